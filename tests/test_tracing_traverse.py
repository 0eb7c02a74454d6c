"""Tests of the ray queries (vfactor.tracing.traverse through Scene) against the oracle."""

import numpy as np
import pytest

from oracles import moller_trumbore
from vfactor.tracing.scene import Scene

# Hits may legitimately differ from the oracle only where the oracle's own test is not
# watertight: within this barycentric distance of an edge (the brief's 1e-9).
EDGE = 1e-9


def _random_scene(g, n, spread):
    c = g.uniform(-1, 1, (n, 3))
    v = (c[:, None, :] + g.normal(0, spread, (n, 3, 3))).reshape(-1, 3)
    return v, np.arange(3 * n).reshape(n, 3)


def _random_rays(g, r, box=1.5):
    o = g.uniform(-box, box, (r, 3))
    d = g.normal(size=(r, 3))
    return o, d / np.linalg.norm(d, axis=1)[:, None]


def _edge_distance(o, d, t, vertices, triangles, facet):
    """Smallest barycentric coordinate of the point o + t d on each given facet."""
    p = o + t[:, None] * d
    a = vertices[triangles[facet, 0]]
    e1 = vertices[triangles[facet, 1]] - a
    e2 = vertices[triangles[facet, 2]] - a
    out = np.empty(len(facet))
    for i in range(len(facet)):
        m = np.array([e1[i], e2[i]]).T
        bc, *_ = np.linalg.lstsq(m, p[i] - a[i], rcond=None)
        out[i] = min(bc[0], bc[1], 1 - bc[0] - bc[1])
    return out


