"""Where the (node, round) jobs of the view factors run: one interface, three runners.

Every runner has ``map(jobs, seed, rays_per_round)`` (an iterator of ``(nodes, rounds,
tallies)`` as jobs finish) and ``close()``: :class:`SerialRunner` traces in this process,
:class:`ProcessRunner` in ``workers`` processes on this machine
(:class:`concurrent.futures.ProcessPoolExecutor`, ``spawn``; each builds the scene once),
:class:`DaskRunner` on a dask.distributed cluster (the geometry sent once to every
worker). Worker processes die with their parent (:func:`die_with_parent`).
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


def _init_worker(geometry, key, threads=None, parent_pid=None):
    """Process-pool initializer: keep the geometry and build its scene once per process.

    ``threads``: numba threads of this process (the machine's cores shared among the
    workers, so that N workers do not each start one thread per core). ``parent_pid``:
    the process that started the pool; the worker dies with it (:func:`die_with_parent`).
    """
    from .tracing.scene import Scene

    if parent_pid is not None:
        die_with_parent(parent_pid)

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


class SerialRunner:
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


class ProcessRunner:
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

        with GATE.deferred():  # submit starts the worker processes
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


class DaskRunner:
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
