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

Resources: :func:`estimate_resources` gives the peak memory and a rough time of a run
from the model (facets, nodes, rays, steps); ``check`` prints it as a ``note:`` line, warns
above :data:`MEMORY_WARNING_SHARE` of the machine's memory or beyond
:data:`TIME_WARNING_S`, and refuses a model whose estimate exceeds the machine's memory.
``run`` makes the same refusal (:func:`require_clean`) before anything large is allocated,
also when the other checks are skipped because they passed before.
"""

from __future__ import annotations

import math
import os
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
from vfactor.tomlread import label, name_problem

__all__ = [
    "AREA_WARNING",
    "RELATIVE_TOLERANCE",
    "AreaDifference",
    "CheckReport",
    "ResourceEstimate",
    "check_geometry",
    "check_model",
    "estimate_resources",
    "format_check_report",
    "machine_memory_bytes",
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
    from vfactor.orbit import orbit_from_table

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
    if model.attitude_table is not None and model.orbit_table is None:
        report.problems.append(Problem("warning", file, "[attitude]",
                                       "has no effect without an [orbit] section"))


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


# --------------------------------------------------------------------------------------
# Resources
# --------------------------------------------------------------------------------------
RESOURCE_WHERE = "resources"
"""Location of the resource findings (kept out of the records of passed checks: they
depend on the machine and are made afresh before every run)."""

MEMORY_WARNING_SHARE = 0.5
"""Share of the machine's memory above which the estimate draws a warning (our own
threshold: the rest is the system's and other programs')."""

TIME_WARNING_S = 3600.0
"""Estimated run time [s] above which ``check`` warns (our own threshold)."""

DENSE_NODE_MATRICES = 20
"""Dense (n, n + 2) float64 node matrices a run holds at its peak, counted from the code
(our own count): tally sums and squares, their mean and error, raw and smoothed view
factors and their error, the smoothing's variances and work arrays, Gebhart factors,
exchange areas, conductances and their error, the matrix of the Gebhart solve and its
factorisation, and the heating stage's solar and infrared Gebhart factors."""

BYTES_PER_FACET = 600.0
"""Geometry, ray-tracing scene (BVH) and per-facet tables [bytes per facet], rough (our
own estimate from the arrays of Geometry and Scene)."""

BASELINE_BYTES = 4e8
"""The interpreter, numpy, numba and the compiled kernels [bytes] (measured resident
size of a small run, about 0.35 GB)."""

RAYS_PER_S_PER_CORE = 1.0e6
"""Conservative ray-tracing throughput per core [rays s-1]: about half of what the demo
model gives (3.8 M rays/s for the view factors on the shared 2-core machine)."""

HEATING_TESTS_PER_S = 2.0e7
"""Conservative rate of the heating stage's per-step work [ray tests s-1] (sun
occlusion rays and planet tests of the cached escaping rays): about half of the demo's
(9052 facet sides x 272 tests in 53 ms per step on the shared 2-core machine)."""

SECONDS_PER_STEP = 6e-3
"""Fixed cost of one heating step [s], whatever the model's size (measured 6.3 ms per
step on a 14-facet model, shared 2-core machine)."""


@dataclass(frozen=True)
class ResourceEstimate:
    """Rough peak memory and time of ``vfactor run`` on a model.

    Attributes
    ----------
    memory_bytes : float — estimated peak resident memory [bytes]
    parts : dict of str -> float — the main terms of ``memory_bytes`` [bytes]
    seconds : float — estimated run time on this machine [s]
    rays : float — rays traced in all (view factors, Gebhart tracing, heating) [1]
    steps : int — time steps of the orbit (0 without one)
    cores : int — cores the estimate assumes
    heating_seconds : float — the part of ``seconds`` spent in the heating steps [s]
    """

    memory_bytes: float
    parts: dict
    seconds: float
    rays: float
    steps: int
    cores: int
    heating_seconds: float = 0.0

    @property
    def largest(self) -> str:
        """The term that dominates the memory estimate."""
        return max(self.parts, key=self.parts.get)


