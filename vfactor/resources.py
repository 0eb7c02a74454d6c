"""Estimated peak memory and time of a run, from the model, before anything is allocated.

:func:`estimate_resources` adds up what the run will hold (sparse node couplings, per-step
results per node and facet, the heating stage's ray cache and one step's samples) and a
rough time from the ray and step counts at stated conservative rates;
:func:`resource_problems` turns it into the ``check`` note, a warning above
:data:`MEMORY_WARNING_SHARE` of the machine's memory or beyond :data:`TIME_WARNING_S`, and
an error when it exceeds the machine's memory (:mod:`vfactor.checks` runs it for ``check``
and, never skipped, before every ``run``).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from vfactor.errors import ModelError, Problem
from vfactor.geometry import Geometry
from vfactor.model import Model

__all__ = ["ResourceEstimate", "estimate_resources", "resource_problems",
           "machine_memory_bytes", "RESOURCE_WHERE", "MEMORY_WARNING_SHARE", "TIME_WARNING_S",
           "COUPLING_COPIES", "COUPLED_PER_ROW", "SECONDS_PER_STEP"]

RESOURCE_WHERE = "resources"
"""Location of the resource findings (kept out of the records of passed checks: they
depend on the machine and are made afresh before every run)."""

MEMORY_WARNING_SHARE = 0.5
"""Share of the machine's memory above which the estimate draws a warning (our own
threshold: the rest is the system's and other programs')."""

TIME_WARNING_S = 3600.0
"""Estimated run time [s] above which ``check`` warns (our own threshold)."""

COUPLING_COPIES = 30
"""Bytes per stored coupling entry / 8 at the run's peak, counted from the code (our own
count): sparse tally sums and squares (keys, values), their mean and error, raw and
smoothed view factors and their error, smoothing variances and pair arrays, the Gebhart
reflection series and its partial sums, Gebhart factors, exchange areas and their error;
and for the heating stage's error of the couplings, per band the transposed reflection
operator, the squared Gebhart factors and the entry variances (:mod:`vfactor.reflecterror`;
measured at 9870 nodes: peak 1.0 GB before it, 1.25 GB with it)."""

COUPLED_PER_ROW = 1000
"""Stored entries assumed per node row when the node count is larger (our own upper
guess: a per-facet model of 10,504 nodes measured 53 view-factor entries per row; Gebhart
rows, which include reflections, are wider)."""

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

TURNING_PASSES = 2.0
"""Passes over every planet ray per step when parts turn (ray caches and couplings rebuilt
at every step; measured on the demo with tracking wings, 0.33 s a step for 3.3e6 planet
rays on the shared 2-core machine)."""


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
    ``COUPLING_COPIES * 8 n min(n + 2, COUPLED_PER_ROW, rays per node)`` for the sparse
    node couplings; ``8 t (3 f + 11 n + 35)``
    for the per-step results (absorbed flux per facet of three sources, per node absorbed,
    incident and error of three sources and the planet rays' part of two errors, the
    trajectory); ``52 s P`` for the heating
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
    # nodes with more planet rays (vfactor.planetrays): their sides count that many times
    factor = dict(getattr(settings, "planet_ray_factor", ()))
    if factor:
        extra = np.array([factor.get(name, 1) - 1 for name in g.nodes.names] + [0], float)
        planet *= 1.0 + float(extra[np.asarray(g.front_node)].sum()
                              + extra[np.asarray(g.back_node)].sum()) / max(sides, 1)

    parts = {
        "node couplings": COUPLING_COPIES * 8.0 * n * min(n + 2.0, COUPLED_PER_ROW,
                                                          rays_per_node),
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
        parts["per-step results"] = 8.0 * steps * (3.0 * f + 11.0 * n + 35.0)
        parts["heating ray cache"] = 52.0 * sides * planet
        parts["sun samples of a step"] = sides * sun
        heat_rays = sides * planet
        heating_s = steps * (SECONDS_PER_STEP + sides * (sun + planet) / HEATING_TESTS_PER_S)
        if getattr(model, "hinges", ()):
            # turning parts: every step rebuilds the ray caches and couplings of all sides
            parts["turning-part ray cache"] = 13.0 * sides * planet
            heating_s += steps * TURNING_PASSES * sides * planet / HEATING_TESTS_PER_S
    seconds = (vf_rays + heat_rays) / (RAYS_PER_S_PER_CORE * cores) + heating_s
    return ResourceEstimate(memory_bytes=float(sum(parts.values())), parts=parts,
                            seconds=float(seconds), rays=float(vf_rays + heat_rays),
                            steps=steps, cores=cores, heating_seconds=float(heating_s))


def _planned_steps(model: Model) -> int:
    """Steps of the model's orbit (0 without one, or when the ``[orbit]`` table cannot be
    read: its own error says why)."""
    if model.orbit_table is None:
        return 0
    from vfactor.orbittable import orbit_from_table

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
    if largest == "node couplings":
        return (f"{geometry.n_nodes} nodes make up to {geometry.n_nodes} x "
                f"{min(geometry.n_nodes, COUPLED_PER_ROW)} stored couplings; use fewer nodes (nodes = \"single\" or \"per-face\" instead "
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
