"""Radiative couplings by Monte Carlo: the ray-tracing driver of view and Gebhart factors.

The records are in :mod:`vfactor.couplings`, tally statistics in :mod:`vfactor.tallystats`,
smoothing in :mod:`vfactor.smoothing`, the diffuse Gebhart solve in
:mod:`vfactor.gebhart` (their names are importable from here as well) and the Gebhart
factors of a band, solved or traced, in :mod:`vfactor.exchange`.

Pipeline::

    Geometry + Scene --trace_tallies (rounds)--> TallySums --view_factors_from_tallies-->
    ViewFactors (raw + smoothed) --exchange.compute_exchange--> Exchange

Columns of every tally and view-factor row
------------------------------------------
A row belongs to an emitting node ``i``; its ``n + 2`` columns are the ``n`` nodes, then
*space* (column ``n``: the ray left the model) and *inert* (column ``n + 1``: the first
facet side hit belongs to no node, i.e. it is opaque and takes no part in the exchange).
Raw rows sum to exactly one.

Units of work ("rounds")
------------------------
A *round* is one independent randomised replicate: every node of the round emits
``round_rays(r, rays_per_round)`` rays (:func:`vfactor.tracing.vf_kernels.round_rays`:
``rays_per_round`` in the first 16 rounds, which hold the :data:`MIN_ROUNDS` every node
gets, more in the later rounds that only rows far from their target error reach), placed
with a stratified, randomised quasi-Monte Carlo design (see :mod:`vfactor.tracing.vf_kernels`). The tally of round ``r``
for node ``i`` is a pure function of ``(geometry, seed, i, r, rays_per_round)``; tallies are
integers, so any set of rounds summed in any order, on any number of threads or processes,
gives identical bits. Statistical errors come from the spread between rounds (see
:func:`tally_statistics`); how many rounds each row gets is :mod:`vfactor.roundplan`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from vfactor.couplings import Exchange, ViewFactors
from vfactor.delivered import delivered_stderr, row_dof
from vfactor.gebhart import DROP_TOLERANCE, GebhartFactors, exchange_from_gebhart, gebhart_matrix
from vfactor.smoothing import (NO_SMOOTHING, SMOOTHING_METHOD, SmoothedViewFactors,
                               smooth_view_factors)
from vfactor.sparsetools import row_ids, values_at
from vfactor.roundplan import (MIN_ROUNDS, error_ratio, plan_rounds, round_sizes,
                               row_error_ratio, run_rounds)
from vfactor.tallystats import (SIGNIFICANCE, PairTallies, TallyStatistics, TallySums,
                                significant_mask, tally_statistics)

__all__ = [
    "compute_view_factors",
    "trace_tallies",
    "trace_pairs",
    "plan_rounds",
    "run_rounds",
    "view_factors_from_tallies",
    "ViewRounds",
    "ViewFactors",
    "Exchange",
    "TallySums",
    "PairTallies",
    "TallyStatistics",
    "SmoothedViewFactors",
    "GebhartFactors",
    "MIN_ROUNDS",
    "SIGNIFICANCE",
    "SMOOTHING_METHOD",
    "tally_statistics",
    "significant_mask",
    "smooth_view_factors",
    "gebhart_matrix",
    "exchange_from_gebhart",
]



# --------------------------------------------------------------------------------------
# Monte Carlo view factors
# --------------------------------------------------------------------------------------
#: Rays traced per kernel call (one progress step); bounds the memory of work items.
_RAYS_PER_CALL = 1 << 22


class _Kernels(NamedTuple):
    emit: tuple
    geo: tuple
    side_id: np.ndarray
    n_nodes: int
    n_facets: int


def _kernel_inputs(geometry, scene) -> _Kernels:
    from .tracing.vf_kernels import emitter_table

    n = geometry.n_nodes
    f = geometry.n_facets
    if n < 1:
        raise ValueError("radiation: the geometry has no nodes")
    if scene.n_facets != f:
        raise ValueError(f"radiation: scene has {scene.n_facets} facets, geometry {f}")
    live = np.zeros(n, bool)
    for side in (geometry.front_node, geometry.back_node):
        ok = (np.asarray(side) >= 0) & (np.asarray(geometry.areas) > 0)
        live[np.asarray(side)[ok]] = True
    if not live.all():
        from .errors import GeometryError

        name = geometry.nodes.names[int(np.flatnonzero(~live)[0])]
        raise GeometryError(f"node {name!r} has no facet side with positive area, so it "
                            f"cannot emit rays", where=f"node {name!r}")
    ptr, facet, sign, cum, side_id = emitter_table(geometry.front_node, geometry.back_node,
                                                    geometry.areas, n)
    geo = (np.ascontiguousarray(geometry.vertices, np.float64),
           np.ascontiguousarray(geometry.triangles, np.int64),
           np.ascontiguousarray(geometry.normals, np.float64),
           np.ascontiguousarray(geometry.front_node, np.int64),
           np.ascontiguousarray(geometry.back_node, np.int64))
    return _Kernels((ptr, facet, sign, cum, side_id), geo, side_id, n, f)


def _check_round_args(n, node_indices, seed, rays_per_node, round_index):
    from .tracing.vf_kernels import MAX_RAYS_PER_ROUND, MAX_ROUNDS

    nodes = np.asarray(node_indices, dtype=np.int64).reshape(-1)
    if nodes.size and (nodes.min() < 0 or nodes.max() >= n):
        raise ValueError(f"node_indices must be in 0..{n - 1}, got {nodes.min()}..{nodes.max()}")
    if np.unique(nodes).size != nodes.size:
        raise ValueError("node_indices has repeats")
    if not 0 <= int(seed) < 2 ** 64:
        raise ValueError(f"seed must be in [0, 2**64), got {seed}")
    if not 1 <= int(rays_per_node) < MAX_RAYS_PER_ROUND:
        raise ValueError(f"rays_per_node must be in 1..{MAX_RAYS_PER_ROUND - 1}, "
                         f"got {rays_per_node}")
    if not 0 <= int(round_index) < MAX_ROUNDS:
        raise ValueError(f"round_index must be in 0..{MAX_ROUNDS - 1}, got {round_index}")
    return nodes


def _pair_batches(count, m, n):
    """Slices of ``count`` (node, round) pairs so that one kernel call traces about
    ``_RAYS_PER_CALL`` rays (rounds of ``m`` rays) and holds at most ~4e6 partial tallies."""
    from .tracing.vf_kernels import CHUNK

    per_call = max(1, _RAYS_PER_CALL // max(m, 1))
    per_call = max(1, min(per_call, 4_000_000 // (max(1, -(-m // CHUNK)) * (n + 2))))
    return [slice(i, min(count, i + per_call)) for i in range(0, count, per_call)]


def _j_ranges(m, k):
    """Split the rays 0..m of a round so that ``k`` pairs trace ~_RAYS_PER_CALL per call."""
    step = max(1, _RAYS_PER_CALL // max(k, 1))
    return [(j, min(m, j + step)) for j in range(0, m, step)]


def trace_tallies(geometry, scene, node_indices, seed, rays_per_node, round_index):
    """Hit counts of one round of view-factor rays from some nodes (the unit of work).

    Parameters
    ----------
    geometry : vfactor.geometry.Geometry
    scene : vfactor.tracing.scene.Scene — built from ``geometry.vertices, .triangles``
    node_indices : (k,) int — emitting nodes (no repeats)
    seed : int — in [0, 2**64)
    rays_per_node : int — ``m``, the rays of the first rounds (the rays per round of the
        computation)
    round_index : int — which independent replicate, 0 .. 65535

    Returns
    -------
    PairTallies
        Sparse rows (``.toarray()`` gives the dense ``(k, n + 2)`` int64 counts): rays of
        each node whose first hit is node 0..n-1, space (column n) or an inert side
        (column n + 1); each row sums to ``round_rays(round_index, rays_per_node)``
        (:func:`vfactor.tracing.vf_kernels.round_rays`: ``rays_per_node`` for the first 16
        rounds).

    Notes
    -----
    A pure function of its arguments: the same call gives the same bits on any thread
    count, and rounds (or node subsets) computed anywhere and summed in any order give
    identical totals. The emission design (randomised quasi-Monte Carlo over side,
    position and cosine-weighted direction) is described in
    :mod:`vfactor.tracing.vf_kernels`. Sum rounds with :class:`TallySums` and turn them
    into view factors with :func:`view_factors_from_tallies`; every round of one
    computation must use the same ``rays_per_node``. :func:`trace_pairs` does many
    (node, round) pairs in one call.
    """
    nodes = np.asarray(node_indices, dtype=np.int64).reshape(-1)
    return trace_pairs(geometry, scene, nodes, np.full(nodes.size, int(round_index)), seed,
                       rays_per_node, _unique_nodes=True)


def trace_pairs(geometry, scene, node_indices, round_indices, seed, rays_per_node, *,
                _unique_nodes=False):
    """Hit counts of many (node, round) units of work in one parallel call.

    Parameters
    ----------
    node_indices, round_indices : (k,) int — the pairs (no pair twice)
    Others as for :func:`trace_tallies`.

    Returns
    -------
    PairTallies — row ``p`` equals that of ``trace_tallies(geometry, scene,
        [node_indices[p]], seed, rays_per_node, round_indices[p])``, bit for bit.
    """
    kin = _kernel_inputs(geometry, scene)
    nodes = np.asarray(node_indices, dtype=np.int64).reshape(-1)
    rounds = np.asarray(round_indices, dtype=np.int64).reshape(-1)
    if rounds.shape != nodes.shape:
        raise ValueError(f"trace_pairs: {nodes.size} nodes but {rounds.size} rounds")
    _check_round_args(kin.n_nodes, nodes if _unique_nodes else [], seed, rays_per_node,
                      int(rounds.max()) if rounds.size else 0)
    if nodes.size and (nodes.min() < 0 or nodes.max() >= kin.n_nodes):
        raise ValueError(f"node_indices must be in 0..{kin.n_nodes - 1}")
    if rounds.size and rounds.min() < 0:
        raise ValueError(f"round_indices must be >= 0, got {int(rounds.min())}")
    if np.unique(nodes * (1 << 20) + rounds).size != nodes.size:
        raise ValueError("trace_pairs: a (node, round) pair is repeated")
    return _trace_pairs(scene, kin, nodes, rounds, int(seed), int(rays_per_node), None, None)


@dataclass(frozen=True)
class ViewRounds:
    """Task of the view-factor stage (see :mod:`vfactor.runners`): a job is a pair of
    arrays ``(nodes, rounds)``, its result :func:`trace_pairs` of those pairs."""

    seed: int
    rays_per_round: int

    @property
    def key(self) -> str:
        return f"view:{self.seed}:{self.rays_per_round}"

    def prepare(self, geometry, scene, reporter=None):
        return geometry, scene

    def run(self, state, job) -> PairTallies:
        geometry, scene = state
        nodes, rounds = job
        return trace_pairs(geometry, scene, nodes, rounds, self.seed, self.rays_per_round)


def _trace_pairs(scene, kin, nodes, rounds, seed, m, bar, facet_acc, sums=None):
    """Trace (node, round) pairs batch by batch; return their :class:`PairTallies`, or,
    with ``sums``, add each batch to it as it comes (memory bounded by one batch)."""
    from .tracing.vf_kernels import round_rays, vf_pairs

    out = []
    lengths = round_rays(rounds, m)
    for sl in _pair_batches(nodes.size, int(lengths.max()) if lengths.size else m,
                            kin.n_nodes):
        k = sl.stop - sl.start
        part = np.zeros((k, kin.n_nodes + 2), np.int64)
        for j_lo, j_hi in _j_ranges(int(lengths[sl].max()), k):
            counts, ray_side, ray_col = vf_pairs(scene.arrays, kin.emit, kin.geo, nodes[sl],
                                                 rounds[sl], seed, m, j_lo, j_hi,
                                                 record=facet_acc is not None)
            part += counts
            if facet_acc is not None:
                facet_acc.add(kin.side_id[ray_side], ray_col)
            if bar is not None:
                bar.advance(int(np.clip(lengths[sl], j_lo, j_hi).sum() - k * j_lo))
        rows = PairTallies.from_dense(part)
        if sums is not None:
            sums.add_pairs(nodes[sl], rows)
        else:
            out.append(rows)
    if sums is not None:
        return None
    if not out:
        return PairTallies(np.zeros(1, np.int64), np.zeros(0, np.int64),
                           np.zeros(0, np.int64), kin.n_nodes + 2)
    return PairTallies.concat(out)


class _FacetAccumulator:
    """Sparse (facet side, column) hit counts, compressed after every call."""

    def __init__(self, n_sides, n_cols):
        import scipy.sparse as sp

        self._sp = sp
        self.shape = (n_sides, n_cols)
        self.total = sp.csr_matrix(self.shape, dtype=np.int64)

    def add(self, sides, cols):
        if sides.size == 0:
            return
        part = self._sp.coo_matrix((np.ones(sides.size, np.int64), (sides, cols)),
                                   shape=self.shape).tocsr()
        self.total = self.total + part

    def factors(self):
        total = self.total.tocsr()
        total.sum_duplicates()
        rays = np.asarray(total.sum(axis=1)).ravel()
        scale = np.zeros_like(rays, dtype=np.float64)
        scale[rays > 0] = 1.0 / rays[rays > 0]
        return self._sp.diags(scale) @ total.astype(np.float64)


def compute_view_factors(geometry, scene, *, rays_per_node, seed, target_error=None,
                         max_rays_per_node=None, facet_factors=False, reporter=None,
                         significance=SIGNIFICANCE, smooth=True) -> ViewFactors:
    """Monte Carlo view factors between nodes, to space and to inert sides.

    Parameters
    ----------
    geometry : vfactor.geometry.Geometry
    scene : vfactor.tracing.scene.Scene — built from the geometry's vertices and triangles
    rays_per_node : int — rays each node emits at least; split into :data:`MIN_ROUNDS`
        rounds of ``ceil(rays_per_node / MIN_ROUNDS)`` rays (rounds added for
        ``target_error`` grow: :func:`vfactor.tracing.vf_kernels.round_rays`)
    seed : int — in [0, 2**64)
    target_error : float or None — one-sigma *relative* error wanted for every significant
        entry (e.g. 0.005 for 0.5 %); rounds are added to the rows that miss it
    max_rays_per_node : int or None — ray budget per node when ``target_error`` is set
        (default :data:`vfactor.model.RAY_BUDGET_FACTOR` x ``rays_per_node``)
    facet_factors : bool — also return facet-side-to-node factors (sparse)
    reporter : vfactor.progress.Reporter or None
    significance : float — share of a row above which an entry is significant [1]
    smooth : bool — enforce reciprocity and closure (``[radiation] smoothing``); when false
        the returned factors are the raw tallies and ``method`` says so; it also chooses
        what ``target_error`` applies to (below)

    Returns
    -------
    ViewFactors
        ``facet_matrix`` (when asked): ``scipy.sparse.csr_matrix`` of shape ``(2 F, n + 2)``
        (``F`` facets): row ``k`` is the front side of facet ``k``, row ``F + k`` its back
        side; columns are the nodes, then space and inert; entry = share of the side's rays
        (from the same rays as the node factors) whose first hit is that column. Rows of
        inert sides are empty. Facet-side factors rest on few rays each (the node's rays
        spread by area), so their relative error is larger than the node factors'.

    Notes
    -----
    F_ij = (rays of i first hitting a side of j) / (rays of i) (Howell 1998, "The Monte
    Carlo method in radiative heat transfer", J. Heat Transfer 120, 547-560). One *round*
    is an independent randomised replicate of a stratified emission design (see
    :mod:`vfactor.tracing.vf_kernels`); the one-sigma error is the standard error of the
    mean over the rounds (:func:`tally_statistics`), an honest estimate for correlated
    stratified rays where ``sqrt(F (1 - F) / N)`` would overstate the error.

    *Significant* entries are the node and space entries of a row with ``F >=
    significance`` (default 1 % of the energy the node emits); the inert column never is.
    With ``target_error``: after the first rounds, rows get more rounds, as many as the
    measured error predicts (:func:`plan_rounds`; later rounds are larger), until every
    significant entry passes or its rows reach ``max_rays_per_node``; ``converged`` says
    whether all passed. The target applies to the values delivered: with ``smooth`` (the
    default) to the smoothed ones, whose error ``smoothed_stderr`` combines the two raw
    estimates of each node pair (``A_i F_ij`` from the rays of ``i``, ``A_j F_ji`` from
    those of ``j``: :func:`vfactor.delivered.pair_precision`, an upper bound, closure left
    out), so a pair that misses it gets its rays on the side where they buy precision
    more cheaply, and a raw entry may stay above the target where its reciprocal is well
    sampled; space and diagonal entries have no reciprocal and must reach the target on
    their own. Without ``smooth`` every significant raw entry must have ``stderr <=
    target_error * F``. Reciprocity and closure are then enforced by
    :func:`smooth_view_factors`; the raw tallies are kept.
    """
    from .progress import NullReporter

    kin = _kernel_inputs(geometry, scene)
    n = kin.n_nodes
    rays_per_node = int(rays_per_node)
    if rays_per_node < 1:
        raise ValueError(f"rays_per_node must be >= 1, got {rays_per_node}")
    m, max_rounds = round_sizes(rays_per_node, max_rays_per_node)
    _check_round_args(n, [], seed, m, 0)
    if target_error is not None:
        target_error = float(target_error)
        if not 0 < target_error < 1:
            raise ValueError(f"target_error must be in (0, 1), got {target_error}")
    reporter = reporter or NullReporter()
    seed = int(seed)
    sums = TallySums.empty(n, m)
    acc = _FacetAccumulator(2 * kin.n_facets, n + 2) if facet_factors else None
    area = np.asarray(geometry.nodes.area, dtype=np.float64) if smooth else None
    with reporter.stage("view factors", total=n * MIN_ROUNDS * m, unit="rays") as bar:
        run_rounds(sums, lambda nodes, rounds: _trace_pairs(scene, kin, nodes, rounds, seed,
                                                            m, bar, acc, sums),
                   target_error=target_error, max_rounds=max_rounds,
                   significance=significance, bar=bar, area=area)
    converged = True if target_error is None else bool(
        np.all(error_ratio(sums, target_error, significance, area) <= 1))
    facet_matrix = acc.factors() if acc is not None else None
    return view_factors_from_tallies(geometry, sums, target_error=target_error,
                                     converged=converged, facet_matrix=facet_matrix,
                                     significance=significance, smooth=smooth)


def _smoothing_variances(stats):
    """Variances used as smoothing weights: ``stderr^2`` on the pattern of the entries hit
    (CSR), plus a floor of ``(1 / rays)^2`` per row (``(n,)``) that every entry gets, so
    that entries never hit (or hit identically in every round) keep a finite weight."""
    floor = (1.0 / stats.rays.astype(np.float64)) ** 2
    var = stats.stderr.copy()
    var.data = var.data ** 2
    return var, floor


def _split_columns(matrix, n):
    """Node part (CSR, n x n) and the space and inert columns (dense) of an (n, n + 2)
    CSR array."""
    coo = matrix.tocoo()
    node = coo.col < n
    nodes = sp.csr_array((coo.data[node], (coo.row[node], coo.col[node])), shape=(n, n))
    nodes.sort_indices()
    space = np.zeros(n)
    inert = np.zeros(n)
    space[coo.row[coo.col == n]] = coo.data[coo.col == n]
    inert[coo.row[coo.col == n + 1]] = coo.data[coo.col == n + 1]
    return nodes, space, inert


def view_factors_from_tallies(geometry, sums: TallySums, *, target_error=None,
                              converged=None, facet_matrix=None,
                              significance=SIGNIFICANCE, smooth=True) -> ViewFactors:
    """View factors, errors and smoothing from summed round tallies.

    Parameters
    ----------
    geometry : vfactor.geometry.Geometry — supplies the node areas
    sums : TallySums — every node with at least one round
    target_error : float or None — recorded; with ``converged=None`` also tested here
    converged : bool or None — whether the convergence target was reached (None: decide
        from ``target_error`` on the delivered values, smoothed or raw as ``smooth`` says;
        True when no target)
    facet_matrix : scipy.sparse matrix or None — passed through
    significance : float — threshold of significant entries [1]
    smooth : bool — enforce reciprocity and closure; when false the factors are the raw
        tallies, ``adjustment_sigma`` is 0 and ``method`` is :data:`NO_SMOOTHING`

    Returns
    -------
    ViewFactors
        ``adjustment_sigma`` is the largest ``|smoothed - raw| / sigma`` over significant
        entries, with ``sigma^2`` the smoothing variance of :func:`_smoothing_variances`;
        ``smoothed_stderr`` the error of the delivered entries
        (:func:`vfactor.delivered.delivered_stderr`).
    """
    stats = tally_statistics(sums)
    n = geometry.n_nodes
    if stats.mean.shape != (n, n + 2):
        raise ValueError(f"view_factors_from_tallies: tallies of shape {stats.mean.shape} "
                         f"for {n} nodes")
    raw, raw_space, raw_inert = _split_columns(stats.mean, n)
    err, err_space, _ = _split_columns(stats.stderr, n)
    area = np.asarray(geometry.nodes.area, dtype=np.float64) if smooth else None
    if converged is None:
        converged = True if target_error is None else bool(
            np.all(error_ratio(sums, target_error, significance, area) <= 1))
    s_err, s_err_space, _ = _split_columns(
        delivered_stderr(stats.mean, stats.stderr, geometry.nodes.area, dof=row_dof(sums),
                         smooth=smooth), n)
    common = dict(stderr=err, stderr_space=err_space, raw_matrix=raw, raw_space=raw_space,
                  raw_inert=raw_inert, rays=stats.rays.astype(np.int64),
                  converged=bool(converged), target_error=target_error,
                  facet_matrix=facet_matrix, smoothed_stderr=s_err,
                  smoothed_stderr_space=s_err_space)
    if not smooth:
        return ViewFactors(matrix=raw.copy(), space=raw_space.copy(), inert=raw_inert.copy(),
                           adjustment_sigma=0.0, method=NO_SMOOTHING, **common)
    var, floor = _smoothing_variances(stats)
    v_nodes, v_space, v_inert = _split_columns(var, n)
    sm = smooth_view_factors(raw, raw_space, raw_inert, v_nodes, v_space + floor,
                             v_inert + floor, geometry.nodes.area, variance_floor=floor)
    sig = significant_mask(stats.mean, significance)
    ii = row_ids(stats.mean)[sig.data]
    jj = stats.mean.indices[sig.data]
    if ii.size:
        node_col = jj < n
        smoothed = np.where(node_col, values_at(sm.matrix, ii, np.minimum(jj, n - 1)),
                            sm.space[ii])
        sigma = np.sqrt(var.data[sig.data] + floor[ii])
        adjustment = float(np.max(np.abs(smoothed - stats.mean.data[sig.data]) / sigma))
    else:
        adjustment = 0.0
    return ViewFactors(matrix=sm.matrix, space=sm.space, inert=sm.inert,
                       adjustment_sigma=adjustment, method=SMOOTHING_METHOD, **common)
