"""The error that the node view factors bring into the loads absorbed after diffuse
reflection (internal; used by :mod:`vfactor.heatreflect`).

The heating stage reports the spread of its replicates as the error of each node's load.
The diffuse part of the reflected power is redistributed by Gebhart factors ``B`` computed
from the node view factors ``F`` of the radiation stage (or of the stage's own rays), the
same ``F`` in every replicate, so their error is not in that spread. The view-factor rays
are independent of the heating rays, so the two errors add in quadrature; this module gives
the second one to first order.

Derivation (ours, standard matrix calculus): with ``D = diag(1 - eps)``, ``E = diag(eps)``
and ``G = (I - F D)^-1`` (Gebhart 1961 in matrix form, :func:`vfactor.gebhart.
gebhart_matrix`), ``B = G F E``, so ``dG = G dF D G`` and ``dB = G dF (D B + E)``. The
power absorbed after reflection from the diffuse pools ``p`` is ``R = B^T p``, hence

    dR = (B^T D + E) u,   u = dF^T y,   y = G^T p,

``u_l = sum_i dF_il y_i``. With the entries' errors independent (variance ``S_il``), the
``u_l`` are independent with variance ``s_l = sum_i S_il y_i^2`` and

    Var(R_j) = sum_l M_jl^2 s_l,   M_jl = B_lj (1 - eps_l) + eps_j [j = l].

Which variances are independent: the raw entries of different rows come from different
rays; within a row, rays that reach one node do not reach another, so their covariance is
negative for independent rays (multinomial) and leaving it out overstates the variance
(``S`` of the raw errors: an upper bound, factor 1). A delivered (smoothed) pair is one
exchange ``g = A_i F_ij = A_j F_ji`` whose error moves both entries together; counting
them as independent can understate by at most a factor 2 (``(a + b)^2 <= 2 (a^2 + b^2)``),
so the smoothed errors bound it with factor 2. :func:`coupling_variance` takes the smallest
of such bounds; smoothing only lowers the variance of the delivered values (least squares
with more constraints), so the raw bound holds for them too.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from vfactor.sparsetools import as_csr

__all__ = ["BandErrors", "band_errors", "coupling_variance", "binomial_variance",
           "transposed_variance"]


class BandErrors:
    """What :func:`coupling_variance` needs of one band, prepared once (internal).

    ``operator_t``: ``G^T``; ``square_t``: ``(B o B)^T`` (elementwise square); ``keep``:
    ``(1 - eps)^2``; ``own``: ``eps^2 + 2 eps B_jj (1 - eps)`` (the diagonal of ``M`` met
    twice); ``variances``: tuples ``(S^T, bound)`` of the entries' variances, transposed
    (CSR), and their factor, shared by the bands (not copied).
    """

    def __init__(self, gebhart, operator, node_abs, variances):
        B = as_csr(gebhart)
        eps = np.asarray(node_abs, dtype=np.float64)
        self.operator_t = as_csr(as_csr(operator).T)
        square = B.copy()
        square.data = square.data ** 2
        self.square_t = as_csr(square.T)
        self.keep = (1.0 - eps) ** 2
        self.own = eps * eps + 2.0 * eps * B.diagonal() * (1.0 - eps)
        self.variances = tuple((v, float(bound)) for v, bound in variances)


def band_errors(gebhart, operator, node_abs, variances):
    """:class:`BandErrors` of a band, or None when no variance of the couplings is known.
    ``variances``: tuples ``(S^T, bound)``, ``S^T`` the transposed (CSR) variances of the
    node entries (:func:`transposed_variance`)."""
    if not variances:
        return None
    return BandErrors(gebhart, operator, node_abs, variances)


def coupling_variance(errors: BandErrors, pool) -> np.ndarray:
    """Variance [W^2] per node of the power absorbed after diffuse reflection of ``pool``,
    from the error of the view factors (module notes; the smallest of the bounds).

    Parameters
    ----------
    errors : BandErrors or None — None gives zeros
    pool : (n,) float — power each node reflects diffusely [W] (mean over replicates)
    """
    pool = np.asarray(pool, dtype=np.float64)
    if errors is None:
        return np.zeros(pool.shape[0])
    y = errors.operator_t @ pool
    y2 = y * y
    best = None
    for s_t, bound in errors.variances:
        s = s_t @ y2
        var = bound * (errors.own * s + errors.square_t @ (errors.keep * s))
        best = var if best is None else np.minimum(best, var)
    return best


def transposed_variance(stderr):
    """``S^T`` (CSR) of the one-sigma errors ``stderr`` (n, n) of node view factors: the
    form :class:`BandErrors` takes, made once for both bands."""
    var = as_csr(as_csr(stderr).T)
    var.data = var.data ** 2
    return var


def binomial_variance(side_node, side_area, start, target, count, rays, n_nodes, node_area):
    """Variances of the node-to-node view factors counted from a stage's own rays, as for
    independent rays: ``sum_s (A_s / A_i)^2 p (1 - p) / N`` over the sides ``s`` of node
    ``i``, ``p`` the share of the side's ``N`` rays that first hit node ``j`` (the rays of a
    side are stratified, so this overstates; :func:`vfactor.tracing.heat_sums.target_runs`
    gives ``start, target, count``).

    Returns
    -------
    (n, n) csr_array [1] — transposed, ``S^T``, as :class:`BandErrors` takes it
    """
    side = np.repeat(np.arange(side_node.shape[0]), np.diff(start))
    hit = target >= 0
    src = side_node[side][hit]
    p = count[hit] / float(rays)
    area = np.where(node_area > 0.0, node_area, 1.0)
    share = side_area[side][hit] / area[src]
    var = share * share * p * (1.0 - p) / float(rays)
    return as_csr(sp.coo_array((var, (target[hit], src)), shape=(n_nodes, n_nodes)))
