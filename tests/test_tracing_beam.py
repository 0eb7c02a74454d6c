"""The conservative Sun-beam test (vfactor.tracing.beam) and its use in the Sun samples.

References: the rays it must never miss are checked against the brute-force Moller &
Trumbore (1997) oracle in tests/oracles.py; the solar disk's angular radius 4.65e-3 rad
at 1 au (about 0.2666 deg) is the common-practice value (from memory).
"""

from __future__ import annotations

import numpy as np
import pytest

from oracles import moller_trumbore
from radiation_shapes import box_faces, icosphere, rectangle
from vfactor.tracing import heat_kernels
from vfactor.tracing.beam import beam_clear
from vfactor.tracing.scene import Scene

SUN_HALF_ANGLE = 4.65e-3        # rad, solar disk from 1 au (common practice, from memory)


def _vehicle():
    """An outward box (0.6 m, 3x3 per face) with a panel standing off +z over part of the
    top, a U-shaped cavity on +x, and a sphere beside it: convex faces, coplanar
    neighbours, shadows and concave corners."""
    meshes = list(box_faces((0.6, 0.6, 0.6), 3, inward=False).values())
    meshes.append(rectangle([0.1, -0.2, 0.8], [0.3, 0.0, 0.0], [0.0, 0.5, 0.0], 2, 3))
    meshes.append(rectangle([0.6, 0.1, 0.1], [0.0, 0.4, 0.0], [0.3, 0.0, 0.0], 2, 2))
    meshes.append(rectangle([0.6, 0.1, 0.5], [0.3, 0.0, 0.0], [0.0, 0.4, 0.0], 2, 2))
    meshes.append(icosphere([-0.4, 0.3, 0.3], 0.2, 1))
    verts, tris, off = [], [], 0
    for v, t in meshes:
        verts.append(v)
        tris.append(t + off)
        off += v.shape[0]
    return np.vstack(verts), np.vstack(tris)


def _suns(count, seed):
    d = np.random.default_rng(seed).normal(size=(count, 3))
    return d / np.linalg.norm(d, axis=1, keepdims=True)


def _cone(sun, cos_half, u1, u2):
    """Directions uniform in the cone about ``sun`` (as the kernels draw them)."""
    a = np.cross(sun, [1.0, 0.0, 0.0] if abs(sun[0]) < 0.9 else [0.0, 1.0, 0.0])
    a /= np.linalg.norm(a)
    b = np.cross(sun, a)
    c = 1.0 - u1 * (1.0 - cos_half)
    s = np.sqrt(np.maximum(0.0, 1.0 - c * c))
    phi = 2 * np.pi * u2
    return (np.outer(s * np.cos(phi), a) + np.outer(s * np.sin(phi), b)
            + np.outer(c, sun))


@pytest.fixture(scope="module")
def vehicle():
    v, t = _vehicle()
    scene = Scene.build(v, t)
    diagonal = float(np.linalg.norm(np.ptp(v, axis=0))) * (1 + 1e-12)
    return scene, diagonal


def test_a_clear_side_has_no_shadowed_ray_and_the_test_clears_many(vehicle):
    """Whenever the beam test says clear, none of 32 rays from random points of the side
    toward random points of the solar disk hits any facet (brute-force oracle); the test
    is not vacuous: it clears a good share of the sides facing the Sun and refuses sides
    whose rays do hit something."""
    scene, diagonal = vehicle
    rng = np.random.default_rng(7)
    cos_half = np.cos(SUN_HALF_ANGLE)
    v, t, n = scene.vertices, scene.triangles, scene.normals
    k = 32
    cleared = facing = refused_shadowed = 0
    for sun in _suns(10, 1):
        sides = [(f, sign) for f in range(t.shape[0]) for sign in (1, -1)
                 if sign * n[f] @ sun > 0]
        clear = np.array([beam_clear(scene.arrays, v, t, n, f, sign, *sun, cos_half,
                                     diagonal) for f, sign in sides])
        facet = np.repeat([f for f, _ in sides], k)
        a, b, c = (v[t[facet, q]] for q in range(3))
        r1, r2 = rng.random(facet.size), rng.random(facet.size)
        s = np.sqrt(r1)[:, None]
        o = (1 - s) * a + s * (1 - r2)[:, None] * b + s * r2[:, None] * c
        d = _cone(sun, cos_half, rng.random(facet.size), rng.random(facet.size))
        hit = np.concatenate([moller_trumbore(o[q:q + 4096], d[q:q + 4096], v, t,
                                              exclude=facet[q:q + 4096])[0]
                              for q in range(0, facet.size, 4096)]).reshape(-1, k)
        shadowed = np.any(hit >= 0, axis=1)
        assert not np.any(shadowed & clear), sun
        facing += len(sides)
        cleared += int(clear.sum())
        refused_shadowed += int((shadowed & ~clear).sum())
    assert cleared > 0.4 * facing
    assert refused_shadowed > 0


