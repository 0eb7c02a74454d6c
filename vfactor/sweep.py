"""Beta-angle sweep: orbit heat loads of one vehicle on circular orbits of many beta angles.

The beta angle (the angle between the Sun direction and the orbit plane) sets how long a
circular orbit stays in the planet's shadow and how the Sun falls on a nadir-pointing
vehicle, so a sweep over it is the usual way to find the hot and cold design orbits
(common practice; e.g. Gilmore (ed.), Spacecraft Thermal Control Handbook, Vol. I, 2nd
ed., 2002, ch. 2). :func:`compute_sweep` takes a model whose ``[orbit]`` is circular and,
for every swept value, replaces the orbit's node by ``beta_deg`` (``raan_deg`` and
``ltan`` removed; :func:`vfactor.orbit.raan_from_beta` chooses the node), computes the
trajectory and the absorbed heat per node, and keeps the orbit average and the peak of
each source. :func:`run_sweep` writes ``sweep.csv`` and ``sweep.png`` into a folder.

What is done once for the whole sweep
-------------------------------------
The geometry does not change with the orbit, so:

* the node view factors of the diffuse redistribution of reflected power are computed
  once (:func:`vfactor.radiation.compute_view_factors`, as ``vfactor run`` does);
* the heating stage's vehicle (its sides, the escaping directions of every planet ray and
  the Gebhart factors built from the view factors; with turning parts the rigid facets'
  rays) is prepared once (:meth:`vfactor.heating.HeatingSteps.prepare`). That state is a
  function of the geometry, the scene and the task's settings (rays, samples, seed,
  replicates, bounces, view factors, hinge position couplings), never of the trajectory,
  so the task of every swept value, built with the same settings, runs on it; only the
  per-step work (Sun and planet per step) is repeated.
* with ``[[hinges]]`` and ``[radiation] hinge_positions = N``, the couplings at hinge
  positions are computed once, at N positions spread over the angles the hinges take on
  *all* swept orbits (:func:`vfactor.positions.hinge_positions` of their union), and each
  step uses the position nearest to its angles, as in ``vfactor run``. The hinge angles
  themselves follow each swept orbit.

Orbit averages are time-weighted (:func:`vfactor.heating.step_weights`); the peak of a
source is its largest value over the steps (the peak of ``total`` is the largest sum, not
the sum of the peaks). The eclipse fraction is ``1 - `` the time-weighted mean of the
visible share of the solar disk: umbra counts whole, penumbra by the share of the disk
hidden (the sunlight lost to the planet's shadow).
"""

from __future__ import annotations

import csv
import math
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from . import atomic
from .errors import ArgumentError, ModelError

__all__ = ["BetaSweep", "SweepRun", "SOURCES", "MAX_BETA_VALUES", "FILE_NAMES",
           "parse_beta_list", "compute_sweep", "run_sweep", "write_sweep_csv",
           "format_sweep_table"]

SOURCES = ("solar", "albedo", "planet_ir", "total")
"""Rows of :attr:`BetaSweep.average` and :attr:`BetaSweep.peak`, in order."""

MAX_BETA_VALUES = 1000
"""Most values one sweep may ask for (a range with a tiny step is a slip; each value is a
whole heating run)."""

FILE_NAMES = ("sweep.csv", "sweep.png")
"""Files :func:`run_sweep` writes into its folder."""

_TABLE_ROWS = 40
"""Nodes above which the printed table is summed by part (sweep.csv keeps every node)."""


