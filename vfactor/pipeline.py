"""The one pipeline the command line calls: model -> geometry -> couplings -> heating -> file.

:func:`run` loads the model, builds its geometry and ray-tracing scene, computes the view
factors and the infrared exchange factors, and, when the model has an ``[orbit]``, the
trajectory and the absorbed heat loads; then writes everything to one HDF5 file
(:func:`vfactor.h5io.write_results`, atomic).

Sharing the ray tracing
-----------------------
The view factors are summed from integer tallies of independent *rounds*
(:func:`vfactor.radiation.trace_pairs`): one round of one node is a pure function of
(geometry, seed, node, round, rays per round). The pipeline asks
:func:`vfactor.radiation.plan_rounds` which (node, round) pairs to trace — the same pairs
:func:`vfactor.radiation.compute_view_factors` traces — cuts them into jobs
(:func:`vfactor.radiation.trace_pairs`) and sends them to

* this process (``workers=1``),
* ``workers`` processes on this machine (:class:`concurrent.futures.ProcessPoolExecutor`,
  ``spawn`` start method; each process builds the scene once), or
* a dask.distributed cluster (``scheduler="tcp://host:port"``; the optional ``dask``
  extra), the geometry sent once to every worker.

Integer sums do not depend on the order of addition, so the results are bit-identical for
any of these and any number of workers.

Resuming
--------
With ``resume=True`` finished jobs are kept in a checkpoint file beside the output
(``OUT.h5.partial``, NumPy ``.npz`` content), written atomically every few seconds. A rerun
with ``resume=True`` skips the jobs it holds and gives identical bits. The checkpoint
records the model hash, seed, rays per round and node count; one from another model or
seed is refused with a one-line error. It is removed when the results file is written.
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import threading
import time
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import atomic
from .errors import ArgumentError, VfactorError
from .progress import NullReporter
from .summary import INERT_WARNING_SHARE

__all__ = ["RunResult", "RunTerminated", "run", "checkpoint_path", "CHECKPOINT_SUFFIX"]

CHECKPOINT_SUFFIX = ".partial"
_CHECKPOINT_KIND = "vfactor-checkpoint-1"
_CHECKPOINT_EVERY_S = 5.0


@dataclass(frozen=True)
class RunResult:
    """What :func:`run` did.

    Attributes
    ----------
    output : pathlib.Path — results file written
    model : vfactor.model.Model
    geometry : vfactor.geometry.Geometry
    view_factors, exchange, trajectory, heating : results of each stage (None if not run)
    seed : int
    rays_per_node : int
    workers : int — processes used for the ray tracing (1 in this process; 0 for dask)
    elapsed_s : dict — stage name -> seconds
    resumed_jobs : int — (node, round) pairs taken from a checkpoint
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
    seed: int = 0
    rays_per_node: int = 0
    workers: int = 1
    elapsed_s: dict = field(default_factory=dict)
    resumed_jobs: int = 0
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
        if vf is not None and np.size(vf.raw_matrix):
            from .summary import SIGNIFICANT_VIEW_FACTOR as sig_level

            sig = vf.raw_matrix >= sig_level
            rel = float((vf.stderr[sig] / vf.raw_matrix[sig]).max()) if sig.any() else 0.0
            target = ("" if vf.target_error is None else
                      f"; target {vf.target_error:g} " + ("reached" if vf.converged
                                                         else "NOT reached (budget spent)"))
            lines.append(f"  view factors >= {sig_level:g}: largest one-sigma relative error "
                         f"{100 * rel:.2f} %{target}")
        if self.resumed_jobs:
            lines.append(f"  {self.resumed_jobs} (node, round) tallies taken from the checkpoint")
        for n in self.notes:
            lines.append(f"  {n}" if n.startswith("warning: ") else f"  note: {n}")
        return "\n".join(lines)


def checkpoint_path(output_path) -> Path:
    """The checkpoint file of ``output_path``: the same name plus ``.partial``."""
    p = Path(output_path)
    return p.with_name(p.name + CHECKPOINT_SUFFIX)


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
    atomic.refuse_inputs([out, checkpoint_path(out), atomic.lock_path(out)],
                         _model_inputs(model),
                         hint="give the results another file name (e.g. run.h5)")


# ---------------------------------------------------------------------------------------
# Jobs: (round, block of nodes) -> integer tallies
# ---------------------------------------------------------------------------------------
_WORKER_STATE: dict = {}


