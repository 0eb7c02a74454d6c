"""Fused kernels for radiative couplings: emit -> trace -> tally, no per-ray Python.

Emission design of one round (one randomised replicate)
-------------------------------------------------------
Node ``i`` emits ``m`` rays in round ``r``. Ray ``j = 0 .. m-1`` takes point ``j`` of the
first five dimensions of the Sobol' sequence, Owen-scrambled afresh for every (node,
round) (:mod:`vfactor.tracing.sobol`):

1. ``u0`` picks the facet side: the node's sides are laid end to end on [0, 1) in
   proportion to their areas (``side_cum``), so every side receives its area share of
   the rays (up to the discrepancy of one coordinate, O(log m) rays);
2. ``(u1, u2)``: point uniform on the triangle (Osada et al. 2002, eq. 1);
3. ``(u3, u4)``: cosine-weighted direction about the side's outward normal (the front
   normal, or minus it for a back side), concentric map (Shirley & Chiu 1997).

The whole node is thus one 5-D randomised quasi-Monte Carlo point set over (side,
position, direction): positions are stratified across and within facets jointly with the
directions. (A systematic side choice with a 4-D sequence run on across the sides made the
errors of the sides add coherently; a randomly shifted 5-D lattice, used until this
version, gave replicate values near two levels on two facing plates and errors estimated
from 8 rounds up to 3 times too small, see the notes of :mod:`vfactor.tracing.sobol`.)

Marginally every ray is uniform in (area x projected solid angle) of the node, so each
round is an unbiased estimate; rounds are independent (independent scrambles). The error
is estimated from the spread between rounds (:func:`vfactor.tallystats.tally_statistics`).

Round sizes
-----------
Round ``r`` has :func:`round_rays` ``(r, m)`` rays: ``m`` in the first 16 rounds (the 8
every node gets and 8 more), then ``m`` more every :data:`GROWTH_STEP` rounds up to ``GROWTH_CAP m`` (fewer
where that would pass :data:`GROWTH_LIMIT` rays: :func:`growth_cap`). The
variance of a randomised QMC replicate falls faster than 1 / rays (measured on the demo's
38 significant couplings over 16 seeds: rounds of 50 000 rays had a median 0.6 times the
variance per ray of rounds of 12 500; about half with the earlier lattice design), so a row that needs many rays is better served by larger replicates, while the
number of replicates, which sets how well the error itself is known, still grows (about
``sqrt(16 N / m)`` rounds for ``N`` rays). Rounds of different sizes are combined by the
ratio estimator in :func:`vfactor.tallystats.tally_statistics`.

Work items never straddle an aligned block of :data:`CHUNK` points; within an item of many
rays the rays are traced in increasing ``u0`` (one ray in every ``1 / CHUNK`` of the first
coordinate: the net property of the scrambled sequence, no sort needed), so each ray's side
is found by stepping on from the previous ray's (:func:`_side_after`; the same index as
bisection).

Tally columns: nodes ``0 .. n-1``, ``n`` = space (no hit), ``n + 1`` = inert (the side hit
has no node, or, for reflection tracing, the ray was cut after :data:`MAX_BOUNCES`).

Random streams (``stream = purpose * STREAM_STRIDE + node``): purpose 1 view-factor
emission, 3 reflection-tracing emission (scramble of round r: Philox counters ``4 r + t``),
5 reflections (counter ``(round << 48) | (j << 16) | bounce``, via
:func:`vfactor.tracing.rng.uniform4`).

References
----------
- A. B. Owen (2013), "Monte Carlo theory, methods and examples", ch. 17 (randomised QMC,
  error from independent replicates).
"""

from __future__ import annotations

import functools

import numpy as np
from numba import njit, prange

from .config import JIT, JIT_PARALLEL
from .rng import STREAM_STRIDE, uniform4
from .sampling import cosine_direction, triangle_point
from .sobol import (DIMENSIONS, block_words, chunk_table, draw_scramble, scrambled_point,
                    scrambled_word)
from .traverse import closest_hit

__all__ = [
    "vf_pairs",
    "gebhart_pairs",
    "emitter_table",
    "round_rays",
    "growth_cap",
    "rays_through",
    "MAX_BOUNCES",
    "MAX_ROUNDS",
    "MAX_RAYS_PER_ROUND",
    "CHUNK",
]

