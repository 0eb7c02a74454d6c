"""How many rounds of rays each coupling row gets, to reach a target error.

A *round* is one independent randomised replicate of the rays of a node (see
:mod:`vfactor.radiation`). :func:`round_sizes` gives the rays per round and the most
rounds a node may get within its budget; :func:`plan_rounds` decides, from the tallies so
far, which rows need more and how many; :func:`run_rounds` repeats trace and plan until
every row meets the target or its budget.
"""

from __future__ import annotations

import numpy as np

from vfactor.sparsetools import row_max
from vfactor.tallystats import SIGNIFICANCE, TallySums, significant_mask, tally_statistics

__all__ = ["MIN_ROUNDS", "round_sizes", "plan_rounds", "run_rounds", "row_error_ratio",
           "PLAN_EXPONENT", "MAX_CONVERGENCE_PASSES"]

#: Number of independent randomised replicates ("rounds") a computation starts with; the
#: one-sigma error of every entry is the spread of these replicates (Owen 2013, "Monte
#: Carlo theory, methods and examples", ch. 17; 8..32 replicates is common practice).
MIN_ROUNDS = 8


def row_error_ratio(stats, target_error, significance):
    """Largest stderr / (target * value) over the significant entries of each row."""
    sig = significant_mask(stats.mean, significance).data
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(sig, stats.stderr.data / (target_error * stats.mean.data), 0.0)
    return row_max(stats.mean, ratio)


