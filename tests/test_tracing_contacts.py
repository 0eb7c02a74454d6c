"""Tests of vfactor.tracing.contacts: the kernel against the numpy sweep of the former
contact check (tests/oracles.py::contact_pairs_reference), and hand-built cases whose
contacts are known by construction."""

import numba
import numpy as np
import pytest
import trimesh

from oracles import contact_pairs_reference
from vfactor.errors import GeometryError
from vfactor.tracing.contacts import (COINCIDENT_OPPOSITE, COINCIDENT_SAME, CROSSING,
                                      KIND_NAMES, Contacts, find_contacts)

# The tolerance of `vfactor check` is 1e-6 of the model's bounding-box diagonal
# (vfactor/checks.py); the scenes here are about 1 m, so 1 um.
TOL = 1e-6


def _normals(vertices, triangles):
    """Unit normals (B - A) x (C - A) / |...| of the facets (plain numpy)."""
    n = np.cross(vertices[triangles[:, 1]] - vertices[triangles[:, 0]],
                 vertices[triangles[:, 2]] - vertices[triangles[:, 0]])
    return n / np.linalg.norm(n, axis=1)[:, None]


def _join(*meshes):
    """(vertices, triangles, part) of meshes given as (vertices, triangles) pairs, one
    part each, in the order given."""
    verts, tris, part, base = [], [], [], 0
    for k, (v, f) in enumerate(meshes):
        verts.append(np.asarray(v, float))
        tris.append(np.asarray(f, np.int64) + base)
        part.append(np.full(len(f), k))
        base += len(v)
    return np.vstack(verts), np.vstack(tris), np.concatenate(part)


def _trimesh(mesh, shift=(0.0, 0.0, 0.0), rotation=None):
    v = np.asarray(mesh.vertices, float)
    if rotation is not None:
        v = v @ np.asarray(rotation).T
    return v + np.asarray(shift, float), np.asarray(mesh.faces, np.int64)


def _grid(n, size=1.0, z=0.0, origin=(0.0, 0.0), flip=False):
    """Flat n x n grid of square cells, two triangles per cell, normal +z (-z if flip)."""
    x = np.linspace(0.0, size, n + 1)
    gx, gy = np.meshgrid(x + origin[0], x + origin[1], indexing="ij")
    v = np.column_stack([gx.ravel(), gy.ravel(), np.full(gx.size, z)])
    idx = np.arange(gx.size).reshape(n + 1, n + 1)
    q0, q1, q2, q3 = idx[:-1, :-1], idx[1:, :-1], idx[1:, 1:], idx[:-1, 1:]
    f = np.vstack([np.column_stack([q0.ravel(), q1.ravel(), q2.ravel()]),
                   np.column_stack([q0.ravel(), q2.ravel(), q3.ravel()])])
    return v, (f[:, ::-1] if flip else f)


def _contacts(vertices, triangles, part, tol=TOL, usable=None, between_only=False):
    """Kernel result, checked equal to the oracle on the pairs the oracle covers."""
    normals = _normals(vertices, triangles)
    if usable is None:
        usable = np.ones(len(triangles), bool)
    got = find_contacts(vertices, triangles, normals, usable, tol)
    between = part[got.a] != part[got.b]
    ref = contact_pairs_reference(vertices, triangles, normals, usable, tol, part)
    np.testing.assert_array_equal(got.a[between], ref[0])
    np.testing.assert_array_equal(got.b[between], ref[1])
    np.testing.assert_array_equal(got.kind[between], ref[2])
    if not between_only:
        ref = contact_pairs_reference(vertices, triangles, normals, usable, tol, part,
                                      same_part=True)
        np.testing.assert_array_equal(got.a, ref[0])
        np.testing.assert_array_equal(got.b, ref[1])
        np.testing.assert_array_equal(got.kind, ref[2])
    return got


def _pairs(contacts):
    return set(zip(contacts.a.tolist(), contacts.b.tolist()))


# --------------------------------------------------------------------------------------
# Kernel == oracle
# --------------------------------------------------------------------------------------