# --------------------------------------------------------------------------------------
# the list of values
# --------------------------------------------------------------------------------------
def _number(text: str, item: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise ArgumentError(f"--beta: {item!r} is not a number or START:STOP:STEP") from None
    if not math.isfinite(value):
        raise ArgumentError(f"--beta: {item!r} is not finite")
    return value


def parse_beta_list(text: str) -> tuple:
    """The beta angles of ``--beta`` [deg], ascending.

    Parameters
    ----------
    text : str
        Comma-separated items, each a number (``0,15,30``) or a range ``START:STOP:STEP``
        (``0:75:15`` is 0, 15, ..., 75: STOP included when the steps reach it to within
        1e-9 of a step; a negative STEP counts down).

    Returns
    -------
    tuple of float — the values [deg], sorted ascending, each once

    Raises
    ------
    ArgumentError
        An item that is not a number or range, a STEP of 0 or pointing away from STOP, a
        value outside -90 .. 90 deg, a value given twice, no value, or more than
        :data:`MAX_BETA_VALUES` values (the message names the item).
    """
    items = [x.strip() for x in str(text).split(",")]
    if not any(items):
        raise ArgumentError("--beta: no value given; write e.g. 0,15,30 or 0:75:15")
    values = []
    for item in items:
        if not item:
            raise ArgumentError(f"--beta: empty item in {text!r}")
        parts = item.split(":")
        if len(parts) == 1:
            values.append(_number(parts[0], item))
            continue
        if len(parts) != 3:
            raise ArgumentError(f"--beta: {item!r} is not a number or START:STOP:STEP")
        start, stop, step = (_number(p, item) for p in parts)
        if step == 0.0 or (stop - start) * step < 0.0:
            raise ArgumentError(f"--beta: the step of {item!r} never reaches {stop:g} from "
                                f"{start:g}")
        count = math.floor((stop - start) / step + 1e-9) + 1
        if len(values) + count > MAX_BETA_VALUES:
            raise ArgumentError(f"--beta: {item!r} gives {count} values, more than "
                                f"{MAX_BETA_VALUES}; use a larger step")
        values.extend(round(start + k * step, 9) for k in range(count))
    if len(values) > MAX_BETA_VALUES:
        raise ArgumentError(f"--beta: {len(values)} values, more than {MAX_BETA_VALUES}")
    for v in values:
        if not -90.0 <= v <= 90.0:
            raise ArgumentError(f"--beta: {v:g} deg is outside -90 .. 90 deg (the beta "
                                f"angle is the Sun's angle from the orbit plane)")
    seen = set()
    for v in values:
        if v in seen:
            raise ArgumentError(f"--beta: {v:g} is given twice in {text!r}")
        seen.add(v)
    return tuple(sorted(values))


# --------------------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class BetaSweep:
    """Orbit-average and peak absorbed heat per node at each swept beta angle.

    Attributes
    ----------
    beta_deg : (b,) float — swept beta angles at the epoch, ascending [deg]
    raan_deg : (b,) float — right ascension of the ascending node chosen for each [deg]
    node_names : tuple of str — (n,)
    node_part : (n,) int — index into ``part_names`` of each node (-1: no facets)
    part_names : tuple of str
    sources : tuple of str — :data:`SOURCES`, the second axis below
    average : (b, 4, n) float — time-weighted orbit average of the absorbed power [W]
    peak : (b, 4, n) float — largest absorbed power over the steps [W]
    average_stderr : (b, 4, n) float — bound on the one-sigma Monte Carlo error of
        ``average`` [W]: the time-weighted mean of the per-step errors (the error of a
        weighted sum is at most the weighted sum of the errors, whatever their
        correlation; Minkowski's inequality), the total's the sum of the three sources'
    eclipse_fraction : (b,) float — share of the orbit's sunlight lost in the planet's
        shadow, 1 - time-weighted mean of the visible share of the solar disk [1]
    steps : int — time steps per swept orbit
    model_name : str
    case : str — environment case
    elapsed_s : dict — stage name -> seconds
    notes : tuple of str — what the sweep did differently from ``vfactor run``
    """

    beta_deg: np.ndarray
    raan_deg: np.ndarray
    node_names: tuple
    node_part: np.ndarray
    part_names: tuple
    average: np.ndarray
    peak: np.ndarray
    average_stderr: np.ndarray
    eclipse_fraction: np.ndarray
    steps: int
    model_name: str = ""
    case: str = ""
    sources: tuple = SOURCES
    elapsed_s: dict = field(default_factory=dict)
    notes: tuple = ()

    @property
    def total(self) -> np.ndarray:
        """(b, n) float — orbit-average total absorbed power of each node [W]."""
        return self.average[:, SOURCES.index("total"), :]

    @property
    def vehicle_average(self) -> np.ndarray:
        """(b, 4) float — orbit average of the whole vehicle per source [W]."""
        return self.average.sum(axis=2)

    @property
    def hottest(self) -> np.ndarray:
        """(n,) int — index into ``beta_deg`` of each node's largest orbit-average total
        (the first of equal ones)."""
        return np.argmax(self.total, axis=0)

    @property
    def coldest(self) -> np.ndarray:
        """(n,) int — index into ``beta_deg`` of each node's smallest orbit-average total."""
        return np.argmin(self.total, axis=0)


@dataclass(frozen=True)
class SweepRun:
    """What :func:`run_sweep` did: the sweep, the files written, the time taken [s]."""

    sweep: BetaSweep
    files: tuple
    elapsed_s: float


# --------------------------------------------------------------------------------------
# computing
# --------------------------------------------------------------------------------------
def _orbit_kind(table: dict) -> str:
    """The orbit type as :func:`vfactor.orbittable.orbit_from_table` infers it."""
    if "type" in table:
        return str(table["type"])
    if "tle" in table:
        return "tle"
    return "circular" if "altitude_km" in table else "elements"


def _swept_orbits(model, beta_deg):
    """The :class:`vfactor.orbit.Orbit` of each swept value (ArgumentError for a value that
    this orbit cannot have, before any ray is traced)."""
    from .orbittable import orbit_from_table

    table = model.orbit_table
    if table is None:
        raise ModelError("has no [orbit]; a beta sweep needs a circular orbit "
                         "(type = \"circular\", altitude_km, inclination_deg)",
                         file=model.path, where="[orbit]")
    kind = _orbit_kind(table)
    if kind != "circular":
        raise ModelError(f"the beta sweep needs a circular orbit, got type = {kind!r}",
                         file=model.path, where="[orbit] type")
    base = {k: v for k, v in table.items() if k not in ("raan_deg", "ltan", "beta_deg")}
    orbits = []
    for beta in beta_deg:
        try:
            orbits.append(orbit_from_table({**base, "beta_deg": float(beta)}, file=model.path))
        except ModelError as exc:
            if exc.where != "[orbit] beta_deg":
                raise
            raise ArgumentError(f"--beta {beta:g}: {exc.message}") from None
    return orbits


def _shared_positions(geometry, motions, count, settings, rays_per_node, seed, reporter):
    """Couplings at ``count`` hinge positions spread over the hinge angles of every swept
    orbit, computed once; per swept value a PositionCouplings with its steps' nearest
    positions."""
    from .positions import PositionCouplings, couplings_at_positions

    angles = np.concatenate([m.angles for m in motions])
    union = SimpleNamespace(angles=angles, owner=motions[0].owner, hinges=motions[0].hinges)
    shared = couplings_at_positions(
        geometry, union, count, rays_per_node=rays_per_node, seed=seed,
        smooth=settings.smoothing, target_error=settings.target_error,
        max_rays_per_node=getattr(settings, "max_rays_per_node", None),
        drop_tolerance=settings.gebhart_drop_tolerance, reporter=reporter)
    out, start = [], 0
    for m in motions:
        stop = start + m.angles.shape[0]
        out.append(PositionCouplings(angles=shared.angles,
                                     step_position=shared.step_position[start:stop],
                                     view_factors=shared.view_factors,
                                     exchange=shared.exchange))
        start = stop
    return out


def compute_sweep(model, geometry, beta_deg, *, scene=None, rays=None, seed=None,
                  reporter=None) -> BetaSweep:
    """Orbit-average and peak heat loads per node at each beta angle of ``beta_deg``.

    Parameters
    ----------
    model : vfactor.model.Model
        Its ``[orbit]`` must be circular; ``raan_deg``/``ltan`` are replaced per value.
        Attitude, environment and ``[radiation]`` settings are used as written.
    geometry : vfactor.geometry.Geometry — built from ``model``
    beta_deg : sequence of float — beta angles at the epoch [deg]
    scene : vfactor.tracing.scene.Scene, optional — the geometry's scene (built if None)
    rays : int, optional — rays per node of the view factors (default ``rays_per_node``)
    seed : int, optional — random seed (default ``[radiation] seed``)
    reporter : vfactor.progress.Reporter, optional

    Returns
    -------
    BetaSweep — values in ascending beta

    Raises
    ------
    vfactor.errors.ModelError
        No ``[orbit]``, not a circular one, or another bad orbit, attitude or environment
        key (naming the file and key).
    vfactor.errors.ArgumentError
        A swept value this orbit cannot have at its epoch (the message names the value and
        the reachable range). Both are raised before any ray is traced.
    """
    from .attitude import attitude_from_table
    from .environment import environment_from_table
    from .heating import HeatingSteps, heating_extremes, step_weights
    from .kinematics import motion_of
    from .planetrays import node_blocks
    from .progress import NullReporter
    from .radiation import compute_view_factors
    from .tracing.scene import Scene
    from .trajectory import compute_trajectory

    reporter = reporter or NullReporter()
    beta_deg = np.array(sorted(float(b) for b in beta_deg), dtype=np.float64)
    if beta_deg.size == 0:
        raise ArgumentError("--beta: no value given")
    elapsed, notes = {}, []
    settings = model.radiation
    rays_per_node = int(rays if rays is not None else settings.rays_per_node)
    seed = int(seed if seed is not None else settings.seed)

    t0 = time.perf_counter()
    orbits = _swept_orbits(model, beta_deg)
    attitude = attitude_from_table(model.attitude_table, file=model.path)
    environment = environment_from_table(model.environment_table, model.path)
    trajectories = [compute_trajectory(o, attitude, planet=o.planet, shadow=o.shadow_model)
                    for o in orbits]
    motions = [motion_of(geometry, model.hinges, tr) for tr in trajectories]
    elapsed["trajectories"] = time.perf_counter() - t0
    if getattr(model, "cases", ()):
        notes.append("the model's [[cases]] are not swept: the sweep uses the model file as "
                     "written")

    if scene is None:
        scene = Scene.build(geometry.vertices, geometry.triangles)
    t0 = time.perf_counter()
    view_factors = compute_view_factors(
        geometry, scene, rays_per_node=rays_per_node, seed=seed,
        target_error=settings.target_error,
        max_rays_per_node=getattr(settings, "max_rays_per_node", None), reporter=reporter,
        smooth=settings.smoothing)
    elapsed["view_factors"] = time.perf_counter() - t0

    positions = [None] * len(orbits)
    count = int(getattr(settings, "hinge_positions", 0))
    if motions[0] is not None and count:
        t0 = time.perf_counter()
        positions = _shared_positions(geometry, motions, count, settings, rays_per_node,
                                      seed, reporter)
        elapsed["positions"] = time.perf_counter() - t0
        notes.append(f"couplings at {count} hinge position(s) over the angles of all "
                     f"{len(orbits)} swept orbits, computed once")

    heat_args = dict(view_factors=view_factors,
                     rays_per_facet=int(settings.planet_rays_per_facet),
                     sun_samples=int(settings.sun_rays_per_facet), seed=seed,
                     planet_blocks=node_blocks(dict(settings.planet_ray_factor),
                                               geometry.nodes.names))
    tasks = [HeatingSteps.of(geometry, scene, trajectories[0], environment,
                             motion=motions[0], positions=positions[0], **heat_args)]
    t0 = time.perf_counter()
    # the vehicle's fixed part, once: it does not depend on the trajectory (module notes)
    state = tasks[0].prepare(geometry, scene, reporter)
    elapsed["heating_prepare"] = time.perf_counter() - t0

    b, n = beta_deg.size, geometry.n_nodes
    average = np.zeros((b, 4, n))
    peak = np.zeros((b, 4, n))
    stderr = np.zeros((b, 4, n))
    eclipse = np.zeros(b)
    t0 = time.perf_counter()
    n_steps = tasks[0].n_steps
    with reporter.stage("sweep: heating", total=b * n_steps, unit="steps") as bar:
        for i, trajectory in enumerate(trajectories):
            task = tasks[0] if i == 0 else HeatingSteps.of(
                geometry, scene, trajectory, environment, motion=motions[i],
                positions=positions[i], **heat_args)
            heating = task.assemble(task.run(state, np.arange(task.n_steps), bar))
            ext = heating_extremes(heating)
            average[i], peak[i] = ext.average, ext.maximum
            for r, src in enumerate(SOURCES[:3]):
                stderr[i, r] = ext.weights @ getattr(heating, f"node_{src}_stderr")
            stderr[i, 3] = stderr[i, :3].sum(axis=0)
            lit = float(step_weights(trajectory.time) @ trajectory.sun_fraction)
            eclipse[i] = min(1.0, max(0.0, 1.0 - lit))    # weights sum to 1 to rounding
    elapsed["heating"] = time.perf_counter() - t0
    return BetaSweep(beta_deg=beta_deg, raan_deg=np.degrees([o.raan for o in orbits]),
                     node_names=tuple(geometry.nodes.names), node_part=geometry.node_parts(),
                     part_names=tuple(geometry.part_names), average=average, peak=peak,
                     average_stderr=stderr, eclipse_fraction=eclipse, steps=n_steps,
                     model_name=model.name, case=environment.case, elapsed_s=elapsed,
                     notes=tuple(notes))


# --------------------------------------------------------------------------------------
# writing
# --------------------------------------------------------------------------------------
def _fmt(x) -> str:
    """Text that reads back to the same value (the CSV tables' rule)."""
    from .tables import _fmt as exact

    return exact(x)


def csv_header() -> list:
    """Column names of ``sweep.csv`` (unit in square brackets)."""
    return (["beta [deg]", "raan [deg]", "node", "part"]
            + [f"average_{s} [W]" for s in SOURCES]
            + [f"average_{s}_stderr [W]" for s in SOURCES]
            + [f"peak_{s} [W]" for s in SOURCES]
            + ["eclipse_fraction [1]", "vehicle_average_total [W]", "hottest [1]",
               "coldest [1]"])


def write_sweep_csv(sweep: BetaSweep, path, batch: atomic.Batch) -> Path:
    """``sweep.csv``: one row per swept value and node (layout in the README, "Sweeping
    the beta angle"); ``hottest``/``coldest`` are 1 on the row of the node's largest /
    smallest orbit-average total, else 0. Written within ``batch``."""
    path = Path(path)
    hot, cold = sweep.hottest, sweep.coldest
    vehicle = sweep.vehicle_average[:, SOURCES.index("total")]
    with batch.open(path, "the sweep table", text=True, newline="") as fh:
        w = csv.writer(fh)
        w.writerow(csv_header())
        for i, beta in enumerate(sweep.beta_deg):
            for j, name in enumerate(sweep.node_names):
                part = (sweep.part_names[sweep.node_part[j]] if sweep.node_part[j] >= 0
                        else "")
                w.writerow([_fmt(x) for x in (
                    [float(beta), float(sweep.raan_deg[i]), name, part]
                    + list(sweep.average[i, :, j]) + list(sweep.average_stderr[i, :, j])
                    + list(sweep.peak[i, :, j])
                    + [float(sweep.eclipse_fraction[i]), float(vehicle[i]),
                       int(hot[j] == i), int(cold[j] == i)])])
    return path


def _model_inputs(model) -> list:
    inputs = [Path(model.path)] if getattr(model, "path", None) else []
    return inputs + [Path(p.parameters["file"]) for p in model.parts
                     if p.shape == "mesh" and p.parameters.get("file")]


def model_beta_list(model_path) -> tuple:
    """The beta angles of the model file's ``[sweep] beta_deg`` (a list of numbers or a
    LIST string as for ``--beta``) [deg]; ArgumentError when it has none."""
    import tomllib

    try:
        doc = tomllib.loads(Path(model_path).read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise ModelError(f"cannot read the model file: {exc}", file=str(model_path)) from None
    table = doc.get("sweep")
    if table is None or "beta_deg" not in table:
        raise ArgumentError(f"{model_path}: give --beta LIST, or [sweep] beta_deg in the "
                            "model")
    value = table["beta_deg"]
    unknown = sorted(set(table) - {"beta_deg"})
    if unknown:
        raise ModelError(f"unknown key {unknown[0]!r}; known keys: beta_deg",
                         file=str(model_path), where="[sweep]")
    if isinstance(value, list) and all(isinstance(v, (int, float)) and not isinstance(v, bool)
                                       for v in value):
        value = ",".join(repr(float(v)) for v in value)
    if not isinstance(value, str) or not value:
        raise ModelError(f"must be a list of numbers or a LIST string such as \"0:60:15\", "
                         f"got {value!r}", file=str(model_path), where="[sweep] beta_deg")
    try:
        return parse_beta_list(value)
    except ArgumentError as exc:
        raise ModelError(str(exc).removeprefix("--beta: "), file=str(model_path),
                         where="[sweep] beta_deg") from None


def run_sweep(model_path, beta_deg, output_dir, *, rays=None, seed=None,
              reporter=None) -> SweepRun:
    """Load a model, sweep it over ``beta_deg`` and write ``sweep.csv`` and ``sweep.png``.

    Parameters
    ----------
    model_path : str or os.PathLike — model file (TOML)
    beta_deg : sequence of float — beta angles [deg] (:func:`parse_beta_list`)
    output_dir : str or os.PathLike — folder for the two files (created if missing)
    rays, seed : int, optional — as for :func:`compute_sweep`
    reporter : vfactor.progress.Reporter, optional

    Returns
    -------
    SweepRun

    Raises
    ------
    vfactor.errors.ModelError, ArgumentError — as :func:`compute_sweep`, and a model the
        checks of ``vfactor check`` refuse
    vfactor.atomic.OutputError
        A file would replace the model or a mesh file, or cannot be written. Both files
        are one :class:`vfactor.atomic.Batch`: replaced together or not at all.
    vfactor.interrupts.RunTerminated
        SIGTERM or SIGHUP arrived (no file of the sweep is changed).
    """
    from .interrupts import signals_raise
    from .progress import NullReporter

    folder = Path(output_dir)
    if folder.exists() and not folder.is_dir():
        raise ArgumentError(f"{folder}: the sweep writes a folder, and this is a file")
    if rays is not None and (isinstance(rays, bool) or int(rays) < 1):
        raise ArgumentError(f"--rays must be a whole number >= 1, got {rays!r}")
    # SIGTERM and SIGHUP end the sweep through the clean-up of the batch, as for `run`
    with signals_raise():
        return _run_sweep(model_path, beta_deg, folder, rays=rays, seed=seed,
                          reporter=reporter or NullReporter())


def _run_sweep(model_path, beta_deg, folder: Path, *, rays, seed, reporter) -> SweepRun:
    """:func:`run_sweep` after the argument checks."""
    from .checks import require_clean
    from .geometry import build_geometry
    from .model import load_model
    from .sweepplot import plot_sweep

    t_start = time.perf_counter()
    t0 = time.perf_counter()
    reporter.message(f"loading {model_path}")
    model = load_model(model_path)
    inputs = _model_inputs(model)
    hint = "give the sweep another folder"
    atomic.refuse_inputs([folder / name for name in FILE_NAMES], inputs, hint=hint)
    geometry = build_geometry(model)
    found = require_clean(model, geometry, rays=rays)
    warnings = tuple("warning: " + ": ".join(x for x in (p.where, p.message) if x)
                     for p in found if p.severity == "warning")
    geometry_s = time.perf_counter() - t0
    sweep = compute_sweep(model, geometry, beta_deg, rays=rays, seed=seed, reporter=reporter)
    t0 = time.perf_counter()
    with atomic.Batch(inputs, hint=hint) as batch:
        batch.folder(folder, "the sweep folder")
        files = (write_sweep_csv(sweep, folder / FILE_NAMES[0], batch),
                 plot_sweep(sweep, folder / FILE_NAMES[1], batch=batch))
    elapsed = dict(sweep.elapsed_s, geometry=geometry_s, write=time.perf_counter() - t0)
    total = time.perf_counter() - t_start
    elapsed["total"] = total
    return SweepRun(sweep=replace(sweep, elapsed_s=elapsed, notes=warnings + sweep.notes),
                    files=files, elapsed_s=total)


# --------------------------------------------------------------------------------------
# the printed table
# --------------------------------------------------------------------------------------
def _groups(sweep: BetaSweep, max_rows: int):
    """(names, (b, n_groups) orbit-average totals, label): nodes, or parts above
    ``max_rows`` nodes."""
    total = sweep.total
    if len(sweep.node_names) <= max_rows:
        return list(sweep.node_names), total, "node"
    used = sorted(set(int(p) for p in sweep.node_part if p >= 0))
    sums = np.stack([total[:, sweep.node_part == p].sum(axis=1) for p in used], axis=1)
    return [sweep.part_names[p] for p in used], sums, "part"


def format_sweep_table(sweep: BetaSweep, max_rows: int = _TABLE_ROWS) -> str:
    """Per node (per part above ``max_rows`` nodes): the hottest and coldest swept beta
    and the orbit-average total absorbed power there; then the eclipse fraction per value
    and the vehicle's hottest and coldest value."""
    names, totals, label = _groups(sweep, max_rows)
    beta = sweep.beta_deg
    width = max([len(label), len("vehicle")] + [len(x) for x in names])
    lines = [f"{label:<{width}}  {'hot beta':>9}  {'average':>10}  {'cold beta':>9}  "
             f"{'average':>10}",
             f"{'':<{width}}  {'[deg]':>9}  {'[W]':>10}  {'[deg]':>9}  {'[W]':>10}"]
    for g, name in enumerate(names):
        hot, cold = int(np.argmax(totals[:, g])), int(np.argmin(totals[:, g]))
        lines.append(f"{name:<{width}}  {beta[hot]:9.2f}  {totals[hot, g]:10.3f}  "
                     f"{beta[cold]:9.2f}  {totals[cold, g]:10.3f}")
    vehicle = sweep.vehicle_average[:, SOURCES.index("total")]
    hot, cold = int(np.argmax(vehicle)), int(np.argmin(vehicle))
    lines.append(f"{'vehicle':<{width}}  {beta[hot]:9.2f}  {vehicle[hot]:10.3f}  "
                 f"{beta[cold]:9.2f}  {vehicle[cold]:10.3f}")
    if label == "part":
        lines.append(f"({len(sweep.node_names)} nodes summed by part; sweep.csv has every "
                     f"node)")
    f = sweep.eclipse_fraction
    lo, hi = int(np.argmin(f)), int(np.argmax(f))
    lines.append(f"eclipse fraction: {f[lo]:.3f} at beta {beta[lo]:g} deg .. {f[hi]:.3f} at "
                 f"beta {beta[hi]:g} deg")
    return "\n".join(lines)
