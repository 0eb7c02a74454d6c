"""Numba kernels of the BVH build (:mod:`vfactor.tracing.bvh`): binned SAH splits into a
binary tree, then its collapse into the 4-wide tree that traversal reads.

The layout of the result (nodes, leaf references, leaf blocks) and the build parameters
are described in :mod:`vfactor.tracing.bvh`, whose :func:`vfactor.tracing.bvh.build`
validates the input and calls these kernels.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .config import JIT

#: Depth below which SAH splits give way to median splits.
_SAH_MAX_DEPTH = 48
#: Children per node (the vector width of the box test).
LANES = 4


@njit(**JIT)
def _area(lo0, lo1, lo2, hi0, hi1, hi2):
    dx = hi0 - lo0
    dy = hi1 - lo1
    dz = hi2 - lo2
    return dx * dy + dy * dz + dz * dx


@njit(**JIT)
def _range_bounds(order, start, end, tri_min, tri_max, cent, box, cbox):
    for a in range(3):
        box[a] = np.inf
        box[3 + a] = -np.inf
        cbox[a] = np.inf
        cbox[3 + a] = -np.inf
    for i in range(start, end):
        r = order[i]
        for a in range(3):
            box[a] = min(box[a], tri_min[r, a])
            box[3 + a] = max(box[3 + a], tri_max[r, a])
            cbox[a] = min(cbox[a], cent[r, a])
            cbox[3 + a] = max(cbox[3 + a], cent[r, a])


@njit(**JIT)
def _encode_leaf(first, count):
    return np.int32(-1 - ((first << 4) | count))


@njit(**JIT)
def _build_kernel(tri_min, tri_max, cent, max_leaf, n_bins, trav_cost,
                  order, boxes, refs):
    """Top-down binned SAH build; fills ``boxes (cap, 12)``, ``refs (cap, 2)``, ``order``.

    Returns the number of nodes.
    """
    m = order.shape[0]
    for i in range(m):
        order[i] = i
    # Empty boxes everywhere to start with.
    for n in range(boxes.shape[0]):
        for c in range(2):
            for a in range(3):
                boxes[n, 6 * c + a] = np.inf
                boxes[n, 6 * c + 3 + a] = -np.inf
            refs[n, c] = -1
    n_nodes = 1
    if m == 0:
        return n_nodes
    # Stack of pending ranges: parent node, child slot, start, end, depth.
    st_parent = np.empty(128, np.int64)
    st_slot = np.empty(128, np.int64)
    st_start = np.empty(128, np.int64)
    st_end = np.empty(128, np.int64)
    st_depth = np.empty(128, np.int64)
    box = np.empty(6)
    cbox = np.empty(6)
    bin_n = np.zeros((3, n_bins), np.int64)
    bin_b = np.empty((3, n_bins, 6))
    right_a = np.empty(n_bins)
    right_n = np.empty(n_bins, np.int64)
    keys = np.empty(m)

    # The root range goes into node 0; if it becomes a leaf it sits in slot 0.
    sp = 0
    st_parent[0] = -1
    st_slot[0] = 0
    st_start[0] = 0
    st_end[0] = m
    st_depth[0] = 0
    sp = 1
    while sp > 0:
        sp -= 1
        parent = st_parent[sp]
        slot = st_slot[sp]
        start = st_start[sp]
        end = st_end[sp]
        depth = st_depth[sp]
        count = end - start
        _range_bounds(order, start, end, tri_min, tri_max, cent, box, cbox)
        area = _area(box[0], box[1], box[2], box[3], box[4], box[5])

        split_axis = -1
        split_bin = -1
        best_cost = np.inf
        if depth < _SAH_MAX_DEPTH and count > 1:
            for a in range(3):
                ext = cbox[3 + a] - cbox[a]
                if not ext > 0.0:
                    continue
                scale = n_bins / ext
                for b in range(n_bins):
                    bin_n[a, b] = 0
                    for q in range(3):
                        bin_b[a, b, q] = np.inf
                        bin_b[a, b, 3 + q] = -np.inf
                for i in range(start, end):
                    r = order[i]
                    b = int((cent[r, a] - cbox[a]) * scale)
                    if b >= n_bins:
                        b = n_bins - 1
                    if b < 0:
                        b = 0
                    bin_n[a, b] += 1
                    for q in range(3):
                        bin_b[a, b, q] = min(bin_b[a, b, q], tri_min[r, q])
                        bin_b[a, b, 3 + q] = max(bin_b[a, b, 3 + q], tri_max[r, q])
                # Sweep from the right: area and count of bins b .. n_bins-1.
                lo0 = np.inf
                lo1 = np.inf
                lo2 = np.inf
                hi0 = -np.inf
                hi1 = -np.inf
                hi2 = -np.inf
                nr = 0
                for b in range(n_bins - 1, 0, -1):
                    lo0 = min(lo0, bin_b[a, b, 0])
                    lo1 = min(lo1, bin_b[a, b, 1])
                    lo2 = min(lo2, bin_b[a, b, 2])
                    hi0 = max(hi0, bin_b[a, b, 3])
                    hi1 = max(hi1, bin_b[a, b, 4])
                    hi2 = max(hi2, bin_b[a, b, 5])
                    nr += bin_n[a, b]
                    right_n[b] = nr
                    right_a[b] = _area(lo0, lo1, lo2, hi0, hi1, hi2) if nr > 0 else 0.0
                lo0 = np.inf
                lo1 = np.inf
                lo2 = np.inf
                hi0 = -np.inf
                hi1 = -np.inf
                hi2 = -np.inf
                nl = 0
                for b in range(0, n_bins - 1):
                    lo0 = min(lo0, bin_b[a, b, 0])
                    lo1 = min(lo1, bin_b[a, b, 1])
                    lo2 = min(lo2, bin_b[a, b, 2])
                    hi0 = max(hi0, bin_b[a, b, 3])
                    hi1 = max(hi1, bin_b[a, b, 4])
                    hi2 = max(hi2, bin_b[a, b, 5])
                    nl += bin_n[a, b]
                    nr = right_n[b + 1]
                    if nl == 0 or nr == 0:
                        continue
                    cost = _area(lo0, lo1, lo2, hi0, hi1, hi2) * nl + right_a[b + 1] * nr
                    if cost < best_cost:
                        best_cost = cost
                        split_axis = a
                        split_bin = b + 1

        make_leaf = False
        if count <= max_leaf:
            if count == 1 or split_axis < 0:
                make_leaf = True
            elif area > 0.0 and trav_cost + best_cost / area >= count:
                make_leaf = True
            elif not area > 0.0:
                make_leaf = True
        if make_leaf:
            if parent < 0:
                refs[0, 0] = _encode_leaf(start, count)
                for q in range(6):
                    boxes[0, q] = box[q]
            else:
                refs[parent, slot] = _encode_leaf(start, count)
                for q in range(6):
                    boxes[parent, 6 * slot + q] = box[q]
            continue

        # Inner node: the root range is node 0 itself.
        if parent < 0:
            node = 0
        else:
            node = n_nodes
            n_nodes += 1
            refs[parent, slot] = node
            for q in range(6):
                boxes[parent, 6 * slot + q] = box[q]

        mid = start
        if split_axis >= 0:
            a = split_axis
            ext = cbox[3 + a] - cbox[a]
            scale = n_bins / ext
            i = start
            j = end - 1
            while i <= j:
                b = int((cent[order[i], a] - cbox[a]) * scale)
                if b >= n_bins:
                    b = n_bins - 1
                if b < split_bin:
                    i += 1
                else:
                    t = order[i]
                    order[i] = order[j]
                    order[j] = t
                    j -= 1
            mid = i
        if mid <= start or mid >= end:
            # Median split on the widest centroid axis (or by index if all coincide).
            a = 0
            for q in range(1, 3):
                if cbox[3 + q] - cbox[q] > cbox[3 + a] - cbox[a]:
                    a = q
            for i in range(start, end):
                keys[i] = cent[order[i], a]
            perm = np.argsort(keys[start:end], kind="mergesort")
            tmp = order[start:end].copy()
            for i in range(count):
                order[start + i] = tmp[perm[i]]
            mid = start + count // 2
        # Push right then left, so the left subtree is numbered first (depth-first).
        st_parent[sp] = node
        st_slot[sp] = 1
        st_start[sp] = mid
        st_end[sp] = end
        st_depth[sp] = depth + 1
        sp += 1
        st_parent[sp] = node
        st_slot[sp] = 0
        st_start[sp] = start
        st_end[sp] = mid
        st_depth[sp] = depth + 1
        sp += 1
    return n_nodes


@njit(**JIT)
def _collapse_kernel(boxes2, refs2, boxes4, refs4):
    """Collapse the binary tree into a 4-wide one; returns the number of 4-wide nodes.

    Each 4-wide node takes the two children of a binary node and, while it has fewer than
    4, replaces its inner child of largest surface area by that child's two children (the
    usual greedy collapse, e.g. Wald, Benthin & Boulos 2008, "Getting rid of packets",
    IEEE Symp. Interactive Ray Tracing, section 3). Numbered depth-first.
    """
    st_n = np.empty(512, np.int64)
    st_p = np.empty(512, np.int64)
    st_s = np.empty(512, np.int64)
    cb = np.empty((LANES, 6))
    cr = np.empty(LANES, np.int64)
    sp = 1
    st_n[0] = 0
    st_p[0] = -1
    st_s[0] = 0
    count = 0
    while sp > 0:
        sp -= 1
        n = st_n[sp]
        p = st_p[sp]
        s = st_s[sp]
        me = count
        count += 1
        if p >= 0:
            refs4[p, s] = me
        for c in range(2):
            for q in range(6):
                cb[c, q] = boxes2[n, 6 * c + q]
            cr[c] = refs2[n, c]
        k = 2
        while k < LANES:
            best = -1
            best_area = -1.0
            for c in range(k):
                if cr[c] >= 0:
                    a = _area(cb[c, 0], cb[c, 1], cb[c, 2], cb[c, 3], cb[c, 4], cb[c, 5])
                    if a > best_area:
                        best_area = a
                        best = c
            if best < 0:
                break
            m = cr[best]
            for q in range(6):
                cb[best, q] = boxes2[m, q]
                cb[k, q] = boxes2[m, 6 + q]
            cr[best] = refs2[m, 0]
            cr[k] = refs2[m, 1]
            k += 1
        for c in range(LANES):
            if c < k:
                for q in range(6):
                    boxes4[me, LANES * q + c] = cb[c, q]
                refs4[me, c] = cr[c]          # inner references are fixed when visited
            else:
                for q in range(3):
                    boxes4[me, LANES * q + c] = np.inf
                    boxes4[me, LANES * (q + 3) + c] = -np.inf
                refs4[me, c] = -1
        for c in range(k - 1, -1, -1):
            if cr[c] >= 0:
                st_n[sp] = cr[c]
                st_p[sp] = me
                st_s[sp] = c
                sp += 1
    return count
