"""Where the jobs of a run are computed: one interface, three runners.

A *task* describes one kind of work and is sent once to every worker: ``task.key`` (a
string naming its payload), ``task.prepare(geometry, scene, reporter=None)`` (what a worker
computes once per task, e.g. the heating stage's cached escape directions) and
``task.run(state, job)`` (one job; a pure function of the task and the job, so that the
result does not depend on where it runs). The tasks of a run are
:class:`vfactor.radiation.ViewRounds`, :class:`vfactor.exchange.GebhartRounds` and
:class:`vfactor.heating.HeatingSteps`.

Every runner has ``map(task, jobs)`` (an iterator of ``(job, result)`` as jobs finish),
``close()`` and ``abort()``: :class:`SerialRunner` computes in this process,
:class:`ProcessRunner` in ``workers`` processes on this machine
(:class:`concurrent.futures.ProcessPoolExecutor`, ``spawn``; each builds the scene once
and prepares each task once), :class:`DaskRunner` on a dask.distributed cluster (geometry
and task sent once to every worker; each worker process prepares a task once). Worker
processes die with their parent (:func:`die_with_parent`).
"""

from __future__ import annotations

import contextlib
import os
import signal
import sys
import threading
import time

from .errors import ArgumentError
from .interrupts import GATE

__all__ = ["SerialRunner", "ProcessRunner", "DaskRunner", "die_with_parent",
           "PARENT_POLL_S"]

_WORKER_STATE: dict = {}
"""What a worker process keeps between jobs: the geometry, its key and the scene."""

#: How often a worker process checks that its parent still lives [s].
PARENT_POLL_S = 0.5
_PR_SET_PDEATHSIG = 1  # <linux/prctl.h>; prctl(2)


def die_with_parent(parent_pid: int, *, kernel_notice: bool = True) -> None:
    """Make this worker process end when the process that started it ends.

    * Ctrl-C reaches every process of the terminal's foreground group; the worker ignores
      SIGINT and leaves the decision to the parent, which terminates its workers.
    * Linux: ``prctl(PR_SET_PDEATHSIG, SIGKILL)`` asks the kernel to kill this process when
      its parent dies, however it dies (prctl(2)); a parent that died before the call is
      caught by comparing ``getppid()`` afterwards (the race prctl(2) describes).
    * Everywhere: a daemon thread polls ``getppid()`` every :data:`PARENT_POLL_S`; an
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
        time.sleep(PARENT_POLL_S)
        if os.getppid() != parent_pid:
            os._exit(1)  # no cleanup: the parent's temporaries are cleaned by the next write


def _init_worker(geometry, key, threads=None, parent_pid=None, task=None):
    """Process-pool initializer: keep the geometry, build its scene and prepare ``task``
    once per process.

    ``threads``: numba threads of this process (the machine's cores shared among the
    workers, so that N workers do not each start one thread per core). ``parent_pid``:
    the process that started the pool; the worker dies with it (:func:`die_with_parent`).
    """
    if parent_pid is not None:
        die_with_parent(parent_pid)

    if threads is not None:
        import numba

        numba.set_num_threads(max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS)))
    _load_geometry(geometry, key)
    if task is not None:
        _prepared(task)


def _load_geometry(geometry, key):
    from .tracing.scene import Scene

    _WORKER_STATE.clear()
    _WORKER_STATE["key"] = key
    _WORKER_STATE["geometry"] = geometry
    _WORKER_STATE["scene"] = Scene.build(geometry.vertices, geometry.triangles)


def _prepared(task):
    """The worker's prepared state of ``task`` (prepared on first use; one task kept)."""
    if _WORKER_STATE.get("task_key") != task.key:
        _WORKER_STATE.pop("task_state", None)
        _WORKER_STATE["task_state"] = task.prepare(_WORKER_STATE["geometry"],
                                                   _WORKER_STATE["scene"])
        _WORKER_STATE["task_key"] = task.key
    return _WORKER_STATE["task_state"]


def _job_in_worker(task, job):
    return task.run(_prepared(task), job)


_DASK_LOCK = threading.Lock()
"""One job at a time per dask worker process: its threads share the worker's state, and
the numba kernels use every core of the process already."""


def _job_on_dask(geometry, key, task, job):
    """Run one job on a dask worker, building the scene and preparing the task once per
    worker process."""
    with _DASK_LOCK:
        if _WORKER_STATE.get("key") != key:
            _load_geometry(geometry, key)
        return _job_in_worker(task, job)


