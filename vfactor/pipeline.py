"""The one pipeline the command line calls: model -> geometry -> couplings -> heating -> file.

:func:`run` loads the model, builds its geometry and ray-tracing scene, computes the view
factors and the infrared exchange factors, and, when the model has an ``[orbit]``, the
trajectory and the absorbed heat loads; then writes everything to one HDF5 file
(:func:`vfactor.h5io.write_results`, atomic).

Sharing the ray tracing
-----------------------
Every ray-tracing stage is a *task* of :mod:`vfactor.runners` whose jobs are pure
functions of (geometry, seed, job): the view-factor rounds
(:class:`vfactor.radiation.ViewRounds`), the traced Gebhart rounds
(:class:`vfactor.exchange.GebhartRounds`) and the heating steps
(:class:`vfactor.heating.HeatingSteps`). With one worker and no checkpoint the stages run
in this process; otherwise :mod:`vfactor.stagework` sends their jobs to one runner for the
whole run:

* ``workers`` processes on this machine (:class:`concurrent.futures.ProcessPoolExecutor`,
  ``spawn`` start method; each process prepares a task once), or
* a dask.distributed cluster (``scheduler="tcp://host:port"``; the optional ``dask``
  extra), the geometry and each task sent once to every worker.

Results are combined in job order (integer tallies; heating rows placed by step), so the
results are bit-identical for any of these and any number of workers.

Resuming
--------
With ``resume=True`` the finished jobs of every stage are kept in a checkpoint file beside
the output (``OUT.h5.partial``, :mod:`vfactor.checkpoint`, one section per stage), written
atomically every few seconds. A rerun with ``resume=True`` skips the jobs it holds and gives
identical bits. The checkpoint records the model hash, seed and node count, each section its
settings; one from another model or seed is refused with a one-line error. It is removed
when the results file is written.
"""

from __future__ import annotations

import contextlib
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import atomic, outputlock
from .checkpoint import CHECKPOINT_SUFFIX, Checkpoint, checkpoint_path
from .errors import ArgumentError
from .interrupts import RunTerminated, signals_raise
from .progress import NullReporter
from .runners import DaskRunner, ProcessRunner, SerialRunner
from .summary import INERT_WARNING_SHARE

__all__ = ["RunResult", "RunTerminated", "run", "checkpoint_path", "CHECKPOINT_SUFFIX"]

