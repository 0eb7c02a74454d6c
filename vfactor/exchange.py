"""Gebhart factors and exchange areas in one band: the route choice and reflection tracing.

:func:`compute_exchange` picks the route: the diffuse Gebhart solve on the smoothed view
factors (:func:`vfactor.gebhart.gebhart_matrix`) when every coating of the band is
diffuse, otherwise Monte Carlo tracing of emitted and reflected rays
(:func:`monte_carlo_gebhart`). The unit of work of the traced route is a (node, round)
pair, as for the view factors (:mod:`vfactor.radiation`): :class:`GebhartRounds` is the
task a runner ships (:mod:`vfactor.runners`), and tallies summed in any order give the
same bits (:func:`exchange_from_tallies`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from vfactor.couplings import Exchange, ViewFactors
from vfactor.gebhart import DROP_TOLERANCE, exchange_from_gebhart, gebhart_matrix
from vfactor.radiation import (MIN_ROUNDS, _check_round_args, _kernel_inputs, _pair_batches,
                               _smoothing_variances, _split_columns)
from vfactor.smoothing import smooth_view_factors
from vfactor.tallystats import PairTallies, TallySums, tally_statistics

__all__ = ["compute_exchange", "monte_carlo_gebhart", "gebhart_tallies",
           "exchange_from_tallies", "traced_band", "GebhartRounds"]


def _band_properties(geometry, band):
    nodes = geometry.nodes
    if band == "ir":
        return (np.asarray(nodes.ir_emissivity, np.float64),
                np.asarray(nodes.ir_specular, np.float64))
    if band == "solar":
        return (np.asarray(nodes.solar_absorptivity, np.float64),
                np.asarray(nodes.solar_specular, np.float64))
    raise ValueError(f"band must be 'ir' or 'solar', got {band!r}")


def traced_band(geometry, band) -> bool:
    """True when the band's Gebhart factors are traced (some coating has a specular
    share in it), False when the diffuse solve on the view factors gives them."""
    _, specular = _band_properties(geometry, band)
    return bool(np.any(specular != 0))


@dataclass(frozen=True)
class GebhartRounds:
    """Task of the traced Gebhart stage (see :mod:`vfactor.runners`): a job is a pair of
    arrays ``(nodes, rounds)``, its result the :class:`PairTallies` of those pairs.

    Build with :meth:`of`, which checks the band's properties.
    """

    band: str
    seed: int
    rays_per_round: int
    absorb: np.ndarray
    specular: np.ndarray

    @property
    def key(self) -> str:
        return f"gebhart:{self.band}:{self.seed}:{self.rays_per_round}"

    @classmethod
    def of(cls, geometry, *, band, rays_per_node, seed) -> "GebhartRounds":
        absorb, specular = _band_properties(geometry, band)
        rays_per_node = int(rays_per_node)
        if rays_per_node < 1:
            raise ValueError(f"rays_per_node must be >= 1, got {rays_per_node}")
        m = -(-rays_per_node // MIN_ROUNDS)
        _check_round_args(geometry.n_nodes, [], seed, m, 0)
        for name, v in (("absorptivity", absorb), ("specular share", specular)):
            if np.any((v < 0) | (v > 1)) or not np.all(np.isfinite(v)):
                i = int(np.flatnonzero(~((v >= 0) & (v <= 1)))[0])
                raise ValueError(f"node {geometry.nodes.names[i]!r}: {band} {name} must be "
                                 f"in [0, 1], got {float(v[i])!r}")
        return cls(band, int(seed), m, absorb, specular)

    @staticmethod
    def pairs(nodes):
        """The (node, round) pairs of a computation: every node in :data:`MIN_ROUNDS`
        rounds."""
        nodes = np.asarray(nodes, dtype=np.int64)
        return (np.tile(nodes, MIN_ROUNDS),
                np.repeat(np.arange(MIN_ROUNDS, dtype=np.int64), nodes.size))

    def prepare(self, geometry, scene, reporter=None):
        return scene, _kernel_inputs(geometry, scene)

    def run(self, state, job) -> PairTallies:
        from .tracing.vf_kernels import gebhart_pairs

        scene, kin = state
        nodes, rounds = (np.asarray(a, dtype=np.int64).reshape(-1) for a in job)
        # batches bound the dense (pairs, n + 2) array of one kernel call
        rows = [PairTallies.from_dense(gebhart_pairs(scene.arrays, kin.emit, kin.geo,
                                                     self.absorb, self.specular, nodes[sl],
                                                     rounds[sl], self.seed,
                                                     self.rays_per_round))
                for sl in _pair_batches(nodes.size, self.rays_per_round, kin.n_nodes)]
        return PairTallies.concat(rows) if rows else PairTallies.from_dense(
            np.zeros((0, kin.n_nodes + 2), np.int64))


def gebhart_tallies(geometry, scene, *, band="ir", rays_per_node, seed, reporter=None,
                    node_indices=None) -> TallySums:
    """Summed round tallies of reflection tracing (see :func:`monte_carlo_gebhart`).

    Parameters
    ----------
    node_indices : (k,) int or None — emitting nodes (default all; other rows stay empty)
    Others as for :func:`monte_carlo_gebhart`.

    Returns
    -------
    TallySums
        Columns: absorbed by node 0..n-1, escaped to space, lost (inert sides or cut after
        :data:`vfactor.tracing.vf_kernels.MAX_BOUNCES` reflections).
    """
    from .progress import NullReporter

    task = GebhartRounds.of(geometry, band=band, rays_per_node=rays_per_node, seed=seed)
    n = geometry.n_nodes
    nodes = np.arange(n, dtype=np.int64) if node_indices is None else \
        _check_round_args(n, node_indices, seed, task.rays_per_round, 0)
    pair_node, pair_round = task.pairs(nodes)
    reporter = reporter or NullReporter()
    sums = TallySums.empty(n, task.rays_per_round)
    state = task.prepare(geometry, scene)
    with reporter.stage(f"Gebhart factors ({band}, reflection tracing)",
                        total=pair_node.size * task.rays_per_round, unit="rays") as bar:
        for sl in _pair_batches(pair_node.size, task.rays_per_round, n):
            sums.add_pairs(pair_node[sl], task.run(state, (pair_node[sl], pair_round[sl])))
            bar.advance((sl.stop - sl.start) * task.rays_per_round)
    return sums


def monte_carlo_gebhart(geometry, scene, *, band="ir", rays_per_node, seed,
                        reporter=None) -> Exchange:
    """Gebhart factors by Monte Carlo tracing of emitted and reflected rays.

    Parameters
    ----------
    geometry : vfactor.geometry.Geometry
    scene : vfactor.tracing.scene.Scene
    band : {"ir", "solar"} — infrared (emissivity, ``ir_specular``) or solar
        (absorptivity, ``solar_specular``) properties of the nodes
    rays_per_node : int — rays emitted per node, in :data:`MIN_ROUNDS` rounds
    seed : int
    reporter : vfactor.progress.Reporter or None

    Returns
    -------
    Exchange
        ``method = "monte-carlo"``; ``stderr`` the one-sigma error of the raw estimates.

    Notes
    -----
    Each ray leaves node i diffusely (the emission design of the view factors); at every
    hit on a node side it is absorbed with probability eps (alpha), else reflected,
    specularly with the node's specular share and diffusely otherwise; misses escape to
    space, inert sides absorb and lose it. B_ij = (rays of i absorbed by j) / (rays of i)
    (Howell 1998, J. Heat Transfer 120, 547-560; Siegel & Howell, Monte Carlo exchange
    factors). Reciprocity eps_i A_i B_ij = eps_j A_j B_ji and closure (rows plus space plus
    lost sum to one) are then enforced with :func:`smooth_view_factors` using the
    "areas" eps_i A_i, among nodes with eps > 0 (rows of non-emitting nodes stay raw).
    """
    sums = gebhart_tallies(geometry, scene, band=band, rays_per_node=rays_per_node,
                           seed=seed, reporter=reporter)
    return exchange_from_tallies(geometry, sums, band=band)


def exchange_from_tallies(geometry, sums: TallySums, *, band="ir") -> Exchange:
    """Gebhart factors of summed reflection-tracing tallies (:func:`gebhart_tallies`, or
    the jobs of :class:`GebhartRounds` summed anywhere): the estimates, their errors and
    the reciprocity and closure smoothing of :func:`monte_carlo_gebhart`."""
    absorb, _ = _band_properties(geometry, band)
    stats = tally_statistics(sums)
    n = geometry.n_nodes
    B, Bs, Bl = _split_columns(stats.mean, n)
    err, _, _ = _split_columns(stats.stderr, n)
    emit = np.flatnonzero(absorb > 0)
    if emit.size:
        var, floor = _smoothing_variances(stats)
        v_nodes, v_space, v_inert = _split_columns(var, n)
        # energy absorbed by non-absorbing nodes is impossible: their columns are zero
        lost = Bl[emit] + np.asarray(B[emit][:, np.flatnonzero(absorb <= 0)].sum(axis=1)
                                     ).ravel()
        sm = smooth_view_factors(B[emit][:, emit], Bs[emit], lost, v_nodes[emit][:, emit],
                                 v_space[emit] + floor[emit], v_inert[emit] + floor[emit],
                                 absorb[emit] * geometry.nodes.area[emit],
                                 variance_floor=floor[emit])
        # rows and columns of the emitting nodes from the smoothing, the rest stays raw
        coo = B.tocoo()
        is_emit = absorb > 0
        keep = ~(is_emit[coo.row] & is_emit[coo.col])
        sub = sm.matrix.tocoo()
        B = sp.csr_array((np.concatenate([coo.data[keep], sub.data]),
                          (np.concatenate([coo.row[keep], emit[sub.row]]),
                           np.concatenate([coo.col[keep], emit[sub.col]]))), shape=(n, n))
        B.sort_indices()
        Bs = Bs.copy()
        Bs[emit] = sm.space
    return exchange_from_gebhart(B, Bs, absorb, geometry.nodes.area, stderr=err,
                                 method="monte-carlo", band=band)


def compute_exchange(geometry, scene, view_factors: ViewFactors, *, rays_per_node, seed,
                     band="ir", reporter=None, drop_tolerance=None) -> Exchange:
    """Gebhart factors and exchange areas in one band, by the fitting route.

    When every node's coating is diffuse in the band (specular share zero), the linear
    solve :func:`gebhart_matrix` on the smoothed view factors (``method = "matrix"``, with
    a first-order propagated error, see Notes); otherwise reflection tracing
    :func:`monte_carlo_gebhart` (``rays_per_node`` and ``seed`` are used only then).

    Parameters
    ----------
    geometry : vfactor.geometry.Geometry
    scene : vfactor.tracing.scene.Scene
    view_factors : ViewFactors — from :func:`compute_view_factors` (unused, may be None,
        when reflection tracing is chosen)
    rays_per_node, seed : int — for reflection tracing
    band : {"ir", "solar"}
    reporter : vfactor.progress.Reporter or None
    drop_tolerance : float or None — of the matrix route (default
        :data:`vfactor.gebhart.DROP_TOLERANCE`), see :func:`gebhart_matrix`

    Returns
    -------
    Exchange

    Notes
    -----
    Error of the matrix route (ours, first-order perturbation of the linear solve): with
    ``G = (I - F D)^-1``, ``D = diag(1 - eps)``, ``dB = G dF (D B + diag(eps))``; treating
    the raw entries of F as independent with variances ``stderr^2`` gives
    ``var(B_ij) = sum_k G_ik^2 sum_l stderr_kl^2 (D B + diag(eps))_lj^2``. Entries of one
    row are in truth negatively correlated (they share the row's rays), which this
    neglects; for non-negative sensitivities that makes the estimate conservative.
    """
    absorb, specular = _band_properties(geometry, band)
    if np.all(specular == 0):
        tol = DROP_TOLERANCE if drop_tolerance is None else float(drop_tolerance)
        geb = gebhart_matrix(view_factors.matrix, view_factors.space, view_factors.inert,
                             absorb, drop_tolerance=tol)
        return exchange_from_gebhart(geb.gebhart, geb.space, absorb, geometry.nodes.area,
                                     stderr=_matrix_route_stderr(geb, view_factors, absorb),
                                     method="matrix", band=band, dropped=geb.dropped,
                                     drop_tolerance=tol)
    return monte_carlo_gebhart(geometry, scene, band=band, rays_per_node=rays_per_node,
                               seed=seed, reporter=reporter)


def _matrix_route_stderr(geb, view_factors, absorb):
    """First-order error of the matrix route (see :func:`compute_exchange`), sparse:
    ``var(B) = (G o G) (stderr^2 (S o S))``, S = diag(1 - eps) B + diag(eps)."""
    n = absorb.size
    S = sp.diags_array(1.0 - absorb) @ geb.gebhart + sp.diags_array(absorb)
    S2 = sp.csr_array(S)
    S2.data = S2.data ** 2
    E2 = sp.csr_array(view_factors.stderr, shape=(n, n))
    E2.data = E2.data ** 2
    G2 = sp.csr_array(geb.operator)
    G2.data = G2.data ** 2
    var = sp.csr_array(G2 @ (E2 @ S2))
    # the error is reported where B is: elsewhere the factor itself is left out
    pattern = sp.csr_array((np.ones(geb.gebhart.nnz), geb.gebhart.indices,
                            geb.gebhart.indptr), shape=(n, n))
    var = sp.csr_array(var.multiply(pattern))
    var.data = np.sqrt(var.data)
    var.sort_indices()
    return var
