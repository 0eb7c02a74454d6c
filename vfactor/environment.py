"""The natural thermal environment near the planet: solar constant, albedo, planet IR.

The ``[environment]`` table of a model file picks a design case and may override any of its
values::

    [environment]
    case = "hot"            # hot | cold | nominal | custom
    albedo = 0.32           # any key given here overrides the case value

Design cases (values and sources in :mod:`vfactor.constants`, "Environment design cases"):

========  ==========================================  ======  ==============
case      solar constant [W m-2]                      albedo  planet IR [W m-2]
========  ==========================================  ======  ==============
nominal   1361 (1 au / r)^2, r = Sun distance of      0.30    237
          each step
hot       1361 / (1 - e)^2 = 1407.6 (perihelion)      0.35    258
cold      1361 / (1 + e)^2 = 1316.6 (aphelion)        0.25    216
custom    all three keys must be given
========  ==========================================  ======  ==============

``e`` is the eccentricity of the Earth's orbit. The hot and cold solar constants are the
annual extremes of the total solar irradiance at Earth: the inverse-square law applied at
perihelion and aphelion to the 1 au value of Kopp & Lean (2011). Gilmore (2002, ch. 2)
quotes 1414 and 1322 W m-2 for the same extremes from the older 1367 W m-2 value; the ratios
to the mean are the same.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vfactor.constants import (
    ALBEDO_COLD,
    ALBEDO_HOT,
    ALBEDO_NOMINAL,
    ASTRONOMICAL_UNIT_M,
    EARTH_ORBIT_ECCENTRICITY,
    PLANET_IR_COLD,
    PLANET_IR_HOT,
    PLANET_IR_NOMINAL,
    SOLAR_CONSTANT_1AU,
)
from vfactor.errors import ModelError

__all__ = [
    "Environment",
    "CASES",
    "design_case",
    "environment_from_table",
    "solar_constant_at",
    "SOLAR_CONSTANT_HOT",
    "SOLAR_CONSTANT_COLD",
]

CASES = ("hot", "cold", "nominal", "custom")
"""Names accepted by ``[environment] case``."""

SOLAR_CONSTANT_HOT = SOLAR_CONSTANT_1AU / (1.0 - EARTH_ORBIT_ECCENTRICITY) ** 2
"""Total solar irradiance at perihelion [W m-2]: 1361 / (1 - e)^2 (about 1407.6); inverse
square law on Kopp & Lean (2011) with e of Simon et al. (1994). Derived here."""

SOLAR_CONSTANT_COLD = SOLAR_CONSTANT_1AU / (1.0 + EARTH_ORBIT_ECCENTRICITY) ** 2
"""Total solar irradiance at aphelion [W m-2]: 1361 / (1 + e)^2 (about 1316.6). Derived here."""

_KEYS = ("case", "solar_constant", "albedo", "planet_ir")


@dataclass(frozen=True)
class Environment:
    """Solar constant, planet albedo and outgoing long-wave flux of one analysis case.

    Attributes
    ----------
    case : str
        ``"hot"``, ``"cold"``, ``"nominal"`` or ``"custom"``.
    solar_constant : float or None
        Solar irradiance at the vehicle [W m-2], used as given at every step; None scales
        the 1 au value by the Sun distance of each step (:func:`solar_constant_at`).
    albedo : float
        Planet Bond albedo, share of the incident solar energy the planet reflects [1].
    planet_ir : float
        Outgoing long-wave flux at the top of the atmosphere [W m-2].
    """

    case: str = "nominal"
    solar_constant: float | None = None
    albedo: float = ALBEDO_NOMINAL
    planet_ir: float = PLANET_IR_NOMINAL

    def __post_init__(self):
        if self.case not in CASES:
            raise ModelError(f"unknown case {self.case!r}; use one of {', '.join(CASES)}",
                             where="[environment] case")
        if self.solar_constant is not None:
            _check_number("solar_constant", self.solar_constant, 0.0, math.inf, None)
        _check_number("albedo", self.albedo, 0.0, 1.0, None)
        _check_number("planet_ir", self.planet_ir, 0.0, math.inf, None)

    def solar_constant_series(self, sun_distance) -> np.ndarray:
        """Solar irradiance at the vehicle at each step.

        Parameters
        ----------
        sun_distance : (t,) float
            Vehicle-to-Sun distance [m].

        Returns
        -------
        (t,) float64
            ``solar_constant`` at every step when it is set, otherwise
            :func:`solar_constant_at` of each distance [W m-2].
        """
        d = np.asarray(sun_distance, dtype=np.float64)
        if self.solar_constant is not None:
            return np.full(d.shape, float(self.solar_constant))
        return solar_constant_at(d)


def solar_constant_at(distance_m):
    """Total solar irradiance at a distance from the Sun.

    Parameters
    ----------
    distance_m : float or (t,) float
        Distance from the Sun [m]; positive.

    Returns
    -------
    float or (t,) float64
        ``1361 (1 au / r)^2`` [W m-2].

    Raises
    ------
    ValueError
        A distance that is not positive and finite.

    References
    ----------
    Kopp, G. & Lean, J. L. (2011), "A new, lower value of total solar irradiance: Evidence
    and climate significance", Geophys. Res. Lett. 38, L01706 (1360.8 +/- 0.5 W m-2 at
    solar minimum); inverse-square law; au from IAU 2012 Resolution B2.
    """
    r = np.asarray(distance_m, dtype=np.float64)
    if not np.all(np.isfinite(r)) or np.any(r <= 0.0):
        bad = r[~(np.isfinite(r) & (r > 0.0))].ravel()[0]
        raise ValueError(f"solar_constant_at: distance must be positive and finite, got {bad!r} m")
    out = SOLAR_CONSTANT_1AU * (ASTRONOMICAL_UNIT_M / r) ** 2
    return float(out) if out.ndim == 0 else out


def design_case(case: str) -> Environment:
    """The environment of a named design case (``"hot"``, ``"cold"`` or ``"nominal"``).

    Parameters
    ----------
    case : str

    Returns
    -------
    Environment

    Raises
    ------
    ModelError
        An unknown name, or ``"custom"`` (which has no values of its own).
    """
    if case == "nominal":
        return Environment("nominal", None, ALBEDO_NOMINAL, PLANET_IR_NOMINAL)
    if case == "hot":
        return Environment("hot", SOLAR_CONSTANT_HOT, ALBEDO_HOT, PLANET_IR_HOT)
    if case == "cold":
        return Environment("cold", SOLAR_CONSTANT_COLD, ALBEDO_COLD, PLANET_IR_COLD)
    if case == "custom":
        raise ModelError("case 'custom' has no values of its own; give solar_constant, "
                         "albedo and planet_ir", where="[environment] case")
    raise ModelError(f"unknown case {case!r}; use one of {', '.join(CASES)}",
                     where="[environment] case")


def environment_from_table(table, file=None) -> Environment:
    """Read the ``[environment]`` table of a model file.

    Parameters
    ----------
    table : dict or None
        The parsed table; None (no table) gives the nominal case.
    file : str or os.PathLike, optional
        Model file named in error messages.

    Returns
    -------
    Environment

    Raises
    ------
    ModelError
        An unknown key, an unknown case, a value of the wrong type or out of range
        (albedo outside [0, 1], negative flux), or a ``custom`` case that lacks one of
        ``solar_constant``, ``albedo``, ``planet_ir``. The message names
        ``[environment] KEY`` and the bad value.
    """
    try:
        return _from_table(table)
    except ModelError as err:
        raise err.with_file(str(file)) if file else err


def _from_table(table) -> Environment:
    if table is None:
        return design_case("nominal")
    if not isinstance(table, dict):
        raise ModelError(f"must be a table, got {table!r}", where="[environment]")
    for key in table:
        if key not in _KEYS:
            raise ModelError(f"unknown key {key!r} = {table[key]!r}; known keys are "
                             f"{', '.join(_KEYS)}", where=f"[environment] {key}")
    case = table.get("case", "nominal")
    if not isinstance(case, str):
        raise ModelError(f"case must be a string, got {case!r}", where="[environment] case")
    case = case.strip().lower()
    if case == "custom":
        missing = [k for k in ("solar_constant", "albedo", "planet_ir") if k not in table]
        if missing:
            raise ModelError(f"case 'custom' needs {', '.join(missing)} (got "
                             f"{', '.join(sorted(k for k in table if k != 'case')) or 'none'})",
                             where=f"[environment] {missing[0]}")
        base = Environment("custom", None, ALBEDO_NOMINAL, PLANET_IR_NOMINAL)
    else:
        base = design_case(case)
    values = {"solar_constant": base.solar_constant, "albedo": base.albedo,
              "planet_ir": base.planet_ir}
    limits = {"solar_constant": (0.0, math.inf), "albedo": (0.0, 1.0),
              "planet_ir": (0.0, math.inf)}
    for key, (lo, hi) in limits.items():
        if key in table:
            values[key] = _check_number(key, table[key], lo, hi, None)
    return Environment(case, values["solar_constant"], values["albedo"], values["planet_ir"])


def _check_number(key, value, lo, hi, file) -> float:
    units = {"solar_constant": " W m-2", "planet_ir": " W m-2", "albedo": ""}[key]
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
        raise ModelError(f"{key} must be a number, got {value!r}", file=file,
                         where=f"[environment] {key}")
    v = float(value)
    if not math.isfinite(v) or v < lo or v > hi:
        rng = f"in [{lo:g}, {hi:g}]" if math.isfinite(hi) else f">= {lo:g}"
        raise ModelError(f"{key} must be {rng}{units}, got {value!r}", file=file,
                         where=f"[environment] {key}")
    return v
