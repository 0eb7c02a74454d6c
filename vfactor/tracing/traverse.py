"""Closest-hit and any-hit device functions: ordered BVH traversal, watertight test.

``arrays`` is :attr:`vfactor.tracing.scene.Scene.arrays`, the tuple
``(nodes, nodes_i, leaf_tri, leaf_tri_i)`` described in :mod:`vfactor.tracing.bvh`.

Robustness
----------
- Ray-triangle test: the watertight algorithm of Woop, Benthin & Wald (2013),
  "Watertight ray/triangle intersection", JCGT 2(1), 65-82, section 3 and listing 1, in
  float64 without fused multiply-add (numba compiles without fastmath, so LLVM does not
  contract). The three edge functions of a triangle are each computed from the two vertices
  of that edge alone, so two triangles sharing an edge compute bit-identical values of
  opposite sign: a ray through a shared edge or vertex hits at least one of them. Edge
  functions of zero are accepted (Woop et al., "no holes" rule); a triangle with zero
  determinant (degenerate, or seen exactly edge-on) is never hit, and no NaN can arise
  (the only division, by the non-zero determinant, happens after the edge tests).
- Ray-box test: slabs in float64 on boxes rounded outward to float32, with the far
  distance enlarged by ``1 + 2 gamma(3)`` (Ize 2013, "Robust BVH ray traversal", JCGT
  2(2), 12-27, section 3), so rounding never culls a box the ray crosses. Zero direction
  components use ``1e300`` as inverse with the origin nudged by a few ulps (see
  ``_slab``), which avoids ``0 * inf = NaN`` and keeps rays lying in a box face plane.
- Only hits with ``0 < t < tmax`` count; ``exclude`` (original facet index) is skipped, so
  a ray leaving a facet never hits it, at any model scale.

Traversal of the wide tree tests the LANES child boxes of a node at once (``_box_lanes``:
vector instructions in float64 on the float32 bounds), visits the hit children nearest
first and keeps the others on a fixed stack of :data:`vfactor.tracing.bvh.STACK_SIZE`
entries in the function's stack frame (no heap, no reference counting), with their entry
distance so that they are skipped when a closer hit has been found since; inner children
are prefetched when pushed (``llvm.prefetch``: +10-20 % measured on 1e5-1e6 triangles).

A leaf is tested one block of TRI_LANES triangles at a time (``_triangle_lanes``): each
lane performs the float64 operations of the scalar :func:`_triangle` in the same order, so
its bits are those of the scalar test, and the lanes are then taken in order with
``t < best`` exactly as a loop over the triangles would; the division for ``t`` is done
only when some lane passes the edge tests. The emitting facet is skipped by its index in
the same vector compare.

The batch query on large trees traces several rays side by side with these device
functions (:mod:`vfactor.tracing.streams`).

Measured (not kept): a fast path that descends directly into a node's only hit child
instead of pushing and popping it cost 20-30 % in :func:`closest_hit` (kept in the streams,
where it helps); continuing a stream ray without switching when its next node is the next
row (depth-first first child) made streams slower at 1e6 triangles.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

from .bvh import BLOCK_WIDTH, LANES, NODE_WIDTH, STACK_SIZE, TRI_LANES
from .config import JIT

__all__ = ["closest_hit", "any_hit"]

_GAMMA3 = 3.0 * 2.0 ** -53 / (1.0 - 3.0 * 2.0 ** -53)
_BOX_SLACK = 1.0 + 2.0 * _GAMMA3


@intrinsic
def _stack_alloca(typingctx, size, dtype):
    """Pointer to ``size`` elements of ``dtype`` in the caller's stack frame (no heap)."""
    elem = dtype.dtype if isinstance(dtype, types.DType) else dtype.instance_type

    def codegen(context, builder, signature, args):
        ty = context.get_value_type(elem)
        return cgutils.alloca_once(builder, ty, size=args[0])

    return types.CPointer(elem)(size, dtype), codegen


