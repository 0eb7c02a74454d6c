"""Conservative tests that nothing can shadow a facet side: from the whole solar disk
(:func:`beam_clear`), or from anything in its hemisphere (:func:`nothing_in_front`).

The Sun's sample rays of a side (:func:`vfactor.tracing.heat_kernels.sun_lit_mask`) start
on the facet and go toward the disk: every ray is ``o + t d`` with ``o`` on the facet,
``d`` within the cone of half-angle ``theta`` about the Sun direction ``s``, ``t > 0``.
:func:`beam_clear` proves, when it returns True, that no facet of the vehicle meets any
such ray, so every sample is lit and none needs tracing. The proof, per facet met in the
tree (the reasoning is ours, elementary geometry):

- *Behind the plane.* With ``n . d > 0`` for every ``d`` of the cone (the side faces the
  Sun by more than the cone: ``n . s > 2 sin(theta / 2) + margin``), every point of a ray
  at ``t > 0`` lies strictly in front of the side's plane, so a facet whose vertices are
  all on or behind the plane (to ``PLANE_MARGIN`` of the side's size) cannot meet one:
  coplanar neighbours of a flat panel and the rest of a convex body drop out.
- *Outside the beam.* Write ``o + t d = c + t s + e`` with ``c`` the facet's centroid; then
  ``|e| <= |o - c| + t |d - s| <= R + t 2 sin(theta / 2)`` (``R`` the distance from the
  centroid to the farthest vertex). A ray can meet a facet of the vehicle only while it
  is inside the vehicle's bounding box, i.e. at ``t <= L`` (``L`` the box diagonal: ``o``
  is in the box), so every ray stays within ``rho = R + L 2 sin(theta / 2)`` of the
  segment ``c + t s``, ``0 <= t <= L``. A box (node or facet) that this segment misses
  when the box is grown by ``rho`` on every side cannot hold a point of any ray.

Boxes are tested by slabs in float64 with ``rho`` grown by a relative ``BOX_MARGIN``, far
larger than the rounding of the slab arithmetic. A side for which no facet passes both
tests is clear; any other side is traced ray by ray, as without the test, so the test
changes which rays are traced, never their result. (The only exception would be a ray
that the watertight test counts as hitting a facet that lies within ``PLANE_MARGIN`` of
the side's plane at a crease with a neighbour: a hit at ``t`` of the order of rounding,
which the test treats as no hit.)
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from .bvh import LANES, PAD_ID, STACK_SIZE, TRI_LANES
from .config import JIT, JIT_PARALLEL
from .traverse import _stack_alloca

__all__ = ["beam_clear", "beam_spread", "nothing_in_front", "open_sides", "PLANE_MARGIN",
           "BOX_MARGIN"]

#: Height above the side's plane, relative to the side's size ``R``, up to which a facet
#: counts as behind it (coplanar neighbours compute heights of the order of 1e-16 R).
PLANE_MARGIN = 1e-9
#: Relative growth of the beam radius that covers the rounding of the slab tests.
BOX_MARGIN = 1e-6


@njit(**JIT, inline="always")
def beam_spread(cos_half_angle):
    """Largest ``|d - s|`` of a unit ``d`` within the cone: ``2 sin(theta / 2) =
    sqrt(2 (1 - cos theta))``, grown by the margins."""
    return math.sqrt(2.0 * max(0.0, 1.0 - cos_half_angle)) * (1.0 + BOX_MARGIN) + 1e-15


@njit(**JIT, inline="always")
def _slope(k):
    """``(sign, 1 / k)`` of the slope of a constraint ``k t <= c`` (sign 0: ``k = 0``)."""
    if k > 1e-300:
        return 1, 1.0 / k
    if k < -1e-300:
        return -1, 1.0 / k
    return 0, 0.0


@njit(**JIT, inline="always")
def _bound(slope, c, t0, t1):
    """Narrow ``[t0, t1]`` by the constraint ``k t <= c`` (``slope`` from :func:`_slope`)."""
    if slope[0] > 0:
        t1 = min(t1, c * slope[1])
    elif slope[0] < 0:
        t0 = max(t0, c * slope[1])
    elif c < 0.0:
        t1 = -1.0
    return t0, t1


@njit(**JIT, inline="always")
def _sweep_meets(fl, fh, lo, hi, slopes, span, pad):
    """True when the facet's box ``[fl, fh]``, moved by ``t s`` and grown by ``t spread``
    on every side, meets the box ``[lo, hi]`` (grown by ``pad``) for some ``0 <= t <=
    span``: per axis ``fl + t (s - spread) <= hi`` and ``fh + t (s + spread) >= lo``
    (``slopes``: :func:`_slope` of ``s_a - spread`` and ``-(s_a + spread)``, a = x, y, z).
    """
    t0 = 0.0
    t1 = span
    t0, t1 = _bound(slopes[0], hi[0] + pad - fl[0], t0, t1)
    t0, t1 = _bound(slopes[1], fh[0] - (lo[0] - pad), t0, t1)
    t0, t1 = _bound(slopes[2], hi[1] + pad - fl[1], t0, t1)
    t0, t1 = _bound(slopes[3], fh[1] - (lo[1] - pad), t0, t1)
    t0, t1 = _bound(slopes[4], hi[2] + pad - fl[2], t0, t1)
    t0, t1 = _bound(slopes[5], fh[2] - (lo[2] - pad), t0, t1)
    return t0 <= t1


@njit(**JIT)
def beam_clear(arrays, vertices, triangles, normals, facet, sign, sx, sy, sz,
               cos_half_angle, length):
    """True when no facet can shadow any point of side (``facet``, ``sign``) from any
    point of the solar disk (see the module notes); False when it may.

    Parameters
    ----------
    arrays : tuple — ``Scene.arrays``
    vertices (v, 3) [m], triangles (f, 3) int64, normals (f, 3) [1]
    facet : int — the side's facet (never counts as a shadow of itself)
    sign : int — +1 front side, -1 back side
    sx, sy, sz : float — unit vector toward the centre of the Sun (the cone's axis) [1]
    cos_half_angle : float — cosine of the Sun's angular radius [1]
    length : float — diagonal of the bounding box of all facets [m]
    """
    n, fl, fh, size, base, plane = _side_plane(vertices, triangles, normals, facet, sign)
    spread = beam_spread(cos_half_angle)
    if n[0] * sx + n[1] * sy + n[2] * sz <= spread + 1e-9:
        return False                     # some ray of the cone may run along the plane
    slopes = (_slope(sx - spread), _slope(-(sx + spread)), _slope(sy - spread),
              _slope(-(sy + spread)), _slope(sz - spread), _slope(-(sz + spread)))
    span = length * (1.0 + BOX_MARGIN)
    pad = BOX_MARGIN * (length + size) + 1e-300
    return _nothing_met(arrays, facet, n, base, plane, fl, fh, slopes, span, pad, True)


@njit(**JIT, inline="always")
def _side_plane(vertices, triangles, normals, facet, sign):
    """Outward normal, box (low, high corners), size of side (``facet``, ``sign``), the
    height of its plane along the normal (through vertex 0: on the plane of every ray
    origin) and the margin above it up to which a point counts as on the plane."""
    n = (sign * normals[facet, 0], sign * normals[facet, 1], sign * normals[facet, 2])
    v0 = triangles[facet, 0]
    v1 = triangles[facet, 1]
    v2 = triangles[facet, 2]
    fl = (min(vertices[v0, 0], min(vertices[v1, 0], vertices[v2, 0])),
          min(vertices[v0, 1], min(vertices[v1, 1], vertices[v2, 1])),
          min(vertices[v0, 2], min(vertices[v1, 2], vertices[v2, 2])))
    fh = (max(vertices[v0, 0], max(vertices[v1, 0], vertices[v2, 0])),
          max(vertices[v0, 1], max(vertices[v1, 1], vertices[v2, 1])),
          max(vertices[v0, 2], max(vertices[v1, 2], vertices[v2, 2])))
    size = max(fh[0] - fl[0], max(fh[1] - fl[1], fh[2] - fl[2]))
    base = n[0] * vertices[v0, 0] + n[1] * vertices[v0, 1] + n[2] * vertices[v0, 2]
    return n, fl, fh, size, base, PLANE_MARGIN * size


@njit(**JIT, inline="always")
def _child_box(nodes, ref, j):
    """Low and high corners (float64) of child ``j`` of 4-wide node ``ref``."""
    return ((np.float64(nodes[ref, j]), np.float64(nodes[ref, LANES + j]),
             np.float64(nodes[ref, 2 * LANES + j])),
            (np.float64(nodes[ref, 3 * LANES + j]), np.float64(nodes[ref, 4 * LANES + j]),
             np.float64(nodes[ref, 5 * LANES + j])))


@njit(**JIT, inline="always")
def _box_top(n, lo, hi, base):
    """Height of the box's highest corner above the plane ``n . x = base``."""
    return (max(n[0] * lo[0], n[0] * hi[0]) + max(n[1] * lo[1], n[1] * hi[1])
            + max(n[2] * lo[2], n[2] * hi[2]) - base)


@njit(**JIT, inline="always")
def _rises_above(tri, b, lane, n, base, plane):
    """A vertex of lane ``lane`` of leaf block ``b`` lies above the side's plane."""
    for v in range(3):
        h = (n[0] * tri[b, (3 * v) * TRI_LANES + lane] + n[1] * tri[b, (3 * v + 1) * TRI_LANES
             + lane] + n[2] * tri[b, (3 * v + 2) * TRI_LANES + lane]) - base
        if h > plane:
            return True
    return False


@njit(**JIT)
def _nothing_met(arrays, facet, n, base, plane, fl, fh, slopes, span, pad, swept):
    """Walk the tree: True when no facet but ``facet`` rises above the plane ``n . x =
    base`` (by more than ``plane``) and, with ``swept``, also meets the swept facet box
    (:func:`_sweep_meets`); False at the first that does."""
    nodes = arrays[0]
    nodes_i = arrays[1]
    tri = arrays[2]
    tri_i = arrays[3]
    stack = _stack_alloca(STACK_SIZE, np.int32)
    sp = 0
    ref = np.int32(0)
    while True:
        if ref >= 0:
            for j in range(LANES):
                c = nodes_i[ref, 6 * LANES + j]
                if c == -1:
                    continue
                lo, hi = _child_box(nodes, ref, j)
                if _box_top(n, lo, hi, base) > plane and (
                        not swept or _sweep_meets(fl, fh, lo, hi, slopes, span, pad)):
                    stack[sp] = c
                    sp += 1
        else:
            code = -1 - ref
            first = code >> 4
            n_blk = ((code & 15) + TRI_LANES - 1) // TRI_LANES
            for b in range(first, first + n_blk):
                for lane in range(TRI_LANES):
                    fid = tri_i[b, 9 * TRI_LANES + lane]
                    if fid == facet or fid == PAD_ID:
                        continue
                    if _rises_above(tri, b, lane, n, base, plane) and (
                            not swept or _lane_meets(tri, b, lane, fl, fh, slopes, span, pad)):
                        return False
        if sp == 0:
            break
        sp -= 1
        ref = stack[sp]
    return True


@njit(**JIT, inline="always")
def _lane_meets(tri, b, lane, fl, fh, slopes, span, pad):
    """The box of lane ``lane`` of leaf block ``b`` meets the swept facet box."""
    lo = (min(tri[b, lane], min(tri[b, 3 * TRI_LANES + lane], tri[b, 6 * TRI_LANES + lane])),
          min(tri[b, TRI_LANES + lane], min(tri[b, 4 * TRI_LANES + lane],
                                            tri[b, 7 * TRI_LANES + lane])),
          min(tri[b, 2 * TRI_LANES + lane], min(tri[b, 5 * TRI_LANES + lane],
                                                tri[b, 8 * TRI_LANES + lane])))
    hi = (max(tri[b, lane], max(tri[b, 3 * TRI_LANES + lane], tri[b, 6 * TRI_LANES + lane])),
          max(tri[b, TRI_LANES + lane], max(tri[b, 4 * TRI_LANES + lane],
                                            tri[b, 7 * TRI_LANES + lane])),
          max(tri[b, 2 * TRI_LANES + lane], max(tri[b, 5 * TRI_LANES + lane],
                                                tri[b, 8 * TRI_LANES + lane])))
    return _sweep_meets(fl, fh, lo, hi, slopes, span, pad)


@njit(**JIT)
def nothing_in_front(arrays, vertices, triangles, normals, facet, sign):
    """True when no facet of the vehicle rises above the plane of side (``facet``,
    ``sign``) (to :data:`PLANE_MARGIN` of the side's size): nothing can block any ray that
    leaves the side (the *behind the plane* part of the module notes, for every direction
    of the side's hemisphere). False when something may.
    """
    n, fl, fh, size, base, plane = _side_plane(vertices, triangles, normals, facet, sign)
    none = _slope(0.0)
    return _nothing_met(arrays, facet, n, base, plane, fl, fh,
                        (none, none, none, none, none, none), 0.0, 0.0, False)


@njit(**JIT_PARALLEL)
def _open_sides(arrays, vertices, triangles, normals, facets, signs, out):
    for i in prange(facets.shape[0]):
        out[i] = nothing_in_front(arrays, vertices, triangles, normals, facets[i], signs[i])


def open_sides(arrays, vertices, triangles, normals, facets, signs):
    """(s,) bool: :func:`nothing_in_front` of every side (``facets`` (s,) int64, ``signs``
    (s,) +1 / -1)."""
    facets = np.ascontiguousarray(facets, dtype=np.int64)
    signs = np.ascontiguousarray(signs, dtype=np.float64)
    if facets.shape != signs.shape:
        raise ValueError(f"open_sides: {facets.shape[0]} facets but {signs.shape[0]} signs")
    out = np.zeros(facets.shape[0], dtype=np.bool_)
    if facets.size:
        _open_sides(arrays, vertices, triangles, normals, facets, signs, out)
    return out