def _pair_chunks(count: int, parallel: int, checkpointed: bool = False) -> list:
    """Slices cutting ``count`` (node, round) pairs into jobs: one job in this process,
    four per worker otherwise (so that the load balances); at least eight when a
    checkpoint is kept, so that an interrupted batch leaves finished jobs behind."""
    if count == 0:
        return []
    pieces = 1 if parallel <= 1 else 4 * parallel
    if checkpointed:
        pieces = max(pieces, 8)
    pieces = min(count, pieces)
    bounds = np.linspace(0, count, pieces + 1).round().astype(np.int64)
    return [slice(int(a), int(b)) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]


#: How often a worker process checks that its parent still lives [s].
_PARENT_POLL_S = 0.5
_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>; prctl(2)


def _die_with_parent(parent_pid: int, *, kernel_notice: bool = True) -> None:
    """Make this worker process end when the process that started it ends.

    * Ctrl-C reaches every process of the terminal's foreground group; the worker ignores
      SIGINT and leaves the decision to the parent, which terminates its workers.
    * Linux: ``prctl(PR_SET_PDEATHSIG, SIGKILL)`` asks the kernel to kill this process when
      its parent dies, however it dies (prctl(2)); a parent that died before the call is
      caught by comparing ``getppid()`` afterwards (the race prctl(2) describes).
    * Everywhere: a daemon thread polls ``getppid()`` every :data:`_PARENT_POLL_S`; an
      orphan is re-parented (to init or a subreaper: getppid changes) and exits at once.

    ``kernel_notice=False`` leaves out the prctl call (the tests check the watchdog alone).
    """
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if kernel_notice and sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0)
        except (OSError, AttributeError):  # no libc prctl: the watchdog below still runs
            pass
    if os.getppid() != parent_pid:
        os._exit(1)
    threading.Thread(target=_watch_parent, args=(parent_pid,), name="vfactor-parent-watch",
                     daemon=True).start()


def _watch_parent(parent_pid: int) -> None:
    while True:
        time.sleep(_PARENT_POLL_S)
        if os.getppid() != parent_pid:
            os._exit(1)  # no cleanup: the parent's temporaries are cleaned by the next write


def _init_worker(geometry, key, threads=None, parent_pid=None):
    """Process-pool initializer: keep the geometry and build its scene once per process.

    ``threads``: numba threads of this process (the machine's cores shared among the
    workers, so that N workers do not each start one thread per core). ``parent_pid``:
    the process that started the pool; the worker dies with it (:func:`_die_with_parent`).
    """
    from .tracing.scene import Scene

    if parent_pid is not None:
        _die_with_parent(parent_pid)

    if threads is not None:
        import numba

        numba.set_num_threads(max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS)))
    _WORKER_STATE.clear()
    _WORKER_STATE["key"] = key
    _WORKER_STATE["geometry"] = geometry
    _WORKER_STATE["scene"] = Scene.build(geometry.vertices, geometry.triangles)


def _job_in_worker(nodes, rounds, seed, rays_per_round):
    from .radiation import trace_pairs

    return trace_pairs(_WORKER_STATE["geometry"], _WORKER_STATE["scene"], nodes, rounds, seed,
                       rays_per_round)


def _job_on_dask(geometry, key, nodes, rounds, seed, rays_per_round):
    """Run one job on a dask worker, building the scene once per worker process."""
    if _WORKER_STATE.get("key") != key:
        _init_worker(geometry, key)
    return _job_in_worker(nodes, rounds, seed, rays_per_round)


class _SerialRunner:
    workers = 1

    def __init__(self, geometry, scene):
        self.geometry, self.scene = geometry, scene

    def map(self, jobs, seed, rays_per_round):
        from .radiation import trace_pairs

        for nodes, rounds in jobs:
            yield (nodes, rounds), trace_pairs(self.geometry, self.scene, nodes, rounds, seed,
                                               rays_per_round)

    def close(self):
        pass

    def abort(self):
        pass


#: Time a terminated worker gets to exit before it is killed [s].
_TERMINATE_GRACE_S = 3.0


