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
beyond Earth orbits in use (metres given as km?), values outside their plausible range
(:meth:`vfactor.tomlread.Reader.quantity`), a spin the time step aliases.

Resources (:mod:`vfactor.resources`): the estimated peak memory and time of a run;
``check`` prints it as a ``note:`` line, warns when it is large and refuses a model whose
estimate exceeds the machine's memory. ``run`` makes the same refusal
(:func:`require_clean`) before anything large is allocated, also when the other checks are
skipped because they passed before.
"""

from __future__ import annotations

import math
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
from vfactor.resources import resource_problems
from vfactor.tomlread import label, name_problem

__all__ = [
    "AREA_WARNING",
    "RELATIVE_TOLERANCE",
    "AreaDifference",
    "CheckReport",
    "check_geometry",
    "check_model",
    "format_check_report",
    "require_clean",
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
    resources : Problem or None — the note with the resource estimate (its warnings and
        errors are in ``problems``)
    """

    path: str
    model: Model | None
    geometry: Geometry | None
    problems: list = field(default_factory=list)
    area_differences: list = field(default_factory=list)
    tolerance: float = 0.0
    resources: Problem | None = None   # the resource estimate's note line

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
    if _check_built(model, geometry, report):
        check_geometry(model, geometry, report)
        _check_network(model, geometry, report)
    if report.ok:
        from vfactor.checkcache import check_key, store_passed

        store_passed(check_key(model, geometry), report.problems)
    for p in resource_problems(model, geometry):
        if p.severity == "note":
            report.resources = p
        else:
            report.problems.append(p)
    return report


def require_clean(model: Model, geometry: Geometry, rays: int | None = None) -> list:
    """Run the checks of ``vfactor check`` on a loaded model before a run.

    A check that passed before for the same model, geometry and check code is not
    repeated: its record (:mod:`vfactor.checkcache`) gives the warnings. The resource
    estimate is always made afresh (it depends on this machine and on ``rays``), before
    the record is looked at.

    Parameters
    ----------
    model : Model
    geometry : Geometry — built from ``model``
    rays : int, optional — rays per node of the run when it overrides the model's
        ``[radiation] rays_per_node`` (``run --rays``)

    Returns
    -------
    list of Problem — the warnings (the run may go on; resource warnings included), and a
    note when the checks were not repeated

    Raises
    ------
    ModelError
        For the first error found (intersecting or coincident parts, inward normals, bad
        settings, a run that would not fit in this machine's memory...), naming how many
        more there are: no run starts.
    """
    from vfactor.checkcache import check_key, load_passed, store_passed

    resources = resource_problems(model, geometry, rays=rays)
    _raise_first([p for p in resources if p.severity == "error"], model)
    resources = [p for p in resources if p.severity == "warning"]
    key = check_key(model, geometry)
    cached = load_passed(key)
    if cached is not None:
        return [p for p in cached if p.severity == "warning"] + resources + [Problem(
            "note", str(model.path), "", "the checks of this model and geometry passed "
            "before and were not repeated")]
    report = CheckReport(path=str(model.path), model=model, geometry=geometry)
    report.problems.extend(_loader_problems(model))
    _check_settings(model, report)
    if _check_built(model, geometry, report):
        check_geometry(model, geometry, report)
        _check_network(model, geometry, report)
    _raise_first(report.errors, model)
    store_passed(key, report.problems)
    return report.warnings + resources


def _raise_first(errors: list, model: Model) -> None:
    if errors:
        first = errors[0]
        more = (f" (and {len(errors) - 1} more error(s); `vfactor check {model.path}` lists "
                f"them)" if len(errors) > 1 else "")
        raise ModelError(first.message + more, file=first.file, where=first.where)


MAX_MODEL_EXTENT_M = 2e4
"""Largest extent of a whole model [m] (twice the largest part size of
:data:`vfactor.parts.MAX_LENGTH_M`): a mesh scaled into kilometres is a unit slip, and its
squared coordinates would lose the geometric checks' precision."""