@dataclass(frozen=True)
class RunResult:
    """What :func:`run` did.

    Attributes
    ----------
    output : pathlib.Path — results file written
    model : vfactor.model.Model
    geometry : vfactor.geometry.Geometry
    view_factors, exchange, trajectory, heating : results of each stage (None if not run)
    motion : vfactor.kinematics.Motion or None — hinge angles per step when parts turn
    cases : tuple of CaseRun — per design case its results (empty for a model without
        ``[[cases]]``; the fields above are then those of the first case)
    seed : int
    rays_per_node : int
    workers : int — processes used for the ray tracing (1 in this process; 0 for dask)
    elapsed_s : dict — stage name -> seconds
    resumed_jobs : int — results of finished jobs taken from a checkpoint: (node, round)
        tallies and heating steps
    resumed_by_stage : dict — stage name -> how many of them
    notes : tuple of str — stages skipped and why; the check's warnings as
        ``warning: WHERE: WHAT``
    """

    output: Path
    model: object
    geometry: object
    view_factors: object = None
    exchange: object = None
    trajectory: object = None
    heating: object = None
    motion: object = None
    positions: object = None
    cases: tuple = ()
    seed: int = 0
    rays_per_node: int = 0
    workers: int = 1
    elapsed_s: dict = field(default_factory=dict)
    resumed_jobs: int = 0
    resumed_by_stage: dict = field(default_factory=dict)
    notes: tuple = ()

    def describe(self) -> str:
        """A few lines for the command line: what was written and how long it took."""
        g = self.geometry
        done = ["geometry"]
        if self.view_factors is not None:
            done.append("view factors")
        if self.exchange is not None:
            done.append("Gebhart factors")
        if self.trajectory is not None:
            done.append(f"orbit ({self.trajectory.n_steps} steps)")
        if self.heating is not None:
            done.append("heat loads")
        size = self.output.stat().st_size / 1e6 if self.output.exists() else 0.0
        lines = [f"wrote {self.output} ({size:.1f} MB): {', '.join(done)}",
                 f"  {g.n_nodes} nodes, {g.n_facets} facets, {self.rays_per_node:,} rays per "
                 f"node, seed {self.seed}, {self.elapsed_s.get('total', 0.0):.1f} s"]
        vf = self.view_factors
        if vf is not None and vf.raw_matrix.nnz:
            from .summary import SIGNIFICANT_VIEW_FACTOR as sig_level

            rel = vf.largest_delivered_relative_error(sig_level)
            target = ("" if vf.target_error is None else
                      f"; target {vf.target_error:g} " + ("reached" if vf.converged
                                                         else "NOT reached (budget spent)"))
            lines.append(f"  view factors >= {sig_level:g}: largest one-sigma relative error "
                         f"(delivered values) "
                         f"{100 * rel:.2f} %{target}" if np.isfinite(rel) else
                         f"  no view factor reaches {sig_level:g}; largest one-sigma error "
                         f"{float(vf.stderr.data.max()) if vf.stderr.nnz else 0.0:.2e}"
                         f"{target}")
        if self.resumed_jobs:
            parts = ", ".join(f"{stage} {count}" for stage, count in self.resumed_by_stage.items())
            lines.append(f"  taken from the checkpoint: {parts}")
        for n in self.notes:
            lines.append(f"  {n}" if n.startswith("warning: ") else f"  note: {n}")
        return "\n".join(lines)


# ---------------------------------------------------------------------------------------
# Argument checks
# ---------------------------------------------------------------------------------------
def _check_arguments(output_path, rays, seed, workers, scheduler):
    if rays is not None and (not isinstance(rays, (int, np.integer)) or rays < 1):
        raise ArgumentError(f"--rays must be a whole number >= 1, got {rays!r}")
    if seed is not None and (not isinstance(seed, (int, np.integer)) or not 0 <= seed < 2 ** 64):
        raise ArgumentError(f"--seed must be a whole number in [0, 2**64), got {seed!r}")
    if not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ArgumentError(f"--workers must be a whole number >= 1, got {workers!r}")
    if scheduler is not None and workers != 1:
        raise ArgumentError("give either --workers or --scheduler, not both")
    out = Path(output_path)
    if out.is_dir():
        raise ArgumentError(f"{out}: is a folder; give the results file name (e.g. {out}/run.h5)")
    folder = out.parent if str(out.parent) else Path(".")
    if not folder.is_dir():
        raise ArgumentError(f"{out}: folder {folder} does not exist")
    if not os.access(folder, os.W_OK):
        raise ArgumentError(f"{out}: folder {folder} is not writable")
    return out


def _model_inputs(model) -> list:
    """Files a run reads: the model file and the mesh files of its parts."""
    inputs = [Path(model.path)] if getattr(model, "path", None) else []
    inputs += [Path(p.parameters["file"]) for p in model.parts
               if p.shape == "mesh" and p.parameters.get("file")]
    return inputs


def _refuse_overwriting_inputs(out: Path, model) -> None:
    """OutputError when the results file, its checkpoint or its lock file would replace the
    model file or a mesh file the model reads (``vfactor run sat.toml -o sat.toml``)."""
    atomic.refuse_inputs([out, checkpoint_path(out), outputlock.lock_path(out)],
                         _model_inputs(model),
                         hint="give the results another file name (e.g. run.h5)")


# ---------------------------------------------------------------------------------------
# The shared route: one runner and one checkpoint for every stage
# ---------------------------------------------------------------------------------------
def _runner(geometry, scene, model, workers, scheduler, tag=""):
    key = f"{model.sha256}:{geometry.n_facets}:{tag}"
    if scheduler is not None:
        return DaskRunner(geometry, key, scheduler)
    if workers > 1:
        return ProcessRunner(geometry, key, workers)
    return SerialRunner(geometry, scene)