def test_a_side_under_a_panel_is_not_clear(vehicle):
    scene, diagonal = vehicle
    v, t, n = scene.vertices, scene.triangles, scene.normals
    top = [f for f in range(t.shape[0]) if n[f, 2] > 0.99 and np.allclose(v[t[f], 2], 0.6)]
    centre = v[t[top]].mean(axis=1)
    under = [f for f, c in zip(top, centre) if 0.1 < c[0] < 0.4 and c[1] < 0.3]
    assert under
    up = np.array([0.0, 0.0, 1.0])
    for f in under:
        assert not beam_clear(scene.arrays, v, t, n, f, 1, *up, np.cos(SUN_HALF_ANGLE),
                              diagonal)


def test_sun_samples_are_the_same_with_and_without_the_beam_test(vehicle):
    """The beam test only skips tracing: mask and counts are bit for bit those of tracing
    every sample (and do not depend on the order the sides are handed to the threads)."""
    scene, diagonal = vehicle
    f = scene.triangles.shape[0]
    facet = np.concatenate([np.arange(f), np.arange(f)]).astype(np.int64)
    sign = np.concatenate([np.ones(f), -np.ones(f)]).astype(np.int64)
    reps, per = 4, 8
    for sun in _suns(12, 2):
        out = []
        # without and with the beam test, the sides handed to the threads in two orders
        for length, order in ((0.0, np.arange(2 * f)), (diagonal, np.arange(2 * f)[::-1])):
            mask = np.empty((2 * f, reps * per), np.bool_)
            count = np.empty((2 * f, reps))
            heat_kernels.sun_lit_mask(scene.arrays, scene.vertices, scene.triangles,
                                      scene.normals, facet, sign, order.copy(), np.uint64(5),
                                      reps, per, sun, np.cos(SUN_HALF_ANGLE), length, mask,
                                      count)
            out.append((mask, count))
        assert np.array_equal(out[0][0], out[1][0])
        assert np.array_equal(out[0][1], out[1][1])
        assert 0 < out[0][0].sum() < out[0][0].size


