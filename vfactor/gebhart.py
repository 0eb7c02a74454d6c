"""Diffuse Gebhart factors by a linear solve, and exchange areas from them.

:func:`gebhart_matrix` solves for the absorption factors of grey diffuse surfaces from
the view factors; :func:`exchange_from_gebhart` turns them into exchange areas
(``eps_i A_i B_ij``) with their errors. The traced (specular) alternative is
:func:`vfactor.radiation.monte_carlo_gebhart`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from vfactor.arrays import finite_array
from vfactor.couplings import Exchange

__all__ = ["GebhartFactors", "gebhart_matrix", "exchange_from_gebhart"]


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
    F = finite_array(view_factors_matrix, "view_factors_matrix", ndim=2)
    n = F.shape[0]
    if F.shape != (n, n):
        raise ValueError(f"gebhart_matrix: view_factors_matrix must be square, got {F.shape}")
    fs = finite_array(space, "space", shape=(n,))
    finite_array(inert, "inert", shape=(n,))
    eps = finite_array(emissivity, "emissivity", shape=(n,))
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
    B = finite_array(gebhart, "gebhart", ndim=2)
    n = B.shape[0]
    bs = finite_array(gebhart_space, "gebhart_space", shape=(n,))
    eps = finite_array(emissivity, "emissivity", shape=(n,))
    A = finite_array(area, "area", shape=(n,))
    ea = eps * A
    return Exchange(gebhart=B, gebhart_space=bs, area=ea[:, None] * B, area_space=ea * bs,
                    stderr=None if stderr is None else finite_array(stderr, "stderr", shape=(n, n)),
                    method=method, band=band)
