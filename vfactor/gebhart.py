"""Diffuse Gebhart factors by a linear solve, and exchange areas from them.

:func:`gebhart_matrix` solves for the absorption factors of grey diffuse surfaces from
the view factors; :func:`exchange_from_gebhart` turns them into exchange areas
(``eps_i A_i B_ij``) with their errors. The traced (specular) alternative is
:func:`vfactor.exchange.monte_carlo_gebhart`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from vfactor.arrays import finite_array
from vfactor.couplings import Exchange
from vfactor.sparsetools import as_csr, row_ids

__all__ = ["GebhartFactors", "gebhart_matrix", "exchange_from_gebhart", "DROP_TOLERANCE"]


#: Entries of the reflection series (and of the Gebhart factors) below this share of the
#: energy a node emits are left out; the energy they carry is added to the node's
#: ``dropped`` share, so every row still closes (absorbed + space + inert + dropped = 1).
#: One part per million of a node's emission per entry: far below the statistical error of
#: any Monte Carlo view factor the entries come from (common practice is to leave out
#: radiative conductances that small; the value is ours).
DROP_TOLERANCE = 1e-6

#: Reflections after which the series stops; energy still in flight then counts as dropped.
#: Reached only when some nodes reflect nearly everything back and forth.
MAX_REFLECTIONS = 20_000


class GebhartFactors(NamedTuple):
    """Result of :func:`gebhart_matrix` (unpacks as ``B, B_space, B_inert, dropped, G``).

    Attributes
    ----------
    gebhart : (n, n) csr_array — B_ij, share of the energy emitted by i absorbed by j [1]
    space : (n,) float — share of the energy emitted by i that escapes to space [1]
    inert : (n,) float — share absorbed on inert sides (lost) [1]
    dropped : (n,) float — share carried by entries below the drop tolerance [1]
    operator : (n, n) csr_array — ``(I - F diag(1 - eps))^-1`` as summed (reflection
        series, dropped entries left out), for error propagation

    ``gebhart`` row sums plus space, inert and dropped are one to rounding.
    """

    gebhart: sp.csr_array
    space: np.ndarray
    inert: np.ndarray
    dropped: np.ndarray
    operator: sp.csr_array


def _drop_small(matrix, tolerance):
    """``matrix`` without entries below ``tolerance`` and the per-row sum of what left."""
    small = matrix.data < tolerance
    lost = np.bincount(row_ids(matrix)[small], weights=matrix.data[small],
                       minlength=matrix.shape[0])
    if small.any():
        matrix = matrix.copy()
        matrix.data[small] = 0.0
        matrix.eliminate_zeros()
    return matrix, lost


def gebhart_matrix(view_factors_matrix, space, inert, emissivity, *,
                   drop_tolerance=DROP_TOLERANCE) -> GebhartFactors:
    """Gebhart factors of diffuse grey surfaces by a sparse reflection series.

    Band-agnostic: pass infrared emissivities for the infrared band, solar absorptivities
    for the redistribution of reflected sunlight.

    Parameters
    ----------
    view_factors_matrix : (n, n) csr_array or dense — F_ij, row i from node i [1]
    space : (n,) float — F_i,space [1]
    inert : (n,) float — F_i,inert, share that meets inert sides [1]
    emissivity : (n,) float — emissivity (or absorptivity) of each node in the band, 0..1
    drop_tolerance : float — entries below this share of a node's emission are left out
        and their energy reported as ``dropped`` (0 keeps every entry)

    Returns
    -------
    GebhartFactors

    Raises
    ------
    ValueError
        On wrong shapes, non-finite values, emissivity outside [0, 1], or a system that
        does not let energy out (a closed set of perfectly reflecting nodes).

    Notes
    -----
    Diffuse grey enclosure theory of Gebhart (1961), in matrix form (Siegel & Howell,
    "Thermal Radiation Heat Transfer", chapter on radiation exchange in enclosures of
    diffuse grey surfaces; section from memory)::

        B_ij = F_ij eps_j + sum_k F_ik (1 - eps_k) B_kj
        (I - F D) B = F diag(eps),   D = diag(1 - eps)
        (I - F D) B_space = F_space,  (I - F D) B_inert = F_inert

    Space absorbs everything that escapes (a black sink); inert sides are opaque and take
    no part (what reaches them is lost). The matrix ``I - F D`` is sparse with the pattern
    of F, but its inverse is not: it is summed as the series of reflections (the Neumann
    series, i.e. Richardson iteration, of the linear solve; Saad 2003, "Iterative methods
    for sparse linear systems", ch. 4)::

        P_0 = I,  P_(k+1) = P_k F D,  G = sum_k P_k = (I - F D)^-1

    where ``P_k[i, l]`` is the share of i's emission that leaves l after its k-th
    reflection. Every row of ``F D`` sums to at most ``1 - eps_min`` of what arrives, so
    the series converges geometrically. After each product, entries of ``P_k`` below
    ``drop_tolerance`` are left out and their energy is added to ``dropped``; the same is
    done for the entries of ``B = G F diag(eps)``. Energy is thus never silently lost: for
    every row, ``sum_j B_ij + B_space + B_inert + dropped = 1`` to rounding (checked).

    References
    ----------
    B. Gebhart (1961), "Surface temperature calculations in radiant surroundings of
    arbitrary complexity - for gray, diffuse radiation", Int. J. Heat Mass Transfer 3,
    341-346.
    """
    F = as_csr(view_factors_matrix)
    n = F.shape[0]
    if F.shape != (n, n):
        raise ValueError(f"gebhart_matrix: view_factors_matrix must be square, got {F.shape}")
    if not np.all(np.isfinite(F.data)):
        raise ValueError("gebhart_matrix: view_factors_matrix has non-finite entries")
    fs = finite_array(space, "space", shape=(n,))
    fi = finite_array(inert, "inert", shape=(n,))
    eps = finite_array(emissivity, "emissivity", shape=(n,))
    if np.any((eps < 0) | (eps > 1)):
        bad = int(np.flatnonzero((eps < 0) | (eps > 1))[0])
        raise ValueError(f"gebhart_matrix: emissivity must be in [0, 1], node {bad} has "
                         f"{float(eps[bad])!r}")
    tol = float(drop_tolerance)
    FD = as_csr(F @ sp.diags_array(1.0 - eps))
    FD.eliminate_zeros()
    P = sp.identity(n, format="csr", dtype=np.float64)
    parts = [P]
    dropped = np.zeros(n)
    for k in range(1, MAX_REFLECTIONS + 1):
        P = as_csr(P @ FD)
        P, lost = _drop_small(P, tol)
        dropped += lost
        if P.nnz == 0:
            break
        flight = np.asarray(P.sum(axis=1)).ravel()     # energy still being reflected
        if flight.max() < 1e-15:                       # below rounding: count it dropped
            dropped += flight
            break
        if k % 1000 == 0 and flight.max() > 0.9:
            i = int(np.argmax(flight))
            raise ValueError(f"gebhart_matrix: singular system: node {i} still has "
                             f"{flight[i]:.3g} of its emission in flight after {k} "
                             "reflections; some nodes reflect everything and never let "
                             "energy out")
        parts.append(P)
        if len(parts) >= 16:                   # keep the partial sums few and sparse
            parts = [as_csr(sum(parts[1:], parts[0]))]
    else:
        dropped += np.asarray(P.sum(axis=1)).ravel()
    G = as_csr(sum(parts[1:], parts[0]))
    B = as_csr(G @ as_csr(F @ sp.diags_array(eps)))
    B, lost = _drop_small(B, tol)
    dropped += lost
    b_space = G @ fs
    b_inert = G @ fi
    closure = np.asarray(B.sum(axis=1)).ravel() + b_space + b_inert + dropped
    row_total = np.asarray(F.sum(axis=1)).ravel() + fs + fi
    whole = np.abs(row_total - 1.0) < 1e-9          # rows that close: so must B's
    if np.any(whole & (np.abs(closure - 1.0) > 1e-9)):
        i = int(np.flatnonzero(whole & (np.abs(closure - 1.0) > 1e-9))[0])
        raise ValueError(f"gebhart_matrix: Gebhart row {i} does not close ({closure[i]!r})")
    return GebhartFactors(gebhart=B, space=b_space, inert=b_inert, dropped=dropped,
                          operator=G)


def exchange_from_gebhart(gebhart, gebhart_space, emissivity, area, *, stderr=None,
                          method="matrix", band="ir", dropped=None,
                          drop_tolerance=0.0) -> Exchange:
    """Exchange areas ``eps_i A_i B_ij`` and to space, packed as :class:`Exchange`.

    Parameters
    ----------
    gebhart : (n, n) csr_array or dense — B_ij [1]
    gebhart_space : (n,) float — B_i,space [1]
    emissivity : (n,) float — emissivity (absorptivity in the solar band) [1]
    area : (n,) float — node areas [m2]
    stderr : (n, n) csr_array, dense or None — one-sigma error of ``gebhart`` [1]
    method, band : str — recorded in the result
    dropped : (n,) float or None — share of each row left out below the drop tolerance
    drop_tolerance : float — that tolerance (0: nothing was left out)

    Returns
    -------
    Exchange
        ``area = eps_i A_i B_ij`` [m2]; the radiative conductance is ``sigma * area``
        [W K-4]: the net exchange between nodes i and j is ``sigma area_ij (T_i^4 -
        T_j^4)`` (Gebhart 1961).
    """
    B = as_csr(gebhart)
    n = B.shape[0]
    if B.shape != (n, n) or not np.all(np.isfinite(B.data)):
        raise ValueError(f"exchange_from_gebhart: gebhart must be a finite square matrix, "
                         f"got shape {B.shape}")
    bs = finite_array(gebhart_space, "gebhart_space", shape=(n,))
    eps = finite_array(emissivity, "emissivity", shape=(n,))
    A = finite_array(area, "area", shape=(n,))
    ea = eps * A
    err = None
    if stderr is not None:
        err = as_csr(stderr)
        if err.shape != (n, n) or not np.all(np.isfinite(err.data)):
            raise ValueError(f"exchange_from_gebhart: stderr must be finite of shape ({n}, {n})")
    drop = np.zeros(n) if dropped is None else finite_array(dropped, "dropped", shape=(n,))
    return Exchange(gebhart=B, gebhart_space=bs, area=as_csr(sp.diags_array(ea) @ B),
                    area_space=ea * bs, stderr=err, method=method, band=band, dropped=drop,
                    drop_tolerance=float(drop_tolerance))
