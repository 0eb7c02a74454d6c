"""Contacts of a triangle set: facet pairs that cross each other or coincide.

:func:`find_contacts` returns every facet pair ``(a, b)``, ``a < b``, of one triangle set
(all parts together, so pairs inside one part are found as well) that is

- a *crossing* (:data:`CROSSING`): an edge of one facet passes through the interior of the
  other, both edge ends farther than ``tol`` on opposite sides of the other's plane and the
  crossing point farther than ``tol`` inside each of the other's edges;
- a *coincident pair facing the same way* (:data:`COINCIDENT_SAME`) or *the opposite way*
  (:data:`COINCIDENT_OPPOSITE`): the facets lie in one plane within ``tol`` and overlap
  with a width above ``tol``.

Facets that only touch (a shared edge or vertex, coplanar neighbours of a flat mesh,
parts standing on each other) are within the tolerance and come out as no contact; no
pair is skipped for sharing vertices.

Method
------
Broad phase: the facets are sorted by the Morton code of their box centres (Morton 1966,
"A computer oriented geodetic data base and a new technique in file sequencing", IBM
technical report; the order of the linear BVH of Lauterbach et al. 2009, "Fast BVH
construction on GPUs", Computer Graphics Forum 28(2)), cut into leaves of
:data:`LEAF_SIZE` consecutive facets, and a complete binary tree of boxes is built over
the leaves in heap order (node ``k`` has children ``2k`` and ``2k + 1``; the leaves are
nodes ``P .. 2P - 1``, ``P`` a power of two; empty leaves have the box (+inf, -inf);
common practice). The tree is then traversed against itself, depth first over pairs of
nodes of one depth (Ericson 2005, "Real-Time Collision Detection", section 6.3,
simultaneous traversal of two hierarchies): a node paired with itself gives its two
children each paired with itself and the two children paired with each other; two
different nodes whose boxes overlap give the four pairs of their children; at the leaves
the facets are compared. Every facet pair is met once. Two boxes overlap when
``lo_a <= hi_b + tol`` and ``lo_b <= hi_a + tol`` on every axis (Ericson 2005, section 4.2,
grown by ``tol``); a node's box holds its facets' boxes exactly, so the test never drops
a pair that the facet test would keep. For the threads, the top levels are expanded
breadth first into independent tasks (:func:`_tasks`), which run in parallel.

Narrow phase (on each overlapping pair, facet ``a`` the one with the lower index, normals
``n_a``, ``n_b``; ``dist_b`` the largest distance of ``b``'s vertices from ``a``'s plane,
``dist_a`` the other way round):

- coplanar when ``|n_a . n_b| > 1 - 1e-9`` or (``dist_b <= tol`` and ``dist_a <= tol``);
- a coplanar pair with ``dist_b <= tol`` is coincident when the six in-plane edge normals
  (edges x ``n_a``) all see the two projections overlap by more than ``tol`` (separating
  axis theorem, Ericson 2005, section 5.2.1); same way when ``n_a . n_b > 0``;
- any other pair is a crossing when one of its six edges crosses the other facet as
  described above.

These are the rules of the numpy contact check (kept in ``tests/oracles.py`` as
``contact_pairs_reference``, against which this module is tested), written here per pair
with the same floating-point operations in the same order.

Output is made in two passes: the first counts the contacts of each task, a prefix sum
gives each task its place in the output, the second (run only for tasks with contacts)
fills them in (stream compaction; Blelloch 1990, "Prefix sums and their applications",
Carnegie Mellon report CMU-CS-90-190). Memory is linear in facets plus contacts, and the
result, sorted by (a, b), is the same for any thread count.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numba import njit, prange

from .config import JIT, JIT_PARALLEL
from .scene import _clean_mesh

__all__ = ["Contacts", "find_contacts", "CROSSING", "COINCIDENT_SAME",
           "COINCIDENT_OPPOSITE", "KIND_NAMES", "LEAF_SIZE"]

#: Kind code: an edge of one facet crosses the interior of the other.
CROSSING = 1
#: Kind code: coincident overlapping facets with normals the same way (n_a . n_b > 0).
COINCIDENT_SAME = 2
#: Kind code: coincident overlapping facets with opposite normals (n_a . n_b <= 0).
COINCIDENT_OPPOSITE = 3
#: Name of each kind code.
KIND_NAMES = {CROSSING: "crossing", COINCIDENT_SAME: "coincident-same",
              COINCIDENT_OPPOSITE: "coincident-opposite"}

#: Facets per leaf of the broad-phase tree (consecutive in Morton order).
LEAF_SIZE = 4
#: Most leaves of a subtree paired with itself, and of two subtrees paired, in one
#: parallel task (see :func:`_tasks`): tasks with contacts run twice, so the dense
#: self-pairs are cut finer.
_SELF_LEAVES = 16
_CROSS_LEAVES = 64
#: The top levels are expanded into tasks only while there are at most
#: max(this, leaf slots) node pairs, so that boxes that all overlap (quadratic in number)
#: cannot make the task list more than linear in the facets.
_MIN_TASK_LIMIT = 1 << 16
#: Tasks run one after another by one thread (between stack allocations).
_CHUNK = 32
#: Traversal stack entries: a visit pops one pair and pushes at most four, over at most
#: 62 levels.
_STACK = 256
#: |n_a . n_b| above this makes a pair coplanar (the numpy check's rule).
_PARALLEL_COSINE = 1.0 - 1e-9


class Contacts(NamedTuple):
    """Facet pairs in contact, sorted by (a, b).

    Attributes
    ----------
    a, b : (k,) int64
        Facet indices, ``a < b``.
    kind : (k,) int8
        :data:`CROSSING`, :data:`COINCIDENT_SAME` or :data:`COINCIDENT_OPPOSITE`.
    """

    a: np.ndarray
    b: np.ndarray
    kind: np.ndarray


# --------------------------------------------------------------------------------------
# Broad phase: Morton order and a complete binary tree of boxes
# --------------------------------------------------------------------------------------

@njit(**JIT)
def _spread_bits(x):
    """The 21 low bits of ``x`` spread to every third bit of a uint64 (Morton 1966)."""
    x = x & np.uint64(0x1FFFFF)
    x = (x | (x << np.uint64(32))) & np.uint64(0x1F00000000FFFF)
    x = (x | (x << np.uint64(16))) & np.uint64(0x1F0000FF0000FF)
    x = (x | (x << np.uint64(8))) & np.uint64(0x100F00F00F00F00F)
    x = (x | (x << np.uint64(4))) & np.uint64(0x10C30C30C30C30C3)
    x = (x | (x << np.uint64(2))) & np.uint64(0x1249249249249249)
    return x


@njit(**JIT)
def _morton_codes(vertices, triangles, ids, codes):
    """Morton code (63 bits) of the box centre of each facet ``ids[r]`` into ``codes[r]``."""
    m = ids.shape[0]
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    for r in range(m):
        for j in range(3):
            v = triangles[ids[r], j]
            for d in range(3):
                lo[d] = min(lo[d], vertices[v, d])
                hi[d] = max(hi[d], vertices[v, d])
    top = 2097151.0                                     # 2**21 - 1 cells per axis
    scale = np.empty(3)
    for d in range(3):
        ext = hi[d] - lo[d]
        scale[d] = top / ext if ext > 0.0 else 0.0
    for r in range(m):
        code = np.uint64(0)
        for d in range(3):
            a = vertices[triangles[ids[r], 0], d]
            b = vertices[triangles[ids[r], 1], d]
            c = vertices[triangles[ids[r], 2], d]
            centre = 0.5 * (min(a, min(b, c)) + max(a, max(b, c)))
            q = (centre - lo[d]) * scale[d]
            q = min(max(q, 0.0), top)
            code |= _spread_bits(np.uint64(q)) << np.uint64(d)
        codes[r] = code


@njit(**JIT)
def _gather(vertices, triangles, normals, ids, tri, nrm, box):
    """Vertices (A, B, C), normal and box (lo xyz, hi xyz) of facet ``ids[r]`` into row r."""
    for r in range(ids.shape[0]):
        f = ids[r]
        for j in range(3):
            v = triangles[f, j]
            for d in range(3):
                tri[r, 3 * j + d] = vertices[v, d]
        for d in range(3):
            nrm[r, d] = normals[f, d]
            a = tri[r, d]
            b = tri[r, 3 + d]
            c = tri[r, 6 + d]
            box[r, d] = min(a, min(b, c))
            box[r, 3 + d] = max(a, max(b, c))


@njit(**JIT)
def _build_tree(box, leaf_size, n_slots, node):
    """Boxes of the complete binary tree over leaves of ``leaf_size`` rows of ``box``.

    ``node`` is (2 n_slots, 6): node k has children 2k, 2k+1, leaf i is node n_slots + i.
    """
    m = box.shape[0]
    for i in range(n_slots):
        k = n_slots + i
        for d in range(3):
            node[k, d] = np.inf
            node[k, 3 + d] = -np.inf
        r1 = min((i + 1) * leaf_size, m)
        for r in range(i * leaf_size, r1):
            for d in range(3):
                node[k, d] = min(node[k, d], box[r, d])
                node[k, 3 + d] = max(node[k, 3 + d], box[r, 3 + d])
    for k in range(n_slots - 1, 0, -1):
        for d in range(3):
            node[k, d] = min(node[2 * k, d], node[2 * k + 1, d])
            node[k, 3 + d] = max(node[2 * k, 3 + d], node[2 * k + 1, 3 + d])


# --------------------------------------------------------------------------------------
# Narrow phase (the numpy check's rules, per pair)
# --------------------------------------------------------------------------------------

@njit(**JIT)
def _signed_distance(tri, j, k, i, nx, ny, nz):
    """(V - A_0) . n for vertex k (V) of facet j, A_0 the first vertex of facet i."""
    return ((tri[j, 3 * k] - tri[i, 0]) * nx + (tri[j, 3 * k + 1] - tri[i, 1]) * ny
            + (tri[j, 3 * k + 2] - tri[i, 2]) * nz)


@njit(**JIT)
def _coplanar_overlap(tri, i, j, nx, ny, nz, tol):
    """Whether facets i and j (in the plane of normal n) overlap by more than ``tol``.

    Separating axis theorem (Ericson 2005, section 5.2.1): the axes are the in-plane
    normals ``edge x n`` of the six edges; overlap below ``tol`` on one of them is touching.
    """
    for s in range(2):
        t = i if s == 0 else j
        for k in range(3):
            k1 = (k + 1) % 3
            ex = tri[t, 3 * k1] - tri[t, 3 * k]
            ey = tri[t, 3 * k1 + 1] - tri[t, 3 * k + 1]
            ez = tri[t, 3 * k1 + 2] - tri[t, 3 * k + 2]
            ax = ey * nz - ez * ny                       # axis = edge x n
            ay = ez * nx - ex * nz
            az = ex * ny - ey * nx
            length = max(np.sqrt(ax * ax + ay * ay + az * az), 1e-300)
            ax = ax / length
            ay = ay / length
            az = az / length
            amin = np.inf
            amax = -np.inf
            bmin = np.inf
            bmax = -np.inf
            for v in range(3):
                pa = tri[i, 3 * v] * ax + tri[i, 3 * v + 1] * ay + tri[i, 3 * v + 2] * az
                pb = tri[j, 3 * v] * ax + tri[j, 3 * v + 1] * ay + tri[j, 3 * v + 2] * az
                amin = min(amin, pa)
                amax = max(amax, pa)
                bmin = min(bmin, pb)
                bmax = max(bmax, pb)
            depth = min(amax, bmax) - max(amin, bmin)
            if not depth > tol:
                return False
    return True


@njit(**JIT)
def _straddles(dp, dq, tol):
    """Both ends of an edge farther than ``tol`` on opposite sides of a plane."""
    return (dp > tol and dq < -tol) or (dp < -tol and dq > tol)


@njit(**JIT)
def _crossing_inside(tri, i, k, dp, dq, t, nx, ny, nz, tol):
    """Whether edge k -> k+1 of facet i, with plane distances dp, dq from facet t (unit
    normal n), crosses the plane farther than ``tol`` inside every edge of facet t."""
    k1 = (k + 1) % 3
    px = tri[i, 3 * k]
    py = tri[i, 3 * k + 1]
    pz = tri[i, 3 * k + 2]
    s = dp / (dp - dq)
    xx = px + s * (tri[i, 3 * k1] - px)
    xy = py + s * (tri[i, 3 * k1 + 1] - py)
    xz = pz + s * (tri[i, 3 * k1 + 2] - pz)
    for e in range(3):
        e1 = (e + 1) % 3
        ax = tri[t, 3 * e]
        ay = tri[t, 3 * e + 1]
        az = tri[t, 3 * e + 2]
        ex = tri[t, 3 * e1] - ax
        ey = tri[t, 3 * e1 + 1] - ay
        ez = tri[t, 3 * e1 + 2] - az
        elen = np.sqrt(ex * ex + ey * ey + ez * ez)
        wx = xx - ax
        wy = xy - ay
        wz = xz - az
        cx = ey * wz - ez * wy                           # edge x (X - A_e)
        cy = ez * wx - ex * wz
        cz = ex * wy - ey * wx
        if not (cx * nx + cy * ny + cz * nz) / elen > tol:
            return False
    return True


@njit(**JIT)
def _classify(tri, nrm, i, j, tol):
    """Kind of contact of facets i and j (rows; i has the lower facet index), 0 for none.

    The signed distances of each facet's vertices from the other's plane serve both the
    coplanarity test (their largest magnitude) and the edge crossings (the numpy check
    computes the same products for both).
    """
    nax = nrm[i, 0]
    nay = nrm[i, 1]
    naz = nrm[i, 2]
    nbx = nrm[j, 0]
    nby = nrm[j, 1]
    nbz = nrm[j, 2]
    sb0 = _signed_distance(tri, j, 0, i, nax, nay, naz)     # b's vertices, a's plane
    sb1 = _signed_distance(tri, j, 1, i, nax, nay, naz)
    sb2 = _signed_distance(tri, j, 2, i, nax, nay, naz)
    sa0 = _signed_distance(tri, i, 0, j, nbx, nby, nbz)     # a's vertices, b's plane
    sa1 = _signed_distance(tri, i, 1, j, nbx, nby, nbz)
    sa2 = _signed_distance(tri, i, 2, j, nbx, nby, nbz)
    dist_b = max(abs(sb0), max(abs(sb1), abs(sb2)))
    dist_a = max(abs(sa0), max(abs(sa1), abs(sa2)))
    cosine = nax * nbx + nay * nby + naz * nbz
    if abs(cosine) > _PARALLEL_COSINE or (dist_b <= tol and dist_a <= tol):
        if dist_b <= tol and _coplanar_overlap(tri, i, j, nax, nay, naz, tol):
            return COINCIDENT_SAME if cosine > 0.0 else COINCIDENT_OPPOSITE
        return 0
    for e in range(6):                          # edges of a across b, then of b across a
        k = e % 3
        if e == 0:
            dp, dq = sa0, sa1
        elif e == 1:
            dp, dq = sa1, sa2
        elif e == 2:
            dp, dq = sa2, sa0
        elif e == 3:
            dp, dq = sb0, sb1
        elif e == 4:
            dp, dq = sb1, sb2
        else:
            dp, dq = sb2, sb0
        if not _straddles(dp, dq, tol):
            continue
        if e < 3:
            src, dst, nx, ny, nz = i, j, nbx, nby, nbz
        else:
            src, dst, nx, ny, nz = j, i, nax, nay, naz
        if _crossing_inside(tri, src, k, dp, dq, dst, nx, ny, nz, tol):
            return CROSSING
    return 0


# --------------------------------------------------------------------------------------
# Traversal: the tree against itself, split into tasks; count pass and fill pass
# --------------------------------------------------------------------------------------

@njit(**JIT)
def _overlap(lo_hi, p, q, tol):
    """Boxes p and q of ``lo_hi`` (rows lo xyz, hi xyz) overlap, grown by ``tol``.

    All six comparisons are made (``&``, no short circuit): cheaper than the branches.
    """
    return ((lo_hi[p, 0] <= lo_hi[q, 3] + tol) & (lo_hi[q, 0] <= lo_hi[p, 3] + tol)
            & (lo_hi[p, 1] <= lo_hi[q, 4] + tol) & (lo_hi[q, 1] <= lo_hi[p, 4] + tol)
            & (lo_hi[p, 2] <= lo_hi[q, 5] + tol) & (lo_hi[q, 2] <= lo_hi[p, 5] + tol))


@njit(**JIT)
def _overlap2(box, p, node, k, tol):
    """Box p of ``box`` and box k of ``node`` overlap, grown by ``tol`` (as :func:`_overlap`)."""
    return ((box[p, 0] <= node[k, 3] + tol) & (node[k, 0] <= box[p, 3] + tol)
            & (box[p, 1] <= node[k, 4] + tol) & (node[k, 1] <= box[p, 4] + tol)
            & (box[p, 2] <= node[k, 5] + tol) & (node[k, 2] <= box[p, 5] + tol))


@njit(**JIT)
def _leaf_pairs(x, y, tri, nrm, box, ids, node, n_slots, leaf_size, tol, write, start,
                out_a, out_b, out_kind):
    """Contacts between the rows of leaf nodes x and y (x == y: pairs within one leaf);
    written from ``start`` when ``write``. Returns their number."""
    m = box.shape[0]
    p0 = (x - n_slots) * leaf_size
    p1 = min(p0 + leaf_size, m)
    q0 = (y - n_slots) * leaf_size
    q1 = min(q0 + leaf_size, m)
    found = 0
    for p in range(p0, p1):
        if x != y and not _overlap2(box, p, node, y, tol):    # p against all of leaf y
            continue
        for q in range(q0 if x != y else p + 1, q1):
            if not _overlap(box, p, q, tol):
                continue
            i, j = (p, q) if ids[p] < ids[q] else (q, p)    # facet a: the lower index
            kind = _classify(tri, nrm, i, j, tol)
            if kind == 0:
                continue
            if write:
                out_a[start + found] = ids[i]
                out_b[start + found] = ids[j]
                out_kind[start + found] = kind
            found += 1
    return found


@njit(**JIT)
def _run_task(x, y, tri, nrm, box, ids, node, n_slots, leaf_size, tol, stack_x, stack_y,
              write, start, out_a, out_b, out_kind):
    """Contacts within subtree x (x == y) or between subtrees x and y (same depth).

    Depth-first over node pairs: a pair (x, x) gives the pairs of its two children and the
    pair of the children with each other; a pair (x, y) of overlapping boxes gives the
    four pairs of their children; at the leaves the facets are compared. Every facet pair
    is met once. Returns the number of contacts (written from ``start`` when ``write``).
    """
    found = 0
    stack_x[0] = x
    stack_y[0] = y
    sp = 1
    while sp > 0:
        sp -= 1
        x = stack_x[sp]
        y = stack_y[sp]
        if x == y:
            if not node[x, 0] <= node[x, 3]:            # empty subtree (padding)
                continue
            if x < n_slots:
                stack_x[sp] = 2 * x + 1
                stack_y[sp] = 2 * x + 1
                stack_x[sp + 1] = 2 * x
                stack_y[sp + 1] = 2 * x + 1
                stack_x[sp + 2] = 2 * x
                stack_y[sp + 2] = 2 * x
                sp += 3
                continue
        else:
            if not _overlap(node, x, y, tol):
                continue
            if x < n_slots:
                stack_x[sp] = 2 * x + 1
                stack_y[sp] = 2 * y + 1
                stack_x[sp + 1] = 2 * x + 1
                stack_y[sp + 1] = 2 * y
                stack_x[sp + 2] = 2 * x
                stack_y[sp + 2] = 2 * y + 1
                stack_x[sp + 3] = 2 * x
                stack_y[sp + 3] = 2 * y
                sp += 4
                continue
        found += _leaf_pairs(x, y, tri, nrm, box, ids, node, n_slots, leaf_size, tol,
                             write, start + found, out_a, out_b, out_kind)
    return found


@njit(**JIT_PARALLEL)
def _contact_pass(task_x, task_y, order, tri, nrm, box, ids, node, n_slots, leaf_size, tol,
                  write, counts, offsets, out_a, out_b, out_kind):
    """Run tasks ``order[t]``: count into ``counts`` or (``write``) fill the outputs from
    ``offsets``; both indexed by task."""
    n = order.shape[0]
    for chunk in prange(-(-n // _CHUNK)):
        stack_x = np.empty(_STACK, np.int64)
        stack_y = np.empty(_STACK, np.int64)
        for t in range(chunk * _CHUNK, min(chunk * _CHUNK + _CHUNK, n)):
            j = order[t]
            start = offsets[j] if write else 0
            c = _run_task(task_x[j], task_y[j], tri, nrm, box, ids, node, n_slots,
                          leaf_size, tol, stack_x, stack_y, write, start, out_a, out_b,
                          out_kind)
            if not write:
                counts[j] = c


def _node_overlap(node, x, y, tol):
    """The box test of :func:`_overlap` on arrays of node pairs (numpy)."""
    a, b = node[x], node[y]
    ok = np.ones(len(x), bool)
    for d in range(3):
        ok &= (a[:, d] <= b[:, 3 + d] + tol) & (b[:, d] <= a[:, 3 + d] + tol)
    return ok


def _tasks(node, n_slots, tol):
    """Node pairs (x, y) for the parallel tasks: subtrees of at most :data:`_SELF_LEAVES`
    leaves against themselves, pairs of subtrees of at most :data:`_CROSS_LEAVES` leaves
    (larger ones when a level would give more than :data:`_MIN_TASK_LIMIT` or the number of
    leaf slots, whichever is more).

    The expansion of :func:`_run_task` done breadth-first over the top levels (pairs of
    empty or disjoint boxes dropped); running every task gives every contact once. The
    tasks come in a fixed order; the pass runs them in a fixed shuffled order so that
    each thread's share holds heavy and light tasks alike (results do not depend on it).
    """
    x = np.ones(1, np.int64)
    y = np.ones(1, np.int64)
    done_x, done_y = [], []
    width = n_slots
    limit = max(_MIN_TASK_LIMIT, n_slots)
    while width > _SELF_LEAVES and len(x) <= limit:     # limit: memory stays linear
        same = x == y
        if width <= _CROSS_LEAVES:                      # pairs of this size are tasks
            done_x.append(x[~same])
            done_y.append(y[~same])
            x, y = x[same], y[same]
            same = np.ones(len(x), bool)
        xs = x[same]
        xs = xs[node[xs, 0] <= node[xs, 3]]             # non-empty subtrees
        cx = 2 * xs
        cross = _node_overlap(node, cx, cx + 1, tol)
        xo, yo = x[~same], y[~same]
        keep = _node_overlap(node, xo, yo, tol)
        xo, yo = xo[keep], yo[keep]
        x = np.concatenate([cx, cx + 1, cx[cross], 2 * xo, 2 * xo, 2 * xo + 1, 2 * xo + 1])
        y = np.concatenate([cx, cx + 1, cx[cross] + 1, 2 * yo, 2 * yo + 1, 2 * yo,
                            2 * yo + 1])
        width //= 2
    x = np.concatenate(done_x + [x])
    y = np.concatenate(done_y + [y])
    order = np.random.default_rng(20261203).permutation(len(x)).astype(np.int64)
    return np.ascontiguousarray(x), np.ascontiguousarray(y), order


# --------------------------------------------------------------------------------------
# Wrapper
# --------------------------------------------------------------------------------------

def find_contacts(vertices, triangles, normals, usable, tol) -> Contacts:
    """All facet pairs of a triangle set that cross each other or coincide.

    Parameters
    ----------
    vertices : (v, 3) float [m], finite
    triangles : (f, 3) int, vertex indices
    normals : (f, 3) float [1]
        Unit normal of each facet (front side); only usable facets are read and must be
        finite.
    usable : (f,) bool
        Facets to include (degenerate facets excluded by the caller).
    tol : float [m], finite, >= 0
        Geometric tolerance: closer than this is touching.

    Returns
    -------
    Contacts
        Pairs ``a < b`` sorted by (a, b), with their kind codes.

    Raises
    ------
    vfactor.errors.GeometryError
        Wrong shapes of vertices or triangles, non-finite vertices, vertex indices out of
        range.
    ValueError
        Wrong shape or dtype of normals or usable, non-finite normals of usable facets,
        ``tol`` not finite or negative.

    Notes
    -----
    Method, rules and references in the module docstring.
    """
    vertices, triangles = _clean_mesh(vertices, triangles, "find_contacts")
    f = triangles.shape[0]
    normals = np.asarray(normals)
    if normals.shape != (f, 3):
        raise ValueError(f"find_contacts: normals must have shape ({f}, 3), got "
                         f"{normals.shape}")
    if normals.dtype.kind not in "fiu":
        raise ValueError(f"find_contacts: normals must be float, got dtype {normals.dtype}")
    normals = np.ascontiguousarray(normals, dtype=np.float64)
    usable = np.asarray(usable)
    if usable.shape != (f,) or usable.dtype != np.bool_:
        raise ValueError(f"find_contacts: usable must be ({f},) bool, got shape "
                         f"{usable.shape} dtype {usable.dtype}")
    tol_value = float(tol)
    if not (np.isfinite(tol_value) and tol_value >= 0.0):
        raise ValueError(f"find_contacts: tol must be finite and >= 0, got {tol!r}")
    ids = np.flatnonzero(usable).astype(np.int64)
    bad = ~np.isfinite(normals[ids]).all(axis=1)
    if bad.any():
        i = int(ids[np.flatnonzero(bad)[0]])
        raise ValueError(f"find_contacts: normal of usable facet {i} is not finite: "
                         f"{normals[i].tolist()}")
    empty = Contacts(np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.int8))
    m = ids.shape[0]
    if m < 2:
        return empty

    codes = np.empty(m, dtype=np.uint64)
    _morton_codes(vertices, triangles, ids, codes)
    ids = np.ascontiguousarray(ids[np.argsort(codes, kind="stable")])
    del codes
    tri = np.empty((m, 9))
    nrm = np.empty((m, 3))
    box = np.empty((m, 6))
    _gather(vertices, triangles, normals, ids, tri, nrm, box)
    n_leaves = -(-m // LEAF_SIZE)
    n_slots = 1 << max(0, int(n_leaves - 1).bit_length())
    node = np.empty((2 * n_slots, 6))
    _build_tree(box, LEAF_SIZE, n_slots, node)

    task_x, task_y, order = _tasks(node, n_slots, tol_value)
    n_tasks = task_x.shape[0]
    counts = np.zeros(n_tasks, dtype=np.int64)
    no_i = np.zeros(0, np.int64)
    no_k = np.zeros(0, np.int8)
    _contact_pass(task_x, task_y, order, tri, nrm, box, ids, node, n_slots, LEAF_SIZE,
                  tol_value, False, counts, counts, no_i, no_i, no_k)
    total = int(counts.sum())
    if total == 0:
        return empty
    offsets = np.zeros(n_tasks, dtype=np.int64)
    np.cumsum(counts[:-1], out=offsets[1:])
    busy = order[counts[order] > 0]                     # only tasks with contacts again
    out_a = np.empty(total, dtype=np.int64)
    out_b = np.empty(total, dtype=np.int64)
    out_kind = np.empty(total, dtype=np.int8)
    _contact_pass(task_x, task_y, busy, tri, nrm, box, ids, node, n_slots, LEAF_SIZE,
                  tol_value, True, counts, offsets, out_a, out_b, out_kind)
    order = np.lexsort((out_b, out_a))
    return Contacts(out_a[order], out_b[order], out_kind[order])