@njit(**JIT, inline="always")
def _slab(o, d):
    """Inverse direction and the origins used for the near and far slab planes.

    For a direction component of (nearly) zero the inverse is 1e300 and the origin is
    moved by a few ulps toward the far plane for the near-plane distance and away from
    it for the far-plane distance, so a ray lying exactly in a box face plane keeps that
    box (the slab interval becomes "all t" instead of 0 * inf = NaN).
    """
    if abs(d) < 1e-300:
        delta = max(abs(o), 1e-300) * 2.0 ** -50
        return 1e300, o + delta, o - delta
    return 1.0 / d, o, o


@njit(**JIT, inline="always")
def _setup(ox, oy, oz, dx, dy, dz):
    """Per-ray constants of the watertight test: axis permutation and shear."""
    ax = abs(dx)
    ay = abs(dy)
    az = abs(dz)
    if ax > ay and ax > az:
        kz = 0
    elif ay > az:
        kz = 1
    else:
        kz = 2
    kx = kz + 1
    if kx == 3:
        kx = 0
    ky = kx + 1
    if ky == 3:
        ky = 0
    dkz = dx if kz == 0 else (dy if kz == 1 else dz)
    if dkz < 0.0:
        t = kx
        kx = ky
        ky = t
    dkx = dx if kx == 0 else (dy if kx == 1 else dz)
    dky = dx if ky == 0 else (dy if ky == 1 else dz)
    okx = ox if kx == 0 else (oy if kx == 1 else oz)
    oky = ox if ky == 0 else (oy if ky == 1 else oz)
    okz = ox if kz == 0 else (oy if kz == 1 else oz)
    sx = dkx / dkz
    sy = dky / dkz
    sz = 1.0 / dkz
    return kx, ky, kz, okx, oky, okz, sx, sy, sz


@njit(**JIT, inline="always")
def _triangle(tri, r, kx, ky, kz, okx, oky, okz, sx, sy, sz):
    """Watertight test of row ``r``; returns (hit, t, det) with t valid only on a hit."""
    az_ = tri[r, kz] - okz
    bz_ = tri[r, 3 + kz] - okz
    cz_ = tri[r, 6 + kz] - okz
    ax_ = tri[r, kx] - okx - sx * az_
    ay_ = tri[r, ky] - oky - sy * az_
    bx_ = tri[r, 3 + kx] - okx - sx * bz_
    by_ = tri[r, 3 + ky] - oky - sy * bz_
    cx_ = tri[r, 6 + kx] - okx - sx * cz_
    cy_ = tri[r, 6 + ky] - oky - sy * cz_
    u = cx_ * by_ - cy_ * bx_
    v = ax_ * cy_ - ay_ * cx_
    w = bx_ * ay_ - by_ * ax_
    # Bitwise (not short-circuit) tests: one branch instead of up to six.
    if ((u < 0.0) | (v < 0.0) | (w < 0.0)) & ((u > 0.0) | (v > 0.0) | (w > 0.0)):
        return False, 0.0, 0.0
    det = u + v + w
    if det == 0.0:
        return False, 0.0, 0.0
    tt = u * (sz * az_) + v * (sz * bz_) + w * (sz * cz_)
    return True, tt / det, det


