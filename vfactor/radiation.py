"""Radiative couplings: Monte Carlo view factors, smoothing, Gebhart factors, exchange areas.

Pipeline of this module::

    Geometry + Scene --trace_tallies (rounds)--> TallySums --view_factors_from_tallies-->
    ViewFactors (raw + smoothed) --gebhart_matrix / monte_carlo_gebhart--> Exchange

Columns of every tally and view-factor row
------------------------------------------
A row belongs to an emitting node ``i``; its ``n + 2`` columns are the ``n`` nodes, then
*space* (column ``n``: the ray left the model) and *inert* (column ``n + 1``: the first
facet side hit belongs to no node, i.e. it is opaque and takes no part in the exchange).
Raw rows sum to exactly one.

Units of work ("rounds")
------------------------
A *round* is one independent randomised replicate: every node of the round emits
``rays_per_round`` rays, placed with a stratified, randomised quasi-Monte Carlo design
(see :mod:`vfactor.tracing.vf_kernels`). The tally of round ``r`` for node ``i`` is a pure
function of ``(geometry, seed, i, r, rays_per_round)``; tallies are integers, so any set of
rounds summed in any order, on any number of threads or processes, gives identical bits.
Statistical errors come from the spread between rounds (see :func:`tally_statistics`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

__all__ = [
    "compute_view_factors",
    "trace_tallies",
    "trace_pairs",
    "plan_rounds",
    "view_factors_from_tallies",
    "compute_exchange",
    "monte_carlo_gebhart",
    "gebhart_tallies",
    "ViewFactors",
    "Exchange",
    "TallySums",
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

#: Number of independent randomised replicates ("rounds") a computation starts with; the
#: one-sigma error of every entry is the spread of these replicates (Owen 2013, "Monte
#: Carlo theory, methods and examples", ch. 17; 8..32 replicates is common practice).
MIN_ROUNDS = 8

#: An entry of a view-factor row (node or space column) is *significant* when its raw value
#: is at least this share of the row (the row sums to one): 1 % of the energy the node
#: emits. Convergence (``target_error``) and ``adjustment_sigma`` look at these entries only.
SIGNIFICANCE = 1e-2

#: Method name recorded when smoothing is switched off (``[radiation] smoothing = false``).
NO_SMOOTHING = "none (raw tallies; reciprocity and closure not enforced)"

#: Name of the reciprocity and closure smoothing method (see :func:`smooth_view_factors`).
SMOOTHING_METHOD = ("variance-weighted least squares with Lagrange multipliers "
                    "(van Leersum 1989; Taylor & Luck 1995), non-negative active set")


@dataclass(frozen=True)
class ViewFactors:
    """Node-to-node view factors with their statistical error.

    Attributes
    ----------
    matrix : (n, n) float — smoothed view factors; row i = from node i [1]
    space : (n,) float — smoothed view factor to deep space [1]
    inert : (n,) float — share of emitted rays lost on inert sides [1]
    stderr : (n, n) float — one-sigma statistical error of each raw entry [1]: standard
        error of the mean over independent randomised replicates (rounds), see
        :func:`tally_statistics`
    stderr_space : (n,) float — one-sigma error of ``raw_space`` [1]
    raw_matrix, raw_space, raw_inert : as above, straight from the tallies (no smoothing) [1]
    rays : (n,) int64 — rays emitted per node
    adjustment_sigma : float — largest |smoothed - raw| / stderr over significant entries
        (node and space entries >= :data:`SIGNIFICANCE` of their row) [1]
    method : str — name of the smoothing method
    converged : bool — True when ``target_error`` was reached (True when none was asked)
    target_error : float or None — requested one-sigma error of significant entries [1]
    facet_matrix : scipy.sparse.csr_matrix or None — facet-side-to-node-side factors on request
    """

    matrix: np.ndarray
    space: np.ndarray
    inert: np.ndarray
    stderr: np.ndarray
    stderr_space: np.ndarray
    raw_matrix: np.ndarray
    raw_space: np.ndarray
    raw_inert: np.ndarray
    rays: np.ndarray
    adjustment_sigma: float
    method: str
    converged: bool
    target_error: float | None = None
    facet_matrix: object = None


@dataclass(frozen=True)
class Exchange:
    """Gebhart (absorption) factors and exchange areas in one band.

    Attributes
    ----------
    gebhart : (n, n) float — B_ij, share of energy emitted by i absorbed by j [1]
    gebhart_space : (n,) float — share of energy emitted by i that escapes to space [1]
    area : (n, n) float — exchange area eps_i A_i B_ij [m2]; conductance = sigma * area
    area_space : (n,) float — eps_i A_i B_i,space [m2]
    stderr : (n, n) float or None — one-sigma error of ``gebhart`` where it was estimated [1]
    method : str — ``"matrix"`` (diffuse linear solve) or ``"monte-carlo"`` (reflection tracing)
    band : str — ``"ir"`` or ``"solar"``
    """

    gebhart: np.ndarray
    gebhart_space: np.ndarray
    area: np.ndarray
    area_space: np.ndarray
    stderr: np.ndarray | None
    method: str
    band: str = "ir"


# --------------------------------------------------------------------------------------
# Tallies and their statistics
# --------------------------------------------------------------------------------------
class TallyStatistics(NamedTuple):
    """Estimates and one-sigma errors from summed round tallies.

    Attributes
    ----------
    mean : (n, n + 2) float — hit fractions per row: nodes, space, inert [1]
    stderr : (n, n + 2) float — one-sigma error of ``mean`` [1]
    rays : (n,) int64 — rays emitted per row (rounds x rays per round)
    """

    mean: np.ndarray
    stderr: np.ndarray
    rays: np.ndarray


@dataclass
class TallySums:
    """Running sums of round tallies: the whole state needed to resume or merge work.

    Sums of integers only, so adding rounds in any order (or merging the sums of several
    workers) gives identical bits.

    Attributes
    ----------
    counts : (n, n + 2) int64 — sum over rounds of the hit counts of each row
    squares : (n, n + 2) int64 — sum over rounds of the squared hit counts
    rounds : (n,) int64 — number of rounds added per row
    rays_per_round : int — rays per node in every round (the same for all rounds)
    """

    counts: np.ndarray
    squares: np.ndarray
    rounds: np.ndarray
    rays_per_round: int

    @classmethod
    def empty(cls, n_nodes: int, rays_per_round: int) -> "TallySums":
        """Sums of no rounds for ``n_nodes`` nodes."""
        n = int(n_nodes)
        return cls(np.zeros((n, n + 2), np.int64), np.zeros((n, n + 2), np.int64),
                   np.zeros(n, np.int64), int(rays_per_round))

    def add(self, node_indices, tallies) -> None:
        """Add one round's tallies of the nodes ``node_indices``.

        Parameters
        ----------
        node_indices : (k,) int — rows the tallies belong to (no repeats)
        tallies : (k, n + 2) int64 — hit counts of one round, as from :func:`trace_tallies`
        """
        idx = np.asarray(node_indices, dtype=np.int64)
        t = np.asarray(tallies)
        if t.shape != (idx.size, self.counts.shape[1]) or t.dtype.kind not in "iu":
            raise ValueError(f"TallySums.add: tallies must be integer of shape "
                             f"({idx.size}, {self.counts.shape[1]}), got {t.dtype} {t.shape}")
        if np.unique(idx).size != idx.size:
            raise ValueError("TallySums.add: node_indices has repeats")
        t = t.astype(np.int64)
        if np.any(t.sum(axis=1) != self.rays_per_round):
            raise ValueError(f"TallySums.add: every tally row must sum to rays_per_round = "
                             f"{self.rays_per_round}")
        self.counts[idx] += t
        self.squares[idx] += t * t
        self.rounds[idx] += 1

    def add_pairs(self, node_indices, tallies) -> None:
        """Add tallies of (node, round) pairs; a node may appear once per round it got.

        Parameters
        ----------
        node_indices : (k,) int — node of each pair
        tallies : (k, n + 2) int64 — hit counts of each pair (one round each)
        """
        idx = np.asarray(node_indices, dtype=np.int64)
        t = np.asarray(tallies)
        if t.shape != (idx.size, self.counts.shape[1]) or t.dtype.kind not in "iu":
            raise ValueError(f"TallySums.add_pairs: tallies must be integer of shape "
                             f"({idx.size}, {self.counts.shape[1]}), got {t.dtype} {t.shape}")
        t = t.astype(np.int64)
        if np.any(t.sum(axis=1) != self.rays_per_round):
            raise ValueError(f"TallySums.add_pairs: every tally row must sum to "
                             f"rays_per_round = {self.rays_per_round}")
        if idx.size == 0:
            return
        if np.unique(idx).size == idx.size:      # each node once: plain indexed add
            self.counts[idx] += t
            self.squares[idx] += t * t
            self.rounds[idx] += 1
            return
        order = np.argsort(idx, kind="stable")
        idx, t = idx[order], t[order]
        starts = np.flatnonzero(np.r_[True, idx[1:] != idx[:-1]])
        rows = idx[starts]                       # unique nodes; exact integer sums
        self.counts[rows] += np.add.reduceat(t, starts, axis=0)
        self.squares[rows] += np.add.reduceat(t * t, starts, axis=0)
        self.rounds[rows] += np.diff(np.r_[starts, idx.size])

    def merge(self, other: "TallySums") -> None:
        """Add the sums of ``other`` (another worker's rounds, disjoint from ours)."""
        if other.rays_per_round != self.rays_per_round or other.counts.shape != self.counts.shape:
            raise ValueError("TallySums.merge: different rays_per_round or node count")
        self.counts += other.counts
        self.squares += other.squares
        self.rounds += other.rounds


def tally_statistics(sums: TallySums) -> TallyStatistics:
    """Hit fractions and their one-sigma errors from summed round tallies.

    Parameters
    ----------
    sums : TallySums
        Every row must have at least one round.

    Returns
    -------
    TallyStatistics

    Notes
    -----
    With ``K >= 2`` rounds of ``m`` rays, each round gives an independent unbiased estimate
    ``p_r = c_r / m`` (randomised quasi-Monte Carlo replicates). The estimate is their mean
    ``p = sum(c) / (K m)`` and its one-sigma error the standard error of the mean of the
    replicates (Owen 2013, "Monte Carlo theory, methods and examples", ch. 17, eq. 17.3)::

        sigma^2 = (K sum(c^2) - (sum c)^2) / (K^2 (K - 1) m^2)

    computed in exact integer arithmetic before the one division. With a single round no
    spread exists, and the binomial bound ``sqrt(p (1 - p) / m)`` of independent rays is
    reported instead (conservative: stratification only lowers the variance).
    """
    counts = np.asarray(sums.counts, dtype=np.int64)
    squares = np.asarray(sums.squares, dtype=np.int64)
    rounds = np.asarray(sums.rounds, dtype=np.int64)
    m = int(sums.rays_per_round)
    if np.any(rounds < 1):
        bad = np.flatnonzero(rounds < 1)
        raise ValueError(f"tally_statistics: rows {bad[:10].tolist()} have no rounds")
    rays = rounds * m
    mean = counts / rays[:, None].astype(np.float64)
    k = rounds[:, None]
    if counts.size and int(counts.max()) < 3_000_000_000:
        num = k * squares - counts * counts            # exact: < 2**63
        num = num.astype(np.float64)
    else:                                              # exact with Python integers
        num = (k.astype(object) * squares.astype(object)
               - counts.astype(object) * counts.astype(object)).astype(np.float64)
    kf = k.astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        var = np.where(kf > 1, np.maximum(num, 0.0) / (kf * kf * (kf - 1.0) * m * m), 0.0)
    binomial = mean * (1.0 - mean) / rays[:, None]
    var = np.where(kf > 1, var, binomial)
    return TallyStatistics(mean=mean, stderr=np.sqrt(var), rays=rays)


def significant_mask(fractions, significance: float = SIGNIFICANCE):
    """Significant entries of view-factor rows.

    Parameters
    ----------
    fractions : (n, n + 2) float — rows of node columns, space, inert [1]
    significance : float — threshold share of the row [1]

    Returns
    -------
    (n, n + 2) bool — True for node and space entries ``>= significance``; the inert column
        is never significant (it is not a coupling).
    """
    f = np.asarray(fractions, dtype=np.float64)
    mask = f >= significance
    mask[:, -1] = False
    return mask


# --------------------------------------------------------------------------------------
# Reciprocity and closure
# --------------------------------------------------------------------------------------
class SmoothedViewFactors(NamedTuple):
    """Result of :func:`smooth_view_factors`.

    Attributes
    ----------
    matrix : (n, n) float — view factors obeying A_i F_ij = A_j F_ji [1]
    space : (n,) float — view factors to space [1]
    inert : (n,) float — shares lost on inert sides [1]
    iterations : int — active-set iterations used (1 when no bound was active)
    """

    matrix: np.ndarray
    space: np.ndarray
    inert: np.ndarray
    iterations: int


def smooth_view_factors(raw_matrix, raw_space, raw_inert, variance, variance_space,
                        variance_inert, area) -> SmoothedViewFactors:
    """Enforce reciprocity and closure on Monte Carlo view factors by weighted least squares.

    Parameters
    ----------
    raw_matrix : (n, n) float — raw view factors, row i from node i [1]
    raw_space, raw_inert : (n,) float — raw factors to space and to inert sides [1]
    variance : (n, n) float — variance of each raw entry [1]; must be > 0 where the entry
        or its reciprocal is non-zero (callers add a floor, see Notes)
    variance_space, variance_inert : (n,) float — variances of the space and inert entries
    area : (n,) float — node areas [m2]

    Returns
    -------
    SmoothedViewFactors

    Raises
    ------
    ValueError
        On wrong shapes, non-finite values or non-positive areas.

    Notes
    -----
    Minimises ``sum (x - x_raw)^2 / var`` over all entries ``x`` (node entries, space,
    inert) subject to

    - reciprocity ``A_i F_ij = A_j F_ji`` for every pair of nodes,
    - closure ``sum_j F_ij + F_i,space + F_i,inert = 1`` for every row,
    - ``x >= 0``,

    which is the least-squares adjustment with Lagrange multipliers of van Leersum (1989)
    weighted by the inverse statistical variance, the weighting that Taylor & Luck (1995)
    found best among the reciprocity and closure enforcement methods they compared: well
    sampled entries move least. Space and inert entries take part in closure; they have no
    reciprocal row.

    Derivation (ours, standard Lagrange calculus): with one unknown ``g_ij = A_i F_ij =
    A_j F_ji`` per pair, stationarity gives ``g = g_hat - h (mu_i + mu_j)`` with
    ``a = w_ij / A_i^2``, ``b = w_ji / A_j^2``, ``g_hat = (w_ij F_ij / A_i + w_ji F_ji /
    A_j) / (a + b)``, ``h = 1 / (2 (a + b))`` (``w = 1/var``); the diagonal and the space
    and inert entries follow likewise; the row constraints become one symmetric positive
    definite, sparse ``n x n`` system for the multipliers ``mu`` (one off-diagonal entry
    per coupled pair). Non-negativity is kept by a
    primal active set: entries that come out negative are fixed at zero and the system is
    solved again; fixed entries whose unconstrained value turns positive are released.
    Entries that are zero in both directions (never hit) are structural zeros and stay
    zero.

    References
    ----------
    - J. van Leersum (1989), "A method for determining a consistent set of radiation view
      factors from a set of generated values", Int. J. Heat Mass Transfer 32(2), 289-293.
    - R. P. Taylor, R. Luck (1995), "Comparison of reciprocity and closure enforcement
      methods for radiation view factors", J. Thermophys. Heat Transfer 9(4), 660-666.
    """
    F = _as_array(raw_matrix, "raw_matrix", ndim=2)
    n = F.shape[0]
    if F.shape != (n, n):
        raise ValueError(f"smooth_view_factors: raw_matrix must be square, got {F.shape}")
    s_hat = _as_array(raw_space, "raw_space", shape=(n,))
    l_hat = _as_array(raw_inert, "raw_inert", shape=(n,))
    V = _as_array(variance, "variance", shape=(n, n))
    vs = _as_array(variance_space, "variance_space", shape=(n,))
    vl = _as_array(variance_inert, "variance_inert", shape=(n,))
    A = _as_array(area, "area", shape=(n,))
    if np.any(A <= 0):
        raise ValueError(f"smooth_view_factors: node areas must be > 0, got min {float(A.min())!r}")

    # Unknowns: one g = A_i F_ij = A_j F_ji per pair i < j hit in at least one direction
    # (others are structural zeros), the diagonal, space and inert entries of each row.
    iu, ju = np.nonzero(np.triu((F > 0) | (F.T > 0), k=1))
    fij, fji = F[iu, ju], F[ju, iu]
    vij, vji = V[iu, ju], V[ju, iu]
    if np.any((vij <= 0) & (fij > 0)) or np.any((vji <= 0) & (fji > 0)) or \
            np.any((vij <= 0) & (vji <= 0)):
        raise ValueError("smooth_view_factors: variance must be > 0 where an entry or its "
                         "reciprocal is hit")
    fd, vd = np.diag(F).copy(), np.diag(V).copy()
    diag_free0 = fd > 0
    s_free0 = s_hat > 0
    l_free0 = l_hat > 0
    for name, v, free in (("variance", vd, diag_free0), ("variance_space", vs, s_free0),
                          ("variance_inert", vl, l_free0)):
        if np.any(v[free] <= 0):
            raise ValueError(f"smooth_view_factors: {name} must be > 0 where an entry is hit")
    with np.errstate(divide="ignore"):
        wij = np.where(vij > 0, 1.0 / vij, 0.0)
        wji = np.where(vji > 0, 1.0 / vji, 0.0)
    a = wij / A[iu] ** 2
    b = wji / A[ju] ** 2
    g_hat = (wij * fij / A[iu] + wji * fji / A[ju]) / (a + b)
    h = 0.5 / (a + b)
    gd_hat = A * fd
    hd = 0.5 * A * A * vd
    hs = 0.5 * A * A * vs
    hl = 0.5 * A * A * vl
    As_hat = A * s_hat
    Al_hat = A * l_hat

    pair_free = np.ones(iu.size, bool)
    diag_free = diag_free0.copy()
    s_free = s_free0.copy()
    l_free = l_free0.copy()
    iterations = 0
    for iterations in range(1, 4 * n + 20):
        mu = _multipliers(n, iu, ju, np.where(pair_free, h, 0.0),
                          np.where(pair_free, g_hat, 0.0),
                          hd * diag_free + hs * s_free + hl * l_free,
                          gd_hat * diag_free + As_hat * s_free + Al_hat * l_free - A)
        G = g_hat - h * (mu[iu] + mu[ju])
        gd = gd_hat - hd * mu
        As = As_hat - hs * mu
        Al = Al_hat - hl * mu
        neg = [pair_free & (G < 0), diag_free & (gd < 0), s_free & (As < 0),
               l_free & (Al < 0)]
        if any(x.any() for x in neg):
            pair_free &= ~neg[0]
            diag_free &= ~neg[1]
            s_free &= ~neg[2]
            l_free &= ~neg[3]
            continue
        # Release fixed entries whose unconstrained value at these multipliers is positive.
        rel = [~pair_free & (G > 0), diag_free0 & ~diag_free & (gd > 0),
               s_free0 & ~s_free & (As > 0), l_free0 & ~l_free & (Al > 0)]
        if any(x.any() for x in rel):
            pair_free |= rel[0]
            diag_free |= rel[1]
            s_free |= rel[2]
            l_free |= rel[3]
            continue
        break
    G = np.where(pair_free, G, 0.0)
    matrix = np.zeros((n, n))
    matrix[iu, ju] = G / A[iu]
    matrix[ju, iu] = G / A[ju]
    matrix[np.diag_indices(n)] = np.where(diag_free, gd, 0.0) / A
    space = np.where(s_free, As, 0.0) / A
    inert = np.where(l_free, Al, 0.0) / A
    return SmoothedViewFactors(matrix=matrix, space=space, inert=inert, iterations=iterations)


def _multipliers(n, iu, ju, h, g_hat, d, r0):
    """Solve the row constraints for the Lagrange multipliers (sparse SPD system).

    ``M = sum_pairs h (e_i + e_j)(e_i + e_j)^T + diag(d)``, right-hand side
    ``r_i = sum_{pairs at i} g_hat + r0_i``. Rows with nothing left to adjust get mu = 0.
    """
    import scipy.sparse as sp
    from scipy.sparse.linalg import spsolve

    diag = d + np.bincount(iu, h, minlength=n) + np.bincount(ju, h, minlength=n)
    r = r0 + np.bincount(iu, g_hat, minlength=n) + np.bincount(ju, g_hat, minlength=n)
    empty = diag <= 0
    diag = np.where(empty, 1.0, diag)
    r = np.where(empty, 0.0, r)
    keep = (h > 0) & ~empty[iu] & ~empty[ju]
    rows = np.concatenate([iu[keep], ju[keep], np.arange(n)])
    cols = np.concatenate([ju[keep], iu[keep], np.arange(n)])
    vals = np.concatenate([h[keep], h[keep], diag])
    M = sp.csc_matrix((vals, (rows, cols)), shape=(n, n))
    if n <= 64 or M.nnz > 0.02 * n * n:        # small or dense enough: LAPACK
        return np.linalg.solve(M.toarray(), r)
    return np.asarray(spsolve(M, r)).reshape(n)


# --------------------------------------------------------------------------------------
# Gebhart factors
# --------------------------------------------------------------------------------------
class GebhartFactors(NamedTuple):
    """Result of :func:`gebhart_matrix` (unpacks as ``B, B_space``).

    Attributes
    ----------
    gebhart : (n, n) float — B_ij, share of the energy emitted by i absorbed by j [1]
    space : (n,) float — share of the energy emitted by i that escapes to space [1]

    The rest of each row, ``1 - sum_j B_ij - B_i,space``, is absorbed on inert sides
    (lost); it is zero when no ray meets an inert side.
    """

    gebhart: np.ndarray
    space: np.ndarray


def gebhart_matrix(view_factors_matrix, space, inert, emissivity) -> GebhartFactors:
    """Gebhart factors of diffuse grey surfaces by the linear solve.

    Band-agnostic: pass infrared emissivities for the infrared band, solar absorptivities
    for the redistribution of reflected sunlight.

    Parameters
    ----------
    view_factors_matrix : (n, n) float — F_ij, row i from node i [1]
    space : (n,) float — F_i,space [1]
    inert : (n,) float — F_i,inert, share that meets inert sides [1]
    emissivity : (n,) float — emissivity (or absorptivity) of each node in the band, 0..1

    Returns
    -------
    GebhartFactors
        ``(B, B_space)``; rows of B plus B_space plus the share lost on inert sides sum to
        one when the view-factor rows (with space and inert) do.

    Raises
    ------
    ValueError
        On wrong shapes, non-finite values, emissivity outside [0, 1], or a singular system
        (a closed set of perfectly reflecting nodes that never lets energy out).

    Notes
    -----
    Diffuse grey enclosure theory of Gebhart (1961), in matrix form (Siegel & Howell,
    "Thermal Radiation Heat Transfer", chapter on radiation exchange in enclosures of
    diffuse grey surfaces; section from memory)::

        B_ij = F_ij eps_j + sum_k F_ik (1 - eps_k) B_kj
        (I - F diag(1 - eps)) B = F diag(eps)
        (I - F diag(1 - eps)) B_space = F_space

    Space absorbs everything that escapes (a black sink). Inert sides are opaque and take
    no part: what reaches them is treated as absorbed there and lost,
    ``(I - F diag(1 - eps)) B_inert = F_inert``; that share is not returned.

    References
    ----------
    B. Gebhart (1961), "Surface temperature calculations in radiant surroundings of
    arbitrary complexity - for gray, diffuse radiation", Int. J. Heat Mass Transfer 3,
    341-346.
    """
    F = _as_array(view_factors_matrix, "view_factors_matrix", ndim=2)
    n = F.shape[0]
    if F.shape != (n, n):
        raise ValueError(f"gebhart_matrix: view_factors_matrix must be square, got {F.shape}")
    fs = _as_array(space, "space", shape=(n,))
    _as_array(inert, "inert", shape=(n,))
    eps = _as_array(emissivity, "emissivity", shape=(n,))
    if np.any((eps < 0) | (eps > 1)):
        bad = int(np.flatnonzero((eps < 0) | (eps > 1))[0])
        raise ValueError(f"gebhart_matrix: emissivity must be in [0, 1], node {bad} has "
                         f"{float(eps[bad])!r}")
    system = np.eye(n) - F * (1.0 - eps)[None, :]
    rhs = np.empty((n, n + 1))
    rhs[:, :n] = F * eps[None, :]
    rhs[:, n] = fs
    try:
        sol = np.linalg.solve(system, rhs)
    except np.linalg.LinAlgError:
        raise ValueError("gebhart_matrix: singular system (I - F diag(1 - eps)); some nodes "
                         "reflect everything and never let energy out") from None
    return GebhartFactors(gebhart=sol[:, :n], space=sol[:, n])


def exchange_from_gebhart(gebhart, gebhart_space, emissivity, area, *, stderr=None,
                          method="matrix", band="ir") -> Exchange:
    """Exchange areas ``eps_i A_i B_ij`` and to space, packed as :class:`Exchange`.

    Parameters
    ----------
    gebhart : (n, n) float — B_ij [1]
    gebhart_space : (n,) float — B_i,space [1]
    emissivity : (n,) float — emissivity (absorptivity in the solar band) [1]
    area : (n,) float — node areas [m2]
    stderr : (n, n) float or None — one-sigma error of ``gebhart`` [1]
    method, band : str — recorded in the result

    Returns
    -------
    Exchange
        ``area = eps_i A_i B_ij`` [m2]; the radiative conductance is ``sigma * area``
        [W K-4]: the net exchange between nodes i and j is ``sigma area_ij (T_i^4 -
        T_j^4)`` (Gebhart 1961).
    """
    B = _as_array(gebhart, "gebhart", ndim=2)
    n = B.shape[0]
    bs = _as_array(gebhart_space, "gebhart_space", shape=(n,))
    eps = _as_array(emissivity, "emissivity", shape=(n,))
    A = _as_array(area, "area", shape=(n,))
    ea = eps * A
    return Exchange(gebhart=B, gebhart_space=bs, area=ea[:, None] * B, area_space=ea * bs,
                    stderr=None if stderr is None else _as_array(stderr, "stderr", shape=(n, n)),
                    method=method, band=band)


# --------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------
def _as_array(value, name, ndim=None, shape=None):
    arr = np.ascontiguousarray(value, dtype=np.float64)
    if ndim is not None and arr.ndim != ndim:
        raise ValueError(f"{name} must be {ndim}-D, got shape {arr.shape}")
    if shape is not None and arr.shape != shape:
        raise ValueError(f"{name} must have shape {shape}, got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} has non-finite values")
    return arr


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
    ``_RAYS_PER_CALL`` rays and holds at most ~4e6 partial tallies."""
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
    rays_per_node : int — rays each node emits in this round (``m``)
    round_index : int — which independent replicate, 0 .. 65535

    Returns
    -------
    (k, n + 2) int64
        Rays of each node whose first hit is node 0..n-1, space (column n) or an inert side
        (column n + 1); each row sums to ``rays_per_node``.

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
    (k, n + 2) int64 — row ``p`` equals ``trace_tallies(geometry, scene, [node_indices[p]],
        seed, rays_per_node, round_indices[p])[0]``, bit for bit.
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


def _trace_pairs(scene, kin, nodes, rounds, seed, m, bar, facet_acc, sums=None):
    """Trace (node, round) pairs batch by batch; return their (k, n + 2) tallies, or, with
    ``sums``, add each batch to it as it comes (memory bounded by one batch)."""
    from .tracing.vf_kernels import vf_pairs

    out = None if sums is not None else np.zeros((nodes.size, kin.n_nodes + 2), np.int64)
    for sl in _pair_batches(nodes.size, m, kin.n_nodes):
        k = sl.stop - sl.start
        part = np.zeros((k, kin.n_nodes + 2), np.int64)
        for j_lo, j_hi in _j_ranges(m, k):
            counts, ray_side, ray_col = vf_pairs(scene.arrays, kin.emit, kin.geo, nodes[sl],
                                                 rounds[sl], seed, m, j_lo, j_hi,
                                                 record=facet_acc is not None)
            part += counts
            if facet_acc is not None:
                facet_acc.add(kin.side_id[ray_side], ray_col)
            if bar is not None:
                bar.advance(k * (j_hi - j_lo))
        if sums is not None:
            sums.add_pairs(nodes[sl], part)
        else:
            out[sl] = part
    return out


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


def _row_error_ratio(stats, target_error, significance):
    """Largest stderr / (target * value) over the significant entries of each row."""
    n = stats.mean.shape[0]
    sig = significant_mask(stats.mean, significance)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(sig, stats.stderr / (target_error * stats.mean), 0.0)
    return ratio.max(axis=1) if n else np.zeros(0)


def round_sizes(rays_per_node, max_rays_per_node=None):
    """Rays per round and the most rounds a node may get.

    Parameters
    ----------
    rays_per_node : int — rays each node emits at least (>= 1)
    max_rays_per_node : int or None — ray budget per node (default 100 x rays_per_node)

    Returns
    -------
    rays_per_round : int — ``ceil(rays_per_node / MIN_ROUNDS)``
    max_rounds : int — ``budget // rays_per_round``, at least :data:`MIN_ROUNDS`, at most the
        kernels' ``MAX_ROUNDS``
    """
    from .tracing.vf_kernels import MAX_ROUNDS

    rays_per_node = int(rays_per_node)
    m = -(-rays_per_node // MIN_ROUNDS)
    budget = 100 * rays_per_node if max_rays_per_node is None else int(max_rays_per_node)
    return m, min(MAX_ROUNDS, max(MIN_ROUNDS, budget // m))


def plan_rounds(sums: TallySums, target_error, max_rounds, significance=SIGNIFICANCE):
    """The (node, round) pairs to trace next to reach ``target_error``.

    Parameters
    ----------
    sums : TallySums — rounds traced so far
    target_error : float — one-sigma relative error wanted on significant entries [1]
    max_rounds : int — most rounds any node may have (its ray budget / rays per round)
    significance : float — threshold of significant entries [1]

    Returns
    -------
    pair_node, pair_round : (k,) int64 — empty when every row passes or is at its budget

    Notes
    -----
    A row whose worst significant entry has ``stderr / (target F) = q > 1`` after ``K``
    rounds gets rounds up to ``ceil(1.1 K q^2)`` (the variance falls as 1/rounds; 10 %
    margin), at least one more, at most ``max_rounds``.
    """
    stats = tally_statistics(sums)
    ratio = _row_error_ratio(stats, target_error, significance)
    want = np.ceil(sums.rounds * ratio ** 2 * 1.1).astype(np.int64)
    want = np.minimum(np.maximum(want, sums.rounds + 1), int(max_rounds))
    need = np.flatnonzero((ratio > 1.0) & (sums.rounds < max_rounds))
    if need.size == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    nodes = np.concatenate([np.full(want[i] - sums.rounds[i], i, np.int64) for i in need])
    rounds = np.concatenate([np.arange(sums.rounds[i], want[i], dtype=np.int64) for i in need])
    return nodes, rounds


def compute_view_factors(geometry, scene, *, rays_per_node, seed, target_error=None,
                         max_rays_per_node=None, facet_factors=False, reporter=None,
                         significance=SIGNIFICANCE, smooth=True) -> ViewFactors:
    """Monte Carlo view factors between nodes, to space and to inert sides.

    Parameters
    ----------
    geometry : vfactor.geometry.Geometry
    scene : vfactor.tracing.scene.Scene — built from the geometry's vertices and triangles
    rays_per_node : int — rays each node emits at least; split into :data:`MIN_ROUNDS`
        rounds of ``ceil(rays_per_node / MIN_ROUNDS)`` rays
    seed : int — in [0, 2**64)
    target_error : float or None — one-sigma *relative* error wanted for every significant
        entry (e.g. 0.005 for 0.5 %); rounds are added to the rows that miss it
    max_rays_per_node : int or None — ray budget per node when ``target_error`` is set
        (default 100 x ``rays_per_node``)
    facet_factors : bool — also return facet-side-to-node factors (sparse)
    reporter : vfactor.progress.Reporter or None
    significance : float — share of a row above which an entry is significant [1]
    smooth : bool — enforce reciprocity and closure (``[radiation] smoothing``); when false
        the returned factors are the raw tallies and ``method`` says so

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
    With ``target_error``: after the first rounds, every row whose significant entries do
    not all have ``stderr <= target_error * F`` gets more rounds, as many as the measured
    error predicts (the variance falls as 1/rounds) plus 10 %, until all pass or the
    row reaches ``max_rays_per_node``; ``converged`` says whether all passed.
    Reciprocity and closure are then enforced by :func:`smooth_view_factors`; the raw
    tallies are kept.
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
    with reporter.stage("view factors", total=n * MIN_ROUNDS * m, unit="rays") as bar:
        done = n * MIN_ROUNDS * m
        pair_node = np.tile(np.arange(n, dtype=np.int64), MIN_ROUNDS)
        pair_round = np.repeat(np.arange(MIN_ROUNDS, dtype=np.int64), n)
        _trace_pairs(scene, kin, pair_node, pair_round, seed, m, bar, acc, sums)
        converged = True
        if target_error is not None:
            for _ in range(50):
                pair_node, pair_round = plan_rounds(sums, target_error, max_rounds,
                                                    significance)
                if pair_node.size == 0:
                    break
                done += pair_node.size * m
                bar.set_total(done)
                _trace_pairs(scene, kin, pair_node, pair_round, seed, m, bar, acc, sums)
            stats = tally_statistics(sums)
            converged = bool(np.all(_row_error_ratio(stats, target_error, significance) <= 1))
    facet_matrix = acc.factors() if acc is not None else None
    return view_factors_from_tallies(geometry, sums, target_error=target_error,
                                     converged=converged, facet_matrix=facet_matrix,
                                     significance=significance, smooth=smooth)


def _smoothing_variances(stats):
    """Variances used as smoothing weights: stderr^2 plus a floor of (1 / rays)^2 so that
    entries never hit (or hit identically in every round) keep a finite weight."""
    floor = (1.0 / stats.rays.astype(np.float64)) ** 2
    return stats.stderr ** 2 + floor[:, None]


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
        from ``target_error``; True when no target)
    facet_matrix : scipy.sparse matrix or None — passed through
    significance : float — threshold of significant entries [1]
    smooth : bool — enforce reciprocity and closure; when false the factors are the raw
        tallies, ``adjustment_sigma`` is 0 and ``method`` is :data:`NO_SMOOTHING`

    Returns
    -------
    ViewFactors
        ``adjustment_sigma`` is the largest ``|smoothed - raw| / sigma`` over significant
        entries, with ``sigma^2`` the smoothing variance of :func:`_smoothing_variances`.
    """
    stats = tally_statistics(sums)
    n = geometry.n_nodes
    if stats.mean.shape != (n, n + 2):
        raise ValueError(f"view_factors_from_tallies: tallies of shape {stats.mean.shape} "
                         f"for {n} nodes")
    V = _smoothing_variances(stats)
    raw = stats.mean
    if not smooth:
        if converged is None:
            converged = True if target_error is None else bool(
                np.all(_row_error_ratio(stats, target_error, significance) <= 1))
        return ViewFactors(matrix=raw[:, :n].copy(), space=raw[:, n].copy(),
                           inert=raw[:, n + 1].copy(), stderr=stats.stderr[:, :n].copy(),
                           stderr_space=stats.stderr[:, n].copy(),
                           raw_matrix=raw[:, :n].copy(), raw_space=raw[:, n].copy(),
                           raw_inert=raw[:, n + 1].copy(), rays=stats.rays.astype(np.int64),
                           adjustment_sigma=0.0, method=NO_SMOOTHING,
                           converged=bool(converged), target_error=target_error,
                           facet_matrix=facet_matrix)
    sm = smooth_view_factors(raw[:, :n], raw[:, n], raw[:, n + 1], V[:, :n], V[:, n],
                             V[:, n + 1], geometry.nodes.area)
    ii, jj = np.nonzero(significant_mask(raw, significance))
    if ii.size:
        node_col = jj < n
        smoothed = np.where(node_col, sm.matrix[ii, np.minimum(jj, n - 1)], sm.space[ii])
        adjustment = float(np.max(np.abs(smoothed - raw[ii, jj]) / np.sqrt(V[ii, jj])))
    else:
        adjustment = 0.0
    if converged is None:
        converged = True if target_error is None else bool(
            np.all(_row_error_ratio(stats, target_error, significance) <= 1))
    return ViewFactors(matrix=sm.matrix, space=sm.space, inert=sm.inert,
                       stderr=stats.stderr[:, :n].copy(), stderr_space=stats.stderr[:, n].copy(),
                       raw_matrix=raw[:, :n].copy(), raw_space=raw[:, n].copy(),
                       raw_inert=raw[:, n + 1].copy(), rays=stats.rays.astype(np.int64),
                       adjustment_sigma=adjustment, method=SMOOTHING_METHOD,
                       converged=bool(converged), target_error=target_error,
                       facet_matrix=facet_matrix)


# --------------------------------------------------------------------------------------
# Gebhart factors by reflection tracing, and the route choice
# --------------------------------------------------------------------------------------
def _band_properties(geometry, band):
    nodes = geometry.nodes
    if band == "ir":
        return (np.asarray(nodes.ir_emissivity, np.float64),
                np.asarray(nodes.ir_specular, np.float64))
    if band == "solar":
        return (np.asarray(nodes.solar_absorptivity, np.float64),
                np.asarray(nodes.solar_specular, np.float64))
    raise ValueError(f"band must be 'ir' or 'solar', got {band!r}")


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
    from .tracing.vf_kernels import gebhart_pairs

    absorb, specular = _band_properties(geometry, band)
    kin = _kernel_inputs(geometry, scene)
    n = kin.n_nodes
    rays_per_node = int(rays_per_node)
    if rays_per_node < 1:
        raise ValueError(f"rays_per_node must be >= 1, got {rays_per_node}")
    m = -(-rays_per_node // MIN_ROUNDS)
    nodes = np.arange(n, dtype=np.int64) if node_indices is None else \
        _check_round_args(n, node_indices, seed, m, 0)
    _check_round_args(n, [], seed, m, 0)
    for name, v in (("absorptivity", absorb), ("specular share", specular)):
        if np.any((v < 0) | (v > 1)) or not np.all(np.isfinite(v)):
            i = int(np.flatnonzero(~((v >= 0) & (v <= 1)))[0])
            raise ValueError(f"node {geometry.nodes.names[i]!r}: {band} {name} must be in "
                             f"[0, 1], got {float(v[i])!r}")
    reporter = reporter or NullReporter()
    sums = TallySums.empty(n, m)
    pair_node = np.tile(nodes, MIN_ROUNDS)
    pair_round = np.repeat(np.arange(MIN_ROUNDS, dtype=np.int64), nodes.size)
    with reporter.stage(f"Gebhart factors ({band}, reflection tracing)",
                        total=pair_node.size * m, unit="rays") as bar:
        for sl in _pair_batches(pair_node.size, m, n):
            sums.add_pairs(pair_node[sl],
                           gebhart_pairs(scene.arrays, kin.emit, kin.geo, absorb, specular,
                                         pair_node[sl], pair_round[sl], int(seed), m))
            bar.advance((sl.stop - sl.start) * m)
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
    absorb, _ = _band_properties(geometry, band)
    sums = gebhart_tallies(geometry, scene, band=band, rays_per_node=rays_per_node,
                           seed=seed, reporter=reporter)
    stats = tally_statistics(sums)
    n = geometry.n_nodes
    raw = stats.mean
    B = raw[:, :n].copy()
    Bs = raw[:, n].copy()
    emit = np.flatnonzero(absorb > 0)
    if emit.size:
        V = _smoothing_variances(stats)
        sub = np.ix_(emit, emit)
        # energy absorbed by non-absorbing nodes is impossible: their columns are zero
        lost = raw[emit, n + 1] + raw[emit][:, :n][:, absorb <= 0].sum(axis=1)
        sm = smooth_view_factors(raw[:, :n][sub], raw[emit, n], lost, V[:, :n][sub],
                                 V[emit, n], V[emit, n + 1],
                                 absorb[emit] * geometry.nodes.area[emit])
        B[sub] = sm.matrix
        Bs[emit] = sm.space
    return exchange_from_gebhart(B, Bs, absorb, geometry.nodes.area,
                                 stderr=stats.stderr[:, :n].copy(), method="monte-carlo",
                                 band=band)


def compute_exchange(geometry, scene, view_factors: ViewFactors, *, rays_per_node, seed,
                     band="ir", reporter=None) -> Exchange:
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
        B, Bs = gebhart_matrix(view_factors.matrix, view_factors.space, view_factors.inert,
                               absorb)
        n = B.shape[0]
        G = np.linalg.inv(np.eye(n) - view_factors.matrix * (1.0 - absorb)[None, :])
        S = (1.0 - absorb)[:, None] * B + np.diag(absorb)
        var = (G ** 2) @ ((view_factors.stderr ** 2) @ (S ** 2))
        return exchange_from_gebhart(B, Bs, absorb, geometry.nodes.area,
                                     stderr=np.sqrt(var), method="matrix", band=band)
    return monte_carlo_gebhart(geometry, scene, band=band, rays_per_node=rays_per_node,
                               seed=seed, reporter=reporter)
