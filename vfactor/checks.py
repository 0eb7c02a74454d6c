"""``vfactor check``: validate a model file and its geometry, listing every problem found.

:func:`check_model` never raises for bad input: every problem becomes a
:class:`vfactor.errors.Problem` (one line each). Errors make the model unusable (the
command exits 2); warnings flag what is merely suspicious (exit 0).

Errors come from the loader (:mod:`vfactor.model`: invalid TOML, unknown sections or keys,
missing keys, unknown coatings, properties outside [0, 1], unknown shapes, bad values),
from building the geometry (:mod:`vfactor.geometry`: missing, unreadable or empty mesh
files, non-finite coordinates, one node name given two different coatings, a selection
that matches no group), from the settings (``[orbit]``, ``[attitude]``,
``[environment]``), and from the geometric checks listed in :mod:`vfactor.geomchecks`.
Warnings besides those: a part with no active side, too few rays per node, an apogee
beyond Earth orbits in use (metres given as km?).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from vfactor.errors import ModelError, Problem
from vfactor.geomchecks import (
    AREA_WARNING,
    RELATIVE_TOLERANCE,
    AreaDifference,
    check_geometry,
)
from vfactor.geometry import Geometry, build_geometry
from vfactor.model import Model, load_model

__all__ = [
    "AREA_WARNING",
    "RELATIVE_TOLERANCE",
    "AreaDifference",
    "CheckReport",
    "check_geometry",
    "check_model",
    "format_check_report",
]

@dataclass
class CheckReport:
    """Outcome of :func:`check_model`.

    Attributes
    ----------
    path : str — the model file
    model : Model or None — None when the file could not be read at all
    geometry : Geometry or None
    problems : list of Problem
    area_differences : list of AreaDifference — curved parts only
    tolerance : float — geometric tolerance used [m]
    """

    path: str
    model: Model | None
    geometry: Geometry | None
    problems: list = field(default_factory=list)
    area_differences: list = field(default_factory=list)
    tolerance: float = 0.0

    @property
    def ok(self) -> bool:
        """True when no problem has severity ``error``."""
        return not any(p.severity == "error" for p in self.problems)

    @property
    def errors(self) -> list:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list:
        return [p for p in self.problems if p.severity == "warning"]


def check_model(path) -> CheckReport:
    """Load, tessellate and check a model file; collect every problem found.

    Parameters
    ----------
    path : str or os.PathLike — the TOML model file

    Returns
    -------
    CheckReport (never raises for bad input)
    """
    file = str(path)
    problems: list = []
    model = load_model(path, problems=problems)
    report = CheckReport(path=file, model=model, geometry=None, problems=problems)
    if model is None:
        return report
    _check_settings(model, report)
    geometry = build_geometry(model, problems=problems)
    report.geometry = geometry
    # a note about a part that could not be read (its stated unit) only distracts
    unread = {p.where for p in problems if p.severity == "error"}
    unread &= {part.where for part in model.parts
               if part.name not in geometry.part_names}
    problems[:] = [p for p in problems if not (p.severity == "note" and p.where in unread)]
    check_geometry(model, geometry, report)
    if report.ok:
        from vfactor.checkcache import check_key, store_passed

        store_passed(check_key(model, geometry), report.problems)
    return report


def require_clean(model: Model, geometry: Geometry) -> list:
    """Run the checks of ``vfactor check`` on a loaded model before a run.

    A check that passed before for the same model, geometry and check code is not
    repeated: its record (:mod:`vfactor.checkcache`) gives the warnings.

    Parameters
    ----------
    model : Model
    geometry : Geometry — built from ``model``

    Returns
    -------
    list of Problem — the warnings (the run may go on), and a note when the checks were
    not repeated

    Raises
    ------
    ModelError
        For the first error found (intersecting or coincident parts, inward normals, bad
        settings...), naming how many more there are: Monte Carlo results on such a model
        would be meaningless, so no run starts.
    """
    from vfactor.checkcache import check_key, load_passed, store_passed

    key = check_key(model, geometry)
    cached = load_passed(key)
    if cached is not None:
        return [p for p in cached if p.severity == "warning"] + [Problem(
            "note", str(model.path), "", "the checks of this model and geometry passed "
            "before and were not repeated")]
    report = CheckReport(path=str(model.path), model=model, geometry=geometry)
    report.problems.extend(_loader_problems(model))
    _check_settings(model, report)
    check_geometry(model, geometry, report)
    errors = report.errors
    if errors:
        first = errors[0]
        more = (f" (and {len(errors) - 1} more error(s); `vfactor check {model.path}` lists "
                f"them)" if len(errors) > 1 else "")
        raise ModelError(first.message + more, file=first.file, where=first.where)
    store_passed(key, report.problems)
    return report.warnings


def _loader_problems(model: Model) -> list:
    """Warnings and notes of reading the model file (a strict load raises errors only)."""
    if not Path(model.path).is_file():
        return []
    found: list = []
    load_model(model.path, problems=found)
    return [p for p in found if p.severity != "error"]


def _check_settings(model: Model, report: CheckReport) -> None:
    """Validate the optional ``[orbit]``, ``[attitude]`` and ``[environment]`` tables.

    Each table is read by the module that owns it; the first problem of each table becomes
    one error line (the owning reader stops at the first bad key).
    """
    from vfactor.attitude import attitude_from_table
    from vfactor.environment import environment_from_table
    from vfactor.orbit import orbit_from_table

    file = report.path
    readers = (("[orbit]", model.orbit_table, orbit_from_table),
               ("[attitude]", model.attitude_table, attitude_from_table),
               ("[environment]", model.environment_table, environment_from_table))
    for section, table, reader in readers:
        if table is None:
            continue
        try:
            value = reader(table, file=file)
        except ModelError as err:
            report.problems.append(Problem("error", file, err.where or section, err.message))
            continue
        if section == "[orbit]":
            _check_altitude(value, table, file, report)
    _check_ray_count(model, report)
    if model.attitude_table is not None and model.orbit_table is None:
        report.problems.append(Problem("warning", file, "[attitude]",
                                       "has no effect without an [orbit] section"))


RAY_CHECK_VIEW_FACTOR = 0.01
"""View factor whose expected relative error ``check`` reports for the model's ray count."""
RAY_CHECK_RELATIVE_ERROR = 0.10
"""Relative one-sigma error of a view factor of :data:`RAY_CHECK_VIEW_FACTOR` above which
``check`` warns that ``rays_per_node`` is too low (a threshold of our own)."""


