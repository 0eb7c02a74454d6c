"""Tests of vfactor.tracing.bvh: structure invariants, conservative boxes, refit."""

import numpy as np
import pytest
import trimesh

from vfactor.tracing import bvh
from vfactor.tracing.scene import Scene


def _walk(tree):
    """Yield (node, lane, ref) over the tree from the root, each reference once."""
    stack = [0]
    while stack:
        n = stack.pop()
        for c in range(bvh.LANES):
            ref = int(tree.nodes_i[n, 6 * bvh.LANES + c])
            yield n, c, ref
            if ref >= 0:
                stack.append(ref)


def _lane_box(tree, n, c):
    row = tree.nodes[n].astype(np.float64)
    return np.array([row[bvh.LANES * q + c] for q in range(6)])


def _check_tree(tree, vertices, triangles, max_leaf):
    seen = np.zeros(tree.n_facets, dtype=int)
    visited = {0}
    for n, c, ref in _walk(tree):
        box = _lane_box(tree, n, c)
        if ref >= 0:
            assert ref > n                      # depth-first numbering
            visited.add(ref)
            for cc in range(bvh.LANES):
                cb = _lane_box(tree, ref, cc)
                if cb[0] <= cb[3]:
                    assert (box[:3] <= cb[:3]).all() and (box[3:] >= cb[3:]).all()
        else:
            code = -1 - ref
            first, count = code >> 4, code & 15
            assert count <= max_leaf
            if count == 0:
                assert (box[:3] == np.inf).all() and (box[3:] == -np.inf).all()
                continue
            # A leaf's triangles fill whole blocks from lane 0 (first is a block index).
            assert 0 <= first and first + (count - 1) // bvh.TRI_LANES < len(tree.leaf_tri)
            ids, rows = tree.leaf(ref)
            seen[ids] += 1
            for p in rows.reshape(-1, 3, 3):
                # Float32 boxes enclose the float64 vertices exactly (outward rounding).
                assert (box[:3] <= p.min(axis=0)).all() and (box[3:] >= p.max(axis=0)).all()
    # every triangle in exactly one leaf
    assert (seen[tree.tri_ids] == 1).all() and seen.sum() == len(tree.tri_ids)
    assert len(visited) == tree.n_nodes
    # Rows of tri are the original facets given by tri_ids.
    np.testing.assert_array_equal(tree.tri.reshape(-1, 3, 3),
                                  vertices[triangles[tree.tri_ids]])
    # A visit pushes at most LANES - 1 more entries than it pops.
    assert (bvh.LANES - 1) * tree.depth() + 1 <= bvh.STACK_SIZE
    assert tree.nodes.ctypes.data % 64 == 0


@pytest.mark.parametrize("max_leaf", [1, 4, 15])
def test_tree_invariants_random_soup(max_leaf):
    g = np.random.default_rng(max_leaf)
    n = 2000
    c = g.uniform(-1, 1, (n, 3)) * [1e3, 1.0, 1e-3]   # very anisotropic spread
    vertices = (c[:, None, :] + g.normal(0, 0.01, (n, 3, 3))).reshape(-1, 3)
    triangles = np.arange(3 * n).reshape(n, 3)
    tree = bvh.build(vertices, triangles, max_leaf=max_leaf)
    _check_tree(tree, vertices, triangles, max_leaf)


def test_coincident_centroids_and_degenerates():
    # 500 copies of one triangle (no SAH split possible) plus degenerate facets.
    v = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [2, 0, 0]], float)
    triangles = np.vstack([np.tile([0, 1, 2], (500, 1)), [[0, 1, 3], [2, 2, 2]]])
    tree = bvh.build(v, triangles, max_leaf=4)
    assert tree.tri.shape[0] == 500            # the two degenerate ones are left out
    assert not np.isin([500, 501], tree.tri_ids).any()
    _check_tree(tree, v, triangles, 4)


def test_single_and_empty():
    v = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0]], float)
    for tris in (np.array([[0, 1, 2]]), np.zeros((0, 3), int), np.array([[0, 0, 1]])):
        scene = Scene.build(v, tris)
        h = scene.closest_hit(np.array([[0.2, 0.2, 1.0]]), np.array([[0, 0, -1.0]]))
        assert h.facet[0] == (0 if len(tris) and tris[0, 0] != tris[0, 1] else -1)


def test_refit_matches_rebuild():
    # Move the vertices of a cylinder and a sphere (rotation + non-rigid stretch): the
    # refit tree answers every ray like a tree built from scratch on the moved mesh.
    mesh = trimesh.util.concatenate([
        trimesh.creation.cylinder(radius=0.5, height=2.0, sections=48),
        trimesh.creation.icosphere(subdivisions=3, radius=0.4).apply_translation([1.5, 0, 0]),
    ])
    v0 = np.asarray(mesh.vertices, float)
    tris = np.asarray(mesh.faces, np.int64)
    scene = Scene.build(v0, tris)
    arrays_before = scene.arrays
    g = np.random.default_rng(4)
    ang = 0.7
    rot = np.array([[np.cos(ang), -np.sin(ang), 0], [np.sin(ang), np.cos(ang), 0], [0, 0, 1]])
    v1 = (v0 * [1.0, 1.3, 0.8]) @ rot.T + [0.2, -0.1, 3.0]
    scene.refit(v1)
    assert all(a is b for a, b in zip(arrays_before, scene.arrays))   # in place
    _check_tree(scene.bvh, v1, tris, 12)          # Scene.build default max_leaf
    fresh = Scene.build(v1, tris)
    o = g.uniform(-3, 3, (20000, 3)) + [0.2, -0.1, 3.0]
    # Half aimed at vertices of the moved mesh, half at random.
    d = g.normal(size=o.shape)
    d[::2] = v1[g.integers(0, len(v1), len(o[::2]))] - o[::2]
    a = scene.closest_hit(o, d)
    b = fresh.closest_hit(o, d)
    # Random rays: identical answers. Rays aimed at a vertex hit all facets of its fan at
    # the same distance; which one is reported depends on the visiting order, so there
    # only hit/miss and the distance (to rounding, 1e-12 m) must agree.
    np.testing.assert_array_equal(a.facet[1::2], b.facet[1::2])
    np.testing.assert_array_equal(a.distance[1::2], b.distance[1::2])
    np.testing.assert_array_equal(a.front[1::2], b.front[1::2])
    np.testing.assert_array_equal(a.facet[::2] >= 0, b.facet[::2] >= 0)
    hit = a.facet >= 0
    np.testing.assert_allclose(a.distance[hit], b.distance[hit], rtol=0, atol=1e-12)
    assert (a.facet >= 0).mean() > 0.3
    # Normals follow the move.
    np.testing.assert_allclose(scene.normals, fresh.normals, rtol=0, atol=1e-15)


def test_build_validation():
    from vfactor.errors import GeometryError
    v = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0]], float)
    with pytest.raises(GeometryError, match="vertex 1 is not finite"):
        Scene.build(np.array([[0, 0, 0], [np.inf, 0, 0], [0, 1, 0]]), [[0, 1, 2]])
    with pytest.raises(GeometryError, match="facet 0 refers to vertex"):
        Scene.build(v, [[0, 1, 3]])
    with pytest.raises(GeometryError, match="shape"):
        Scene.build(v[:, :2], [[0, 1, 2]])
    with pytest.raises(ValueError, match="max_leaf"):
        bvh.build(v, np.array([[0, 1, 2]]), max_leaf=16)
    scene = Scene.build(v, [[0, 1, 2]])
    with pytest.raises(GeometryError, match="keep shape"):
        scene.refit(np.zeros((4, 3)))