@dataclass(frozen=True)
class CaseRun:
    """The results of one design case (``name`` "" for a model without cases)."""

    name: str
    description: str
    model: object
    geometry: object
    exchange: object = None
    trajectory: object = None
    motion: object = None
    positions: object = None
    heating: object = None


def _selected_cases(model, only) -> list:
    """The cases to compute: every ``[[cases]]`` table, or those named in ``only`` (an
    unknown name is an ArgumentError); ``[None]`` for a model without cases."""
    if not model.cases:
        if only:
            raise ArgumentError(f"--case {only[0]}: {model.path} has no [[cases]]")
        return [None]
    names = [c.name for c in model.cases]
    for name in only or ():
        if name not in names:
            raise ArgumentError(f"--case {name}: no such case in {model.path}; cases are "
                                f"{', '.join(names)}")
    return [c for c in model.cases if not only or c.name in only]


def _case_models(model, cases) -> dict:
    """id(case) -> the Model of that case, its orbit, attitude and environment read (a bad
    value of any case stops the run here, before the ray tracing)."""
    from .attitude import attitude_from_table
    from .cases import case_model
    from .environment import environment_from_table
    from .orbittable import orbit_from_table

    out = {}
    for case in cases:
        cm = model if case is None else case_model(model, case)
        if case is not None:
            file = f"{model.path} (case {case.name})"
            if cm.orbit_table is not None:
                orbit_from_table(cm.orbit_table, file=file)
            if cm.attitude_table is not None:
                attitude_from_table(cm.attitude_table, file=file)
            environment_from_table(cm.environment_table, file)
        out[id(case)] = cm
    return out