PURPOSE_VF = 1
PURPOSE_GEBHART = 3
PURPOSE_BOUNCE = 5

#: Reflections after which a ray is cut and counted as lost (inert column). The chance of
#: surviving this many reflections is at most (1 - a_min)**MAX_BOUNCES, a_min the smallest
#: absorptivity met (only nearly lossless mirrors get near it).
MAX_BOUNCES = 4096
#: Largest round index (the counter layout of reflection tracing holds 16 bits of round).
MAX_ROUNDS = 1 << 16
#: Largest number of rays per node in one round (32 bits of ray index).
MAX_RAYS_PER_ROUND = 1 << 32
#: Round sizes (see :func:`round_rays`): rounds ``r >= 2 GROWTH_STEP`` have
#: ``min(r // GROWTH_STEP, growth_cap(m))`` times the rays of the first rounds. Measured with
#: adaptive rounds (target 0.5 % on the demo, 20 seeds; 0.3 % on the catalog squares, 320
#: estimates): a step of 4 rounds took 6.6 M rays on the demo, but its errors, known from
#: fewer rounds, came out too small on the squares (mean z^2 1.26); a step of 8 rounds took
#: 6.8 M with mean z^2 0.99; rounds all of one size took 9.9 M (measured with the earlier
#: lattice design; with scrambled Sobol' points the demo takes 3.9 M rays on average for
#: the delivered values, 20 seeds, scatter 0.96 times the reported variance).
GROWTH_STEP = 8
GROWTH_CAP = 32
#: Rounds grow to at most this many rays (or stay at ``m`` when ``m`` is larger), which
#: keeps the int64 sums of squared tallies as far from overflow as rounds of one size.
GROWTH_LIMIT = 1 << 24
#: Rays per parallel work item (a power of two: items are aligned blocks of the sequence);
#: within an item the rays are traced in increasing order of their side coordinate u0, so
#: that consecutive rays start close together (rays in sequence order jump across the node;
#: measured on the demo model, shared 2-core machine: 2.8 -> 3.5 M rays/s for the fused
#: kernel; the tracer's batch query ran 3x slower on shuffled rays than on facet-ordered
#: ones).
CHUNK = 4096
_CHUNK_BITS = CHUNK.bit_length() - 1
#: Unscrambled points 0 .. CHUNK - 1 (bit-reversed words, uint32): point ``B + k`` of an
#: aligned block ``B`` is ``point(B) ^ _TABLE[k]``.
_TABLE = chunk_table(CHUNK).astype(np.uint32)
_ORDER_SHIFT = np.uint64(32 - _CHUNK_BITS)

_STRIDE = np.uint64(STREAM_STRIDE)


def emitter_table(front_node, back_node, areas, n_nodes):
    """Facet sides of every node laid end to end by area (the emission layout).

    Parameters
    ----------
    front_node, back_node : (f,) int — node of each side, -1 where inert
    areas : (f,) float — facet areas [m2]
    n_nodes : int

    Returns
    -------
    side_ptr : (n + 1,) int64 — sides of node i are ``side_ptr[i]:side_ptr[i + 1]``
    side_facet : (s,) int64 — facet of each side
    side_sign : (s,) float64 — +1 front, -1 back
    side_cum : (s,) float64 — cumulative area share within the node, last of each node 1.0
    side_id : (s,) int64 — ``facet`` for a front side, ``f + facet`` for a back side

    Raises
    ------
    ValueError
        When a node has no facet side with positive area.
    """
    front_node = np.asarray(front_node, dtype=np.int64)
    back_node = np.asarray(back_node, dtype=np.int64)
    areas = np.asarray(areas, dtype=np.float64)
    f = front_node.shape[0]
    node = np.concatenate([front_node, back_node])
    facet = np.concatenate([np.arange(f), np.arange(f)])
    sign = np.concatenate([np.ones(f), -np.ones(f)])
    side_id = np.arange(2 * f, dtype=np.int64)
    area = np.concatenate([areas, areas])
    keep = (node >= 0) & (area > 0)
    node, facet, sign, side_id, area = (a[keep] for a in (node, facet, sign, side_id, area))
    order = np.lexsort((side_id, node))
    node, facet, sign, side_id, area = (a[order] for a in (node, facet, sign, side_id, area))
    counts = np.bincount(node, minlength=n_nodes)
    if np.any(counts == 0):
        i = int(np.flatnonzero(counts == 0)[0])
        raise ValueError(f"emitter_table: node {i} has no facet side with positive area")
    ptr = np.zeros(n_nodes + 1, np.int64)
    ptr[1:] = np.cumsum(counts)
    cum = np.empty_like(area)
    for i in range(n_nodes):
        a = area[ptr[i]:ptr[i + 1]]
        c = np.cumsum(a)
        c /= c[-1]
        c[-1] = 1.0
        cum[ptr[i]:ptr[i + 1]] = c
    return (ptr, np.ascontiguousarray(facet, np.int64), np.ascontiguousarray(sign),
            np.ascontiguousarray(cum), np.ascontiguousarray(side_id))