@intrinsic
def _box_lanes(typingctx, nodes, base, nx, ny, nz, oxn, oyn, ozn, oxf, oyf, ozf, ix, iy, iz,
               tbest, tout):
    """Slab test of the LANES child boxes of one node, as LANES-wide float64 vector code.

    ``nodes`` is the (n, NODE_WIDTH) float32 node array, ``base`` the flat index of the
    node's first float, ``nx, ny, nz`` the offsets of the near-plane rows (the far row of
    an axis is the other of its two rows). Writes the entry distances (clamped to >= 0) to
    ``tout[0:LANES]`` and returns a mask whose bit j is set when the ray enters box j at
    ``t_j <= min(t_exit * (1 + 2 gamma3), tbest)``. Maximum and minimum are
    compare-and-select, the semantics of the scalar ``max``/``min`` (no NaN can occur,
    see ``_slab``).
    """
    sig = types.int64(nodes, base, nx, ny, nz, oxn, oyn, ozn, oxf, oyf, ozf, ix, iy, iz,
                      tbest, tout)
    w = LANES

    def codegen(context, builder, signature, args):
        ary = context.make_array(signature.args[0])(context, builder, args[0])
        data = ary.data
        fv = ir.VectorType(ir.FloatType(), w)
        dv = ir.VectorType(ir.DoubleType(), w)
        i32 = ir.IntType(32)
        i64 = ir.IntType(64)
        base_ = args[1]

        def load(off):
            p = builder.gep(data, [builder.add(base_, off)])
            v = builder.load(builder.bitcast(p, fv.as_pointer()), align=4, typ=fv)
            return builder.fpext(v, dv)

        def splat(x):
            v = builder.insert_element(ir.Constant(dv, ir.Undefined), x, ir.Constant(i32, 0))
            return builder.shuffle_vector(v, ir.Constant(dv, ir.Undefined),
                                          ir.Constant(ir.VectorType(i32, w), [0] * w))

        def vmax(a, c):
            return builder.select(builder.fcmp_ordered(">", a, c), a, c)

        def vmin(a, c):
            return builder.select(builder.fcmp_ordered("<", a, c), a, c)

        nx_, ny_, nz_ = args[2:5]
        # The two rows of axis a are a*w and (a+3)*w: far = (2a+3)*w - near.
        fx_ = builder.sub(ir.Constant(i64, 3 * w), nx_)
        fy_ = builder.sub(ir.Constant(i64, 5 * w), ny_)
        fz_ = builder.sub(ir.Constant(i64, 7 * w), nz_)
        oxn_, oyn_, ozn_, oxf_, oyf_, ozf_ = [splat(a) for a in args[5:11]]
        ix_, iy_, iz_ = [splat(a) for a in args[11:14]]
        tb = splat(args[14])
        tx = builder.fmul(builder.fsub(load(nx_), oxn_), ix_)
        ty = builder.fmul(builder.fsub(load(ny_), oyn_), iy_)
        tz = builder.fmul(builder.fsub(load(nz_), ozn_), iz_)
        ux = builder.fmul(builder.fsub(load(fx_), oxf_), ix_)
        uy = builder.fmul(builder.fsub(load(fy_), oyf_), iy_)
        uz = builder.fmul(builder.fsub(load(fz_), ozf_), iz_)
        zero = ir.Constant(dv, [0.0] * w)
        slack = ir.Constant(dv, [_BOX_SLACK] * w)
        tn = vmax(vmax(tx, ty), vmax(tz, zero))
        tf = vmin(builder.fmul(vmin(vmin(ux, uy), uz), slack), tb)
        hit = builder.fcmp_ordered("<=", tn, tf)
        builder.store(tn, builder.bitcast(args[15], dv.as_pointer()), align=8)
        return builder.zext(builder.bitcast(hit, ir.IntType(w)), i64)

    return sig, codegen