def _check_ray_count(model: Model, report: CheckReport) -> None:
    """Warn when ``rays_per_node`` leaves a 1 % view factor with a large error.

    The binomial one-sigma relative error of a view factor F from N rays is
    sqrt((1 - F) / (F N)) (e.g. Howell, Menguc & Siegel, Thermal Radiation Heat Transfer,
    6th ed., 2016, ch. 7 on Monte Carlo error); the stratified sampling of the tracer does
    better, so this is an upper estimate.
    """
    rays = model.radiation.rays_per_node
    F = RAY_CHECK_VIEW_FACTOR
    rel = ((1.0 - F) / (F * rays)) ** 0.5
    if rel > RAY_CHECK_RELATIVE_ERROR:
        needed = int(np.ceil((1.0 - F) / (F * RAY_CHECK_RELATIVE_ERROR ** 2)))
        report.problems.append(Problem(
            "warning", report.path, "[radiation] rays_per_node",
            f"{rays} rays per node leave a view factor of {F:g} with up to "
            f"{100 * rel:.0f} % relative error (one sigma); use at least {needed} rays or "
            f"set target_error"))


ALTITUDE_WARNING_KM = 100_000.0
"""Apogee altitude [km] above which ``check`` asks whether metres were written as km
(about 2.8 times the geostationary altitude of 35 786 km, common practice)."""