def test_random_soup_matches_reference():
    """Random triangles in a unit cube (crossings) plus random triangles in one plane,
    either winding (coincident pairs both ways), in random parts."""
    g = np.random.default_rng(11)
    n_free, n_flat = 600, 300
    centre = g.uniform(0, 1, (n_free, 1, 3))
    free = centre + g.normal(0, 0.08, (n_free, 3, 3))
    c2 = g.uniform(0, 1, (n_flat, 1, 2))
    flat2 = c2 + g.normal(0, 0.08, (n_flat, 3, 2))
    flat = np.concatenate([flat2, np.full((n_flat, 3, 1), 0.5)], axis=2)
    tris = np.concatenate([free, flat])
    v = tris.reshape(-1, 3)
    f = np.arange(len(v)).reshape(-1, 3)
    part = g.integers(0, 5, len(f))
    got = _contacts(v, f, part)
    kinds = np.bincount(got.kind, minlength=4)
    # the comparison means something only if every branch of the rules was taken
    assert kinds[CROSSING] > 100 and kinds[COINCIDENT_SAME] > 20 \
        and kinds[COINCIDENT_OPPOSITE] > 20, kinds


def test_interpenetrating_boxes_cross():
    box = trimesh.creation.box(extents=[1.0, 1.0, 1.0]).subdivide().subdivide()
    v, f, part = _join(_trimesh(box),
                       _trimesh(box, shift=(0.37, 0.21, 0.13)),
                       _trimesh(box, rotation=trimesh.transformations.rotation_matrix(
                           0.4, [1, 2, 3])[:3, :3], shift=(-0.5, 0.6, 0.2)))
    got = _contacts(v, f, part)
    assert len(got.a) > 0
    assert (got.kind == CROSSING).all()
    assert (part[got.a] != part[got.b]).all()       # each box alone is clean
    # box 0 and the shifted copy cut through each other's faces: pairs of both
    assert {(0, 1), (0, 2)} <= set(zip(part[got.a].tolist(), part[got.b].tolist()))


def test_rotated_copies_match_reference():
    sphere = trimesh.creation.icosphere(subdivisions=3, radius=0.5)
    rot = trimesh.transformations.rotation_matrix(0.3, [0.2, 1.0, 0.4])[:3, :3]
    v, f, part = _join(_trimesh(sphere), _trimesh(sphere, rotation=rot),
                       _trimesh(sphere, rotation=rot.T, shift=(0.45, 0.0, 0.0)))
    got = _contacts(v, f, part)
    assert (got.kind == CROSSING).sum() > 100


def test_symmetric_rotation_gives_one_coincident_partner_per_facet():
    """An icosphere turned by 72 degrees about a vertex axis lands on itself (icosahedral
    symmetry; trimesh's icosahedron has vertices (+-1, +-phi, 0) cyclic, common knowledge),
    so every facet of the copy coincides with exactly one facet of the original."""
    sphere = trimesh.creation.icosphere(subdivisions=1, radius=0.5)
    phi = (1 + 5 ** 0.5) / 2
    rot = trimesh.transformations.rotation_matrix(2 * np.pi / 5, [0.0, 1.0, phi])[:3, :3]
    v, f, part = _join(_trimesh(sphere), _trimesh(sphere, rotation=rot))
    got = _contacts(v, f, part)
    n = len(sphere.faces)
    assert len(got.a) == n
    assert (got.kind == COINCIDENT_SAME).all()
    assert sorted(got.a.tolist()) == list(range(n))             # a bijection
    assert sorted(got.b.tolist()) == list(range(n, 2 * n))


@pytest.mark.parametrize("flip, kind", [(False, COINCIDENT_SAME),
                                        (True, COINCIDENT_OPPOSITE)])
def test_stacked_coplanar_panels(flip, kind):
    """Two 4 x 4 grids of 1 m cells in one plane, the second shifted by two cells: the
    cells of the two overlapping columns coincide triangle for triangle (16 pairs);
    triangles that only share the cell diagonal or an edge touch, and do not count."""
    a = _grid(4, size=4.0)
    b = _grid(4, size=4.0, origin=(2.0, 0.0), flip=flip)
    v, f, part = _join(a, b)
    got = _contacts(v, f, part)
    assert len(got.a) == 16
    assert (got.kind == kind).all()
    ca = (v[f[got.a]].mean(axis=1))
    cb = (v[f[got.b]].mean(axis=1))
    np.testing.assert_allclose(ca, cb, atol=1e-12)             # the same triangle [m]