@intrinsic
def _triangle_lanes(typingctx, tri, base, kx, ky, kz, okx, oky, okz, sx, sy, sz, tbest,
                    exclude, tout, dout):
    """Watertight test of the TRI_LANES triangles of one leaf block, as vector code.

    ``tri`` is the (b, BLOCK_WIDTH) float64 block array, ``base`` the flat index of the
    block's first word, ``kx, ky, kz`` the ray's axis permutation (see ``_setup``). Each
    lane performs exactly the float64 operations of :func:`_triangle`, in the same order
    (IEEE arithmetic is lane-exact and nothing is fused), so a lane's ``t`` and ``det`` are
    the bits the scalar test gives. Writes ``t`` and ``det`` of every lane to
    ``tout[0:TRI_LANES]`` and ``dout[0:TRI_LANES]`` and returns a mask whose bit j is set
    when triangle j is hit (edge functions of one sign or zero, ``det != 0``) at
    ``0 < t < tbest`` and its facet index differs from ``exclude``.
    """
    sig = types.int64(tri, base, kx, ky, kz, okx, oky, okz, sx, sy, sz, tbest, exclude,
                      tout, dout)
    w = TRI_LANES

    def codegen(context, builder, signature, args):
        ary = context.make_array(signature.args[0])(context, builder, args[0])
        dv = ir.VectorType(ir.DoubleType(), w)
        lv = ir.VectorType(ir.IntType(64), w)
        i32 = ir.IntType(32)
        i64 = ir.IntType(64)
        blk = builder.gep(ary.data, [args[1]])

        def load(off, typ=dv):
            p = builder.gep(blk, [off])
            return builder.load(builder.bitcast(p, typ.as_pointer()), align=32, typ=typ)

        def splat(x, typ=dv):
            v = builder.insert_element(ir.Constant(typ, ir.Undefined), x, ir.Constant(i32, 0))
            return builder.shuffle_vector(v, ir.Constant(typ, ir.Undefined),
                                          ir.Constant(ir.VectorType(i32, w), [0] * w))

        def row(vertex, k):
            # Row of coordinate k (0, 1, 2) of vertex 0 (A), 1 (B), 2 (C).
            off = builder.add(builder.mul(k, ir.Constant(i64, w)),
                              ir.Constant(i64, 3 * w * vertex))
            return load(off)

        kx_, ky_, kz_ = args[2:5]
        okx_, oky_, okz_, sx_, sy_, sz_ = [splat(a) for a in args[5:11]]
        fsub, fmul, fadd = builder.fsub, builder.fmul, builder.fadd
        az_ = fsub(row(0, kz_), okz_)
        bz_ = fsub(row(1, kz_), okz_)
        cz_ = fsub(row(2, kz_), okz_)
        ax_ = fsub(fsub(row(0, kx_), okx_), fmul(sx_, az_))
        ay_ = fsub(fsub(row(0, ky_), oky_), fmul(sy_, az_))
        bx_ = fsub(fsub(row(1, kx_), okx_), fmul(sx_, bz_))
        by_ = fsub(fsub(row(1, ky_), oky_), fmul(sy_, bz_))
        cx_ = fsub(fsub(row(2, kx_), okx_), fmul(sx_, cz_))
        cy_ = fsub(fsub(row(2, ky_), oky_), fmul(sy_, cz_))
        u = fsub(fmul(cx_, by_), fmul(cy_, bx_))
        v = fsub(fmul(ax_, cy_), fmul(ay_, cx_))
        ww = fsub(fmul(bx_, ay_), fmul(by_, ax_))
        zero = ir.Constant(dv, [0.0] * w)

        def lt(a, c):
            return builder.fcmp_ordered("<", a, c)

        def gt(a, c):
            return builder.fcmp_ordered(">", a, c)

        neg = builder.or_(builder.or_(lt(u, zero), lt(v, zero)), lt(ww, zero))
        pos = builder.or_(builder.or_(gt(u, zero), gt(v, zero)), gt(ww, zero))
        det = fadd(fadd(u, v), ww)
        ids = load(ir.Constant(i64, 9 * w), lv)
        ok = builder.not_(builder.and_(neg, pos))
        ok = builder.and_(ok, builder.fcmp_ordered("!=", det, zero))
        ok = builder.and_(ok, builder.icmp_signed("!=", ids, splat(args[12], lv)))
        out = cgutils.alloca_once_value(builder, ir.Constant(i64, 0))
        any_ = builder.icmp_unsigned("!=", builder.bitcast(ok, ir.IntType(w)),
                                     ir.Constant(ir.IntType(w), 0))
        # Distances only when a lane passed the edge tests (most blocks a ray meets have
        # none): the division is the costliest instruction here.
        with builder.if_then(any_, likely=False):
            tt = fadd(fadd(fmul(u, fmul(sz_, az_)), fmul(v, fmul(sz_, bz_))),
                      fmul(ww, fmul(sz_, cz_)))
            t = builder.fdiv(tt, det)
            hit = builder.and_(ok, gt(t, zero))
            hit = builder.and_(hit, lt(t, splat(args[11])))
            builder.store(t, builder.bitcast(args[13], dv.as_pointer()), align=8)
            builder.store(det, builder.bitcast(args[14], dv.as_pointer()), align=8)
            builder.store(builder.zext(builder.bitcast(hit, ir.IntType(w)), i64), out)
        return builder.load(out)

    return sig, codegen


