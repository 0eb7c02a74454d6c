"""How many rounds of rays each coupling row gets, to reach a target error.

A *round* is one independent randomised replicate of the rays of a node (see
:mod:`vfactor.radiation`). :func:`round_sizes` gives the rays per round and the most
rounds a node may get within its budget; :func:`plan_rounds` decides, from the tallies so
far, which rows need more and how many; :func:`run_rounds` repeats trace and plan until
every row meets the target or its budget.

Two criteria: on the raw entries (:func:`row_error_ratio`; smoothing off, the raw values
are delivered), or on the delivered, smoothed ones (:func:`delivered_error_ratio`;
smoothing on): there a node pair is one coupling estimated from the rays of both its
nodes (:mod:`vfactor.delivered`), and planning gives the rays of a pair that misses the
target to the node whose rays buy its precision more cheaply.
"""

from __future__ import annotations

import numpy as np

from vfactor.delivered import pair_precision, row_dof
from vfactor.sparsetools import row_ids, row_max, values_at
from vfactor.tallystats import SIGNIFICANCE, TallySums, significant_mask, tally_statistics

__all__ = ["MIN_ROUNDS", "round_sizes", "plan_rounds", "run_rounds", "row_error_ratio",
           "delivered_error_ratio", "error_ratio", "PLAN_EXPONENT", "MAX_CONVERGENCE_PASSES"]

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


def _own_entries(stats, target_error, significance):
    """Largest raw ``stderr / (target F)`` per row over its significant entries that have
    no reciprocal (space, diagonal)."""
    n = stats.mean.shape[0]
    sig = significant_mask(stats.mean, significance).data
    cols = stats.mean.indices
    own = sig & ((cols >= n) | (cols == row_ids(stats.mean)))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(own, stats.stderr.data / (target_error * stats.mean.data), 0.0)
    return row_max(stats.mean, ratio)


def _pair_ratios(stats, area, target_error, significance, dof):
    """Pairs of :func:`vfactor.delivered.pair_precision`, whether each is significant in
    row ``i`` and in row ``j``, and its ``sqrt(var_g) / (target g)``."""
    pp = pair_precision(stats.mean, stats.stderr, area, dof)
    sig = significant_mask(stats.mean, significance)
    sig_i = values_at(sig, pp.iu, pp.ju) > 0
    sig_j = values_at(sig, pp.ju, pp.iu) > 0
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(pp.var_g > 0, np.sqrt(pp.var_g) / (target_error * pp.g), 0.0)
    return pp, sig_i, sig_j, q


def delivered_error_ratio(stats, area, target_error, significance, dof=None):
    """Largest one-sigma error / (target * value) over the significant entries of each
    row, for the delivered (smoothed) values.

    Parameters
    ----------
    stats : vfactor.tallystats.TallyStatistics
    area : (n,) float — node areas [m2]
    target_error, significance : [1]
    dof : (n,) float or None — degrees of freedom of each row's variances
        (:func:`vfactor.delivered.row_dof`)

    Returns
    -------
    (n,) float — the row passes when <= 1

    Notes
    -----
    A node entry's error is that of its pair's reciprocity combination
    (:func:`vfactor.delivered.pair_precision`, an upper bound: closure left out) relative
    to the combined value; space and diagonal entries have no reciprocal and keep their raw
    error. Significance is that of the raw entry in its own row, as for the raw criterion.
    """
    n = stats.mean.shape[0]
    ratio = _own_entries(stats, target_error, significance)
    pp, sig_i, sig_j, q = _pair_ratios(stats, area, target_error, significance, dof)
    np.maximum.at(ratio, pp.iu[sig_i], q[sig_i])
    np.maximum.at(ratio, pp.ju[sig_j], q[sig_j])
    return ratio[:n]


def error_ratio(sums: TallySums, target_error, significance, area=None):
    """:func:`delivered_error_ratio` with node areas (smoothed values delivered), else
    :func:`row_error_ratio` (raw values delivered), of the statistics of ``sums``."""
    stats = tally_statistics(sums)
    if area is None:
        return row_error_ratio(stats, target_error, significance)
    return delivered_error_ratio(stats, area, target_error, significance, row_dof(sums))


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