def _check_built(model: Model, geometry: Geometry, report: CheckReport) -> bool:
    """Checks of the built geometry that must pass before the geometric checks can run:
    an extent the arithmetic can handle, at least one node, printable node names (those
    made from the group names of mesh files too). False when the geometric checks would
    be meaningless."""
    file = report.path
    g = geometry
    add = report.problems.append
    if g.n_facets:
        with np.errstate(over="ignore", invalid="ignore"):
            extent = float(np.max(np.ptp(g.vertices, axis=0)))
        if not extent <= MAX_MODEL_EXTENT_M:
            add(Problem("error", file, "", f"the model spans {extent:.3g} m, more than "
                        f"{MAX_MODEL_EXTENT_M / 1e3:g} km; check the length_unit, scale and "
                        f"file_unit of its parts"))
            return False
        if g.n_nodes == 0 and not report.errors:
            add(Problem("error", file, "[[parts]]", "no part has a front or back side: "
                        "nothing emits or absorbs radiation, so there is nothing to "
                        "compute; give at least one part a side, e.g. front = { coating "
                        "= \"NAME\" }"))
    from vfactor.planetrays import unknown_nodes

    for message in unknown_nodes(dict(model.radiation.planet_ray_factor), g.nodes.names):
        add(Problem("error", file, "[radiation] planet_ray_factor", message))
    for name in g.nodes.names:
        problem = name_problem(name)
        if problem:
            add(Problem("error", file, f"node {label(name)}", f"node name {name!r} "
                        f"{problem}; rename the group or body in the mesh file, or give the "
                        f"side a node name of its own (node = \"NAME\")"))
    return True


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
    from vfactor.orbittable import orbit_from_table

    file = report.path
    readers = (("[orbit]", model.orbit_table, orbit_from_table),
               ("[attitude]", model.attitude_table, attitude_from_table),
               ("[environment]", model.environment_table, environment_from_table))
    read = {}
    for section, table, reader in readers:
        if table is None:
            continue
        found: list = []
        try:
            value = reader(table, file=file, problems=found)
        except ModelError as err:
            report.problems.append(Problem("error", file, err.where or section, err.message))
            continue
        finally:
            report.problems.extend(p for p in found if p.severity != "error")
        read[section] = value
        if section == "[orbit]":
            _check_altitude(value, table, file, report)
    if "[orbit]" in read and "[attitude]" in read:
        _check_spin_sampling(read["[orbit]"], read["[attitude]"], model, report)
    _check_ray_count(model, report)
    _check_reflection_errors(model, report)
    _check_cases(model, report)
    if model.attitude_table is not None and model.orbit_table is None:
        report.problems.append(Problem("warning", file, "[attitude]",
                                       "has no effect without an [orbit] section"))


def _check_network(model: Model, geometry: Geometry, report: CheckReport) -> None:
    """The ``[sweep]`` section (``vfactor sweep``) and the ``[network]`` section
    (``vfactor solve``, against the built nodes)."""
    import tomllib

    from vfactor.netmodel import network_from_table

    doc = tomllib.loads(model.source_text)
    if "sweep" in doc:
        from vfactor.errors import VfactorError
        from vfactor.sweep import model_beta_list

        try:
            model_beta_list(model.path)
        except ModelError as err:
            report.problems.append(Problem("error", report.path, err.where or "[sweep]",
                                           err.message))
        except VfactorError as err:
            report.problems.append(Problem("error", report.path, "[sweep]", str(err)))
    table = doc.get("network")
    if table is None:
        return
    try:
        network_from_table(table, geometry.nodes.names, geometry.nodes.area, file=report.path)
    except ModelError as err:
        report.problems.append(Problem("error", report.path, err.where or "[network]",
                                       err.message))


def _check_cases(model: Model, report: CheckReport) -> None:
    """Every ``[[cases]]`` table applied to the model: its coating values, orbit, attitude
    and environment read as a run reads them (one error line per case and table)."""
    from vfactor.attitude import attitude_from_table
    from vfactor.cases import case_model
    from vfactor.environment import environment_from_table
    from vfactor.orbittable import orbit_from_table

    file = report.path
    for case in model.cases:
        where = f"[[cases]] {case.name}"
        try:
            cm = case_model(model, case)
        except ModelError as err:
            report.problems.append(Problem("error", file, f"{where}: {err.where or ''}".rstrip(
                ": "), err.message))
            continue
        for section, table, reader in (("orbit", cm.orbit_table, orbit_from_table),
                                       ("attitude", cm.attitude_table, attitude_from_table),
                                       ("environment", cm.environment_table,
                                        environment_from_table)):
            if table is None or getattr(case, section) is None:
                continue          # the model's own table, checked above
            found: list = []
            try:
                reader(table, file=file, problems=found)
            except ModelError as err:
                report.problems.append(Problem("error", file,
                                               f"{where}: {err.where or section}", err.message))
            report.problems.extend(
                Problem(p.severity, p.file, f"{where}: {p.where}", p.message)
                for p in found if p.severity != "error")


def _check_spin_sampling(orbit, attitude, model: Model, report: CheckReport) -> None:
    """Warn when the time step is longer than 1/SPIN_SAMPLES_PER_TURN of the spin period:
    the attitude sampled at the steps aliases (at a whole number of turns per step the
    body shows the same face to the Sun at every step)."""
    from vfactor.attitude import SPIN_SAMPLES_PER_TURN

    if attitude.mode != "spin" or attitude.spin_rate == 0.0:
        return
    period = 2.0 * math.pi / abs(attitude.spin_rate)
    if orbit.step <= period / SPIN_SAMPLES_PER_TURN:
        return
    from vfactor.orbit import MAX_STEPS

    turns = orbit.step / period
    key = "rate_rpm" if "rate_rpm" in (model.attitude_table or {}) else "rate_deg_s"
    needed = math.ceil(orbit.period / (period / SPIN_SAMPLES_PER_TURN))
    needed_span = math.ceil(orbit.span / (period / SPIN_SAMPLES_PER_TURN))
    if needed_span > MAX_STEPS:
        fix = (f"a spin this fast cannot be followed within {MAX_STEPS} steps "
               f"({needed_span} needed for the span); for loads averaged over the spin, "
               f"shorten the span (orbits) or model the attitude "
               f"without the spin (e.g. mode = \"sun\" or \"inertial\")")
    else:
        fix = (f"set step_s <= {period / SPIN_SAMPLES_PER_TURN:.3g} s in [orbit] "
               f"(steps_per_orbit >= {needed})")
    report.problems.append(Problem(
        "warning", report.path, f"[attitude] {key}",
        f"the time step of {orbit.step:.4g} s covers {turns:.3g} turns of the "
        f"{period:.4g} s spin: the sampled attitude aliases (a whole number of turns per "
        f"step shows the same face to the Sun at every step); steps should be at most "
        f"1/{SPIN_SAMPLES_PER_TURN} of a turn (sampling: more than 2 per turn by the "
        f"Nyquist-Shannon theorem, 8 to follow a face through a turn): {fix}"))


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


