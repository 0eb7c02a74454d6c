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


# --------------------------------------------------------------------------------------
# Contacts: the numpy contact check of vfactor.checks (one-axis sweep + vectorised
# narrow phase), kept here as the reference for vfactor.tracing.contacts
# --------------------------------------------------------------------------------------

def _candidate_pairs(box_lo, box_hi, ia, ib, tol, chunk=2048):
    """Facet pairs (a in ia, b in ib) whose bounding boxes overlap (grown by tol)."""
    out_a, out_b = [], []
    lo_b, hi_b = box_lo[ib], box_hi[ib]
    order = np.argsort(lo_b[:, 0], kind="stable")
    lo_b, hi_b, ib_sorted = lo_b[order], hi_b[order], ib[order]
    for s in range(0, len(ia), chunk):
        a = ia[s:s + chunk]
        la, ha = box_lo[a], box_hi[a]
        # sweep along x: b must start before a ends
        end = np.searchsorted(lo_b[:, 0], ha[:, 0].max() + tol, side="right")
        if end == 0:
            continue
        lb, hb = lo_b[:end], hi_b[:end]
        ov = np.ones((len(a), end), bool)
        for d in range(3):
            ov &= (la[:, d, None] <= hb[None, :, d] + tol)
            ov &= (lb[None, :, d] <= ha[:, d, None] + tol)
        r, c = np.nonzero(ov)
        out_a.append(a[r])
        out_b.append(ib_sorted[c])
    if not out_a:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    return np.concatenate(out_a), np.concatenate(out_b)


def _edge_crossings(P, Q, T, n, tol):
    """Which segments P->Q (m,3) cross the interior of triangles T (m,3,3), normals n.

    Both ends must lie farther than ``tol`` on opposite sides of the triangle's plane and
    the crossing point farther than ``tol`` inside every edge of the triangle.
    """
    dp = np.einsum("ij,ij->i", P - T[:, 0], n)
    dq = np.einsum("ij,ij->i", Q - T[:, 0], n)
    cross = ((dp > tol) & (dq < -tol)) | ((dp < -tol) & (dq > tol))
    if not cross.any():
        return cross
    idx = np.flatnonzero(cross)
    t = dp[idx] / (dp[idx] - dq[idx])
    X = P[idx] + t[:, None] * (Q[idx] - P[idx])
    Ti, ni = T[idx], n[idx]
    inside = np.ones(len(idx), bool)
    for k in range(3):
        a, b = Ti[:, k], Ti[:, (k + 1) % 3]
        e = b - a
        elen = np.linalg.norm(e, axis=1)
        d = np.einsum("ij,ij->i", np.cross(e, X - a), ni) / elen
        inside &= d > tol
    out = np.zeros_like(cross)
    out[idx[inside]] = True
    return out


def _coplanar_overlap(A, B, n, tol):
    """Coplanar triangle pairs that overlap by more than ``tol`` (separating axis test).

    A, B : (m, 3, 3) triangles in (nearly) the same plane with unit normal n (m, 3).
    The axes are the in-plane normals of the six edges; two convex polygons are disjoint
    iff one of them separates them (separating axis theorem, e.g. Ericson, Real-Time
    Collision Detection, 2005, section 5.2.1). Overlap below ``tol`` counts as touching.
    """
    overlap = np.ones(len(A), bool)
    for tri in (A, B):
        for k in range(3):
            e = tri[:, (k + 1) % 3] - tri[:, k]
            axis = np.cross(e, n)
            axis /= np.maximum(np.linalg.norm(axis, axis=1), 1e-300)[:, None]
            pa = np.einsum("ijk,ik->ij", A, axis)
            pb = np.einsum("ijk,ik->ij", B, axis)
            depth = np.minimum(pa.max(1), pb.max(1)) - np.maximum(pa.min(1), pb.min(1))
            overlap &= depth > tol
    return overlap


