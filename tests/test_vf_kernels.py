"""Tests of vfactor.tracing.vf_kernels against slow, obviously correct re-implementations.

The oracles rebuild every ray in plain Python from the documented design (scrambled Sobol'
point from scipy's unscrambled points and Python integers, side by area, point and
direction by the sampling functions) and
trace it by brute force (tests/oracles.py, Moller & Trumbore 1997); the fused kernels must
give the same tallies bit for bit.
"""

from __future__ import annotations

import numpy as np

from oracles import moller_trumbore
from radiation_shapes import BLACK, box_faces, make_geometry, rectangle
from vfactor.geometry import Coating
from vfactor.tracing import vf_kernels as K
from vfactor.tracing.rng import STREAM_STRIDE, philox4x32_10
from vfactor.tracing.sampling import cosine_direction, triangle_point
from vfactor.tracing.scene import Scene
from vfactor.tracing.sobol import draw_scramble


_SCIPY_POINTS = {}


def sobol_word_scipy(j, d):
    """Unscrambled 32-bit word of point ``j``, dimension ``d``, from scipy's Sobol' points
    (Joe & Kuo direction numbers; scipy lists the points in Gray-code order: its ``i``-th
    point is point ``i ^ (i >> 1)`` of the sequence)."""
    from scipy.stats import qmc

    if "x" not in _SCIPY_POINTS:
        x = qmc.Sobol(5, scramble=False, bits=32).random(1 << 14)
        _SCIPY_POINTS["x"] = (x * 2.0 ** 32).astype(np.uint64)
    i, g = 0, j          # inverse Gray code: i with i ^ (i >> 1) == j
    while g:
        i ^= g
        g >>= 1
    return int(_SCIPY_POINTS["x"][i, d])


def scrambled_point_python(seed, stream, replicate, j):
    """Point j of the Owen-scrambled Sobol' sequence (design of vfactor.tracing.sobol) with
    Python integers: scramble words from Philox at counters 4 replicate + t, bits
    reversed, mixed (add, odd multiply, xor-multiplies by even constants), reversed back."""
    words = []
    for t in range(3):
        c = replicate * 4 + t
        w = philox4x32_10(c & 0xFFFFFFFF, c >> 32, stream & 0xFFFFFFFF, stream >> 32,
                          seed & 0xFFFFFFFF, seed >> 32)
        words += [int(x) for x in w]
    rev = lambda x: int(f"{x:032b}"[::-1], 2)
    m32 = 0xFFFFFFFF
    out = []
    for d in range(5):
        add, mul = words[2 * d], words[2 * d + 1] | 1
        x = rev(sobol_word_scipy(j, d))
        x ^= (x * 0x3D20ADEA) & m32
        x = (x + add) & m32
        x = (x * mul) & m32
        x ^= (x * 0x05526C56) & m32
        x ^= (x * 0x53A22864) & m32
        out.append((rev(x) + 0.5) * 2.0 ** -32)
    return out


def test_block_order_is_increasing_first_coordinate():
    scramble = np.empty(10, np.uint64)
    draw_scramble(np.uint64(1), np.uint64(5), np.uint64(0), scramble)
    for blk, k_lo, k_hi in ((0, 0, K.CHUNK), (K.CHUNK, 0, 3000), (3 * K.CHUNK, 700, 4000)):
        base = np.empty(5, np.uint64)
        K.block_words(blk, base)
        order = np.empty(K.CHUNK, np.int64)
        K._order_block(K._TABLE, scramble, base, k_lo, k_hi, order)
        ks = [int(k) for k in order if k >= 0]
        assert sorted(ks) == list(range(k_lo, k_hi))
        u0 = [scrambled_point_python(1, 5, 0, blk + k)[0] for k in ks]
        assert all(a < b for a, b in zip(u0, u0[1:]))


def _scene_with_sides():
    """Two nodes with several facets (one node on both sides of a plate), an inert side,
    and an open box around them."""
    faces = box_faces((1.0, 1.0, 1.0), divisions=1, inward=True)
    del faces["+z"]
    sheets = [dict(mesh=m, front=("box", "black")) for m in faces.values()]
    sheets.append(dict(mesh=rectangle([0.2, 0.2, 0.5], [0.6, 0, 0], [0, 0.3, 0.1], 2, 2),
                       front=("plate", "black"), back=("plate", "black")))
    sheets.append(dict(mesh=rectangle([0.1, 0.6, 0.3], [0.3, 0, 0], [0, 0.3, 0.0], 1, 1),
                       front=("tab", "black")))                # back inert
    return make_geometry(sheets)