def _case_stage(case, cmodel, model, geometry, scene, view_factors, exchanges, traced, settings, *,
                rays_per_node, seed, runner, ckpt, workers, scheduler, resumed, elapsed,
                notes, reporter, extra_runners, multiple) -> CaseRun:
    """Gebhart factors, trajectory, couplings at hinge positions and heating of one case
    (``case`` None: the model as written), reusing what earlier cases computed."""
    from . import stagework
    from .cases import infrared_key, recoated
    from .environment import environment_from_table
    from .exchange import compute_exchange, traced_band
    from .heating import HeatingSteps
    from .kinematics import motion_of
    from .planetrays import node_blocks
    from .positions import couplings_at_positions
    from .trajectory import trajectory_from_model

    name = "" if case is None else case.name
    tag = f"{name}: " if multiple else ""
    cgeom = geometry if case is None or not case.coatings else recoated(geometry, cmodel)
    if cgeom is not geometry and runner is not None and not isinstance(runner, SerialRunner):
        # workers hold the geometry they were given: this case's coatings need their own
        runner = _runner(cgeom, scene, model, workers, scheduler, tag=name)
        extra_runners.append(runner)
    elif cgeom is not geometry and runner is not None:
        runner = SerialRunner(cgeom, scene)
        extra_runners.append(runner)
    if multiple:
        reporter.message(f"case {name}")

    t0 = time.perf_counter()
    key = infrared_key(cgeom)
    if key in exchanges:
        exchange = exchanges[key]
    else:
        if runner is not None and traced_band(cgeom, "ir"):
            exchange, resumed[f"{tag}Gebhart factors"] = stagework.gebhart_on(
                runner, cgeom, band="ir", rays_per_node=rays_per_node, seed=seed,
                checkpoint=ckpt, reporter=reporter,
                section_name=f"gebhart_ir:{len(exchanges)}" if len(exchanges) else None)
        else:
            exchange = compute_exchange(cgeom, scene, view_factors, rays_per_node=rays_per_node,
                                        seed=seed, band="ir", reporter=reporter,
                                        drop_tolerance=settings.gebhart_drop_tolerance)
        exchanges[key] = exchange
    elapsed[f"{tag}exchange"] = elapsed.get(f"{tag}exchange", 0.0) + time.perf_counter() - t0

    t0 = time.perf_counter()
    trajectory = trajectory_from_model(cmodel)
    motion = None if trajectory is None else motion_of(cgeom, model.hinges, trajectory)
    elapsed[f"{tag}trajectory"] = time.perf_counter() - t0
    positions = heating = None
    if motion is not None:
        if not any("hinge(s) turn parts" in n for n in notes):
            notes.append(f"{len(motion.hinges)} hinge(s) turn parts along the orbit: the "
                         "stored couplings are those of the model as built (every hinge at "
                         "0); each heating step uses the vehicle as placed at that step")
        count = int(getattr(settings, "hinge_positions", 0))
        if count:
            t1 = time.perf_counter()
            positions = couplings_at_positions(
                cgeom, motion, count, rays_per_node=rays_per_node, seed=seed,
                smooth=settings.smoothing, target_error=settings.target_error,
                max_rays_per_node=getattr(settings, "max_rays_per_node", None),
                drop_tolerance=settings.gebhart_drop_tolerance, reporter=reporter)
            elapsed[f"{tag}positions"] = time.perf_counter() - t1
            note = f"couplings also at {count} hinge position(s), in /positions"
            if note not in notes and not multiple:
                notes.append(note)
    elif model.hinges and trajectory is None and case is None:
        notes.append("the model has hinges but no [orbit]: its parts stay as built")
    if trajectory is None:
        if not any("has no [orbit]" in n for n in notes):
            notes.append("the model has no [orbit]: couplings only, no heat loads")
        return CaseRun(name=name, description="" if case is None else case.description,
                       model=cmodel, geometry=cgeom, exchange=exchange)

    environment = environment_from_table(cmodel.environment_table, model.path)
    t0 = time.perf_counter()
    task = HeatingSteps.of(cgeom, scene, trajectory, environment, view_factors=view_factors,
                           rays_per_facet=int(settings.planet_rays_per_facet),
                           sun_samples=int(settings.sun_rays_per_facet), seed=seed,
                           motion=motion, positions=positions,
                           planet_blocks=node_blocks(dict(settings.planet_ray_factor),
                                                     cgeom.nodes.names))
    if runner is not None:
        heating, resumed[f"{tag}heating steps"] = stagework.heating_on(
            runner, cgeom, task, checkpoint=ckpt, reporter=reporter,
            section_name=f"heating:{name}" if multiple else "heating")
    else:
        state = task.prepare(cgeom, scene, reporter, traced=traced[0] if traced else None)
        if motion is None and not traced:
            traced.append(state[0])
        with reporter.stage(f"{tag}heating", total=task.n_steps, unit="steps") as bar:
            heating = task.assemble(task.run(state, np.arange(task.n_steps), bar))
    elapsed[f"{tag}heating"] = time.perf_counter() - t0
    return CaseRun(name=name, description="" if case is None else case.description,
                   model=cmodel, geometry=cgeom, exchange=exchange, trajectory=trajectory,
                   motion=motion, positions=positions, heating=heating)


# ---------------------------------------------------------------------------------------
# Notes
# ---------------------------------------------------------------------------------------
#: Share of a node's emission lost on inert sides above which the run says so [1]: the
#: summary's warning threshold (one constant, in summary.py).
INERT_NOTE_SHARE = INERT_WARNING_SHARE


def _inert_notes(geometry, view_factors) -> list:
    """One note per node that sends more than :data:`INERT_NOTE_SHARE` of its emission to
    inert sides: in the thermal network that heat disappears, so the inert side should
    probably be a node of its own (common practice: every surface that sees an active one
    takes part in the exchange)."""
    notes = []
    for name, share in zip(geometry.nodes.names, view_factors.raw_inert):
        if share > INERT_NOTE_SHARE:
            notes.append(f"node {name!r} sends {100 * share:.0f} % of its emission to inert "
                         f"sides (lost in the network); consider giving those sides a node")
    return notes