@njit(**JIT)
def _first_side(side_cum, lo, hi, u):
    """First index s in [lo, hi) with side_cum[s] > u (hi - 1 if none)."""
    return _first_side_from(side_cum, lo, hi, u)


@njit(**JIT, inline="always")
def _side_after(side_cum, lo, hi, u, s):
    """As :func:`_first_side`, given that the answer is at least ``s`` (``lo <= s``): a few
    steps forward, then bisection of the rest. The rays of a full chunk are traced in
    increasing ``u0`` (see the module notes on work items), so each
    finds its side in O(1) from the previous ray's; the index found is the same as by
    bisection from ``lo`` (the binary search over ~500 sides cost ~20 % of the fused
    kernel's time on the demo)."""
    for _ in range(4):
        if s >= hi - 1 or side_cum[s] > u:
            return s
        s += 1
    return _first_side_from(side_cum, s, hi, u)


@njit(**JIT, inline="always")
def _first_side_from(side_cum, lo, hi, u):
    a = lo
    b = hi - 1
    while a < b:
        mid = (a + b) // 2
        if side_cum[mid] > u:
            b = mid
        else:
            a = mid + 1
    return a


@njit(**JIT)
def _order_block(table, scramble, base, k_lo, k_hi, order):
    """``order[q]`` = the point ``k`` of the aligned block (``k_lo <= k < k_hi``) whose
    scrambled ``u0`` lies in ``[q / CHUNK, (q + 1) / CHUNK)``, -1 where none: increasing
    ``u0`` in one pass (each such interval holds at most one point of a block)."""
    for q in range(CHUNK):
        order[q] = -1
    for k in range(k_lo, k_hi):
        w = scrambled_word(scramble, 0, base[0] ^ np.uint64(table[k, 0]))
        order[w >> _ORDER_SHIFT] = k


@njit(**JIT, inline="always")
def _emit(emit, geo, node, scramble, table, base, k, s_low):
    """Origin, direction and side index of ray ``B + k`` of ``node`` (``base``: the words of
    the ray's aligned block ``B``); ``s_low`` is a side index known not to exceed the ray's
    (the node's first side if nothing is known)."""
    side_ptr, side_facet, side_sign, side_cum = emit[0], emit[1], emit[2], emit[3]
    vertices, triangles, normals = geo[0], geo[1], geo[2]
    u0 = scrambled_point(scramble, 0, base[0] ^ np.uint64(table[k, 0]))
    u1 = scrambled_point(scramble, 1, base[1] ^ np.uint64(table[k, 1]))
    u2 = scrambled_point(scramble, 2, base[2] ^ np.uint64(table[k, 2]))
    u3 = scrambled_point(scramble, 3, base[3] ^ np.uint64(table[k, 3]))
    u4 = scrambled_point(scramble, 4, base[4] ^ np.uint64(table[k, 4]))
    s = _side_after(side_cum, side_ptr[node], side_ptr[node + 1], u0, s_low)
    fct = side_facet[s]
    sg = side_sign[s]
    x, y, z = triangle_point(vertices, triangles, fct, u1, u2)
    dx, dy, dz = cosine_direction(sg * normals[fct, 0], sg * normals[fct, 1],
                                  sg * normals[fct, 2], u3, u4)
    return s, fct, x, y, z, dx, dy, dz