@intrinsic
def _prefetch_node(typingctx, nodes, index):
    """Hint the CPU to load the 2 cache lines of node row ``index`` (llvm.prefetch)."""
    sig = types.void(nodes, index)

    def codegen(context, builder, signature, args):
        ary = context.make_array(signature.args[0])(context, builder, args[0])
        i8p = ir.IntType(8).as_pointer()
        i32 = ir.IntType(32)
        fnty = ir.FunctionType(ir.VoidType(), [i8p, i32, i32, i32])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.prefetch.p0")
        base = builder.mul(args[1], ir.Constant(ir.IntType(64), NODE_WIDTH))
        for off in (0, 16):
            p = builder.gep(ary.data, [builder.add(base, ir.Constant(ir.IntType(64), off))])
            builder.call(fn, [builder.bitcast(p, i8p), ir.Constant(ir.IntType(32), 0),
                              ir.Constant(ir.IntType(32), 3), ir.Constant(ir.IntType(32), 1)])
        return context.get_dummy_value()

    return sig, codegen


@njit(**JIT, inline="always")
def _lane_of(bit):
    """Lane index of a one-bit mask 1, 2, 4 or 8."""
    return (bit >> 1) - (bit >> 3)


@njit(**JIT, inline="always")
def _ray_setup(ox, oy, oz, dx, dy, dz):
    ix, oxn, oxf = _slab(ox, dx)
    iy, oyn, oyf = _slab(oy, dy)
    iz, ozn, ozf = _slab(oz, dz)
    nx = 0 if ix >= 0.0 else 3 * LANES
    ny = LANES if iy >= 0.0 else 4 * LANES
    nz = 2 * LANES if iz >= 0.0 else 5 * LANES
    return ix, iy, iz, oxn, oyn, ozn, oxf, oyf, ozf, nx, ny, nz


@njit(**JIT)
def closest_hit(arrays, ox, oy, oz, dx, dy, dz, tmax, exclude):
    """Nearest facet hit by the ray ``o + t d``, ``0 < t < tmax``.

    Parameters
    ----------
    arrays : tuple
        ``Scene.arrays``.
    ox, oy, oz : float
        Ray origin [m].
    dx, dy, dz : float
        Ray direction; unit length for ``t`` to be a distance in metres. Must not be zero.
    tmax : float
        Largest distance counted [m] (``inf`` for none).
    exclude : int
        Original facet index that is never hit (the emitting facet), or -1.

    Returns
    -------
    facet : int64
        Original facet index, -1 for a miss.
    t : float64
        Distance to the hit [m] (``tmax`` on a miss).
    front : bool
        True when the ray met the side the facet's normal points to: ``dot(d, n) < 0`` with
        ``n = (B - A) x (C - A)`` (counter-clockwise winding).
    """
    nodes = arrays[0]
    nodes_i = arrays[1]
    tri = arrays[2]
    tri_i = arrays[3]
    kx, ky, kz, okx, oky, okz, sx, sy, sz = _setup(ox, oy, oz, dx, dy, dz)
    ix, iy, iz, oxn, oyn, ozn, oxf, oyf, ozf, nx, ny, nz = _ray_setup(ox, oy, oz, dx, dy, dz)
    stack_n = _stack_alloca(STACK_SIZE, np.int32)
    stack_t = _stack_alloca(STACK_SIZE, np.float64)
    tl = _stack_alloca(LANES, np.float64)
    tt = _stack_alloca(TRI_LANES, np.float64)
    dt = _stack_alloca(TRI_LANES, np.float64)
    best_t = tmax
    best_id = np.int64(-1)
    best_det = 0.0
    sp = 0
    ref = np.int32(0)
    while True:
        if ref >= 0:
            m = _box_lanes(nodes, np.int64(ref) * NODE_WIDTH, nx, ny, nz,
                           oxn, oyn, ozn, oxf, oyf, ozf, ix, iy, iz, best_t, tl)
            if m != 0:
                # Push the hit children sorted so that the nearest is on top, take it
                # (for equal entry distances the later lane is on top).
                base = sp
                for j in range(LANES):
                    if (m >> j) & 1:
                        t = tl[j]
                        c = nodes_i[ref, 6 * LANES + j]
                        q = sp
                        while q > base and stack_t[q - 1] < t:
                            stack_t[q] = stack_t[q - 1]
                            stack_n[q] = stack_n[q - 1]
                            q -= 1
                        stack_t[q] = t
                        stack_n[q] = c
                        sp += 1
                        if c >= 0:
                            _prefetch_node(nodes, np.int64(c))
                sp -= 1
                ref = stack_n[sp]
                continue
        else:
            code = -1 - ref
            first = code >> 4
            n_blk = ((code & 15) + TRI_LANES - 1) // TRI_LANES
            for b in range(first, first + n_blk):
                hm = _triangle_lanes(tri, np.int64(b) * BLOCK_WIDTH, kx, ky, kz, okx, oky,
                                     okz, sx, sy, sz, best_t, exclude, tt, dt)
                # The lanes in order, as a loop over the triangles would take them.
                for j in range(TRI_LANES):
                    if (hm >> j) & 1 and tt[j] < best_t:
                        best_t = tt[j]
                        best_id = tri_i[b, 9 * TRI_LANES + j]
                        best_det = dt[j]
        # Pop the next subtree that may still hold a closer hit.
        found = False
        while sp > 0:
            sp -= 1
            if stack_t[sp] <= best_t:
                ref = stack_n[sp]
                found = True
                break
        if not found:
            break
    if best_id < 0:
        return best_id, tmax, False
    # det > 0 means the ray sees A, B, C counter-clockwise in the sheared frame, i.e.
    # it travels against n = (B - A) x (C - A): front side.
    return best_id, best_t, best_det > 0.0


