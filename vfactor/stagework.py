"""The stages of a run as jobs over a runner, each with its section of the checkpoint.

A shared or resumable run (``--workers``, ``--scheduler``, ``--resume``) computes its three
ray-tracing stages as jobs of a task (:mod:`vfactor.runners`):

* view factors — (node, round) pairs of :class:`vfactor.radiation.ViewRounds`, the pairs
  :func:`vfactor.radiation.run_rounds` asks for (convergence rounds included);
* traced Gebhart factors — (node, round) pairs of :class:`vfactor.exchange.GebhartRounds`
  (only when a coating of the band is specular; otherwise the solve needs no tracing);
* heating — blocks of steps of :class:`vfactor.heating.HeatingSteps` (each worker traces
  the cached escape directions once, then its steps).

Every job's result is a pure function of its task and job, and results are combined by
integer sums or by placing rows at their steps, so the bits do not depend on the runner,
the number of workers, the order in which jobs finish or the point a run resumed from.
With a checkpoint (:class:`vfactor.checkpoint.Checkpoint`) each finished job is kept in
the stage's section, and a resumed run takes what its sections hold before computing the
rest: a run killed in the heating stage starts the heating stage again with the steps it
had finished.
"""

from __future__ import annotations

import numpy as np

from .tallystats import PairTallies, TallySums

__all__ = ["job_slices", "view_factors_on", "gebhart_on", "heating_on"]


def job_slices(count: int, parallel: int, checkpointed: bool = False) -> list:
    """Slices cutting ``count`` work items into jobs: one job in this process, four per
    worker otherwise (so that the load balances); at least eight when a checkpoint is
    kept, so that an interrupted stage leaves finished jobs behind."""
    if count == 0:
        return []
    pieces = 1 if parallel <= 1 else 4 * parallel
    if checkpointed:
        pieces = max(pieces, 8)
    pieces = min(count, pieces)
    bounds = np.linspace(0, count, pieces + 1).round().astype(np.int64)
    return [slice(int(a), int(b)) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]


def _parallel(runner) -> int:
    return max(1, int(getattr(runner, "workers", 1) or 1))


def run_pairs(runner, task, pair_node, pair_round, sums: TallySums, section, bar) -> int:
    """Compute the (node, round) pairs not held by ``section``; add all of them to ``sums``.

    Returns the number of pairs taken from the checkpoint section.
    """
    todo = np.ones(pair_node.size, bool)
    if section is not None:
        done_nodes, done_rows = [], []
        for p, (i, r) in enumerate(zip(pair_node.tolist(), pair_round.tolist())):
            row = section.tallies.get((r, i))
            if row is not None:
                done_nodes.append(i)
                done_rows.append(row)
                todo[p] = False
        if done_rows:
            done = PairTallies.concat(done_rows)
            sums.add_pairs(done_nodes, done)
            bar.advance(int(done.row_sums().sum()))
    nodes, rounds = pair_node[todo], pair_round[todo]
    jobs = [(nodes[sl], rounds[sl])
            for sl in job_slices(nodes.size, _parallel(runner), section is not None)]
    for (job_nodes, job_rounds), tallies in runner.map(task, jobs):
        sums.add_pairs(job_nodes, tallies)
        if section is not None:
            section.add(job_rounds, job_nodes, tallies)
        bar.advance(int(tallies.row_sums().sum()))
    return int((~todo).sum())