# ---------------------------------------------------------------------------------------
# Signals
# ---------------------------------------------------------------------------------------
# ---------------------------------------------------------------------------------------
# The pipeline
# ---------------------------------------------------------------------------------------
def run(model_path, output_path, *, rays=None, seed=None, workers=1, scheduler=None,
        resume=False, facet_factors=False, cases=None, reporter=None) -> RunResult:
    """Compute everything a model asks for and write the results file.

    Parameters
    ----------
    model_path : str or os.PathLike
        Model file (TOML).
    output_path : str or os.PathLike
        Results file (HDF5) to write; its folder must exist.
    rays : int, optional
        Rays emitted per node; default ``[radiation] rays_per_node``.
    seed : int, optional
        Random seed; default ``[radiation] seed``.
    workers : int
        Processes on this machine that share the ray tracing of every stage.
    scheduler : str, optional
        Address of a dask.distributed scheduler to share it with instead.
    resume : bool
        Keep finished work in ``OUT.h5.partial`` and continue from it.
    facet_factors : bool
        Also compute and store facet-to-node view factors (sparse).
    cases : sequence of str, optional
        For a model with ``[[cases]]``: compute only these (default: every case).
    reporter : vfactor.progress.Reporter, optional
        Progress of the long stages; silent by default.

    Returns
    -------
    RunResult

    Raises
    ------
    vfactor.errors.VfactorError
        Bad model, mesh or argument (one line naming the file, key or value).
    vfactor.atomic.OutputBusyError
        Another live run writes the same output (it holds ``OUT.h5.lock``).
    vfactor.atomic.OutputError
        The output would replace an input, or cannot be written (full disk).
    RunTerminated
        SIGTERM or SIGHUP arrived; everything was cleaned up as for KeyboardInterrupt.

    Notes
    -----
    For the whole run this process holds ``OUT.h5.lock`` (:class:`vfactor.outputlock.OutputLock`)
    and turns SIGTERM and SIGHUP into :class:`RunTerminated`; worker processes die with it.
    """
    reporter = reporter or NullReporter()
    out = _check_arguments(output_path, rays, seed, workers, scheduler)
    atomic.refuse_inputs(outputlock.lock_path(out), [model_path],
                         hint="give the results another file name (e.g. run.h5)")
    with signals_raise(), outputlock.OutputLock(out):
        return _run(model_path, out, rays=rays, seed=seed, workers=workers,
                    scheduler=scheduler, resume=resume, facet_factors=facet_factors,
                    reporter=reporter, only_cases=cases)


