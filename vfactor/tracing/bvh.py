"""Bounding volume hierarchy (BVH): binned SAH build and refit, as flat arrays.

Layout (what :mod:`vfactor.tracing.traverse` reads)
----------------------------------------------------
A 4-wide tree: each 128-byte node (two cache lines) holds the boxes of its up to 4
children in "structure of arrays" order, so one node visit tests 4 boxes with 4-lane
vector instructions:

``nodes`` : (n, 32) float32, 64-byte aligned
    ``[0:4]`` minimum x of children 0..3, ``[4:8]`` minimum y, ``[8:12]`` minimum z,
    ``[12:16]`` maximum x, ``[16:20]`` maximum y, ``[20:24]`` maximum z [m]. Boxes are
    rounded OUTWARD to float32 (minimum rounded down, maximum up), so a box never shrinks
    by the rounding and no ray is missed. An empty child has the box (+inf, -inf).
``nodes_i`` : (n, 32) int32, the same memory viewed as int32
    ``[24:28]``: child references. ``ref >= 0`` is an inner node (row of ``nodes``);
    ``ref < 0`` is a leaf, ``-1 - ref = (first << 4) | count``: ``count`` triangles
    (1..15) in the leaf blocks ``first .. first + ceil(count / TRI_LANES) - 1`` of
    ``leaf_tri`` (-1 is an empty child).
``leaf_tri`` : (b, BLOCK_WIDTH = 40) float64, 64-byte aligned (320 bytes, 5 cache lines)
    Leaf blocks of TRI_LANES = 4 triangles in "structure of arrays" order, so one leaf
    test runs the float64 watertight test on 4 triangles with 4-lane vector instructions:
    ``[4 q : 4 q + 4]`` for ``q = 0..8`` is coordinate ``q`` (A x, A y, A z, B x, ..., C z)
    [m] of lanes 0..3; ``[36:40]`` (viewed as int64, ``leaf_tri_i``) the original facet
    index of each lane. A leaf's triangles fill its blocks from lane 0 in leaf order;
    unused lanes of its last block hold the point (0, 0, 0) (zero determinant: never hit)
    and the facet index ``PAD_ID = -2``. Blocks are in the order of their leaves, which is
    the depth-first order of the tree, so the triangles of a leaf are contiguous and a
    subtree's leaves lie together.
``slot`` : (m,) int64 (not read by the traversal)
    ``block * TRI_LANES + lane`` of each triangle in leaf order (``tri``, ``tri_ids`` and
    :func:`refit` go through it).

Row 0 is the root. Nodes are numbered depth-first (a child after its parent), which keeps
a traversal path close in memory and lets :func:`refit` work in one backward sweep.
Degenerate triangles (zero area to rounding) are left out of the tree at build time:
they can never be hit.

Sizes at 1e6 triangles (scripts/bench_raytrace.py, open scene): before leaf blocks, 258 k
nodes of leaves of at most 4 (33 MB) and 72 MB of float64 triangles + 8 MB of facet
indices (113 MB); with the defaults ``max_leaf=12, traversal_cost=8`` (leaves of about 8
triangles), 52 k nodes (6.7 MB) and 89 MB of blocks, padding included (95 MB in all).
Quantised child boxes (8-bit, 64-byte nodes) were measured too and left out: they halve
the node bytes but cost more in dequantising than they save on this machine (-10 to -20 %
at 1e5 and 1e6 triangles).

Build
-----
Top-down binned surface-area heuristic (SAH): at each node the triangle centroids are
put into ``n_bins`` bins along each axis, and the split plane between bins that minimises
``C_trav + (A_L N_L + A_R N_R) / A`` (in units of one triangle test) is taken, or a leaf is
made when ``N`` is at most ``max_leaf`` and cheaper (Wald 2007, "On fast construction of
SAH-based bounding volume hierarchies", IEEE Symp. Interactive Ray Tracing, sections 3-4;
MacDonald & Booth 1990, "Heuristics for ray tracing using space subdivision", The Visual
Computer 6(3), for the cost model). Below depth 48, or when all centroids fall in one bin,
the split is at the median centroid of the widest axis, which bounds the depth (<= 48 +
log2 m) and so the traversal stack. The binary tree is then collapsed into the 4-wide
layout (see ``_collapse_kernel``) and the leaves are packed into blocks
(``_pack_leaves``). The default ``traversal_cost = 8`` (a node visit costs about 8 scalar
triangle tests, 2 block tests) with ``max_leaf = 12`` gives leaves of about 8 triangles:
measured against ``max_leaf = 4, traversal_cost = 1`` (leaves of 2) it is +10-40 % at
1e6 triangles and no slower at 1e4.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .bvh_build import LANES, _build_kernel, _collapse_kernel
from .config import JIT

__all__ = ["BVH", "build", "refit", "MAX_LEAF_LIMIT", "STACK_SIZE", "NODE_WIDTH", "TRI_LANES",
           "BLOCK_WIDTH", "PAD_ID"]

#: Largest leaf size the reference encoding allows.
MAX_LEAF_LIMIT = 15
#: Floats (4 bytes) per node: 6 LANES bounds, LANES references, padding to 8 LANES.
NODE_WIDTH = 8 * LANES
#: Triangles per leaf block (the vector width of the triangle test).
TRI_LANES = 4
#: float64 words per leaf block: 9 coordinate rows and 1 facet-index row of TRI_LANES each.
BLOCK_WIDTH = 10 * TRI_LANES
#: Facet index of an unused lane of a leaf block (its triangle is a point: never hit).
PAD_ID = -2
#: Traversal stack entries enough for any tree this module builds: a visit pushes at most
#: LANES - 1 entries more than it pops, over at most 48 + 27 levels.
STACK_SIZE = 80 * (LANES - 1) + 16


@njit(**JIT)
def _triangle_data(vertices, triangles, ids, tri, tri_min, tri_max, cent):
    """Gather vertices of facets ``ids`` into ``tri`` rows, with boxes and centroids."""
    for r in range(ids.shape[0]):
        f = ids[r]
        for j in range(3):
            v = triangles[f, j]
            for a in range(3):
                tri[r, 3 * j + a] = vertices[v, a]
        for a in range(3):
            x0 = tri[r, a]
            x1 = tri[r, 3 + a]
            x2 = tri[r, 6 + a]
            lo = min(x0, min(x1, x2))
            hi = max(x0, max(x1, x2))
            tri_min[r, a] = lo
            tri_max[r, a] = hi
            cent[r, a] = 0.5 * (lo + hi)


@njit(**JIT)
def degenerate_mask(vertices, triangles):
    """True for triangles of zero area to rounding.

    A triangle is degenerate when ``|(B - A) x (C - A)| <= 64 eps L^2`` with ``L`` its
    longest edge and ``eps = 2**-52`` (our choice: a few ulps of the area scale).

    Parameters
    ----------
    vertices : (v, 3) float64 [m]
    triangles : (f, 3) int64

    Returns
    -------
    (f,) bool
    """
    f = triangles.shape[0]
    out = np.zeros(f, dtype=np.bool_)
    eps = 2.0 ** -52
    for i in range(f):
        a = triangles[i, 0]
        b = triangles[i, 1]
        c = triangles[i, 2]
        e1x = vertices[b, 0] - vertices[a, 0]
        e1y = vertices[b, 1] - vertices[a, 1]
        e1z = vertices[b, 2] - vertices[a, 2]
        e2x = vertices[c, 0] - vertices[a, 0]
        e2y = vertices[c, 1] - vertices[a, 1]
        e2z = vertices[c, 2] - vertices[a, 2]
        e3x = e2x - e1x
        e3y = e2y - e1y
        e3z = e2z - e1z
        nx = e1y * e2z - e1z * e2y
        ny = e1z * e2x - e1x * e2z
        nz = e1x * e2y - e1y * e2x
        n2 = nx * nx + ny * ny + nz * nz
        l2 = max(e1x * e1x + e1y * e1y + e1z * e1z,
                 max(e2x * e2x + e2y * e2y + e2z * e2z, e3x * e3x + e3y * e3y + e3z * e3z))
        lim = 64.0 * eps * l2
        out[i] = not (n2 > lim * lim)
    return out


@njit(**JIT)
def _refit_kernel(blocks, boxes, refs, n_nodes):
    """Recompute node boxes bottom-up (children have larger rows than parents)."""
    for n in range(n_nodes - 1, -1, -1):
        for c in range(LANES):
            ref = refs[n, c]
            lo0 = np.inf
            lo1 = np.inf
            lo2 = np.inf
            hi0 = -np.inf
            hi1 = -np.inf
            hi2 = -np.inf
            if ref >= 0:
                for cc in range(LANES):
                    lo0 = min(lo0, boxes[ref, 0 * LANES + cc])
                    lo1 = min(lo1, boxes[ref, 1 * LANES + cc])
                    lo2 = min(lo2, boxes[ref, 2 * LANES + cc])
                    hi0 = max(hi0, boxes[ref, 3 * LANES + cc])
                    hi1 = max(hi1, boxes[ref, 4 * LANES + cc])
                    hi2 = max(hi2, boxes[ref, 5 * LANES + cc])
            else:
                code = -1 - ref
                first = code >> 4
                count = code & 15
                for i in range(count):
                    b = first + i // TRI_LANES
                    ln = i % TRI_LANES
                    for j in range(3):
                        x = blocks[b, (3 * j + 0) * TRI_LANES + ln]
                        y = blocks[b, (3 * j + 1) * TRI_LANES + ln]
                        z = blocks[b, (3 * j + 2) * TRI_LANES + ln]
                        lo0 = min(lo0, x)
                        lo1 = min(lo1, y)
                        lo2 = min(lo2, z)
                        hi0 = max(hi0, x)
                        hi1 = max(hi1, y)
                        hi2 = max(hi2, z)
            boxes[n, 0 * LANES + c] = lo0
            boxes[n, 1 * LANES + c] = lo1
            boxes[n, 2 * LANES + c] = lo2
            boxes[n, 3 * LANES + c] = hi0
            boxes[n, 4 * LANES + c] = hi1
            boxes[n, 5 * LANES + c] = hi2


def _to_float32_outward(boxes):
    """float64 lane boxes (n, 6 LANES) -> float32 rounded outward (min down, max up)."""
    f = boxes.astype(np.float32)
    back = f.astype(np.float64)
    lo = np.zeros(boxes.shape[1], dtype=bool)
    lo[:3 * LANES] = True
    lo_cols = np.broadcast_to(lo, boxes.shape)
    down = lo_cols & (back > boxes)
    up = ~lo_cols & (back < boxes)
    f[down] = np.nextafter(f[down], np.float32(-np.inf))
    f[up] = np.nextafter(f[up], np.float32(np.inf))
    return f


def _aligned(n, width, dtype):
    """Zeroed (n, width) array of ``dtype`` whose start is 64-byte aligned."""
    size = np.dtype(dtype).itemsize
    raw = np.zeros(n * width + 64 // size, dtype=dtype)
    off = (-raw.ctypes.data % 64) // size
    return raw[off:off + n * width].reshape(n, width)


def _aligned_nodes(n):
    """Zeroed (n, NODE_WIDTH) float32 array whose start is 64-byte aligned."""
    return _aligned(n, NODE_WIDTH, np.float32)


def _pack_leaves(refs):
    """Give each leaf whole blocks: re-encode ``refs`` in place, return (slot, blocks).

    Leaves come in with ``(first, count)`` over the triangles in leaf order and leave with
    ``(first block, count)``; blocks follow the leaves' order in memory.
    """
    leaf = (refs < 0) & (refs != -1)
    code = -1 - refs[leaf]
    first = code >> 4
    count = code & 15
    by_first = np.argsort(first, kind="stable")
    n_blk = (count[by_first] + TRI_LANES - 1) // TRI_LANES
    b_first = np.empty_like(n_blk)
    b_first[:] = np.cumsum(n_blk) - n_blk
    new_first = np.empty_like(first)
    new_first[by_first] = b_first
    refs[leaf] = -1 - ((new_first << 4) | count)
    m = int(count.sum())
    c_sorted = count[by_first]
    start = np.repeat(first[by_first], c_sorted)
    blk0 = np.repeat(b_first, c_sorted)
    p = np.arange(m, dtype=np.int64)
    slot = blk0 * TRI_LANES + (p - start)
    return slot.astype(np.int64), int(n_blk.sum())


def _write_blocks(leaf_tri, slot, tri):
    """Scatter the (m, 9) vertex rows ``tri`` (leaf order) into the leaf blocks."""
    blk = leaf_tri.reshape(-1, 10, TRI_LANES)
    blk[slot // TRI_LANES, :9, slot % TRI_LANES] = tri


@njit(**JIT)
def _collapse_degenerate(tri, bad):
    """Make triangles flagged ``bad`` a single point: such a triangle is never hit."""
    for r in range(tri.shape[0]):
        if bad[r]:
            for j in range(1, 3):
                for a in range(3):
                    tri[r, 3 * j + a] = tri[r, a]


class BVH:
    """Flat 4-wide BVH arrays (see the module notes for the layout).

    Attributes
    ----------
    nodes : (n, 32) float32
    nodes_i : (n, 32) int32 (same memory as ``nodes``)
    leaf_tri : (b, BLOCK_WIDTH) float64, 64-byte aligned
        Leaf blocks of TRI_LANES triangles (structure of arrays, see the module notes).
    leaf_tri_i : (b, BLOCK_WIDTH) int64 (same memory as ``leaf_tri``)
    slot : (m,) int64
        Flat lane (``block * TRI_LANES + lane``) of each triangle, in leaf order.
    n_facets : int
        Number of rows of the ``triangles`` array the tree was built from.
    """

    def __init__(self, nodes, leaf_tri, slot, n_facets):
        self.nodes = nodes
        self.nodes_i = nodes.view(np.int32)
        self.leaf_tri = leaf_tri
        self.leaf_tri_i = leaf_tri.view(np.int64)
        self.slot = slot
        self.n_facets = n_facets

    @property
    def tri(self):
        """(m, 9) float64 [m]: vertices A, B, C of each triangle in leaf order (a copy)."""
        blk = self.leaf_tri.reshape(-1, 10, TRI_LANES)
        return blk[self.slot // TRI_LANES, :9, self.slot % TRI_LANES]

    @property
    def tri_ids(self):
        """(m,) int64: facet index of each triangle in leaf order (a copy)."""
        blk = self.leaf_tri_i.reshape(-1, 10, TRI_LANES)
        return blk[self.slot // TRI_LANES, 9, self.slot % TRI_LANES]

    def leaf(self, ref):
        """Facet indices ``(count,)`` and vertices ``(count, 9)`` of leaf reference ``ref``."""
        code = -1 - int(ref)
        first, count = code >> 4, code & 15
        i = np.arange(count)
        b, ln = first + i // TRI_LANES, i % TRI_LANES
        blk = self.leaf_tri.reshape(-1, 10, TRI_LANES)
        return self.leaf_tri_i.reshape(-1, 10, TRI_LANES)[b, 9, ln], blk[b, :9, ln]

    @property
    def nbytes(self):
        """Bytes of the arrays the traversal reads (nodes and leaf blocks)."""
        return self.nodes.nbytes + self.leaf_tri.nbytes

    @property
    def n_nodes(self):
        return self.nodes.shape[0]

    @property
    def refs(self):
        """(n, LANES) int32 child references (a view)."""
        return self.nodes_i[:, 6 * LANES:7 * LANES]

    def depth(self):
        """Largest number of nodes on a root-to-leaf path."""
        best = 0
        stack = [(0, 1)]
        refs = self.refs
        while stack:
            n, d = stack.pop()
            best = max(best, d)
            for c in range(LANES):
                ref = int(refs[n, c])
                if ref >= 0:
                    stack.append((ref, d + 1))
        return best


def build(vertices, triangles, max_leaf=12, n_bins=16, traversal_cost=8.0):
    """Build a BVH over the non-degenerate triangles of a mesh.

    Parameters
    ----------
    vertices : (v, 3) float64 [m], finite
    triangles : (f, 3) int64, indices into ``vertices``
    max_leaf : int
        Most triangles in a leaf (1 .. 15).
    n_bins : int
        SAH bins per axis (Wald 2007 uses 16-32).
    traversal_cost : float
        Cost of one node visit in units of one triangle test (SAH constant).

    Returns
    -------
    BVH
    """
    if not 1 <= int(max_leaf) <= MAX_LEAF_LIMIT:
        raise ValueError(f"bvh.build: max_leaf must be in 1..{MAX_LEAF_LIMIT}, got {max_leaf}")
    if not 2 <= int(n_bins) <= 256:
        raise ValueError(f"bvh.build: n_bins must be in 2..256, got {n_bins}")
    vertices = np.ascontiguousarray(vertices, dtype=np.float64)
    triangles = np.ascontiguousarray(triangles, dtype=np.int64)
    bad = degenerate_mask(vertices, triangles)
    ids = np.flatnonzero(~bad).astype(np.int64)
    m = ids.shape[0]
    if m >= 1 << 27:
        raise ValueError(f"bvh.build: at most 2**27 triangles, got {m}")
    tri = np.empty((m, 9))
    tri_min = np.empty((m, 3))
    tri_max = np.empty((m, 3))
    cent = np.empty((m, 3))
    _triangle_data(vertices, triangles, ids, tri, tri_min, tri_max, cent)
    cap = max(m, 1)
    boxes = np.empty((cap, 12))
    refs = np.empty((cap, 2), dtype=np.int32)
    order = np.empty(m, dtype=np.int64)
    n2 = _build_kernel(tri_min, tri_max, cent, int(max_leaf), int(n_bins),
                       float(traversal_cost), order, boxes, refs)
    boxes4 = np.empty((n2, 6 * LANES))
    refs4 = np.empty((n2, LANES), dtype=np.int64)
    n4 = _collapse_kernel(boxes, refs, boxes4, refs4)
    nodes = _aligned_nodes(n4)
    nodes[:, :6 * LANES] = _to_float32_outward(boxes4[:n4])
    refs4 = refs4[:n4]
    slot, n_blocks = _pack_leaves(refs4)
    nodes.view(np.int32)[:, 6 * LANES:7 * LANES] = refs4
    leaf_tri = _aligned(n_blocks, BLOCK_WIDTH, np.float64)
    leaf_tri.view(np.int64).reshape(-1, 10, TRI_LANES)[:, 9, :] = PAD_ID
    _write_blocks(leaf_tri, slot, tri[order])
    leaf_tri.view(np.int64).reshape(-1, 10, TRI_LANES)[slot // TRI_LANES, 9,
                                                       slot % TRI_LANES] = ids[order]
    return BVH(nodes, leaf_tri, slot, triangles.shape[0])


def refit(bvh, vertices, triangles):
    """Move the triangles of ``bvh`` to new vertex positions and recompute the boxes.

    The tree topology (which triangle is in which leaf) is kept; the arrays are updated in
    place, so tuples of them held elsewhere stay valid. Triangles that were degenerate at
    build time stay out of the tree; triangles that became degenerate are collapsed to a
    point and can no longer be hit.

    Parameters
    ----------
    bvh : BVH
    vertices : (v, 3) float64 [m], finite
    triangles : (f, 3) int64, the array the tree was built from
    """
    m = bvh.slot.shape[0]
    tri = np.empty((m, 9))
    tri_min = np.empty((m, 3))
    tri_max = np.empty((m, 3))
    cent = np.empty((m, 3))
    ids = bvh.tri_ids
    _triangle_data(vertices, triangles, ids, tri, tri_min, tri_max, cent)
    bad = degenerate_mask(vertices, triangles)[ids]
    _collapse_degenerate(tri, bad)
    _write_blocks(bvh.leaf_tri, bvh.slot, tri)
    n = bvh.n_nodes
    boxes = np.empty((n, 6 * LANES))
    _refit_kernel(bvh.leaf_tri, boxes, np.ascontiguousarray(bvh.refs), n)
    bvh.nodes[:, :6 * LANES] = _to_float32_outward(boxes)