def _plan_goal(sums: TallySums, pred):
    """Rays to bring each row to in the next pass of :func:`plan_rounds`.

    ``pred`` is the predicted need ``P`` of each row: with ``q`` a row's worst ``stderr /
    (target F)`` after ``N`` rays, ``P = N q**(2 / PLAN_EXPONENT)`` (raw criterion; the
    delivered one is :func:`_pair_needs`). The variance estimate behind it has a
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
    far = pred * (1.0 - u) > 2.0 * rays
    return np.where(far, np.minimum(pred * (1.0 - u), 4.0 * rays), pred * (1.0 + 0.5 * u))


def _pair_needs(sums: TallySums, stats, area, target_error, significance, max_rounds):
    """Predicted rays ``P`` per row for the delivered criterion, and the rows that need more.

    Notes
    -----
    A row's entries without a reciprocal (space, diagonal) ask for ``N q**(2 / p)`` as in
    the raw criterion (``p`` = :data:`PLAN_EXPONENT`). A node pair that misses the target
    has precision ``a + b`` (:func:`vfactor.delivered.pair_precision`) where it needs
    ``1 / (target g)^2``; with the variance falling as ``N**-p``, the precision of one side
    grows as ``a (N' / N)**p``, so bringing the pair to its target on side ``i`` alone
    costs ``N_i ((a' + D) / a)**(1 / p) - N'_i`` rays (``D`` the missing precision at the
    rays ``N'`` already planned, ``a'`` side ``i``'s precision there), likewise on ``j``;
    the pair's rays go to the cheaper side (ours). The precision wanted includes the
    pair's ``inflation`` (:func:`vfactor.delivered.pair_precision`) at its present value. Pairs are taken worst first (ties in
    pair order), each seeing the rays planned for the ones before, so a row that gets rays
    anyway serves its other pairs too. A pure function of the tallies: the same pairs on
    any machine.
    """
    p = PLAN_EXPONENT
    rays = np.asarray(sums.rays, dtype=np.float64)
    open_row = np.asarray(sums.rounds) < int(max_rounds)
    q_own = _own_entries(stats, target_error, significance)
    pred = np.where(q_own > 1.0, rays * q_own ** (2.0 / p), rays)
    need = (q_own > 1.0) & open_row
    pp, sig_i, sig_j, q = _pair_ratios(stats, area, target_error, significance,
                                       row_dof(sums))
    fail = np.flatnonzero((sig_i | sig_j) & (q > 1.0))
    if fail.size == 0:
        return pred, need
    fail = fail[np.argsort(-q[fail], kind="stable")]
    with np.errstate(divide="ignore"):
        prec_i = np.where(np.isinf(pp.var_i), 0.0, 1.0 / pp.var_i)[fail]
        prec_j = np.where(np.isinf(pp.var_j), 0.0, 1.0 / pp.var_j)[fail]
    required = pp.inflation[fail] / (target_error * pp.g[fail]) ** 2
    for i, j, a, b, want in zip(pp.iu[fail].tolist(), pp.ju[fail].tolist(), prec_i.tolist(),
                                prec_j.tolist(), required.tolist()):
        a_now = a * (pred[i] / rays[i]) ** p
        b_now = b * (pred[j] / rays[j]) ** p
        deficit = want - a_now - b_now
        if deficit <= 0.0:
            continue
        cost_i = (rays[i] * ((a_now + deficit) / a) ** (1.0 / p) - pred[i]
                  if a > 0.0 and open_row[i] else np.inf)
        cost_j = (rays[j] * ((b_now + deficit) / b) ** (1.0 / p) - pred[j]
                  if b > 0.0 and open_row[j] else np.inf)
        if np.isinf(cost_i) and np.isinf(cost_j):
            continue
        side = i if cost_i <= cost_j else j
        pred[side] += min(cost_i, cost_j)
        need[side] = True
    return pred, need


def plan_rounds(sums: TallySums, target_error, max_rounds, significance=SIGNIFICANCE, *,
                area=None):
    """The (node, round) pairs to trace next to reach ``target_error``.

    Parameters
    ----------
    sums : TallySums — rounds traced so far
    target_error : float — one-sigma relative error wanted on significant entries [1]
    max_rounds : int — most rounds any node may have (its ray budget in rounds)
    significance : float — threshold of significant entries [1]
    area : (n,) float or None — node areas [m2] when the delivered values are smoothed:
        the target then applies to their error (:func:`delivered_error_ratio`, planned by
        :func:`_pair_needs`); None: to the raw entries' (:func:`row_error_ratio`)

    Returns
    -------
    pair_node, pair_round : (k,) int64 — empty when every row passes or is at its budget

    Notes
    -----
    Raw criterion: a row whose worst significant entry has ``stderr / (target F) = q > 1``
    gets the rounds that bring its rays to :func:`_plan_goal` of ``N q**(2 / p)``, at least
    one more, at most ``max_rounds``. Delivered criterion: the same with the needs of
    :func:`_pair_needs`. Rounds grow after the first ones
    (:func:`vfactor.tracing.vf_kernels.round_rays`), so rows that need many rays get
    larger replicates.
    """
    from .tracing.vf_kernels import MAX_ROUNDS, rays_through

    stats = tally_statistics(sums)
    if area is None:
        ratio = row_error_ratio(stats, target_error, significance)
        pred = np.asarray(sums.rays, dtype=np.float64) * ratio ** (2.0 / PLAN_EXPONENT)
        need = (ratio > 1.0) & (sums.rounds < max_rounds)
    else:
        pred, need = _pair_needs(sums, stats, area, target_error, significance, max_rounds)
    goal = _plan_goal(sums, pred)
    cum = rays_through(np.arange(MAX_ROUNDS + 1), sums.rays_per_round)
    want = np.searchsorted(cum, np.minimum(goal, float(cum[-1])), side="left")
    want = np.minimum(np.maximum(want, sums.rounds + 1), int(max_rounds))
    need = np.flatnonzero(need)
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
               significance=SIGNIFICANCE, bar=None, area=None) -> None:
    """The one round loop of a view-factor computation: :data:`MIN_ROUNDS` rounds of every
    node, then, with ``target_error``, the rounds :func:`plan_rounds` asks for.

    Parameters
    ----------
    sums : TallySums — filled by ``trace``
    trace : callable ``(pair_node, pair_round)`` — traces those (node, round) pairs and adds
        their tallies to ``sums`` (in this process, or over a runner)
    target_error, max_rounds, significance, area : as for :func:`plan_rounds` (``area``
        given when the delivered values are smoothed)
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
        pair_node, pair_round = plan_rounds(sums, target_error, max_rounds, significance,
                                            area=area)
        if pair_node.size == 0:
            break
        total += int(round_rays(pair_round, m).sum())
        if bar is not None:
            bar.set_total(total)
        trace(pair_node, pair_round)