def estimate_resources(model: Model, geometry: Geometry, rays: int | None = None,
                       cores: int | None = None) -> ResourceEstimate:
    """Estimate the peak memory and the time of a run before anything is allocated.

    Parameters
    ----------
    model : Model — ``[radiation]`` settings and the raw ``[orbit]``/``[attitude]`` tables
    geometry : Geometry — facets, sides and nodes after tessellation
    rays : int, optional — rays per node (default ``[radiation] rays_per_node``)
    cores : int, optional — cores to assume (default ``os.cpu_count()``)

    Returns
    -------
    ResourceEstimate

    Notes
    -----
    Memory (bytes; n nodes, f facets, s active facet sides, t steps, P planet and S sun
    rays per facet side, rounded up to the 8 replicates of the heating stage):
    ``DENSE_NODE_MATRICES * 8 n (n + 2)`` for the node matrices; ``8 t (3 f + 9 n + 35)``
    for the per-step results (absorbed flux per facet of three sources, per node absorbed,
    incident and error of three sources, the trajectory); ``52 s P`` for the heating
    stage's ray cache (first hit, and origin and direction of every escaping ray); ``s S``
    for one step's sun-sample mask; ``24`` per stored facet factor when asked; plus
    :data:`BYTES_PER_FACET` per facet and :data:`BASELINE_BYTES`. An upper estimate: not
    every term is alive at once.

    Time: ``n rays`` view-factor rays (three times that again when infrared specular
    shares make the Gebhart factors by reflection tracing) and ``s P`` escaping-direction
    rays at :data:`RAYS_PER_S_PER_CORE` per core, and per step :data:`SECONDS_PER_STEP`
    plus ``s (S + P)`` tests at :data:`HEATING_TESTS_PER_S`. Rough, by design.
    """
    g = geometry
    settings = model.radiation
    n = g.n_nodes
    f = g.n_facets
    sides = int(np.count_nonzero(np.asarray(g.front_node) >= 0)
                + np.count_nonzero(np.asarray(g.back_node) >= 0))
    rays_per_node = float(rays if rays is not None else settings.rays_per_node)
    cores = int(cores or os.cpu_count() or 1)
    steps = _planned_steps(model)
    replicates = 8
    planet = float(replicates * -(-int(settings.planet_rays_per_facet) // replicates))
    sun = float(replicates * -(-int(settings.sun_rays_per_facet) // replicates))

    parts = {
        "dense node matrices": DENSE_NODE_MATRICES * 8.0 * n * (n + 2.0),
        "interpreter, libraries and geometry": BYTES_PER_FACET * f + BASELINE_BYTES,
    }
    vf_rays = n * rays_per_node
    if np.any(np.asarray(g.nodes.ir_specular) > 0.0):
        vf_rays *= 4.0   # view factors, then Gebhart factors by reflection tracing
    if settings.facet_factors:
        parts["facet factors"] = 24.0 * min(2.0 * f * (n + 2.0), n * rays_per_node)
    heating_s = 0.0
    heat_rays = 0.0
    if steps:
        parts["per-step results"] = 8.0 * steps * (3.0 * f + 9.0 * n + 35.0)
        parts["heating ray cache"] = 52.0 * sides * planet
        parts["sun samples of a step"] = sides * sun
        heat_rays = sides * planet
        heating_s = steps * (SECONDS_PER_STEP + sides * (sun + planet) / HEATING_TESTS_PER_S)
    seconds = (vf_rays + heat_rays) / (RAYS_PER_S_PER_CORE * cores) + heating_s
    return ResourceEstimate(memory_bytes=float(sum(parts.values())), parts=parts,
                            seconds=float(seconds), rays=float(vf_rays + heat_rays),
                            steps=steps, cores=cores, heating_seconds=float(heating_s))


def _planned_steps(model: Model) -> int:
    """Steps of the model's orbit (0 without one, or when the ``[orbit]`` table cannot be
    read: its own error says why)."""
    if model.orbit_table is None:
        return 0
    from vfactor.orbit import orbit_from_table

    try:
        return int(orbit_from_table(model.orbit_table, file=model.path).n_steps)
    except ModelError:
        return 0


def machine_memory_bytes() -> float | None:
    """Memory this process may use [bytes]: the machine's physical memory
    (``os.sysconf`` page size times physical pages), or the memory limit of its control
    group (a container) when that is lower; None when neither can be read."""
    total = None
    try:
        total = float(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        pass
    for path in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(path).read_text().strip()
        except OSError:
            continue
        if text.isdigit() and (total is None or float(text) < total):
            total = float(text)
    return total if total and total > 0 else None


def _size(nbytes: float) -> str:
    for unit, factor in (("TiB", 2.0 ** 40), ("GiB", 2.0 ** 30), ("MiB", 2.0 ** 20)):
        if nbytes >= factor:
            return f"{nbytes / factor:.3g} {unit}"
    return f"{nbytes / 2.0 ** 20:.2g} MiB"


def _duration(seconds: float) -> str:
    if seconds < 90:
        return f"{seconds:.2g} s"
    if seconds < 5400:
        return f"{seconds / 60:.2g} min"
    if seconds < 2 * 86400:
        return f"{seconds / 3600:.3g} h"
    return f"{seconds / 86400:.3g} days"


def resource_problems(model: Model, geometry: Geometry, rays: int | None = None) -> list:
    """The resource note, and a warning or error when the estimate is too large.

    Returns
    -------
    list of Problem (``where`` = :data:`RESOURCE_WHERE`): a note with the estimate; an
    error when the memory estimate exceeds the machine's memory; a warning above
    :data:`MEMORY_WARNING_SHARE` of it or beyond :data:`TIME_WARNING_S`. Empty for a
    model without nodes (nothing would run).
    """
    if geometry is None or geometry.n_nodes == 0:
        return []
    est = estimate_resources(model, geometry, rays=rays)
    file = str(model.path)
    memory = machine_memory_bytes()
    steps = f", {est.steps} steps" if est.steps else ""
    text = (f"estimated peak memory {_size(est.memory_bytes)} (largest: {est.largest}, "
            f"{_size(est.parts[est.largest])}), time about {_duration(est.seconds)} on "
            f"{est.cores} core(s) ({est.rays:.3g} rays{steps})")
    out = [Problem("note", file, RESOURCE_WHERE, text)]
    fix = _resource_fix(est, model, geometry)
    if memory is not None and est.memory_bytes > memory:
        out.append(Problem("error", file, RESOURCE_WHERE,
                           f"a run would need about {_size(est.memory_bytes)} of memory "
                           f"({est.largest}: {_size(est.parts[est.largest])}), more than "
                           f"this machine's {_size(memory)}; {fix}"))
    elif memory is not None and est.memory_bytes > MEMORY_WARNING_SHARE * memory:
        out.append(Problem("warning", file, RESOURCE_WHERE,
                           f"a run would need about {_size(est.memory_bytes)} of memory, "
                           f"more than {100 * MEMORY_WARNING_SHARE:.0f} % of this machine's "
                           f"{_size(memory)} ({est.largest}: "
                           f"{_size(est.parts[est.largest])}); {fix}"))
    if est.seconds > TIME_WARNING_S:
        out.append(Problem("warning", file, RESOURCE_WHERE,
                           f"a run would take about {_duration(est.seconds)} on "
                           f"{est.cores} core(s) ({est.rays:.3g} rays{steps}); "
                           f"{_time_fix(est, model)}"))
    return out


def _resource_fix(est: ResourceEstimate, model: Model, geometry: Geometry) -> str:
    largest = est.largest
    if largest == "dense node matrices":
        return (f"{geometry.n_nodes} nodes make {geometry.n_nodes} x {geometry.n_nodes} "
                f"matrices; use fewer nodes (nodes = \"single\" or \"per-face\" instead "
                f"of \"per-facet\", or a coarser max_edge)")
    if largest == "per-step results":
        return (f"{est.steps} steps x {geometry.n_facets} facets of per-facet results; use "
                f"fewer steps (steps_per_orbit, step_s, orbits) or fewer facets")
    if largest == "heating ray cache":
        return (f"planet_rays_per_facet = {model.radiation.planet_rays_per_facet} is too "
                f"many for {geometry.n_facets} facets; the default is 256")
    if largest == "sun samples of a step":
        return (f"sun_rays_per_facet = {model.radiation.sun_rays_per_facet} is too many "
                f"for {geometry.n_facets} facets; the default is 16")
    if largest == "facet factors":
        return "leave facet_factors off, or use fewer facets"
    return f"use fewer facets ({geometry.n_facets} now; a larger max_edge or simplify)"


def _time_fix(est: ResourceEstimate, model: Model) -> str:
    settings = model.radiation
    if est.steps and est.heating_seconds > 0.5 * est.seconds:
        return (f"most of it in the {est.steps} heating steps; use fewer steps "
                f"(steps_per_orbit, step_s, orbits), or fewer sun_rays_per_facet "
                f"({settings.sun_rays_per_facet}) and planet_rays_per_facet "
                f"({settings.planet_rays_per_facet})")
    return (f"use fewer rays (rays_per_node = {settings.rays_per_node}, "
            f"sun_rays_per_facet = {settings.sun_rays_per_facet}, planet_rays_per_facet = "
            f"{settings.planet_rays_per_facet}) or --workers / --scheduler")


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