def _oracle_pairs(g, pairs, seed, m, purpose, lengths=None):
    """(counts, per-ray side ids, per-ray columns) rebuilt ray by ray in Python; pair ``p``
    emits ``lengths[p]`` rays (default ``m`` each)."""
    n = g.n_nodes
    ptr, facet, sign, cum, side_id = K.emitter_table(g.front_node, g.back_node, g.areas, n)
    counts = np.zeros((len(pairs), n + 2), np.int64)
    sides, cols = [], []
    for p, (node, rnd) in enumerate(pairs):
        O, D, E, S = [], [], [], []
        size = m if lengths is None else int(lengths[p])
        for j in range(size):
            u = scrambled_point_python(seed, purpose * STREAM_STRIDE + node, rnd, j)
            s = ptr[node] + int(np.searchsorted(cum[ptr[node]:ptr[node + 1]], u[0],
                                                side="right"))
            s = min(s, ptr[node + 1] - 1)
            f = int(facet[s])
            nrm = sign[s] * g.normals[f]
            O.append(triangle_point(g.vertices, g.triangles, f, u[1], u[2]))
            D.append(cosine_direction(nrm[0], nrm[1], nrm[2], u[3], u[4]))
            E.append(f)
            S.append(s)
        hit, _, front, _, _ = moller_trumbore(np.array(O), np.array(D), g.vertices,
                                              g.triangles, exclude=np.array(E))
        for k in range(size):
            if hit[k] < 0:
                c = n
            else:
                c = g.front_node[hit[k]] if front[k] else g.back_node[hit[k]]
                c = n + 1 if c < 0 else c
            counts[p, c] += 1
            cols.append(c)
        sides += [int(side_id[s]) for s in S]
    return counts, np.array(sides), np.array(cols)


def test_emitter_table_lays_sides_end_to_end_by_area():
    g = _scene_with_sides()
    ptr, facet, sign, cum, side_id = K.emitter_table(g.front_node, g.back_node, g.areas,
                                                     g.n_nodes)
    plate = g.nodes.index("plate")
    sl = slice(ptr[plate], ptr[plate + 1])
    assert set(sign[sl]) == {1.0, -1.0}                    # both sides of the plate
    a = g.areas[facet[sl]]
    np.testing.assert_allclose(cum[sl], np.cumsum(a) / a.sum(), rtol=0, atol=1e-15)
    assert cum[sl][-1] == 1.0
    np.testing.assert_array_equal(side_id[sl], np.where(sign[sl] > 0, facet[sl],
                                                        g.n_facets + facet[sl]))


def test_vf_pairs_equals_ray_by_ray_oracle():
    g = _scene_with_sides()
    sc = Scene.build(g.vertices, g.triangles)
    kin_emit = K.emitter_table(g.front_node, g.back_node, g.areas, g.n_nodes)
    geo = (g.vertices, g.triangles, g.normals, g.front_node.astype(np.int64),
           g.back_node.astype(np.int64))
    pairs = [(0, 0), (1, 3), (2, 1)]
    m = 300
    counts, ray_side, ray_col = K.vf_pairs(sc.arrays, kin_emit, geo, [p[0] for p in pairs],
                                           [p[1] for p in pairs], 11, m, record=True)
    ref, ref_side, ref_col = _oracle_pairs(g, pairs, 11, m, K.PURPOSE_VF)
    np.testing.assert_array_equal(counts, ref)
    np.testing.assert_array_equal(kin_emit[4][ray_side], ref_side)
    np.testing.assert_array_equal(ray_col, ref_col)
    assert counts[:, -2].sum() > 0 and counts[:, -1].sum() > 0    # space and inert seen


def test_round_sizes_grow_after_the_first_rounds():
    m = 7
    sizes = K.round_rays(np.arange(200), m)
    np.testing.assert_array_equal(sizes[:8], m)            # MIN_ROUNDS = 8 rounds of m
    step = K.GROWTH_STEP
    assert np.all(sizes[2 * step:] >= 2 * m) and np.all(np.diff(sizes) >= 0)
    np.testing.assert_array_equal(sizes, m * np.clip(np.arange(200) // step, 1,
                                                     K.GROWTH_CAP))
    assert K.round_rays(10 ** 4, m) == K.GROWTH_CAP * m
    big = K.GROWTH_LIMIT // 4                        # growth stops at GROWTH_LIMIT rays
    assert K.round_rays(10 ** 4, big) == K.GROWTH_LIMIT
    assert K.round_rays(10 ** 4, 3 * K.GROWTH_LIMIT) == 3 * K.GROWTH_LIMIT   # never cut
    np.testing.assert_array_equal(K.rays_through([0, 8, 40], big),
                                  np.cumsum(K.round_rays(np.arange(40), big))[[0, 7, 39]]
                                  * [0, 1, 1])
    np.testing.assert_array_equal(K.rays_through(np.arange(201), m),
                                  np.concatenate([[0], np.cumsum(sizes)]))