def test_mirror_chains_of_clear_sun_samples_are_the_same_without_tracing(vehicle):
    """Mirror rays of the lit Sun samples that the beam test marks clear escape without
    tracing: the chain tallies are bit for bit those of tracing every ray, and the test
    marks a good share of them (sides whose mirror beam leaves the vehicle)."""
    from vfactor.tracing import chain_kernels

    scene, diagonal = vehicle
    v, t, n = scene.vertices, scene.triangles, scene.normals
    f = t.shape[0]
    facet = np.concatenate([np.arange(f), np.arange(f)]).astype(np.int64)
    sign = np.concatenate([np.ones(f), -np.ones(f)]).astype(np.int64)
    facet_node = np.stack([np.arange(f) % 5, (np.arange(f) + 2) % 5], axis=1).astype(np.int64)
    absorb = np.full((f, 2), 0.3)
    specular = np.full((f, 2), 0.8)
    reps, per = 4, 4
    cos_half = np.cos(SUN_HALF_ANGLE)
    marked = total = 0
    for sun in _suns(6, 3):
        mask = np.empty((2 * f, reps * per), np.bool_)
        count = np.empty((2 * f, reps))
        heat_kernels.sun_lit_mask(scene.arrays, v, t, n, facet, sign, np.arange(2 * f),
                                  np.uint64(5), reps, per, sun, cos_half, diagonal, mask, count)
        first = np.zeros(2 * f + 1, np.int64)
        np.cumsum(mask.sum(axis=1), out=first[1:])
        u = int(first[-1])
        tallies = []
        drawn = []
        for length in (0.0, diagonal):
            rays = [np.empty((u, 3)), np.empty((u, 3)), np.empty(u, np.int64), np.empty(u),
                    np.empty(u, np.int64), np.empty(u, np.bool_)]
            heat_kernels.sun_mirror_rays(scene.arrays, v, t, n, facet, sign, np.uint64(5),
                                         reps, per, sun, cos_half, length, mask, first,
                                         np.linspace(1.0, 2.0, 2 * f), *rays)
            chunks = -(-u // 64)
            out = (np.empty((chunks, reps, 5)), np.empty((chunks, reps, 5)), np.empty(chunks),
                   np.empty(chunks))
            chain_kernels.specular_chains(scene.arrays, n, facet_node, absorb, specular,
                                          *rays[:5], rays[5], 64, 100, *out)
            tallies.append(out)
            drawn.append(rays)
            if length:
                marked += int(rays[5].sum())
                total += u
        for a, b in zip(*tallies):
            assert np.array_equal(a, b)
        # the rays marked clear are not drawn (zeros); the others, and every weight,
        # facet and replicate, are those drawn without the test
        clear = drawn[1][5]
        assert not drawn[0][5].any()
        for q in (0, 1):
            assert np.array_equal(drawn[1][q][~clear], drawn[0][q][~clear])
            assert not drawn[1][q][clear].any()
        for q in (2, 3, 4):
            assert np.array_equal(drawn[1][q], drawn[0][q])
    assert marked > 0.3 * total


def test_open_sides_are_those_with_no_vertex_in_front(vehicle):
    """open_sides (a tree walk) equals the brute-force definition: no vertex of any other
    facet lies above the side's plane by more than PLANE_MARGIN of the side's size; and a
    side of which nothing lies in front has no blocked ray (brute-force oracle: Moller &
    Trumbore rays over its hemisphere). Convex faces of the box are open, faces under the
    panel or in the cavity are not."""
    from vfactor.tracing.beam import PLANE_MARGIN, open_sides

    scene, _ = vehicle
    v, t, n = scene.vertices, scene.triangles, scene.normals
    f = np.repeat(np.arange(t.shape[0]), 2)
    sign = np.tile([1.0, -1.0], t.shape[0])
    got = open_sides(scene.arrays, v, t, n, f, sign)
    want = np.empty_like(got)
    for q, (fct, sg) in enumerate(zip(f, sign)):
        corners = v[t[fct]]
        size = np.ptp(corners, axis=0).max()
        height = (v[t] - corners[0]) @ (sg * n[fct])            # (faces, 3)
        height[fct] = 0.0
        want[q] = not np.any(height > PLANE_MARGIN * size)
    np.testing.assert_array_equal(got, want)
    assert 0.1 * got.size < got.sum() < 0.9 * got.size
    rng = np.random.default_rng(3)
    for q in np.flatnonzero(got)[:40]:
        fct, sg = f[q], sign[q]
        d = rng.normal(size=(64, 3))
        d *= np.sign(d @ (sg * n[fct]))[:, None]
        d /= np.linalg.norm(d, axis=1, keepdims=True)
        o = np.repeat(v[t[fct]].mean(axis=0)[None, :], 64, axis=0)
        hit = moller_trumbore(o, d, v, t, exclude=np.full(64, fct))[0]
        assert np.all(hit < 0)
    with pytest.raises(ValueError, match="signs"):
        open_sides(scene.arrays, v, t, n, f, sign[:-1])
