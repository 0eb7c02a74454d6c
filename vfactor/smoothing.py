"""Reciprocity and closure smoothing of Monte Carlo view factors.

Raw view factors from rays obey reciprocity (A_i F_ij = A_j F_ji) and closure (rows sum
to one) only within their statistical error; :func:`smooth_view_factors` makes them obey
both by the least change weighted by the variances (method and sources in its docstring).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from vfactor.arrays import finite_array
from vfactor.sparsetools import as_csr, hit_pairs, values_at

__all__ = ["SmoothedViewFactors", "smooth_view_factors", "SMOOTHING_METHOD", "NO_SMOOTHING"]

#: Method name recorded when smoothing is switched off (``[radiation] smoothing = false``).
NO_SMOOTHING = "none (raw tallies; reciprocity and closure not enforced)"

#: Name of the reciprocity and closure smoothing method (see :func:`smooth_view_factors`).
SMOOTHING_METHOD = ("variance-weighted least squares with Lagrange multipliers "
                    "(van Leersum 1989; Taylor & Luck 1995), non-negative active set")


class SmoothedViewFactors(NamedTuple):
    """Result of :func:`smooth_view_factors`.

    Attributes
    ----------
    matrix : (n, n) csr_array — view factors obeying A_i F_ij = A_j F_ji [1]
    space : (n,) float — view factors to space [1]
    inert : (n,) float — shares lost on inert sides [1]
    iterations : int — active-set iterations used (1 when no bound was active)
    """

    matrix: np.ndarray
    space: np.ndarray
    inert: np.ndarray
    iterations: int


def smooth_view_factors(raw_matrix, raw_space, raw_inert, variance, variance_space,
                        variance_inert, area, *, variance_floor=None) -> SmoothedViewFactors:
    """Enforce reciprocity and closure on Monte Carlo view factors by weighted least squares.

    Parameters
    ----------
    raw_matrix : (n, n) csr_array or dense — raw view factors, row i from node i [1]
    raw_space, raw_inert : (n,) float — raw factors to space and to inert sides [1]
    variance : (n, n) csr_array or dense — variance of each raw entry [1]; with
        ``variance_floor`` it must be > 0 where the entry or its reciprocal is non-zero
    variance_floor : (n,) float or None — added to the variance of every entry of row i
        (entries not stored in ``variance`` included), so that an entry never hit keeps a
        finite weight
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
    F = as_csr(raw_matrix)
    n = F.shape[0]
    if F.shape != (n, n):
        raise ValueError(f"smooth_view_factors: raw_matrix must be square, got {F.shape}")
    V = as_csr(variance)
    if V.shape != (n, n):
        raise ValueError(f"smooth_view_factors: variance must have shape ({n}, {n}), "
                         f"got {V.shape}")
    for name, m in (("raw_matrix", F), ("variance", V)):
        if not np.all(np.isfinite(m.data)):
            raise ValueError(f"smooth_view_factors: {name} has non-finite entries")
    s_hat = finite_array(raw_space, "raw_space", shape=(n,))
    l_hat = finite_array(raw_inert, "raw_inert", shape=(n,))
    vs = finite_array(variance_space, "variance_space", shape=(n,))
    vl = finite_array(variance_inert, "variance_inert", shape=(n,))
    A = finite_array(area, "area", shape=(n,))
    floor = np.zeros(n) if variance_floor is None else \
        finite_array(variance_floor, "variance_floor", shape=(n,))
    if np.any(A <= 0):
        raise ValueError(f"smooth_view_factors: node areas must be > 0, got min {float(A.min())!r}")

    # Unknowns: one g = A_i F_ij = A_j F_ji per pair i < j hit in at least one direction
    # (others are structural zeros), the diagonal, space and inert entries of each row.
    iu, ju = hit_pairs(F)
    fij, fji = values_at(F, iu, ju), values_at(F, ju, iu)
    vij, vji = values_at(V, iu, ju) + floor[iu], values_at(V, ju, iu) + floor[ju]
    if np.any((vij <= 0) & (fij > 0)) or np.any((vji <= 0) & (fji > 0)) or \
            np.any((vij <= 0) & (vji <= 0)):
        raise ValueError("smooth_view_factors: variance must be > 0 where an entry or its "
                         "reciprocal is hit")
    fd, vd = F.diagonal().copy(), V.diagonal() + floor
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
    diag = np.where(diag_free, gd, 0.0) / A
    keep = G > 0
    dk = np.flatnonzero(diag > 0)
    matrix = as_csr(sp.coo_array(
        (np.concatenate([G[keep] / A[iu[keep]], G[keep] / A[ju[keep]], diag[dk]]),
         (np.concatenate([iu[keep], ju[keep], dk]), np.concatenate([ju[keep], iu[keep], dk]))),
        shape=(n, n)))
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
    if n <= 64 or (M.nnz > 0.02 * n * n and n <= 4000):   # small or dense: LAPACK
        return np.linalg.solve(M.toarray(), r)
    return np.asarray(spsolve(M, r)).reshape(n)
