"""Slow, obviously correct reference implementations for the tests.

Other test modules may append oracles here.
"""

from __future__ import annotations

import numpy as np


def moller_trumbore(origins, directions, vertices, triangles, tmax=np.inf, exclude=None):
    """Brute-force first hit of each ray against every triangle (plain numpy).

    Möller & Trumbore (1997), "Fast, minimum storage ray-triangle intersection", J. Graphics
    Tools 2(1), 21-28, section 2: solve ``o + t d = (1 - u - v) A + u B + v C`` by Cramer's
    rule; a hit needs ``u >= 0, v >= 0, u + v <= 1`` and ``0 < t < tmax``.

    Parameters
    ----------
    origins, directions : (r, 3) float64 (directions unit length)
    vertices : (v, 3) float64
    triangles : (f, 3) int
    tmax : float or (r,) float
    exclude : None or (r,) int
        Facet skipped by each ray.

    Returns
    -------
    facet : (r,) int64 (-1 miss)
    t : (r,) float64 (inf on a miss)
    front : (r,) bool (dot(d, n) < 0, n = (B - A) x (C - A))
    u, v : (r,) float64, barycentric coordinates of the hit (nan on a miss)
    """
    o = np.asarray(origins, float)
    d = np.asarray(directions, float)
    r = o.shape[0]
    tmax = np.broadcast_to(np.asarray(tmax, float), (r,))
    a = vertices[triangles[:, 0]]
    e1 = vertices[triangles[:, 1]] - a
    e2 = vertices[triangles[:, 2]] - a
    normal = np.cross(e1, e2)
    best_f = np.full(r, -1, dtype=np.int64)
    best_t = np.full(r, np.inf)
    best_u = np.full(r, np.nan)
    best_v = np.full(r, np.nan)
    for i in range(r):
        p = np.cross(d[i], e2)
        det = np.einsum("ij,ij->i", e1, p)
        ok = np.abs(det) > 0
        inv = np.where(ok, 1.0 / np.where(ok, det, 1.0), 0.0)
        s = o[i] - a
        u = np.einsum("ij,ij->i", s, p) * inv
        q = np.cross(s, e1)
        v = (q @ d[i]) * inv
        t = np.einsum("ij,ij->i", e2, q) * inv
        hit = ok & (u >= 0) & (v >= 0) & (u + v <= 1) & (t > 0) & (t < tmax[i])
        if exclude is not None and exclude[i] >= 0:
            hit[exclude[i]] = False
        if hit.any():
            j = np.flatnonzero(hit)
            k = j[np.argmin(t[j])]
            best_f[i] = k
            best_t[i] = t[k]
            best_u[i] = u[k]
            best_v[i] = v[k]
    front = np.zeros(r, dtype=bool)
    m = best_f >= 0
    front[m] = np.einsum("ij,ij->i", d[m], normal[best_f[m]]) < 0
    return best_f, best_t, front, best_u, best_v