def _forget_on_dask(key):
    """Drop what this dask worker keeps for the run ``key`` (called when the run ends)."""
    with _DASK_LOCK:
        if _WORKER_STATE.get("key") == key:
            _WORKER_STATE.clear()


class SerialRunner:
    """Jobs in this process, one after the other (each job uses every core)."""

    workers = 1

    def __init__(self, geometry, scene):
        self.geometry, self.scene = geometry, scene
        self._task_key, self._state = None, None

    def prepare(self, task, reporter=None):
        """Prepare ``task`` here (its progress to ``reporter``) before :meth:`map` needs it."""
        if self._task_key != task.key:
            self._state = None
            self._state = task.prepare(self.geometry, self.scene, reporter)
            self._task_key = task.key

    def map(self, task, jobs):
        self.prepare(task)
        for job in jobs:
            yield job, task.run(self._state, job)

    def close(self):
        self._state = None

    def abort(self):
        self._state = None


#: Time a terminated worker gets to exit before it is killed [s].
_TERMINATE_GRACE_S = 3.0


class ProcessRunner:
    """Jobs over ``workers`` spawned processes; :meth:`abort` ends them at once.

    The pool is started for each task (the task goes to every process once, with the
    geometry, in the pool's initializer), so that a large payload such as the heating
    stage's view factors is not pickled with every job.
    """

    def __init__(self, geometry, key, workers):
        self.workers = workers
        self._geometry, self._key = geometry, key
        self._pool, self._task_key = None, None
        self._before: set = set()

    def prepare(self, task, reporter=None):
        """Start the pool of ``task`` (the workers prepare it as they start)."""
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        if self._pool is not None and self._task_key == task.key:
            return
        self.close()
        # the pool's processes are the children started from now on (public API:
        # multiprocessing.active_children; the executor keeps its own list private)
        before = set(multiprocessing.active_children())
        with GATE.deferred():
            self._pool = ProcessPoolExecutor(
                max_workers=self.workers, mp_context=multiprocessing.get_context("spawn"),
                initializer=_init_worker,
                initargs=(self._geometry, self._key,
                          max(1, (os.cpu_count() or 1) // self.workers), os.getpid(), task))
        self._task_key = task.key
        self._before = before

    def map(self, task, jobs):
        from concurrent.futures import as_completed

        jobs = list(jobs)
        self.prepare(task)
        with GATE.deferred():  # submit starts the worker processes
            futures = {self._pool.submit(_job_in_worker, task, job): i
                       for i, job in enumerate(jobs)}
        for fut in as_completed(futures):
            yield jobs[futures[fut]], fut.result()

    def close(self):
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
        self._pool, self._task_key = None, None

    def abort(self):
        """Stop now (an error, Ctrl-C, SIGTERM): cancel what is queued, SIGTERM the workers,
        SIGKILL those still there after :data:`_TERMINATE_GRACE_S`."""
        import multiprocessing

        if self._pool is None:
            return
        procs = [p for p in multiprocessing.active_children() if p not in self._before]
        self._pool.shutdown(wait=False, cancel_futures=True)
        self._pool, self._task_key = None, None
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


class DaskRunner:
    """Jobs on a dask.distributed cluster: the geometry and each task are scattered once
    to every worker; each worker process builds the scene and prepares a task once."""

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
        self._geometry = self._client.scatter(geometry, broadcast=True, hash=False)
        self._key = key
        self._task_key, self._task = None, None
        self.workers = max(1, len(self._client.scheduler_info().get("workers", {})))

    def prepare(self, task, reporter=None):
        if self._task_key != task.key:
            self._task = self._client.scatter(task, broadcast=True, hash=False)
            self._task_key = task.key

    def map(self, task, jobs):
        from distributed import as_completed

        self.prepare(task)
        futures = {}
        for job in jobs:
            fut = self._client.submit(_job_on_dask, self._geometry, self._key, self._task,
                                      job, pure=False)
            futures[fut] = job
        for fut in as_completed(list(futures), loop=self._client.loop):
            yield futures[fut], fut.result()

    def close(self):
        with contextlib.suppress(Exception):  # the workers may be gone already
            self._client.run(_forget_on_dask, self._key)
        self._client.close()

    def abort(self):
        self._client.close()