def _run(model_path, out: Path, *, rays, seed, workers, scheduler, resume, facet_factors,
         reporter, only_cases=None) -> RunResult:
    """:func:`run` after the argument checks, holding the output's lock."""
    from . import radiation, stagework
    from .checks import require_clean
    from .geometry import build_geometry
    from .h5io import write_results
    from .model import load_model
    from .tracing.scene import Scene

    elapsed = {}
    t_start = time.perf_counter()
    notes = []

    t0 = time.perf_counter()
    reporter.message(f"loading {model_path}")
    model = load_model(model_path)
    _refuse_overwriting_inputs(out, model)
    geometry = build_geometry(model)
    found = require_clean(model, geometry, rays=rays)
    check_warnings = [": ".join(x for x in (p.where, p.message) if x)
                      for p in found if p.severity == "warning"]
    notes.extend(f"warning: {w}" for w in check_warnings)
    notes.extend(p.message for p in found if p.severity != "warning")
    settings = model.radiation
    rays_per_node = int(rays if rays is not None else settings.rays_per_node)
    seed = int(seed if seed is not None else settings.seed)
    facet_factors = bool(facet_factors or getattr(settings, "facet_factors", False))
    elapsed["geometry"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    reporter.message(f"building the ray-tracing scene of {geometry.n_facets} facets")
    scene = Scene.build(geometry.vertices, geometry.triangles)
    elapsed["scene"] = time.perf_counter() - t0

    view_factors = None
    runs, extra_runners = [], []
    cases = _selected_cases(model, only_cases)
    case_models = _case_models(model, cases)      # every case read before any tracing
    shared = workers > 1 or scheduler is not None or resume
    runner = ckpt = None
    resumed = {}
    if shared:
        if resume:
            ckpt = Checkpoint(checkpoint_path(out), model_sha256=model.sha256, seed=seed,
                              n_nodes=geometry.n_nodes)
            held = ckpt.load()
            if held:
                reporter.message(f"resuming: {held} finished jobs' results from "
                                 f"{ckpt.path}")
        runner = _runner(geometry, scene, model, workers, scheduler)
    try:
        t0 = time.perf_counter()
        if runner is not None and not facet_factors:
            view_factors, resumed["view factors"] = stagework.view_factors_on(
                runner, geometry, settings, rays_per_node=rays_per_node, seed=seed,
                checkpoint=ckpt, reporter=reporter)
        else:
            # facet-level factors need the per-ray record of the in-process kernel
            view_factors = radiation.compute_view_factors(
                geometry, scene, rays_per_node=rays_per_node, seed=seed,
                target_error=settings.target_error,
                max_rays_per_node=getattr(settings, "max_rays_per_node", None),
                facet_factors=facet_factors, reporter=reporter, smooth=settings.smoothing)
            if shared:
                notes.append("--facet-factors: view factors traced in this process, without "
                             "workers or checkpoint (the per-ray record is not shared)")
        elapsed["view_factors"] = time.perf_counter() - t0
        notes.extend(_inert_notes(geometry, view_factors))

        exchanges = {}     # infrared properties -> Exchange (computed once per distinct set)
        traced = []        # the heating stage's escaping directions, once for all cases
        for case in cases:
            runs.append(_case_stage(
                case, case_models[id(case)], model, geometry, scene, view_factors, exchanges, traced, settings,
                rays_per_node=rays_per_node, seed=seed, runner=runner, ckpt=ckpt,
                workers=workers, scheduler=scheduler, resumed=resumed, elapsed=elapsed,
                notes=notes, reporter=reporter, extra_runners=extra_runners,
                multiple=bool(model.cases)))
    except BaseException:
        for r in extra_runners:
            r.abort()
        if runner is not None:
            runner.abort()
        if ckpt is not None:
            # keep the finished work for --resume; a full disk here must not hide the
            # error that stopped the run
            with contextlib.suppress(atomic.OutputError):
                ckpt.save()
        raise
    for r in extra_runners:
        r.close()
    if runner is not None:
        runner.close()
    if ckpt is not None:
        ckpt.save()

    first = runs[0]
    exchange, trajectory, heating = first.exchange, first.trajectory, first.heating
    motion, positions = first.motion, first.positions
    elapsed["total"] = time.perf_counter() - t_start
    provenance = {"seed": seed, "rays_per_node": rays_per_node, "elapsed_s": elapsed,
                  "workers": int(workers) if scheduler is None else 0,
                  "scheduler": scheduler or "", "facet_factors": facet_factors,
                  "check_warnings": check_warnings}
    t0 = time.perf_counter()
    write_results(out, model=model, geometry=geometry, view_factors=view_factors,
                  exchange=exchange, trajectory=trajectory, heating=heating,
                  provenance=provenance, inputs=_model_inputs(model), motion=motion,
                  positions=positions, cases=runs if model.cases else None)
    elapsed["write"] = time.perf_counter() - t0
    if ckpt is not None:
        ckpt.remove()
    return RunResult(output=out, model=model, geometry=geometry, view_factors=view_factors,
                     exchange=exchange, trajectory=trajectory, heating=heating, motion=motion,
                     positions=positions, cases=tuple(runs) if model.cases else (),
                     seed=seed,
                     rays_per_node=rays_per_node,
                     workers=int(workers) if scheduler is None else 0, elapsed_s=elapsed,
                     resumed_jobs=sum(resumed.values()),
                     resumed_by_stage={k: v for k, v in resumed.items() if v},
                     notes=tuple(notes))