def test_near_touching_within_tolerance():
    """Unit boxes side by side: a gap or an overlap below tol is touching (no contact),
    an overlap of 10 tol is a crossing, face on face is a coincident opposite contact."""
    box = trimesh.creation.box(extents=[1.0, 1.0, 1.0])
    for dx, expect in [(1.0 + 0.5 * TOL, None), (1.0 - 0.5 * TOL, None),
                       (1.0 - 10 * TOL, CROSSING), (1.0 + 2 * TOL, "none")]:
        v, f, part = _join(_trimesh(box), _trimesh(box, shift=(dx, 0.3, 0.2)))
        got = _contacts(v, f, part)
        if expect == CROSSING:
            assert len(got.a) > 0 and (got.kind == CROSSING).all(), dx
        elif expect is None:
            # within tol: the side faces meet face to face (coplanar within tol)
            assert not (got.kind == CROSSING).any(), dx
            assert (got.kind == COINCIDENT_OPPOSITE).all() and len(got.a) > 0, dx
        else:
            assert len(got.a) == 0, dx
    # a box standing on another, shifted so that only a corner region overlaps
    v, f, part = _join(_trimesh(box), _trimesh(box, shift=(0.5, 0.5, 1.0)))
    got = _contacts(v, f, part)
    assert len(got.a) > 0 and (got.kind == COINCIDENT_OPPOSITE).all()


# --------------------------------------------------------------------------------------
# Known answers
# --------------------------------------------------------------------------------------

def _clean_meshes():
    box = trimesh.creation.box(extents=[1.0, 0.7, 1.3])
    for _ in range(3):
        box = box.subdivide()
    return {
        "box": _trimesh(box),
        "sphere-fine": _trimesh(trimesh.creation.icosphere(subdivisions=5, radius=0.5)),
        "cylinder": _trimesh(trimesh.creation.cylinder(radius=0.4, height=1.1,
                                                       sections=64)),
        "grid": _grid(60),
    }


@pytest.mark.parametrize("name", sorted(_clean_meshes()))
def test_clean_meshes_have_no_contacts(name):
    """Neighbours share edges and vertices (and are coplanar in the grid): touching only."""
    v, f = _clean_meshes()[name]
    got = find_contacts(v, f, _normals(v, f), np.ones(len(f), bool), TOL)
    assert len(got.a) == 0, list(zip(got.a[:5], got.b[:5], got.kind[:5]))


def test_duplicate_faces_within_one_mesh_are_coincident_same():
    v, f = _trimesh(trimesh.creation.icosphere(subdivisions=3, radius=0.5))
    dup = np.array([3, 100, 101, 777, 1279])
    f2 = np.vstack([f, f[dup]])
    got = _contacts(v, f2, np.zeros(len(f2), int))
    assert _pairs(got) == {(int(i), len(f) + k) for k, i in enumerate(dup)}
    assert (got.kind == COINCIDENT_SAME).all()


def test_folded_back_facet_is_coincident_opposite():
    """In a grid, the second triangle of one cell folded over the cell diagonal lies on
    the first triangle with the opposite normal."""
    v, f = _grid(8)
    cell = 27
    t1, t2 = cell, 64 + cell                 # (q0, q1, q2) and (q0, q2, q3) of the cell
    q0, q1, q2 = f[t1]
    v = np.vstack([v, v[q1]])                # a new vertex where q1 is
    f = f.copy()
    f[t2] = [q0, q2, len(v) - 1]             # (q0, q2, q3) folded onto (q0, q2, q1)
    got = _contacts(v, f, np.zeros(len(f), int))
    assert _pairs(got) == {(t1, t2)}
    assert got.kind.tolist() == [COINCIDENT_OPPOSITE]


def test_self_intersecting_pair_in_one_mesh():
    """Two triangles of one part crossing like an X (one in z = 0, one in x = 0.2)."""
    v = np.array([[-1.0, -1.0, 0.0], [1.0, -1.0, 0.0], [0.0, 1.0, 0.0],
                  [0.2, -0.5, -0.5], [0.2, 0.5, -0.5], [0.2, 0.0, 0.5]])
    f = np.array([[0, 1, 2], [3, 4, 5]])
    got = _contacts(v, f, np.zeros(2, int))
    assert (got.a.tolist(), got.b.tolist(), got.kind.tolist()) == ([0], [1], [CROSSING])
    # moved so that it only touches the first (its lower edge 0.5 tol above z = 0)
    v2 = v.copy()
    v2[3:, 2] += 0.5 - 0.5 * TOL
    assert len(find_contacts(v2, f, _normals(v2, f), np.ones(2, bool), TOL).a) == 0


def test_unusable_facets_are_left_out():
    v, f = _grid(4)
    f2 = np.vstack([f, f[:1]])
    normals = _normals(v, f2)
    usable = np.ones(len(f2), bool)
    assert len(find_contacts(v, f2, normals, usable, TOL).a) == 1
    usable[-1] = False
    assert len(find_contacts(v, f2, normals, usable, TOL).a) == 0