def round_sizes(rays_per_node, max_rays_per_node=None):
    """Rays per round and the most rounds a node may get.

    Parameters
    ----------
    rays_per_node : int — rays each node emits at least (>= 1)
    max_rays_per_node : int or None — ray budget per node (default
        :data:`vfactor.model.RAY_BUDGET_FACTOR` x rays_per_node)

    Returns
    -------
    rays_per_round : int — ``m = ceil(rays_per_node / MIN_ROUNDS)``, the rays of each of
        the first rounds (later rounds have more:
        :func:`vfactor.tracing.vf_kernels.round_rays`)
    max_rounds : int — the most rounds whose rays together fit in the budget, at least
        :data:`MIN_ROUNDS`, at most the kernels' ``MAX_ROUNDS``
    """
    from .model import RAY_BUDGET_FACTOR
    from .tracing.vf_kernels import MAX_ROUNDS, rays_through

    rays_per_node = int(rays_per_node)
    m = -(-rays_per_node // MIN_ROUNDS)
    budget = (RAY_BUDGET_FACTOR * rays_per_node if max_rays_per_node is None
              else int(max_rays_per_node))
    fit = int(np.searchsorted(rays_through(np.arange(MAX_ROUNDS + 1), m), budget,
                              side="right")) - 1
    return m, min(MAX_ROUNDS, max(MIN_ROUNDS, fit))


#: Exponent of the fall of the variance with the rays that planning assumes: ``var ~
#: N**-PLAN_EXPONENT``. Independent rounds of one size give 1; the rounds here grow with
#: the rays, and their randomised QMC replicates gain with size, so a row's variance falls
#: faster (fitted between successive passes on the demo's hard rows: 1.2 to 1.7).
PLAN_EXPONENT = 1.5


def _plan_goal(sums: TallySums, ratio):
    """Rays to bring each row to in the next pass of :func:`plan_rounds`.

    With ``q`` a row's worst ``stderr / (target F)`` after ``N`` rays, the need is
    predicted as ``P = N q**(2 / PLAN_EXPONENT)``. The variance estimate behind it has a
    relative uncertainty of about ``u = sqrt(2 / (K - 1))``, ``K = N^2 / sum n_r^2`` the
    effective number of rounds (chi-square with ``K - 1`` degrees of freedom; the round
    count when all rounds have one size). A row whose need is surely far (``(1 - u) P >
    2 N``) is brought to ``min((1 - u) P, 4 N)`` and measured again, so that a rough early
    estimate does not make it overshoot; otherwise to ``(1 + u / 2) P``, so that the next
    look decides. Few looks near the target matter for honesty: each is a chance to stop
    on an estimate that happens to be low (checked against the scatter over seeds in the
    tests). On the demo (20 seeds, target 0.5 %) this takes 6.8 M rays where the former rule
    (1.1 P with exponent 1, rounds of one size) took 9.9 M, with the reported errors as
    close to the scatter over seeds (ratio 1.10 against 1.12).
    """
    rays = np.asarray(sums.rays, dtype=np.float64)
    k_eff = rays * rays / np.maximum(np.asarray(sums.rays_sq, dtype=np.float64), 1.0)
    u = np.sqrt(2.0 / np.maximum(k_eff - 1.0, 1.0))
    pred = rays * ratio ** (2.0 / PLAN_EXPONENT)
    far = pred * (1.0 - u) > 2.0 * rays
    return np.where(far, np.minimum(pred * (1.0 - u), 4.0 * rays), pred * (1.0 + 0.5 * u))


def plan_rounds(sums: TallySums, target_error, max_rounds, significance=SIGNIFICANCE):
    """The (node, round) pairs to trace next to reach ``target_error``.

    Parameters
    ----------
    sums : TallySums — rounds traced so far
    target_error : float — one-sigma relative error wanted on significant entries [1]
    max_rounds : int — most rounds any node may have (its ray budget in rounds)
    significance : float — threshold of significant entries [1]

    Returns
    -------
    pair_node, pair_round : (k,) int64 — empty when every row passes or is at its budget

    Notes
    -----
    A row whose worst significant entry has ``stderr / (target F) = q > 1`` gets the rounds
    that bring its rays to :func:`_plan_goal`, at least one more, at most ``max_rounds``.
    Rounds grow after the first ones
    (:func:`vfactor.tracing.vf_kernels.round_rays`), so rows that need many rays get
    larger replicates.
    """
    from .tracing.vf_kernels import MAX_ROUNDS, rays_through

    stats = tally_statistics(sums)
    ratio = row_error_ratio(stats, target_error, significance)
    goal = _plan_goal(sums, ratio)
    cum = rays_through(np.arange(MAX_ROUNDS + 1), sums.rays_per_round)
    want = np.searchsorted(cum, np.minimum(goal, float(cum[-1])), side="left")
    want = np.minimum(np.maximum(want, sums.rounds + 1), int(max_rounds))
    need = np.flatnonzero((ratio > 1.0) & (sums.rounds < max_rounds))
    if need.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    nodes = np.concatenate([np.full(want[i] - sums.rounds[i], i, np.int64) for i in need])
    rounds = np.concatenate([np.arange(sums.rounds[i], want[i], dtype=np.int64) for i in need])
    return nodes, rounds


#: Passes of :func:`plan_rounds` after the first rounds. Each pass gives every row that
#: misses the target the rounds its measured error asks for (:func:`_plan_goal`), so a few
#: passes suffice; the cap only bounds a pathological case (a row's error estimate that keeps
#: growing), whose budget ``max_rounds`` also bounds.
MAX_CONVERGENCE_PASSES = 50


def run_rounds(sums: TallySums, trace, *, target_error, max_rounds,
               significance=SIGNIFICANCE, bar=None) -> None:
    """The one round loop of a view-factor computation: :data:`MIN_ROUNDS` rounds of every
    node, then, with ``target_error``, the rounds :func:`plan_rounds` asks for.

    Parameters
    ----------
    sums : TallySums — filled by ``trace``
    trace : callable ``(pair_node, pair_round)`` — traces those (node, round) pairs and adds
        their tallies to ``sums`` (in this process, or over a runner)
    target_error, max_rounds, significance : as for :func:`plan_rounds`
    bar : progress bar or None — its total grows with the planned rays
    """
    from .tracing.vf_kernels import round_rays

    n, m = sums.n_nodes, sums.rays_per_round
    trace(np.tile(np.arange(n, dtype=np.int64), MIN_ROUNDS),
          np.repeat(np.arange(MIN_ROUNDS, dtype=np.int64), n))
    if target_error is None:
        return
    total = n * MIN_ROUNDS * m
    for _ in range(MAX_CONVERGENCE_PASSES):
        pair_node, pair_round = plan_rounds(sums, target_error, max_rounds, significance)
        if pair_node.size == 0:
            break
        total += int(round_rays(pair_round, m).sum())
        if bar is not None:
            bar.set_total(total)
        trace(pair_node, pair_round)