@njit(**JIT)
def any_hit(arrays, ox, oy, oz, dx, dy, dz, tmax, exclude):
    """True when the ray ``o + t d`` hits any facet at ``0 < t < tmax``.

    Parameters are those of :func:`closest_hit`. Used for occlusion (rays toward the Sun
    with ``tmax = inf``, or toward a point with ``tmax`` its distance).
    """
    nodes = arrays[0]
    nodes_i = arrays[1]
    tri = arrays[2]
    tri_i = arrays[3]
    kx, ky, kz, okx, oky, okz, sx, sy, sz = _setup(ox, oy, oz, dx, dy, dz)
    ix, iy, iz, oxn, oyn, ozn, oxf, oyf, ozf, nx, ny, nz = _ray_setup(ox, oy, oz, dx, dy, dz)
    stack_n = _stack_alloca(STACK_SIZE, np.int32)
    tl = _stack_alloca(LANES, np.float64)
    tt = _stack_alloca(TRI_LANES, np.float64)
    dt = _stack_alloca(TRI_LANES, np.float64)
    sp = 0
    ref = np.int32(0)
    while True:
        if ref >= 0:
            m = _box_lanes(nodes, np.int64(ref) * NODE_WIDTH, nx, ny, nz,
                           oxn, oyn, ozn, oxf, oyf, ozf, ix, iy, iz, tmax, tl)
            for j in range(LANES):
                if (m >> j) & 1:
                    c = nodes_i[ref, 6 * LANES + j]
                    stack_n[sp] = c
                    sp += 1
                    if c >= 0:
                        _prefetch_node(nodes, np.int64(c))
        else:
            code = -1 - ref
            first = code >> 4
            n_blk = ((code & 15) + TRI_LANES - 1) // TRI_LANES
            for b in range(first, first + n_blk):
                if _triangle_lanes(tri, np.int64(b) * BLOCK_WIDTH, kx, ky, kz, okx, oky,
                                   okz, sx, sy, sz, tmax, exclude, tt, dt) != 0:
                    return True
        if sp == 0:
            break
        sp -= 1
        ref = stack_n[sp]
    return False