def _compare(scene, vertices, triangles, o, d, tmax=np.inf, exclude=None):
    hits = scene.closest_hit(o, d, tmax=tmax, exclude=exclude)
    f, t, front, u, v = moller_trumbore(o, d, vertices, triangles, tmax=tmax, exclude=exclude)
    differ = np.flatnonzero(hits.facet != f)
    for i in differ:
        # Accept only a grazing case: either side's hit lies within EDGE of an edge.
        near = []
        if f[i] >= 0:
            near.append(min(u[i], v[i], 1 - u[i] - v[i]))
        if hits.facet[i] >= 0:
            near.append(_edge_distance(o[i:i + 1], d[i:i + 1], hits.distance[i:i + 1],
                                       vertices, triangles, hits.facet[i:i + 1])[0])
        assert min(near) < EDGE, f"ray {i}: vfactor {hits.facet[i]}, oracle {f[i]}"
    same = (hits.facet == f) & (f >= 0)
    # Distances agree to rounding of a unit-scale scene (1e-12 m).
    assert np.abs(hits.distance[same] - t[same]).max(initial=0) < 1e-12
    assert np.array_equal(hits.front[same], front[same])
    assert len(differ) <= max(2, len(o) // 1000)
    return hits, f


@pytest.mark.parametrize("n,spread,seed", [(1, 0.5, 0), (7, 0.4, 1), (400, 0.15, 2),
                                           (3000, 0.05, 3)])
def test_closest_hit_matches_oracle(n, spread, seed):
    g = np.random.default_rng(seed)
    vertices, triangles = _random_scene(g, n, spread)
    scene = Scene.build(vertices, triangles)
    o, d = _random_rays(g, 1500)
    hits, f = _compare(scene, vertices, triangles, o, d)
    assert (f >= 0).sum() > 0
    # Occlusion agrees with the closest hit, with and without a distance limit.
    assert np.array_equal(scene.occluded(o, d, np.inf), hits.facet >= 0)
    tlim = g.uniform(0, 2, len(o))
    occ = scene.occluded(o, d, tlim)
    assert np.array_equal(occ, (hits.facet >= 0) & (hits.distance < tlim))


def test_tmax_and_exclude_match_oracle():
    g = np.random.default_rng(5)
    vertices, triangles = _random_scene(g, 500, 0.2)
    scene = Scene.build(vertices, triangles, max_leaf=8)
    o, d = _random_rays(g, 1000)
    tmax = g.uniform(0.1, 3, len(o))
    first = scene.closest_hit(o, d).facet
    exclude = np.where(g.uniform(size=len(o)) < 0.7, first, -1)
    hits, _ = _compare(scene, vertices, triangles, o, d, tmax=tmax, exclude=exclude)
    assert not np.any((hits.facet == exclude) & (exclude >= 0))
    occ = scene.occluded(o, d, tmax, exclude=exclude)
    assert np.array_equal(occ, hits.facet >= 0)


def _grid(n, z=0.0, scale=1.0):
    """Square n x n grid of unit cells split into triangles (shared edges and vertices)."""
    x, y = np.meshgrid(np.arange(n + 1), np.arange(n + 1), indexing="ij")
    vertices = np.column_stack([x.ravel(), y.ravel(), np.full(x.size, z)]) * scale
    idx = np.arange((n + 1) ** 2).reshape(n + 1, n + 1)
    a = idx[:-1, :-1].ravel()
    b = idx[1:, :-1].ravel()
    c = idx[1:, 1:].ravel()
    d = idx[:-1, 1:].ravel()
    triangles = np.vstack([np.column_stack([a, b, c]), np.column_stack([a, c, d])])
    return vertices.astype(float), triangles


@pytest.mark.parametrize("scale", [1e-3, 1.0, 100.0])
def test_watertight_through_shared_edges_and_vertices(scale):
    # Rays aimed exactly at the vertices, edge midpoints and diagonals of a grid from
    # many directions: each must hit (Woop, Benthin & Wald 2013, section 1: no ray
    # passes between triangles that share an edge). A non-watertight test misses some.
    n = 6
    vertices, triangles = _grid(n, scale=scale)
    scene = Scene.build(vertices, triangles, max_leaf=2)
    g = np.random.default_rng(8)
    i, j = np.meshgrid(np.arange(1, 2 * n), np.arange(1, 2 * n), indexing="ij")
    targets = np.column_stack([i.ravel() / 2, j.ravel() / 2, np.zeros(i.size)]) * scale
    targets = np.repeat(targets, 40, axis=0)
    o = targets + g.normal(size=targets.shape) * scale * 3
    o[:, 2] = np.abs(o[:, 2]) + 0.1 * scale
    o[::2, 2] *= -1
    d = targets - o
    hits = scene.closest_hit(o, d)
    assert (hits.facet >= 0).all()
    dist = np.linalg.norm(targets - o, axis=1)
    # Hit at the target point to rounding (1e-12 relative to the scene size).
    assert np.abs(hits.distance - dist).max() < 1e-12 * scale * 10
    # Normals are +z: rays from above meet the front.
    assert np.array_equal(hits.front, o[:, 2] > 0)


def test_degenerate_triangles_never_hit_and_no_nan():
    vertices = np.array([[0, 0, 0], [1, 0, 0], [2, 0, 0], [0, 1, 0], [0.5, 0.5, 0],
                         [0, 0, 1.0]])
    # 0: collinear, 1: repeated vertex, 2: a point, 3: a real triangle in the plane x = 0
    triangles = np.array([[0, 1, 2], [0, 0, 3], [4, 4, 4], [0, 3, 5]])
    scene = Scene.build(vertices, triangles)
    g = np.random.default_rng(1)
    o = g.uniform(-1, 2, (3000, 3))
    d = np.vstack([[1, 0, 0], [0, 0, 1], [0, 1, 0]] * 1000).astype(float)
    d[1000:] = g.normal(size=(2000, 3))
    hits = scene.closest_hit(o, d)
    assert np.isin(hits.facet, [-1, 3]).all()
    assert not np.isnan(hits.distance).any()
    # Rays along the degenerate segment's line (they touch vertex 0 of facet 3 only) and
    # through the point-like facet 2.
    o2 = np.array([[-1.0, 0, 0], [3.0, 0, 0], [0.5, 0.5, -1]])
    d2 = np.array([[1.0, 0, 0], [-1.0, 0, 0], [0, 0, 1.0]])
    h2 = scene.closest_hit(o2, d2)
    assert h2.facet.tolist() == [3, 3, -1]
    np.testing.assert_allclose(h2.distance[:2], [1.0, 3.0], rtol=0, atol=1e-15)


def test_axis_aligned_and_zero_component_directions():
    vertices, triangles = _grid(4, z=1.0)
    scene = Scene.build(vertices, triangles, max_leaf=1)
    # Origins on cell boundaries (box faces) with zero direction components.
    o = np.array([[1.0, 1.0, 0.0], [2.0, 0.5, 0.0], [0.0, 0.0, 0.0], [4.0, 4.0, 0.0],
                  [1.5, 1.5, 2.0], [1.0, 1.0, 1.0]])
    d = np.array([[0, 0, 1.0], [0, 0, 1.0], [0, 0, 1.0], [0, 0, 1.0], [0, 0, -1.0],
                  [1.0, 0, 0]])
    hits = scene.closest_hit(o, d)
    assert (hits.facet[:5] >= 0).all()
    np.testing.assert_allclose(hits.distance[:5], [1, 1, 1, 1, 1], rtol=0, atol=1e-15)
    # A ray lying in the plane of the grid is edge-on: no hit, no NaN.
    assert hits.facet[5] == -1 and not np.isnan(hits.distance[5])


def test_query_validation():
    vertices, triangles = _grid(2)
    scene = Scene.build(vertices, triangles)
    o = np.zeros((2, 3))
    d = np.ones((2, 3))
    with pytest.raises(ValueError, match="origins"):
        scene.closest_hit(np.zeros((2, 2)), d)
    with pytest.raises(ValueError, match="direction 1 is zero"):
        scene.closest_hit(o, np.array([[1.0, 0, 0], [0, 0, 0]]))
    with pytest.raises(ValueError, match="not finite"):
        scene.occluded(np.array([[np.nan, 0, 0], [0, 0, 0]]), d, 1.0)
    with pytest.raises(ValueError, match="exclude"):
        scene.closest_hit(o, d, exclude=np.array([0, 99]))
    with pytest.raises(ValueError, match="tmax"):
        scene.occluded(o, d, -1.0)
    empty = scene.closest_hit(np.zeros((0, 3)), np.zeros((0, 3)))
    assert empty.facet.shape == (0,)