class _ProcessRunner:
    """Jobs over ``workers`` spawned processes; :meth:`abort` ends them at once."""

    def __init__(self, geometry, key, workers):
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        self.workers = workers
        # the pool's processes are the children started from now on (public API:
        # multiprocessing.active_children; the executor keeps its own list private)
        self._before = set(multiprocessing.active_children())
        self._pool = ProcessPoolExecutor(max_workers=workers,
                                         mp_context=multiprocessing.get_context("spawn"),
                                         initializer=_init_worker,
                                         initargs=(geometry, key,
                                                   max(1, (os.cpu_count() or 1) // workers),
                                                   os.getpid()))

    def map(self, jobs, seed, rays_per_round):
        from concurrent.futures import as_completed

        with _GATE.deferred():  # submit starts the worker processes
            futures = {self._pool.submit(_job_in_worker, nodes, rounds, seed, rays_per_round):
                       (nodes, rounds) for nodes, rounds in jobs}
        for fut in as_completed(futures):
            yield futures[fut], fut.result()

    def close(self):
        self._pool.shutdown(wait=True, cancel_futures=True)

    def abort(self):
        """Stop now (an error, Ctrl-C, SIGTERM): cancel what is queued, SIGTERM the workers,
        SIGKILL those still there after :data:`_TERMINATE_GRACE_S`."""
        import multiprocessing

        procs = [p for p in multiprocessing.active_children() if p not in self._before]
        self._pool.shutdown(wait=False, cancel_futures=True)
        for p in procs:
            with contextlib.suppress(OSError, ValueError):
                p.terminate()
        deadline = time.monotonic() + _TERMINATE_GRACE_S
        for p in procs:
            p.join(max(0.0, deadline - time.monotonic()))
            if p.is_alive():
                with contextlib.suppress(OSError, ValueError):
                    p.kill()
                p.join(1.0)


class _DaskRunner:
    workers = 0

    def __init__(self, geometry, key, address):
        try:
            from distributed import Client
        except ImportError:
            raise ArgumentError("--scheduler needs dask.distributed: pip install "
                                "'vfactor[dask]'") from None
        try:
            self._client = Client(address, timeout=30, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise ArgumentError(f"--scheduler {address}: cannot connect ({exc})") from None
        self._geometry = self._client.scatter(geometry, broadcast=True)
        self._key = key

    def map(self, jobs, seed, rays_per_round):
        from distributed import as_completed

        futures = {}
        for nodes, rounds in jobs:
            fut = self._client.submit(_job_on_dask, self._geometry, self._key, nodes, rounds,
                                      seed, rays_per_round, pure=False)
            futures[fut] = (nodes, rounds)
        for fut in as_completed(list(futures), loop=self._client.loop):
            yield futures[fut], fut.result()

    def close(self):
        self._client.close()

    def abort(self):
        self._client.close()


# ---------------------------------------------------------------------------------------
# Checkpoint
# ---------------------------------------------------------------------------------------
class _Checkpoint:
    """Finished (round, node) tallies of one computation, kept beside the output file."""

    def __init__(self, path: Path, *, model_sha256, seed, rays_per_round, n_nodes):
        self.path = path
        self.identity = {"model_sha256": str(model_sha256), "seed": int(seed),
                         "rays_per_round": int(rays_per_round), "n_nodes": int(n_nodes)}
        self.tallies: dict = {}   # (round, node) -> (n + 2,) int64
        self._last = time.monotonic()

    def load(self) -> int:
        """Read an existing checkpoint; return how many (round, node) tallies it held."""
        if not self.path.exists():
            return 0
        try:
            # opened here: np.load leaves its own handle open when the zip is unreadable
            with open(self.path, "rb") as fh:
                z = np.load(fh, allow_pickle=False)
                if not isinstance(z, np.lib.npyio.NpzFile):  # a bare .npy array
                    raise ValueError("a single array, not a checkpoint archive")
                kind = str(z["kind"])
                ident = {"model_sha256": str(z["model_sha256"]), "seed": int(z["seed"]),
                         "rays_per_round": int(z["rays_per_round"]),
                         "n_nodes": int(z["n_nodes"])}
                keys, rows = z["keys"], z["rows"]
                z.close()
        except (OSError, KeyError, ValueError, EOFError, zipfile.BadZipFile) as exc:
            # a truncated or foreign file: np.load raises BadZipFile or EOFError for a cut
            # .npz, ValueError for other content
            reason = " ".join(str(exc).split()) or type(exc).__name__
            raise VfactorError(f"{self.path}: unreadable checkpoint ({reason}); delete it or "
                               "run without --resume") from None
        if kind != _CHECKPOINT_KIND:
            raise VfactorError(f"{self.path}: not a vfactor checkpoint (kind {kind!r})")
        for name, value in ident.items():
            if value != self.identity[name]:
                raise VfactorError(
                    f"{self.path}: checkpoint belongs to another computation ({name} "
                    f"{value!r}, this run {self.identity[name]!r}); delete it or run without "
                    "--resume")
        for (r, i), row in zip(keys, rows):
            self.tallies[(int(r), int(i))] = row.astype(np.int64)
        return len(self.tallies)

    def add(self, rounds, nodes, tallies, force=False):
        for r, i, row in zip(rounds, nodes, tallies):
            self.tallies[(int(r), int(i))] = np.asarray(row, dtype=np.int64)
        if force or time.monotonic() - self._last >= _CHECKPOINT_EVERY_S:
            self.save()

    def save(self):
        keys = np.array(sorted(self.tallies), dtype=np.int64).reshape(-1, 2)
        rows = (np.stack([self.tallies[tuple(k)] for k in keys]) if len(keys)
                else np.zeros((0, self.identity["n_nodes"] + 2), np.int64))
        ident = dict(self.identity, seed=np.uint64(self.identity["seed"]))
        with atomic.open_atomic(self.path, "the checkpoint") as fh:
            np.savez(fh, kind=_CHECKPOINT_KIND, keys=keys, rows=rows, **ident)
        self._last = time.monotonic()

    def remove(self):
        if self.path.exists():
            self.path.unlink()


# ---------------------------------------------------------------------------------------
# View factors over a runner
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


def _view_factors(radiation, model, geometry, scene, *, rays_per_node, seed, workers,
                  scheduler, resume, facet_factors, checkpoint, reporter):
    """View factors in this process, or by jobs of (node, round) pairs over a runner.

    The jobs are exactly the (node, round) pairs that
    :func:`vfactor.radiation.compute_view_factors` traces, convergence rounds included, so
    both routes give the same integer sums and hence the same bits.
    """
    settings = model.radiation
    target = settings.target_error
    max_rays = getattr(settings, "max_rays_per_node", None)
    distributed = workers > 1 or scheduler is not None
    if not distributed and not resume or facet_factors:
        # facet-level factors need the per-ray record of the in-process kernel
        vf = radiation.compute_view_factors(geometry, scene, rays_per_node=rays_per_node,
                                            seed=seed, target_error=target,
                                            max_rays_per_node=max_rays,
                                            facet_factors=facet_factors, reporter=reporter,
                                            smooth=settings.smoothing)
        return vf, 0
    n = geometry.n_nodes
    min_rounds = radiation.MIN_ROUNDS
    m, max_rounds = radiation.round_sizes(rays_per_node, max_rays)
    sums = radiation.TallySums.empty(n, m)
    ckpt = None
    resumed = 0
    if resume:
        ckpt = _Checkpoint(checkpoint, model_sha256=model.sha256, seed=seed,
                           rays_per_round=m, n_nodes=n)
        resumed_pairs = ckpt.load()
        if resumed_pairs:
            reporter.message(f"resuming: {resumed_pairs} (node, round) tallies from {checkpoint}")
    key = f"{model.sha256}:{geometry.n_facets}"
    if scheduler is not None:
        runner = _DaskRunner(geometry, key, scheduler)
    elif workers > 1:
        runner = _ProcessRunner(geometry, key, workers)
    else:
        runner = _SerialRunner(geometry, scene)
    try:
        with reporter.stage("view factors", total=n * min_rounds * m, unit="rays") as bar:
            # the first rounds, then the rounds radiation.plan_rounds asks for: the same
            # (node, round) pairs as radiation.compute_view_factors traces
            pair_node = np.tile(np.arange(n, dtype=np.int64), min_rounds)
            pair_round = np.repeat(np.arange(min_rounds, dtype=np.int64), n)
            resumed += _run_pairs(runner, pair_node, pair_round, sums, ckpt, seed, m, bar)
            if target is not None:
                total = n * min_rounds * m
                for _ in range(50):
                    pair_node, pair_round = radiation.plan_rounds(sums, target, max_rounds)
                    if pair_node.size == 0:
                        break
                    total += pair_node.size * m
                    bar.set_total(total)
                    resumed += _run_pairs(runner, pair_node, pair_round, sums, ckpt, seed, m,
                                          bar)
    except BaseException:
        runner.abort()
        if ckpt is not None:
            # keep the finished work for --resume; a full disk here must not hide the
            # error that stopped the run
            with contextlib.suppress(atomic.OutputError):
                ckpt.save()
        raise
    runner.close()
    if ckpt is not None:
        ckpt.save()
    # converged=None: decided from target_error as compute_view_factors decides it
    vf = radiation.view_factors_from_tallies(geometry, sums, target_error=target,
                                             converged=None, smooth=settings.smoothing)
    return vf, resumed


def _run_pairs(runner, pair_node, pair_round, sums, ckpt, seed, m, bar) -> int:
    """Trace the (node, round) pairs not in the checkpoint; add all of them to ``sums``.

    Returns the number of pairs taken from the checkpoint.
    """
    todo = np.ones(pair_node.size, bool)
    if ckpt is not None:
        for p, (i, r) in enumerate(zip(pair_node.tolist(), pair_round.tolist())):
            row = ckpt.tallies.get((r, i))
            if row is not None:
                sums.add_pairs([i], row[None, :])
                bar.advance(m)
                todo[p] = False
    nodes, rounds = pair_node[todo], pair_round[todo]
    parallel = max(1, getattr(runner, "workers", 1) or 4)
    jobs = [(nodes[sl], rounds[sl])
            for sl in _pair_chunks(nodes.size, parallel, checkpointed=ckpt is not None)]
    for (job_nodes, job_rounds), tallies in runner.map(jobs, seed, m):
        sums.add_pairs(job_nodes, tallies)
        if ckpt is not None:
            ckpt.add(job_rounds, job_nodes, tallies)
        bar.advance(len(job_nodes) * m)
    return int((~todo).sum())


# ---------------------------------------------------------------------------------------
# Signals
# ---------------------------------------------------------------------------------------
class RunTerminated(KeyboardInterrupt):
    """SIGTERM or SIGHUP arrived during :func:`run`.

    Raised in the main thread by the handler :func:`_signals_raise` installs, so that the
    same clean-up as for Ctrl-C runs: workers terminated, temporaries removed, the
    checkpoint kept (``--resume``), the lock file removed. A KeyboardInterrupt, so the
    command line reports it as an interruption.

    Attributes
    ----------
    signum : int — the signal received
    """

    def __init__(self, signum: int):
        self.signum = int(signum)
        super().__init__(f"terminated by {signal.Signals(signum).name}")


class _SignalGate:
    """What the signal handler of :func:`_signals_raise` does, and where it must wait.

    A signal that arrives inside :meth:`deferred` (a worker process being started: one
    interrupted between its start and its registration in the pool would be left running,
    unknown to the pool) is held and raised when the block ends. After the first signal
    the handler does nothing more, so the clean-up it starts can finish.
    """

    def __init__(self):
        self.reset()

    def reset(self):
        self.depth, self.pending, self.fired = 0, None, False

    def handler(self, signum, frame):
        if self.fired:
            return
        if self.depth:
            self.pending = signum
            return
        self._raise(signum)

    def _raise(self, signum):
        self.fired = True
        if signum == signal.SIGINT:
            raise KeyboardInterrupt
        raise RunTerminated(signum)

    @contextlib.contextmanager
    def deferred(self):
        self.depth += 1
        try:
            yield
        finally:
            self.depth -= 1
            if not self.depth and self.pending is not None and not self.fired:
                signum, self.pending = self.pending, None
                self._raise(signum)


#: The one gate of this process (signal handlers are per process, like this state).
_GATE = _SignalGate()


@contextlib.contextmanager
def _signals_raise():
    """Turn SIGTERM and SIGHUP into :class:`RunTerminated`, and SIGINT into
    KeyboardInterrupt, at moments where the clean-up can run, while the block runs.

    By default SIGTERM and SIGHUP end a Python process at once, without ``finally``
    blocks, and a process pool's workers would be left running; SIGINT raises
    KeyboardInterrupt anywhere, also while a worker is being started. Only in the main
    thread (signal handlers can only be set there; Python library reference, signal
    module), and only where the signal still has its default action (a SIG_IGN set by
    ``nohup`` is kept). See :class:`_SignalGate`; the previous handlers are restored at
    the end.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    _GATE.reset()
    previous = {}
    for name, default in (("SIGTERM", signal.SIG_DFL), ("SIGHUP", signal.SIG_DFL),
                          ("SIGINT", signal.default_int_handler)):
        sig = getattr(signal, name, None)
        if sig is not None and signal.getsignal(sig) == default:
            previous[sig] = signal.signal(sig, _GATE.handler)
    try:
        yield
    finally:
        for sig, old in previous.items():
            signal.signal(sig, old)
        _GATE.reset()


# ---------------------------------------------------------------------------------------
# The pipeline
# ---------------------------------------------------------------------------------------
def run(model_path, output_path, *, rays=None, seed=None, workers=1, scheduler=None,
        resume=False, facet_factors=False, reporter=None) -> RunResult:
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
        Processes on this machine that share the ray tracing of the view factors.
    scheduler : str, optional
        Address of a dask.distributed scheduler to share it with instead.
    resume : bool
        Keep finished work in ``OUT.h5.partial`` and continue from it.
    facet_factors : bool
        Also compute and store facet-to-node view factors (sparse).
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
    For the whole run this process holds ``OUT.h5.lock`` (:class:`vfactor.atomic.OutputLock`)
    and turns SIGTERM and SIGHUP into :class:`RunTerminated`; worker processes die with it.
    """
    reporter = reporter or NullReporter()
    out = _check_arguments(output_path, rays, seed, workers, scheduler)
    atomic.refuse_inputs(atomic.lock_path(out), [model_path],
                         hint="give the results another file name (e.g. run.h5)")
    with _signals_raise(), atomic.OutputLock(out):
        return _run(model_path, out, rays=rays, seed=seed, workers=workers,
                    scheduler=scheduler, resume=resume, facet_factors=facet_factors,
                    reporter=reporter)


def _run(model_path, out: Path, *, rays, seed, workers, scheduler, resume, facet_factors,
         reporter) -> RunResult:
    """:func:`run` after the argument checks, holding the output's lock."""
    from . import radiation
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

    view_factors = exchange = trajectory = heating = None
    resumed = 0
    t0 = time.perf_counter()
    view_factors, resumed = _view_factors(
        radiation, model, geometry, scene, rays_per_node=rays_per_node, seed=seed,
        workers=workers, scheduler=scheduler, resume=resume, facet_factors=facet_factors,
        checkpoint=checkpoint_path(out), reporter=reporter)
    elapsed["view_factors"] = time.perf_counter() - t0
    if facet_factors and (workers > 1 or scheduler is not None or resume):
        notes.append("--facet-factors: view factors traced in this process, without "
                     "workers or checkpoint (the per-ray record is not shared)")

    notes.extend(_inert_notes(geometry, view_factors))

    t0 = time.perf_counter()
    exchange = radiation.compute_exchange(geometry, scene, view_factors,
                                          rays_per_node=rays_per_node, seed=seed, band="ir",
                                          reporter=reporter)
    elapsed["exchange"] = time.perf_counter() - t0

    t0 = time.perf_counter()
    from .trajectory import trajectory_from_model

    trajectory = trajectory_from_model(model)
    elapsed["trajectory"] = time.perf_counter() - t0
    if trajectory is not None:
        from .environment import environment_from_table
        from .heating import compute_heating

        environment = environment_from_table(model.environment_table, model.path)
        t0 = time.perf_counter()
        heating = compute_heating(
            geometry, scene, trajectory, environment, view_factors=view_factors,
            rays_per_facet=int(settings.planet_rays_per_facet),
            sun_samples=int(settings.sun_rays_per_facet), seed=seed, reporter=reporter)
        elapsed["heating"] = time.perf_counter() - t0
    else:
        notes.append("the model has no [orbit]: couplings only, no heat loads")

    elapsed["total"] = time.perf_counter() - t_start
    provenance = {"seed": seed, "rays_per_node": rays_per_node, "elapsed_s": elapsed,
                  "workers": int(workers) if scheduler is None else 0,
                  "scheduler": scheduler or "", "facet_factors": facet_factors,
                  "check_warnings": check_warnings}
    t0 = time.perf_counter()
    write_results(out, model=model, geometry=geometry, view_factors=view_factors,
                  exchange=exchange, trajectory=trajectory, heating=heating,
                  provenance=provenance, inputs=_model_inputs(model))
    elapsed["write"] = time.perf_counter() - t0
    if resume:
        checkpoint_path(out).unlink(missing_ok=True)
    return RunResult(output=out, model=model, geometry=geometry, view_factors=view_factors,
                     exchange=exchange, trajectory=trajectory, heating=heating, seed=seed,
                     rays_per_node=rays_per_node,
                     workers=int(workers) if scheduler is None else 0, elapsed_s=elapsed,
                     resumed_jobs=resumed, notes=tuple(notes))
