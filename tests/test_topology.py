"""Edge topology: winding agreement and open / non-manifold edges (vfactor.topology).

Outside references: the orientation rule of triangulated 2-manifolds (two facets sharing
an edge agree when they traverse it in opposite directions; Botsch et al., Polygon Mesh
Processing, 2010, section 1.3), and trimesh's own ``is_winding_consistent`` /
``is_watertight`` on the same meshes where both apply (an independent implementation).
"""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from vfactor.topology import edge_report


def _merged(mesh):
    mesh = trimesh.Trimesh(mesh.vertices, mesh.faces, process=False)
    mesh.merge_vertices()
    return mesh


@pytest.mark.parametrize("mesh", [trimesh.creation.box(), trimesh.creation.icosphere(2),
                                  trimesh.creation.cylinder(0.3, 1.0, sections=16)])
def test_clean_closed_meshes_agree_with_trimesh(mesh):
    r = edge_report(mesh.faces)
    assert r.consistent and mesh.is_winding_consistent
    assert r.open_edges == 0 and r.non_manifold_edges == 0 and mesh.is_watertight
    assert r.facets_to_turn == 0 and not r.non_orientable


def test_turned_facets_are_counted_and_named():
    sphere = trimesh.creation.icosphere(2)                 # 320 facets
    faces = sphere.faces.copy()
    turned = [7, 100, 101, 250]                            # 100 and 101 may be neighbours
    faces[turned] = faces[turned][:, ::-1]
    r = edge_report(faces)
    assert not trimesh.Trimesh(sphere.vertices, faces, process=False).is_winding_consistent
    assert r.facets_to_turn == len(turned)
    assert r.example is not None and (r.example[0] in turned or r.example[1] in turned)
    # every edge of a lone turned facet disagrees: 3 per facet, less shared ones
    assert 3 * len(turned) - 2 * 1 <= r.disagreeing_edges <= 3 * len(turned)


def test_two_bodies_touching_along_an_edge_are_not_inconsistent():
    a = trimesh.creation.box()
    b = trimesh.creation.box()
    b.apply_translation((1.0, 1.0, 0.0))                   # share the edge x = y = 0.5
    both = _merged(trimesh.util.concatenate([a, b]))
    r = edge_report(both.faces)
    assert r.consistent
    assert r.non_manifold_edges >= 1                       # the shared edge: four facets


def test_open_sheet_and_moebius_strip():
    # a 2 x 2 grid of quads (9 vertices, 8 facets): 8 boundary edges, all agreeing
    quads = [(0, 1, 4, 3), (1, 2, 5, 4), (3, 4, 7, 6), (4, 5, 8, 7)]
    sheet = np.array([f for a, b, c, d in quads for f in ((a, b, c), (a, c, d))])
    r = edge_report(sheet)
    assert r.consistent and r.open_edges == 8 and r.non_manifold_edges == 0
    # a Moebius strip of 10 quads: no orientation exists
    n = 10
    faces = []
    for i in range(n):
        a0, a1 = 2 * i, 2 * i + 1
        j = (i + 1) % n
        b0, b1 = (2 * j, 2 * j + 1) if j else (1, 0)       # the half twist at the seam
        faces += [[a0, b0, a1], [a1, b0, b1]]
    r = edge_report(np.array(faces))
    assert r.non_orientable and not r.consistent


def test_closed_bodies_per_body():
    # two closed boxes touching along an edge stay closed each; a box without its top does not
    from vfactor.topology import closed_bodies

    a = trimesh.creation.box()
    b = trimesh.creation.box()
    b.apply_translation((1.0, 1.0, 0.0))
    both = _merged(trimesh.util.concatenate([a, b]))
    body = np.repeat([0, 1], [len(a.faces), len(b.faces)])
    assert closed_bodies(both.faces, body).tolist() == [True, True]
    top_open = np.repeat([0, 1], [len(a.faces) - 2, len(b.faces)])
    faces = np.vstack([both.faces[:10], both.faces[12:]])   # two facets of box 0 removed
    assert closed_bodies(faces, top_open).tolist() == [False, True]