@njit(**JIT, inline="always")
def _column(geo, g, front, n):
    if g < 0:
        return n
    if front:
        k = geo[3][g]
    else:
        k = geo[4][g]
    if k < 0:
        return n + 1
    return k


def growth_cap(rays_per_round):
    """Largest round of a computation with ``rays_per_round = m``, in units of ``m``:
    ``GROWTH_CAP``, less where ``GROWTH_CAP m`` would pass :data:`GROWTH_LIMIT` rays
    (never below 1: rounds of ``m`` itself are never cut)."""
    return max(1, min(GROWTH_CAP, GROWTH_LIMIT // max(int(rays_per_round), 1)))


def round_rays(round_index, rays_per_round):
    """Rays a node emits in round ``r`` of a computation with ``rays_per_round = m``:
    ``m * clip(r // GROWTH_STEP, 1, growth_cap(m))`` (array in, array out).

    The first ``2 GROWTH_STEP = 16`` rounds (the ``MIN_ROUNDS = 8`` rounds every node gets
    and 8 more) have ``m`` rays; later rounds, which only rows that need many rays reach,
    grow by ``m`` every ``GROWTH_STEP`` rounds up to :func:`growth_cap` ``(m) m``.
    A randomised quasi-Monte Carlo replicate of more rays has a smaller variance per ray
    (measured on the demo's significant couplings: rounds of 50 000 rays had a median 0.6
    times the variance per ray of rounds of 12 500), while the number of replicates, which sets how
    well the error itself is known, still grows with the rays (about ``sqrt(16 N / m)``
    rounds for ``N`` rays). A pure function of ``(r, m)``, so rounds stay units of work.
    """
    r = np.asarray(round_index, dtype=np.int64)
    cap = growth_cap(rays_per_round)
    return np.int64(rays_per_round) * np.clip(r // GROWTH_STEP, 1, cap)


def rays_through(rounds, rays_per_round):
    """Rays of rounds ``0 .. rounds - 1`` together (array in, array out)."""
    units = _round_units(growth_cap(rays_per_round))
    return np.int64(rays_per_round) * units[np.asarray(rounds, dtype=np.int64)]


@functools.lru_cache(maxsize=None)
def _round_units(cap):
    return np.concatenate([[0], np.cumsum(np.clip(np.arange(MAX_ROUNDS) // GROWTH_STEP, 1,
                                                  cap))]).astype(np.int64)


@njit(**JIT_PARALLEL)
def _vf_kernel(arrays, emit, geo, pair_node, pair_round, seed, item_pair, item_j0,
               item_end, rec_off, j_lo, record, table, counts, ray_side, ray_col):
    ncol = counts.shape[1]
    n = ncol - 2
    n_items = item_pair.shape[0]
    partial = np.zeros((n_items, ncol), np.int64)
    for item in prange(n_items):
        a = item_pair[item]
        node = pair_node[a]
        scramble = np.empty(2 * DIMENSIONS, np.uint64)
        draw_scramble(seed, np.uint64(PURPOSE_VF) * _STRIDE + np.uint64(node),
                      np.uint64(pair_round[a]), scramble)
        j0 = item_j0[item]
        blk = j0 - j0 % CHUNK           # items lie within one aligned block
        k_lo = j0 - blk
        k_hi = item_end[item] - blk
        base = np.empty(DIMENSIONS, np.uint64)
        block_words(blk, base)
        ordered = k_hi - k_lo >= CHUNK // 8   # few rays: plain order (ordering would not pay)
        order = np.empty(CHUNK if ordered else 0, np.int64)
        if ordered:
            _order_block(table, scramble, base, k_lo, k_hi, order)
        lo = emit[0][node]
        s_low = lo
        for q in range(CHUNK if ordered else k_hi - k_lo):
            kk = order[q] if ordered else k_lo + q
            if kk < 0:
                continue
            j = blk + kk
            s, fct, x, y, z, dx, dy, dz = _emit(emit, geo, node, scramble, table, base, kk,
                                                s_low)
            if ordered:
                s_low = s               # u0 increases through an ordered block
            g, t, front = closest_hit(arrays, x, y, z, dx, dy, dz, np.inf, fct)
            col = _column(geo, g, front, n)
            partial[item, col] += 1
            if record:
                r = rec_off[a] + (j - j_lo)
                ray_side[r] = s
                ray_col[r] = col
    for item in range(n_items):
        a = item_pair[item]
        for q in range(ncol):
            counts[a, q] += partial[item, q]


def vf_pairs(scene_arrays, emit, geo, pair_node, pair_round, seed, rays_per_round, j_lo=0,
             j_hi=None, record=False):
    """Hit counts of view-factor rays for a list of (node, round) pairs.

    Parameters
    ----------
    scene_arrays : tuple — :attr:`vfactor.tracing.scene.Scene.arrays`
    emit : tuple — ``(side_ptr, side_facet, side_sign, side_cum, side_id)`` from
        :func:`emitter_table`
    geo : tuple — ``(vertices (v,3), triangles (f,3) int64, normals (f,3), front_node (f,)
        int64, back_node (f,) int64)``
    pair_node, pair_round : (k,) int64 — emitting node and round (replicate) of each pair
    seed : int — randomisation
    rays_per_round : int — ``m``; round ``r`` has :func:`round_rays` ``(r, m)`` rays
    j_lo, j_hi : int — emit only rays ``j_lo <= j < j_hi`` of each round (default all;
        a round's window ends at its own length)
    record : bool — also return the side index and column of every ray

    Returns
    -------
    counts : (k, n + 2) int64 — hits per column (nodes, space, inert)
    ray_side, ray_col : int64 — per ray, pair-major, each pair's rays ``j_lo ..
        min(j_hi, length) - 1`` (empty unless ``record``)
    """
    m = int(rays_per_round)
    pair_node = np.ascontiguousarray(pair_node, dtype=np.int64)
    pair_round = np.ascontiguousarray(pair_round, dtype=np.int64)
    length = round_rays(pair_round, m)
    end = length if j_hi is None else np.minimum(length, int(j_hi))
    j_lo = int(j_lo)
    span = np.maximum(end - j_lo, 0)
    n = emit[0].shape[0] - 1
    k = pair_node.shape[0]
    counts = np.zeros((k, n + 2), np.int64)
    rec_off = np.zeros(k + 1, np.int64)
    np.cumsum(span, out=rec_off[1:])
    size = int(rec_off[-1]) if record else 0
    ray_side = np.empty(size, np.int64)
    ray_col = np.empty(size, np.int64)
    first_block = j_lo // CHUNK         # items are cut at the aligned blocks of CHUNK rays
    chunks = np.where(span > 0, -(-end // CHUNK) - first_block, 0)
    if k and chunks.sum():
        item_pair = np.repeat(np.arange(k, dtype=np.int64), chunks)
        first = np.repeat(np.cumsum(chunks) - chunks, chunks)
        blk = (first_block + np.arange(item_pair.size, dtype=np.int64) - first) * CHUNK
        item_j0 = np.maximum(blk, j_lo)
        item_end = np.minimum(blk + CHUNK, end[item_pair])
        _vf_kernel(scene_arrays, emit, geo, pair_node, pair_round, np.uint64(seed),
                   item_pair, item_j0, item_end, rec_off, np.int64(j_lo), bool(record),
                   _TABLE, counts, ray_side, ray_col)
    return counts, ray_side, ray_col


@njit(**JIT_PARALLEL)
def _gebhart_kernel(arrays, emit, geo, absorb, specular, pair_node, pair_round, seed, m,
                    table, counts):
    k = pair_node.shape[0]
    ncol = counts.shape[1]
    n = ncol - 2
    nchunks = (m + CHUNK - 1) // CHUNK
    partial = np.zeros((k * nchunks, ncol), np.int64)
    normals = geo[2]
    for item in prange(k * nchunks):
        a = item // nchunks
        c = item - a * nchunks
        node = pair_node[a]
        rnd = np.uint64(pair_round[a])
        rshift = rnd << np.uint64(48)
        scramble = np.empty(2 * DIMENSIONS, np.uint64)
        draw_scramble(seed, np.uint64(PURPOSE_GEBHART) * _STRIDE + np.uint64(node), rnd,
                      scramble)
        bounce_stream = np.uint64(PURPOSE_BOUNCE) * _STRIDE + np.uint64(node)
        j0 = c * CHUNK
        size = min(m, j0 + CHUNK) - j0
        base = np.empty(DIMENSIONS, np.uint64)
        block_words(j0, base)
        ordered = size >= CHUNK // 8    # few rays: plain order (ordering would not pay)
        order = np.empty(CHUNK if ordered else 0, np.int64)
        if ordered:
            _order_block(table, scramble, base, 0, size, order)
        lo = emit[0][node]
        s_low = lo
        for q in range(CHUNK if ordered else size):
            kk = order[q] if ordered else q
            if kk < 0:
                continue
            j = j0 + kk
            s, fct, x, y, z, dx, dy, dz = _emit(emit, geo, node, scramble, table, base, kk,
                                                s_low)
            if ordered:
                s_low = s               # u0 increases through an ordered block
            ctr = rshift | (np.uint64(j) << np.uint64(16))
            exclude = fct
            col = n + 1
            for b in range(MAX_BOUNCES + 1):
                g, t, front = closest_hit(arrays, x, y, z, dx, dy, dz, np.inf, exclude)
                col = _column(geo, g, front, n)
                if col >= n or b == MAX_BOUNCES:
                    if col < n:
                        col = n + 1          # cut after MAX_BOUNCES: lost
                    break
                v0, v1, v2, v3 = uniform4(seed, bounce_stream, ctr | np.uint64(b))
                if v0 < absorb[col]:
                    break
                x = x + t * dx
                y = y + t * dy
                z = z + t * dz
                sg = 1.0 if front else -1.0
                nx = sg * normals[g, 0]
                ny = sg * normals[g, 1]
                nz = sg * normals[g, 2]
                if v1 < specular[col]:
                    dn = dx * nx + dy * ny + dz * nz
                    dx = dx - 2.0 * dn * nx
                    dy = dy - 2.0 * dn * ny
                    dz = dz - 2.0 * dn * nz
                else:
                    dx, dy, dz = cosine_direction(nx, ny, nz, v2, v3)
                exclude = g
            partial[item, col] += 1
    for a in range(k):
        for c in range(nchunks):
            for q in range(ncol):
                counts[a, q] += partial[a * nchunks + c, q]


def gebhart_pairs(scene_arrays, emit, geo, absorb, specular, pair_node, pair_round, seed,
                  rays_per_round):
    """Absorption counts of reflection tracing for a list of (node, round) pairs.

    Every round here has ``rays_per_round`` rays (the traced Gebhart stage uses the first
    ``MIN_ROUNDS`` rounds only, which :func:`round_rays` gives that size too).

    Each ray leaves the node diffusely (emission design of the module notes); at every hit
    on a node side it is absorbed with probability ``absorb[node]``, else reflected:
    specularly with probability ``specular[node]``, diffusely (cosine-weighted about the
    side's normal) otherwise (analogue Monte Carlo: Russian roulette with the absorptivity
    as the survival test; Howell, "The Monte Carlo method in radiative heat transfer",
    J. Heat Transfer 120 (1998) 547-560). Misses escape to space; inert sides absorb and
    lose the ray; a ray still alive after :data:`MAX_BOUNCES` reflections is lost.

    Parameters
    ----------
    absorb : (n,) float — absorption probability of each node (eps or alpha) [1]
    specular : (n,) float — specular share of the reflected energy [1]
    Others as for :func:`vf_pairs`.

    Returns
    -------
    counts : (k, n + 2) int64 — absorbed per column (nodes, space, lost)
    """
    m = int(rays_per_round)
    pair_node = np.ascontiguousarray(pair_node, dtype=np.int64)
    pair_round = np.ascontiguousarray(pair_round, dtype=np.int64)
    n = emit[0].shape[0] - 1
    counts = np.zeros((pair_node.shape[0], n + 2), np.int64)
    if pair_node.shape[0] and m > 0:
        _gebhart_kernel(scene_arrays, emit, geo, np.ascontiguousarray(absorb, np.float64),
                        np.ascontiguousarray(specular, np.float64), pair_node, pair_round,
                        np.uint64(seed), np.int64(m), _TABLE, counts)
    return counts
