"""Interleaved closest-hit traversal of a batch of rays (large trees).

:func:`closest_hit_stream` (the batch query on large trees, :mod:`vfactor.tracing.scene`)
runs the same steps for up to STREAM_RAYS rays per thread side by side: after each node or
leaf step of a ray it prefetches that ray's next node or leaf block and moves on to the
next ray, so memory latency (about 250 ns a miss on the shared machine, measured) overlaps
with work on the other rays. Each ray takes exactly the steps
:func:`vfactor.tracing.traverse.closest_hit` takes (same boxes, same order, same tests),
so the answers are bit-identical, ties included.

The device functions (slab and watertight tests, lanes, prefetch of nodes) are those of
:mod:`vfactor.tracing.traverse`.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

from .bvh import BLOCK_WIDTH, LANES, NODE_WIDTH, STACK_SIZE, TRI_LANES
from .config import JIT
from .traverse import (_box_lanes, _lane_of, _prefetch_node, _ray_setup, _setup,
                       _stack_alloca, _triangle_lanes)

__all__ = ["closest_hit_stream", "STREAM_RAYS"]


@intrinsic
def _prefetch_lines(typingctx, ary, index, n_lines):
    """Hint the CPU to load ``n_lines`` cache lines from flat element ``index`` of ``ary``."""
    sig = types.void(ary, index, n_lines)

    def codegen(context, builder, signature, args):
        a = context.make_array(signature.args[0])(context, builder, args[0])
        i8p = ir.IntType(8).as_pointer()
        i32 = ir.IntType(32)
        i64 = ir.IntType(64)
        fnty = ir.FunctionType(ir.VoidType(), [i8p, i32, i32, i32])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.prefetch.p0")
        p0 = builder.bitcast(builder.gep(a.data, [args[1]]), i8p)
        with cgutils.for_range(builder, builder.sext(args[2], i64)) as loop:
            p = builder.gep(p0, [builder.mul(loop.index, ir.Constant(i64, 64))])
            builder.call(fn, [p, ir.Constant(i32, 0), ir.Constant(i32, 3),
                              ir.Constant(i32, 1)])
        return context.get_dummy_value()

    return sig, codegen


#: Most rays traced side by side by one thread in :func:`closest_hit_stream`.
STREAM_RAYS = 16

# Per-ray state of closest_hit_stream, float64 words: ray constants, then best t and det.
_S_OKX, _S_OKY, _S_OKZ, _S_SX, _S_SY, _S_SZ = 0, 1, 2, 3, 4, 5
_S_IX, _S_IY, _S_IZ, _S_OXN, _S_OYN, _S_OZN, _S_OXF, _S_OYF, _S_OZF = 6, 7, 8, 9, 10, 11, 12, 13, 14
_S_BT, _S_BD = 15, 16
_SF = 17
# int64 words: permutation, near rows, current reference, stack depth, best facet, ray, exclude.
_I_KX, _I_KY, _I_KZ, _I_NX, _I_NY, _I_NZ, _I_REF, _I_SP, _I_BID, _I_RAY, _I_EX = range(11)
_SI = 11
_SF_ALL = STREAM_RAYS * _SF
_SI_ALL = STREAM_RAYS * _SI
_STACK_ALL = STREAM_RAYS * STACK_SIZE


@njit(**JIT, inline="always")
def _stream_start(sf, si, k, ray, origins, directions, tmax, exclude):
    ox = origins[ray, 0]
    oy = origins[ray, 1]
    oz = origins[ray, 2]
    dx = directions[ray, 0]
    dy = directions[ray, 1]
    dz = directions[ray, 2]
    kx, ky, kz, okx, oky, okz, sx, sy, sz = _setup(ox, oy, oz, dx, dy, dz)
    ix, iy, iz, oxn, oyn, ozn, oxf, oyf, ozf, nx, ny, nz = _ray_setup(ox, oy, oz, dx, dy, dz)
    f = k * _SF
    sf[f + _S_OKX] = okx
    sf[f + _S_OKY] = oky
    sf[f + _S_OKZ] = okz
    sf[f + _S_SX] = sx
    sf[f + _S_SY] = sy
    sf[f + _S_SZ] = sz
    sf[f + _S_IX] = ix
    sf[f + _S_IY] = iy
    sf[f + _S_IZ] = iz
    sf[f + _S_OXN] = oxn
    sf[f + _S_OYN] = oyn
    sf[f + _S_OZN] = ozn
    sf[f + _S_OXF] = oxf
    sf[f + _S_OYF] = oyf
    sf[f + _S_OZF] = ozf
    sf[f + _S_BT] = tmax[ray]
    sf[f + _S_BD] = 0.0
    g = k * _SI
    si[g + _I_KX] = kx
    si[g + _I_KY] = ky
    si[g + _I_KZ] = kz
    si[g + _I_NX] = nx
    si[g + _I_NY] = ny
    si[g + _I_NZ] = nz
    si[g + _I_REF] = 0
    si[g + _I_SP] = 0
    si[g + _I_BID] = -1
    si[g + _I_RAY] = ray
    si[g + _I_EX] = exclude[ray]


@njit(**JIT)
def closest_hit_stream(arrays, origins, directions, tmax, exclude, lo, hi, facet, distance,
                       front, n_lanes):
    """:func:`closest_hit` of rays ``lo .. hi - 1``, STREAM_RAYS of them side by side.

    Each ray goes through exactly the steps of :func:`closest_hit` (same boxes, same order,
    same tests), so its answer is bit for bit the one :func:`closest_hit` gives; only the
    steps of different rays are interleaved: after each step (one node or one leaf) of a
    ray its next node or leaf block is prefetched and the thread moves on to the next ray,
    so that the memory latency of one ray is hidden behind the work on the others.
    Writes ``facet[i], distance[i], front[i]`` for each ray ``i``.
    """
    nodes = arrays[0]
    nodes_i = arrays[1]
    tri = arrays[2]
    tri_i = arrays[3]
    K = min(n_lanes, STREAM_RAYS)
    sf = _stack_alloca(_SF_ALL, np.float64)
    si = _stack_alloca(_SI_ALL, np.int64)
    stack_n = _stack_alloca(_STACK_ALL, np.int32)
    stack_t = _stack_alloca(_STACK_ALL, np.float64)
    tl = _stack_alloca(LANES, np.float64)
    tt = _stack_alloca(TRI_LANES, np.float64)
    dt = _stack_alloca(TRI_LANES, np.float64)
    nxt = lo
    active = 0
    for k in range(K):
        if nxt < hi:
            _stream_start(sf, si, k, nxt, origins, directions, tmax, exclude)
            nxt += 1
            active += 1
        else:
            si[k * _SI + _I_RAY] = -1
    while active > 0:
        for k in range(K):
            g = k * _SI
            if si[g + _I_RAY] < 0:
                continue
            f = k * _SF
            sb = k * STACK_SIZE
            ref = np.int32(si[g + _I_REF])
            sp = si[g + _I_SP]
            best_t = sf[f + _S_BT]
            moved = False
            if ref >= 0:
                m = _box_lanes(nodes, np.int64(ref) * NODE_WIDTH, si[g + _I_NX], si[g + _I_NY],
                               si[g + _I_NZ], sf[f + _S_OXN], sf[f + _S_OYN], sf[f + _S_OZN],
                               sf[f + _S_OXF], sf[f + _S_OYF], sf[f + _S_OZF], sf[f + _S_IX],
                               sf[f + _S_IY], sf[f + _S_IZ], best_t, tl)
                if m != 0 and (m & (m - 1)) == 0:
                    # One child hit (the common case on the way down): go there.
                    ref = nodes_i[ref, 6 * LANES + _lane_of(m)]
                    moved = True
                elif m != 0:
                    base = sp
                    for j in range(LANES):
                        if (m >> j) & 1:
                            t = tl[j]
                            c = nodes_i[ref, 6 * LANES + j]
                            q = sp
                            while q > base and stack_t[sb + q - 1] < t:
                                stack_t[sb + q] = stack_t[sb + q - 1]
                                stack_n[sb + q] = stack_n[sb + q - 1]
                                q -= 1
                            stack_t[sb + q] = t
                            stack_n[sb + q] = c
                            sp += 1
                            if c >= 0:
                                _prefetch_node(nodes, np.int64(c))
                    sp -= 1
                    ref = stack_n[sb + sp]
                    moved = True
            else:
                code = -1 - ref
                first = code >> 4
                n_blk = ((code & 15) + TRI_LANES - 1) // TRI_LANES
                kx = si[g + _I_KX]
                ky = si[g + _I_KY]
                kz = si[g + _I_KZ]
                okx = sf[f + _S_OKX]
                oky = sf[f + _S_OKY]
                okz = sf[f + _S_OKZ]
                sx = sf[f + _S_SX]
                sy = sf[f + _S_SY]
                sz = sf[f + _S_SZ]
                ex = si[g + _I_EX]
                for b in range(first, first + n_blk):
                    hm = _triangle_lanes(tri, np.int64(b) * BLOCK_WIDTH, kx, ky, kz, okx, oky,
                                         okz, sx, sy, sz, best_t, ex, tt, dt)
                    for j in range(TRI_LANES):
                        if (hm >> j) & 1 and tt[j] < best_t:
                            best_t = tt[j]
                            si[g + _I_BID] = tri_i[b, 9 * TRI_LANES + j]
                            sf[f + _S_BD] = dt[j]
            if not moved:
                while sp > 0:
                    sp -= 1
                    if stack_t[sb + sp] <= best_t:
                        ref = stack_n[sb + sp]
                        moved = True
                        break
            sf[f + _S_BT] = best_t
            if moved:
                si[g + _I_REF] = ref
                si[g + _I_SP] = sp
                if ref >= 0:
                    _prefetch_node(nodes, np.int64(ref))
                else:
                    _prefetch_lines(tri, np.int64((-1 - ref) >> 4) * BLOCK_WIDTH,
                                    np.int64(BLOCK_WIDTH // 8))
                continue
            # Done: write the answer, start the next ray in this slot.
            ray = si[g + _I_RAY]
            bid = si[g + _I_BID]
            if bid < 0:
                facet[ray] = -1
                distance[ray] = tmax[ray]
                front[ray] = False
            else:
                facet[ray] = bid
                distance[ray] = best_t
                front[ray] = sf[f + _S_BD] > 0.0
            if nxt < hi:
                _stream_start(sf, si, k, nxt, origins, directions, tmax, exclude)
                nxt += 1
            else:
                si[g + _I_RAY] = -1
                active -= 1
