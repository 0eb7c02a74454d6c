"""The steps of a heating job on threads, one whole step per thread at a time (internal).

A step of a rigid vehicle (:func:`vfactor.heatstep.one_step`) is a pure function of the
prepared vehicle and the step: it reads the shared model and bands and writes its own row
of the outputs. :func:`run_steps` hands the steps of a job to ``numba.get_num_threads()``
Python threads, each taking the next step when it is done with one, and each running the
numba kernels of its steps on one numba thread (``numba.set_num_threads`` is per thread).
The kernels give the same bits for any thread count (their sums follow side or chunk
order, never the thread), so the rows are those of running the steps one at a time.

Why: with a cache a step is short (about 10 ms on the demo) and made of several small
parallel kernels with numpy work between them. Run one after another, each kernel ends
at a barrier where one thread waits for the other; when another process holds a core
the wait lasts up to a scheduler time slice, at every kernel of every step; and the
numpy work between them runs on one core. Whole steps per thread have no barrier inside
a step, balance themselves (a thread that is held up takes fewer steps), and overlap one
step's numpy work with another step's kernels (the kernels release the GIL). Measured on
the demo (``scripts/bench_heating.py``): see DEVELOPERS.md.

The mirror chains that a cached step replays (:func:`vfactor.heatreflect.record_chains`)
are recorded before the threads start, with every numba thread; recorded at the first
step that needs them (as before), they would be recorded by one thread while the others
wait for the lock.
"""

from __future__ import annotations

from concurrent.futures import FIRST_EXCEPTION, ThreadPoolExecutor, wait

import numba

from vfactor.heatreflect import record_chains
from vfactor.heatstep import one_step

__all__ = ["run_steps", "step_threads"]


def step_threads(count: int) -> int:
    """Threads for ``count`` steps: the calling thread's numba thread count, at most one per
    step (1: the steps run one after another in the calling thread)."""
    return max(1, min(int(numba.get_num_threads()), int(count)))


def run_steps(model, bands, steps, use_cache: bool, out: dict, bar=None) -> None:
    """Fill row ``p`` of every output of ``out`` with :func:`vfactor.heatstep.one_step` of
    ``steps[p]``, on :func:`step_threads` threads (module notes).

    Parameters
    ----------
    model : vfactor.heatstep.Model — prepared (and traced) vehicle
    bands : vfactor.heatreflect.Bands or None — reflections (None: none)
    steps : sequence of vfactor.heatstep.Step
    use_cache : bool — as :func:`vfactor.heatstep.one_step`
    out : dict name -> array with one row per step, written
    bar : progress bar or None — advanced once per finished step (in the calling thread)

    Raises
    ------
    Whatever a step raises (the steps not yet started are cancelled, the running ones
    finish first).
    """
    threads = step_threads(len(steps))
    if threads == 1:
        for p, step in enumerate(steps):
            one_step(model, bands, step, use_cache, p, out)
            if bar is not None:
                bar.advance(1)
        return
    if use_cache and model.rigid and bands is not None:
        names = [name for name, wanted in (("ir", any(s.olr > 0.0 for s in steps)),
                                           ("solar", any(s.albedo > 0.0 for s in steps)))
                 if wanted]
        record_chains(model, bands, names)
    pool = ThreadPoolExecutor(threads, thread_name_prefix="vfactor-heating",
                              initializer=numba.set_num_threads, initargs=(1,))
    try:
        pending = {pool.submit(one_step, model, bands, step, use_cache, p, out)
                   for p, step in enumerate(steps)}
        while pending:
            done, pending = wait(pending, return_when=FIRST_EXCEPTION)
            for future in done:
                future.result()                 # a step's exception is raised here
                if bar is not None:
                    bar.advance(1)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