def test_same_result_for_any_thread_count():
    sphere = trimesh.creation.icosphere(subdivisions=4, radius=0.5)
    meshes = [_trimesh(sphere, shift=(0.7 * i, 0.3 * (i % 2), 0.0)) for i in range(4)]
    v, f, part = _join(*meshes, _grid(80, size=3.0, origin=(-0.5, -0.5), z=0.1))
    normals = _normals(v, f)
    usable = np.ones(len(f), bool)
    saved = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = find_contacts(v, f, normals, usable, TOL)
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = find_contacts(v, f, normals, usable, TOL)
    finally:
        numba.set_num_threads(saved)
    assert len(one.a) > 1000
    for x, y in zip(one, two):
        np.testing.assert_array_equal(x, y)
    key = one.a * len(f) + one.b
    assert (np.diff(key) > 0).all() and (one.a < one.b).all()     # sorted by (a, b)
    # and the pairs between parts are the numpy sweep's (between parts only: fast)
    ref = contact_pairs_reference(v, f, normals, usable, TOL, part)
    between = part[one.a] != part[one.b]
    np.testing.assert_array_equal(one.a[between], ref[0])
    np.testing.assert_array_equal(one.b[between], ref[1])
    np.testing.assert_array_equal(one.kind[between], ref[2])


@pytest.mark.parametrize("self_leaves, cross_leaves, task_limit",
                         [(1, 1, 1), (1, 4, 1), (4, 64, 1 << 16)])
def test_task_split_does_not_change_the_result(monkeypatch, self_leaves, cross_leaves,
                                               task_limit):
    """Long random triangles through a cube: nearly all boxes overlap, so the task list
    hits its size limit (the expansion stops early) with the small settings."""
    import vfactor.tracing.contacts as contacts

    g = np.random.default_rng(5)
    v = g.uniform(0, 1, (900, 3))
    f = np.arange(900).reshape(-1, 3)
    part = np.arange(300) % 3
    normals = _normals(v, f)
    usable = np.ones(300, bool)
    default = find_contacts(v, f, normals, usable, TOL)
    monkeypatch.setattr(contacts, "_SELF_LEAVES", self_leaves)
    monkeypatch.setattr(contacts, "_CROSS_LEAVES", cross_leaves)
    monkeypatch.setattr(contacts, "_MIN_TASK_LIMIT", task_limit)
    got = _contacts(v, f, part)
    assert len(got.a) > 1000
    for x, y in zip(default, got):
        np.testing.assert_array_equal(x, y)


# --------------------------------------------------------------------------------------
# Wrapper
# --------------------------------------------------------------------------------------

def test_result_type_and_kind_names():
    v, f = _grid(2)
    got = find_contacts(v, np.vstack([f, f[:1]]), _normals(v, np.vstack([f, f[:1]])),
                        np.ones(len(f) + 1, bool), TOL)
    assert isinstance(got, Contacts)
    assert (got.a.dtype, got.b.dtype, got.kind.dtype) == (np.int64, np.int64, np.int8)
    assert KIND_NAMES[int(got.kind[0])] == "coincident-same"
    assert len(set(KIND_NAMES)) == 3 and 0 not in KIND_NAMES


def test_fewer_than_two_usable_facets():
    v, f = _grid(1)
    got = find_contacts(v, f, _normals(v, f), np.array([True, False]), TOL)
    assert len(got.a) == 0 and got.kind.dtype == np.int8


@pytest.mark.parametrize("change, error, text", [
    (dict(vertices=np.zeros((4, 2))), GeometryError, "vertices must have shape (v, 3)"),
    (dict(triangles=np.array([[0, 1, 9], [0, 2, 3]])), GeometryError, "outside 0..3"),
    (dict(normals=np.zeros((3, 3))), ValueError, "normals must have shape (2, 3)"),
    (dict(normals=np.array([[0, 0, 1.0], [np.nan, 0, 1]])), ValueError,
     "normal of usable facet 1 is not finite"),
    (dict(usable=np.ones(2, int)), ValueError, "usable must be (2,) bool"),
    (dict(tol=-1.0), ValueError, "tol must be finite and >= 0, got -1.0"),
    (dict(tol=np.inf), ValueError, "tol must be finite and >= 0, got inf"),
])
def test_bad_input_is_named(change, error, text):
    v, f = _grid(1)
    args = dict(vertices=v, triangles=f, normals=_normals(v, f),
                usable=np.ones(2, bool), tol=TOL)
    args.update(change)
    with pytest.raises(error) as info:
        find_contacts(**args)
    assert text in str(info.value)