def _check_altitude(orbit, table: dict, file: str, report: CheckReport) -> None:
    """Warn when the apogee altitude is far beyond Earth orbits in use: most often a value
    in metres given to a ``*_km`` key (``altitude_km = 550000``)."""
    apogee_km = (orbit.semi_major_axis * (1.0 + orbit.eccentricity)
                 - orbit.planet.radius) / 1e3
    if not apogee_km > ALTITUDE_WARNING_KM:
        return
    key = next((k for k in ("altitude_km", "apogee_km", "semi_major_axis_km", "perigee_km")
                if k in table), "tle")
    shown = f" = {table[key]!r}" if key in table and key != "tle" else ""
    report.problems.append(Problem(
        "warning", file, f"[orbit] {key}",
        f"apogee altitude {apogee_km:,.0f} km{f' (from {key}{shown})' if shown else ''} "
        f"is beyond {ALTITUDE_WARNING_KM:,.0f} km; were metres given where km are asked?"))


def _area(a: float) -> str:
    """An area [m2] with 5 significant digits (fixed point from 0.001 m2 up)."""
    return f"{a:.5f}" if a >= 1e-3 or a == 0.0 else f"{a:.4e}"


# --------------------------------------------------------------------------------------
# Text report
# --------------------------------------------------------------------------------------

def format_check_report(report: CheckReport) -> str:
    """The text ``vfactor check`` prints: problems (errors, warnings, notes), node table,
    curved-part areas, verdict.

    Parameters
    ----------
    report : CheckReport

    Returns
    -------
    str (no trailing newline)
    """
    lines = []
    m, g = report.model, report.geometry
    order = {"error": 0, "warning": 1, "note": 2}
    for p in sorted(report.problems, key=lambda p: order.get(p.severity, 3)):
        lines.append(p.line())
    if report.problems:
        lines.append("")
    if m is not None:
        lines.append(f"model {m.name!r} ({report.path}), length unit {m.length_unit}")
    else:
        lines.append(f"model {report.path}: not readable")
    if g is not None:
        total = float(g.areas.sum())
        lines.append(f"{len(g.part_names)} parts, {g.n_facets} facets, {g.n_nodes} nodes, "
                     f"facet area {total:.4g} m2 (one side)")
        if g.n_nodes:
            w = max(4, max(len(n) for n in g.nodes.names))
            lines.append("")
            lines.append(f"{'node':<{w}}  {'facets':>7}  {'area m2':>10}  "
                         f"{'solar abs':>9}  {'IR emis':>7}  coating")
            for k, name in enumerate(g.nodes.names):
                lines.append(
                    f"{name:<{w}}  {int(g.nodes.facet_count[k]):>7d}  "
                    f"{_area(g.nodes.area[k]):>10}  {g.nodes.solar_absorptivity[k]:>9.3f}  "
                    f"{g.nodes.ir_emissivity[k]:>7.3f}  {g.nodes.coating[k]}")
    if report.area_differences:
        w = max(len("curved part"), max(len(d.part) for d in report.area_differences))
        lines.append("")
        lines.append(f"{'curved part':<{w}}  {'shape':<8}  {'facets':>7}  "
                     f"{'facet m2':>10}  {'exact m2':>10}  {'difference':>10}")
        for d in report.area_differences:
            lines.append(f"{d.part:<{w}}  {d.shape:<8}  {d.facets:>7d}  "
                         f"{d.tessellated:>10.5f}  {d.exact:>10.5f}  "
                         f"{100 * d.relative:>+9.3f}%")
    lines.append("")
    n_err, n_warn = len(report.errors), len(report.warnings)
    if n_err:
        lines.append(f"FAILED: {n_err} error(s), {n_warn} warning(s) in {report.path}")
    else:
        lines.append(f"OK: no errors, {n_warn} warning(s) in {report.path}")
    return "\n".join(lines)