REFLECTION_WARNING_SHARE = 0.5
"""Share of a band's incident power a coating reflects above which ``check`` reminds that
heat loads after reflection carry the couplings' error, propagated to first order only (a
threshold of our own)."""
REFLECTION_COUPLING_ERROR = 0.05
"""Relative error of a 1 % view factor (as :func:`_check_ray_count` estimates it) that the
reminder asks for (a target of our own); it is given where the ray count already draws the
warning of :func:`_check_ray_count` (a convex vehicle reflects nothing back onto itself,
so below that the run's summary, which sees the reflected shares, says it)."""


def _check_reflection_errors(model: Model, report: CheckReport) -> None:
    """Warn when reflective coatings meet couplings from few rays.

    The diffuse couplings that redistribute reflected power are the same in every heating
    replicate; their error enters the loads' one-sigma errors (``/heating/*_stderr``) by
    first-order propagation (:mod:`vfactor.reflecterror`), which is good for small errors
    of the couplings and rough for large ones. Where coatings reflect much and the couplings
    come from few rays, the loads of the nodes that receive reflections are then uncertain
    (measured on a public CubeSat frame, aluminium at alpha 0.3 and eps 0.1, 4000 rays per
    node: before the couplings' error was propagated, the scatter over seeds was a median
    3.8 and up to ~1000 times the reported error; with it, a median 0.9 and at most 2.9
    over 6 seeds).
    """
    rays = model.radiation.rays_per_node
    F = RAY_CHECK_VIEW_FACTOR
    rel = ((1.0 - F) / (F * rays)) ** 0.5
    if rel <= RAY_CHECK_RELATIVE_ERROR:
        return
    reflective = []
    for name, c in model.coatings.items():
        worst = max(1.0 - c.solar_absorptivity, 1.0 - c.ir_emissivity)
        if worst > REFLECTION_WARNING_SHARE:
            band = "solar" if 1.0 - c.solar_absorptivity >= 1.0 - c.ir_emissivity else "infrared"
            reflective.append(f"{name!r} ({100 * worst:.0f} % of the {band} band)")
    if not reflective:
        return
    needed = int(np.ceil((1.0 - F) / (F * REFLECTION_COUPLING_ERROR ** 2)))
    report.problems.append(Problem(
        "warning", report.path, "[radiation] rays_per_node",
        f"{'coating' if len(reflective) == 1 else 'coatings'} "
        f"{', '.join(reflective[:3])}{' ...' if len(reflective) > 3 else ''} "
        f"{'reflects' if len(reflective) == 1 else 'reflect'} much of what they receive, "
        f"and {rays} rays per node leave the couplings that redistribute it uncertain "
        f"(~{100 * rel:.0f} % on a 1 % view factor): heat loads after reflection carry "
        f"that error (in their +-, to first order only); use at least {needed} rays per "
        f"node or set target_error, and compare two seeds (--seed)"))


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

def _printable(text: str) -> str:
    """``text`` with every non-printable character escaped, so that one finding stays one
    line and nothing from a file reaches the terminal raw (a last guard: the readers
    already refuse such names)."""
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in str(text))


def format_check_report(report: CheckReport, errors: bool = True,
                        only_errors: bool = False) -> str:
    """The text ``vfactor check`` prints: problems (errors, warnings, notes), node table,
    curved-part areas, verdict.

    Parameters
    ----------
    report : CheckReport
    errors : bool — include the error lines (the command line prints them on standard
        error, the rest on standard output)
    only_errors : bool — only the error lines (one per line, nothing else)

    Returns
    -------
    str (no trailing newline)
    """
    if only_errors:
        return "\n".join(_printable(p.line()) for p in report.errors)
    lines = []
    m, g = report.model, report.geometry
    order = {"error": 0, "warning": 1, "note": 2}
    shown = [p for p in report.problems if errors or p.severity != "error"]
    for p in sorted(shown, key=lambda p: order.get(p.severity, 3)):
        lines.append(_printable(p.line()))
    if report.resources is not None:
        lines.append(_printable(report.resources.line()))
    if shown or report.resources is not None:
        lines.append("")
    if m is not None:
        lines.append(_printable(f"model {m.name!r} ({report.path}), length unit "
                                f"{m.length_unit}"))
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
                name = _printable(name)
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