def view_factors_on(runner, geometry, settings, *, rays_per_node, seed, checkpoint, reporter):
    """View factors by :class:`vfactor.radiation.ViewRounds` jobs on ``runner``.

    Returns ``(ViewFactors, pairs taken from the checkpoint)``; the same bits as
    :func:`vfactor.radiation.compute_view_factors` with the same settings.
    """
    from . import radiation

    target = settings.target_error
    n = geometry.n_nodes
    m, max_rounds = radiation.round_sizes(rays_per_node,
                                          getattr(settings, "max_rays_per_node", None))
    task = radiation.ViewRounds(seed=int(seed), rays_per_round=m)
    section = None if checkpoint is None else checkpoint.pairs("view", rays_per_round=m)
    sums = TallySums.empty(n, m)
    resumed = [0]
    with reporter.stage("view factors", total=n * radiation.MIN_ROUNDS * m, unit="rays") as bar:
        def trace(pair_node, pair_round):
            resumed[0] += run_pairs(runner, task, pair_node, pair_round, sums, section, bar)

        # the one round loop of radiation.compute_view_factors: the same pairs
        radiation.run_rounds(sums, trace, target_error=target, max_rounds=max_rounds, bar=bar,
                             area=(geometry.nodes.area if settings.smoothing else None))
    # converged=None: decided from target_error as compute_view_factors decides it
    vf = radiation.view_factors_from_tallies(geometry, sums, target_error=target,
                                             converged=None, smooth=settings.smoothing)
    return vf, resumed[0]


def gebhart_on(runner, geometry, *, band, rays_per_node, seed, checkpoint, reporter,
               section_name=None):
    """Traced Gebhart factors by :class:`vfactor.exchange.GebhartRounds` jobs on
    ``runner``: the bits of :func:`vfactor.exchange.monte_carlo_gebhart`.

    Returns ``(Exchange, pairs taken from the checkpoint)``.
    """
    from .exchange import GebhartRounds, exchange_from_tallies

    task = GebhartRounds.of(geometry, band=band, rays_per_node=rays_per_node, seed=seed)
    m = task.rays_per_round
    section = None if checkpoint is None else checkpoint.pairs(
        section_name or f"gebhart_{band}", rays_per_round=m)
    pair_node, pair_round = task.pairs(np.arange(geometry.n_nodes, dtype=np.int64))
    sums = TallySums.empty(geometry.n_nodes, m)
    with reporter.stage(f"Gebhart factors ({band}, reflection tracing)",
                        total=pair_node.size * m, unit="rays") as bar:
        resumed = run_pairs(runner, task, pair_node, pair_round, sums, section, bar)
    return exchange_from_tallies(geometry, sums, band=band), resumed


def heating_on(runner, geometry, task, *, checkpoint, reporter, section_name="heating"):
    """Heat loads by blocks of steps of ``task`` (:class:`vfactor.heating.HeatingSteps`)
    on ``runner``: the bits of :func:`vfactor.heating.compute_heating`.

    Returns ``(Heating, steps taken from the checkpoint)``.
    """
    section = None
    if checkpoint is not None:
        section = checkpoint.steps(section_name, rays_per_facet=task.rays_per_facet,
                                   sun_samples=task.sun_samples, n_steps=task.n_steps,
                                   replicates=task.replicates, max_bounces=task.max_bounces)
    rows = task.empty_rows()
    held = [] if section is None else sorted(k for k in section.rows if k < task.n_steps)
    for k in held:
        for name, value in section.rows[k].items():
            rows[name][k] = value
    todo = np.setdiff1d(np.arange(task.n_steps, dtype=np.int64), held)
    if todo.size:
        prepare = getattr(runner, "prepare", None)
        if getattr(runner, "workers", 1) == 1 and prepare is not None:
            prepare(task, reporter)          # in this process: show the tracing's progress
        else:
            reporter.message("heating: every worker traces the escaping directions once")
    with reporter.stage("heating", total=task.n_steps, unit="steps") as bar:
        bar.advance(len(held))
        jobs = [todo[sl] for sl in job_slices(todo.size, _parallel(runner),
                                              section is not None)]
        for steps, block in (runner.map(task, jobs) if jobs else ()):
            for name, value in block.items():
                rows[name][steps] = value
            if section is not None:
                section.add(steps, block)
            bar.advance(len(steps))
    return task.assemble(rows), len(held)