def test_vf_pairs_with_grown_rounds_and_windows_equals_oracle():
    # Rounds past the first ones have more rays; a window (j_lo, j_hi) ends at each round's
    # own length; items of many rays (traced in increasing u0) and of few both appear, and
    # a round crosses a block of CHUNK rays.
    g = _scene_with_sides()
    sc = Scene.build(g.vertices, g.triangles)
    emit = K.emitter_table(g.front_node, g.back_node, g.areas, g.n_nodes)
    geo = (g.vertices, g.triangles, g.normals, g.front_node.astype(np.int64),
           g.back_node.astype(np.int64))
    m = 300
    pairs = [(0, 2), (1, 17), (2, 41), (1, 130)]
    lengths = K.round_rays([p[1] for p in pairs], m)
    assert list(lengths) == [300, 600, 1500, 4800]      # the last crosses a block of CHUNK
    nodes, rounds = [p[0] for p in pairs], [p[1] for p in pairs]
    counts, ray_side, ray_col = K.vf_pairs(sc.arrays, emit, geo, nodes, rounds, 5, m,
                                           record=True)
    ref, ref_side, ref_col = _oracle_pairs(g, pairs, 5, m, K.PURPOSE_VF, lengths)
    np.testing.assert_array_equal(counts, ref)
    np.testing.assert_array_equal(counts.sum(axis=1), lengths)
    np.testing.assert_array_equal(emit[4][ray_side], ref_side)
    np.testing.assert_array_equal(ray_col, ref_col)
    parts = [K.vf_pairs(sc.arrays, emit, geo, nodes, rounds, 5, m, lo, hi)[0]
             for lo, hi in ((0, 250), (250, 700), (700, 5000))]
    np.testing.assert_array_equal(sum(parts), counts)
    import numba
    old = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = K.vf_pairs(sc.arrays, emit, geo, nodes[::-1], rounds[::-1], 5, m)[0]
    finally:
        numba.set_num_threads(old)
    np.testing.assert_array_equal(one[::-1], counts)          # threads, pair order


def test_gebhart_pairs_with_black_nodes_is_a_first_hit_tally():
    # Every node absorbs what it meets (absorptivity 1): reflection tracing reduces to the
    # first-hit tally of its own emission stream.
    g = _scene_with_sides()
    sc = Scene.build(g.vertices, g.triangles)
    emit = K.emitter_table(g.front_node, g.back_node, g.areas, g.n_nodes)
    geo = (g.vertices, g.triangles, g.normals, g.front_node.astype(np.int64),
           g.back_node.astype(np.int64))
    n = g.n_nodes
    counts = K.gebhart_pairs(sc.arrays, emit, geo, np.ones(n), np.zeros(n), [1, 2], [0, 5],
                             4, 200)
    ref, _, _ = _oracle_pairs(g, [(1, 0), (2, 5)], 4, 200, K.PURPOSE_GEBHART)
    np.testing.assert_array_equal(counts, ref)


def test_gebhart_pairs_perfect_mirror_box_loses_nothing_but_escapes():
    # An open box of perfect specular mirrors (absorptivity 0, specular 1) above a black
    # floor node: every ray ends absorbed by the floor or escaped, and rows sum to the rays
    # emitted (energy conservation of the random walk). Only a ray emitted almost
    # horizontally by a wall can bounce between the mirrors MAX_BOUNCES times and be cut
    # (counted lost): |dz| below about 1/MAX_BOUNCES, probability of order 1e-3 (ours).
    faces = box_faces((1.0, 1.0, 1.0), divisions=1, inward=True)
    del faces["+z"]
    coat = {"black": BLACK, "mirror": Coating("mirror", 0.0, 0.0, 1.0, 1.0)}
    sheets = [dict(mesh=m, front=("floor" if k == "-z" else "walls",
                                  "black" if k == "-z" else "mirror"))
              for k, m in faces.items()]
    g = make_geometry(sheets, coat)
    sc = Scene.build(g.vertices, g.triangles)
    emit = K.emitter_table(g.front_node, g.back_node, g.areas, g.n_nodes)
    geo = (g.vertices, g.triangles, g.normals, g.front_node.astype(np.int64),
           g.back_node.astype(np.int64))
    walls, floor = g.nodes.index("walls"), g.nodes.index("floor")
    absorb = np.zeros(2)
    absorb[floor] = 1.0
    specular = np.zeros(2)
    specular[walls] = 1.0
    c = K.gebhart_pairs(sc.arrays, emit, geo, absorb, specular, [floor, walls], [0, 0], 3,
                        5000)
    assert np.all(c.sum(axis=1) == 5000)
    assert np.all(c[:, walls] == 0) and c[0, -1] == 0 and c[1, -1] <= 0.002 * 5000
    # the floor, seen through mirror walls, is an infinite plane of floor images: every
    # ray from the floor goes up and escapes (it cannot come back down to the floor)
    assert c[0, -2] == 5000
