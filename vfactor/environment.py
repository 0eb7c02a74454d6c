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
from vfactor.tomlread import TableReader, hint, show

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

SOLAR_CONSTANT_LIMIT = 1e8
"""Largest ``solar_constant`` [W m-2]: above the flux leaving the Sun's photosphere itself
(sigma T^4 with T = 5772 K, about 6.3e7 W m-2; IAU 2015 Resolution B3 nominal effective
temperature)."""

PLAUSIBLE_SOLAR_CONSTANT = (100.0, 15000.0)
"""``solar_constant`` [W m-2] outside which ``check`` warns: from beyond Mars (about
590 W m-2 at 1.52 au) down by a margin, to Mercury at perihelion (about 14 400 W m-2 at
0.307 au), by the inverse-square law on Kopp & Lean (2011). A value near 1.36 is the usual
slip of kW m-2 written as W m-2."""

PLANET_IR_LIMIT = 1e5
"""Largest ``planet_ir`` [W m-2]: a planet emitting that much would be at about 1150 K
(Stefan-Boltzmann); larger values are slips."""

PLAUSIBLE_PLANET_IR = (None, 500.0)
"""``planet_ir`` [W m-2] above which ``check`` warns: the Earth's outgoing long-wave flux
stays within about 150-350 W m-2 even for short orbit segments (Gilmore (ed.), Spacecraft
Thermal Control Handbook, Vol. I, 2nd ed., 2002, ch. 2, from memory)."""


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


def environment_from_table(table, file=None, problems: list | None = None) -> Environment:
    """Read the ``[environment]`` table of a model file.

    Parameters
    ----------
    table : dict or None
        The parsed table; None (no table) gives the nominal case.
    file : str or os.PathLike, optional
        Model file named in error messages.
    problems : list, optional
        Receives warnings (:class:`vfactor.errors.Problem`) about legal but implausible
        values, e.g. ``solar_constant = 1.361`` (kW m-2 written as W m-2).

    Returns
    -------
    Environment

    Raises
    ------
    ModelError
        An unknown key, an unknown case, a value of the wrong type or out of range
        (albedo outside [0, 1], negative flux, a flux above the Sun's own surface), or a
        ``custom`` case that lacks one of ``solar_constant``, ``albedo``, ``planet_ir``.
        The message names ``[environment] KEY`` and the bad value.
    """
    if table is None:
        return design_case("nominal")
    reader = TableReader(table, str(file) if file else None, "[environment]", problems)
    for key in table:
        if key not in _KEYS:
            raise reader.error(key, f"unknown key {key!r} = {show(table[key])}"
                               f"{hint(key, _KEYS)}; known keys are {', '.join(_KEYS)}")
    case = table.get("case", "nominal")
    if not isinstance(case, str):
        raise reader.error("case", f"case must be a string, got {show(case)}")
    case = case.strip().lower()
    if case not in CASES:
        raise reader.error("case", f"unknown case {show(table['case'])}{hint(case, CASES)}; "
                           f"use one of {', '.join(CASES)}")
    if case == "custom":
        missing = [k for k in ("solar_constant", "albedo", "planet_ir") if k not in table]
        if missing:
            raise reader.error(missing[0], f"case 'custom' needs {', '.join(missing)} (got "
                               f"{', '.join(sorted(k for k in table if k != 'case')) or 'none'})")
        base = Environment("custom", None, ALBEDO_NOMINAL, PLANET_IR_NOMINAL)
    else:
        base = design_case(case)
    solar = reader.number(
        "solar_constant", base.solar_constant, minimum=0.0, maximum=SOLAR_CONSTANT_LIMIT,
        unit="W m-2", why="more than leaves the surface of the Sun",
        plausible=PLAUSIBLE_SOLAR_CONSTANT,
        advice_low=("kW m-2 given as W m-2? the solar constant at 1 au is 1361 W m-2"
                    + (f" (write {table['solar_constant'] * 1000:g})"
                       if _is_number(table.get("solar_constant"))
                       and 0.1 <= table["solar_constant"] <= 15.0 else "")),
        advice_high="the solar constant at 1 au is 1361 W m-2")
    albedo = reader.number("albedo", base.albedo, minimum=0.0, maximum=1.0,
                           advice_high="albedo is a fraction: write 0.3 for 30 %")
    planet_ir = reader.number("planet_ir", base.planet_ir, minimum=0.0,
                              maximum=PLANET_IR_LIMIT, unit="W m-2",
                              plausible=PLAUSIBLE_PLANET_IR,
                              advice_high="the Earth's outgoing long-wave flux is about "
                                          "150-350 W m-2")
    return Environment(case, solar, albedo, planet_ir)


def _is_number(value) -> bool:
    return not isinstance(value, bool) and isinstance(value, (int, float))


def _check_number(key, value, lo, hi, file) -> float:
    """Validation of a value set on an :class:`Environment` built in code (the model
    file's values are read by :func:`environment_from_table`)."""
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