def _contact_kinds(v, normals, a, b, tol):
    """Kind code of each candidate pair (a, b) (0 none), the numpy check's narrow phase."""
    from vfactor.tracing.contacts import COINCIDENT_OPPOSITE, COINCIDENT_SAME, CROSSING

    kind = np.zeros(len(a), np.int8)
    na, nb = normals[a], normals[b]
    A, B = v[a], v[b]
    dist_b = np.abs(np.einsum("ijk,ik->ij", B - A[:, :1], na)).max(axis=1)
    dist_a = np.abs(np.einsum("ijk,ik->ij", A - B[:, :1], nb)).max(axis=1)
    coplanar = (np.abs((na * nb).sum(1)) > 1.0 - 1e-9) | \
        ((dist_b <= tol) & (dist_a <= tol))
    cp = np.flatnonzero(coplanar & (dist_b <= tol))
    if len(cp):
        ov = _coplanar_overlap(A[cp], B[cp], na[cp], tol)
        hits = cp[ov]
        same = (na[hits] * nb[hits]).sum(1) > 0.0
        kind[hits] = np.where(same, COINCIDENT_SAME, COINCIDENT_OPPOSITE)
    idx = np.flatnonzero(~coplanar)
    if len(idx):
        Ai, Bi, nai, nbi = A[idx], B[idx], na[idx], nb[idx]
        hit = np.zeros(len(idx), bool)
        for k in range(3):
            hit |= _edge_crossings(Ai[:, k], Ai[:, (k + 1) % 3], Bi, nbi, tol)
            hit |= _edge_crossings(Bi[:, k], Bi[:, (k + 1) % 3], Ai, nai, tol)
        kind[idx[hit]] = CROSSING
    return kind


def contact_pairs_reference(vertices, triangles, normals, usable, tol, part,
                            same_part=False):
    """Facet pairs in contact, by the numpy contact check of :mod:`vfactor.checks`.

    The broad phase sweeps along x between the usable facets of every two parts whose
    boxes overlap (grown by ``tol``); the narrow phase is vectorised numpy. Each pair is
    put with ``a < b`` before the narrow phase, so facet ``a`` (whose plane the coplanar
    test measures from) is the lower index; for parts numbered in facet order, as
    :class:`vfactor.geometry.Geometry` numbers them, that is the check's own order.

    Parameters
    ----------
    vertices : (v, 3) float64 [m]
    triangles : (f, 3) int
    normals : (f, 3) float64 [1], unit
    usable : (f,) bool
    tol : float [m]
    part : (f,) int, part index of each facet
    same_part : bool
        False (the check): only pairs of facets of different parts. True: all usable
        facets as one set, pairs of one part included (``part`` is then not read).

    Returns
    -------
    a, b : (k,) int64, ``a < b``, sorted by (a, b)
    kind : (k,) int8, codes of :mod:`vfactor.tracing.contacts`
    """
    vertices = np.asarray(vertices, float)
    triangles = np.asarray(triangles, np.int64)
    normals = np.asarray(normals, float)
    usable = np.asarray(usable, bool)
    v = vertices[triangles]
    box_lo, box_hi = v.min(axis=1), v.max(axis=1)
    if same_part:
        groups = [(np.flatnonzero(usable), np.flatnonzero(usable))]
    else:
        part = np.asarray(part)
        nparts = int(part.max()) + 1 if len(part) else 0
        facets_of = [np.flatnonzero((part == k) & usable) for k in range(nparts)]
        part_lo = [box_lo[f].min(0) if len(f) else None for f in facets_of]
        part_hi = [box_hi[f].max(0) if len(f) else None for f in facets_of]
        groups = []
        for i in range(nparts):
            for j in range(i + 1, nparts):
                if part_lo[i] is None or part_lo[j] is None:
                    continue
                lo = np.maximum(part_lo[i], part_lo[j]) - tol
                hi = np.minimum(part_hi[i], part_hi[j]) + tol
                if (lo > hi).any():
                    continue
                fi, fj = facets_of[i], facets_of[j]
                fi = fi[((box_hi[fi] >= lo) & (box_lo[fi] <= hi)).all(axis=1)]
                fj = fj[((box_hi[fj] >= lo) & (box_lo[fj] <= hi)).all(axis=1)]
                if len(fi) and len(fj):
                    groups.append((fi, fj))
    out_a, out_b, out_kind = [], [], []
    for fi, fj in groups:
        a, b = _candidate_pairs(box_lo, box_hi, fi, fj, tol)
        a, b = np.minimum(a, b), np.maximum(a, b)
        keep = a < b                     # one set: drop (a, a) and the mirrored copies
        a, b = a[keep], b[keep]
        if same_part:
            key = np.unique(a * len(triangles) + b)
            a, b = key // len(triangles), key % len(triangles)
        if not len(a):
            continue
        kind = _contact_kinds(v, normals, a, b, tol)
        hit = kind > 0
        out_a.append(a[hit])
        out_b.append(b[hit])
        out_kind.append(kind[hit])
    if not out_a:
        return np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.int8)
    a, b, kind = np.concatenate(out_a), np.concatenate(out_b), np.concatenate(out_kind)
    order = np.lexsort((b, a))
    return a[order].astype(np.int64), b[order].astype(np.int64), kind[order]
