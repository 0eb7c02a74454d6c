"""Model -> Geometry (vfactor.geometry): placement, node naming, side assignment, units.

Outside references: unit conversion factors exact by definition (1 in = 0.0254 m, 1959
international yard and pound agreement); rotation of a right-handed frame (z cross x = y)
is elementary vector algebra; facet areas checked against trimesh (Trimesh.area_faces).
"""

from __future__ import annotations

import numpy as np
import pytest
import trimesh

from vfactor.errors import GeometryError, MeshError, ModelError
from vfactor.geometry import Geometry, build_geometry
from vfactor.model import load_model, load_model_text

COATINGS = """
[coatings.w]
solar_absorptivity = 0.2
ir_emissivity = 0.8
[coatings.b]
solar_absorptivity = 0.9
ir_emissivity = 0.85
solar_specular = 0.1
ir_specular = 0.3
"""


def geo(text, base_dir=None) -> Geometry:
    return build_geometry(load_model_text(COATINGS + text, "g.toml", base_dir=base_dir))


def test_arrays_have_the_interface_shapes_and_dtypes(demo_model_path):
    g = build_geometry(load_model(demo_model_path))
    f, v = g.n_facets, len(g.vertices)
    for name, shape, dtype in [("vertices", (v, 3), np.float64), ("triangles", (f, 3), np.int64),
                               ("normals", (f, 3), np.float64), ("areas", (f,), np.float64),
                               ("centroids", (f, 3), np.float64), ("front_node", (f,), np.int32),
                               ("back_node", (f,), np.int32), ("front_coating", (f,), np.int32),
                               ("back_coating", (f,), np.int32), ("part", (f,), np.int32)]:
        arr = getattr(g, name)
        assert arr.shape == shape and arr.dtype == dtype and arr.flags.c_contiguous, name
    np.testing.assert_allclose(np.linalg.norm(g.normals, axis=1), 1.0, rtol=1e-14)
    # areas against trimesh's independent computation
    np.testing.assert_allclose(g.areas, trimesh.Trimesh(g.vertices, g.triangles,
                                                        process=False).area_faces, rtol=1e-12)
    np.testing.assert_allclose(g.centroids, g.vertices[g.triangles].mean(axis=1), rtol=1e-15)
    # a node's area is the sum of the facet sides assigned to it
    for k in range(g.n_nodes):
        a = g.areas[g.front_node == k].sum() + g.areas[g.back_node == k].sum()
        assert g.nodes.area[k] == pytest.approx(a, rel=1e-13)
        assert g.nodes.facet_count[k] == (g.front_node == k).sum() + (g.back_node == k).sum()
    assert len(g.part_names) == len(g.part_closed) == len(g.part_shapes) == 7


def test_placement_with_axes():
    g = geo('[[parts]]\nname = "p"\nshape = "rectangle"\nsize = [2.0, 1.0]\n'
            'center = [1, 2, 3]\nz_axis = [1, 0, 0]\nx_axis = [0.5, 1, 0]\n'
            'front = { coating = "w" }\n')
    # local z -> model +x; local x -> model +y (its 0.5 part along z_axis removed); local y = z x x = +z
    np.testing.assert_allclose(g.normals, np.tile([1.0, 0, 0], (g.n_facets, 1)), atol=1e-15)
    lo, hi = g.vertices.min(0), g.vertices.max(0)
    np.testing.assert_allclose(lo, [1.0, 1.0, 2.5], atol=1e-15)
    np.testing.assert_allclose(hi, [1.0, 3.0, 3.5], atol=1e-15)


def test_node_names_per_mode():
    g = geo("""
[[parts]]
name = "body"
shape = "box"
size = [1, 1, 1]
front = { coating = "w", nodes = "per-face" }
back = { coating = "b", nodes = "per-face" }
[[parts]]
name = "wing"
shape = "rectangle"
size = [1, 0.5]
center = [0, 2, 0]
front = { coating = "b", nodes = "per-facet" }
back = { coating = "w" }
[[parts]]
name = "tank"
shape = "cylinder"
radius = 0.2
length = 0.5
center = [0, -2, 0]
front = { coating = "w", nodes = "per-face" }
[[parts]]
name = "plate"
shape = "rectangle"
size = [0.3, 0.3]
center = [2, 0, 0]
front = { coating = "w", nodes = "per-face" }
back = { coating = "w", nodes = "per-group" }
""")
    names = g.nodes.names
    faces = ["+x", "-x", "+y", "-y", "+z", "-z"]
    assert names[:6] == tuple(f"body.{f}" for f in faces)
    assert names[6:12] == tuple(f"body.{f}.back" for f in faces)
    assert names[12:14] == ("wing.0", "wing.1") and names[14] == "wing.back"
    assert names[15:18] == ("tank.side", "tank.top", "tank.bottom")
    assert names[18:] == ("plate", "plate.back")     # one-face shape: like single
    # box per-face: each face's node holds only facets with that outward normal
    for k, f in enumerate(faces):
        sel = g.front_node == k
        expected = np.zeros(3)
        expected["xyz".index(f[1])] = 1.0 if f[0] == "+" else -1.0
        np.testing.assert_allclose(g.normals[sel], np.tile(expected, (sel.sum(), 1)), atol=1e-15)
        assert g.nodes.area[k] == pytest.approx(1.0, rel=1e-14)
    # coatings per side and per node
    body = np.flatnonzero(g.part == 0)
    assert set(g.front_coating[body].tolist()) == {0} and set(g.back_coating[body].tolist()) == {1}
    assert g.nodes.coating[6] == "b" and g.nodes.ir_specular[6] == pytest.approx(0.3)
    assert g.nodes.solar_specular[0] == 0.0


def test_inert_sides_and_shared_nodes():
    g = geo("""
[[parts]]
name = "a"
shape = "rectangle"
size = [1, 1]
front = { coating = "w", node = "panel" }
back = { coating = "w", node = "panel" }
[[parts]]
name = "b"
shape = "rectangle"
size = [1, 1]
center = [0, 0, 1]
front = { coating = "w", node = "panel" }
[[parts]]
name = "shade"
shape = "rectangle"
size = [1, 1]
center = [0, 0, 2]
""")
    assert g.nodes.names == ("panel",)
    assert g.nodes.area[0] == pytest.approx(3.0, rel=1e-14)   # two sides of a + front of b
    assert g.nodes.facet_count[0] == 6
    b = g.part == 1
    assert (g.back_node[b] == -1).all() and (g.back_coating[b] == -1).all()
    s = g.part == 2
    assert (g.front_node[s] == -1).all() and (g.back_node[s] == -1).all()
    assert g.part_names == ("a", "b", "shade")


def test_node_with_two_coatings_is_an_error():
    text = """
[[parts]]
name = "a"
shape = "rectangle"
size = [1, 1]
front = { coating = "w", node = "panel" }
back = { coating = "b", node = "panel" }
"""
    with pytest.raises(ModelError, match="node 'panel' has coating 'b'.*coating 'w'"):
        geo(text)
    problems = []
    build_geometry(load_model_text(COATINGS + text, "g.toml"), problems=problems)
    assert len(problems) == 1 and "panel" in problems[0].line()


def test_inch_model_equals_metre_twin(tmp_path):
    # every length of the inch model is the metre model's divided by 0.0254 (exact)
    trimesh.creation.box(extents=[10.0, 20.0, 30.0]).export(tmp_path / "blk.stl")
    metre = """
[model]
length_unit = "m"
[[parts]]
name = "c"
shape = "cone"
radius = 0.254
top_radius = 0.127
length = 0.508
center = [0.0254, 0.0508, 0.0762]
z_axis = [0, 1, 1]
max_edge = 0.0762
front = { coating = "w", nodes = "per-face" }
[[parts]]
name = "m"
shape = "mesh"
file = "blk.stl"
scale = 0.0254
center = [1.0, 0, 0]
front = { coating = "w" }
"""
    inch = """
[model]
length_unit = "in"
[[parts]]
name = "c"
shape = "cone"
radius = 10.0
top_radius = 5.0
length = 20.0
center = [1.0, 2.0, 3.0]
z_axis = [0, 1, 1]
max_edge = 3.0
front = { coating = "w", nodes = "per-face" }
[[parts]]
name = "m"
shape = "mesh"
file = "blk.stl"
scale = 1.0
center = [39.37007874015748, 0, 0]
front = { coating = "w" }
"""
    gm, gi = geo(metre, tmp_path), geo(inch, tmp_path)
    assert gm.triangles.shape == gi.triangles.shape
    np.testing.assert_array_equal(gm.triangles, gi.triangles)
    np.testing.assert_allclose(gi.vertices, gm.vertices, rtol=0, atol=1e-12)   # metres
    np.testing.assert_allclose(gi.nodes.area, gm.nodes.area, rtol=1e-12)
    assert gi.nodes.names == gm.nodes.names
    # the mesh block is 10 x 20 x 30 in = 0.254 x 0.508 x 0.762 m
    m = gi.part == 1
    ext = np.ptp(gi.vertices[np.unique(gi.triangles[m])], axis=0)
    np.testing.assert_allclose(ext, [0.254, 0.508, 0.762], rtol=1e-7)  # STL float32


def test_mesh_part_per_group_names_and_missing_file(tmp_path):
    (tmp_path / "inst.obj").write_text(
        "o lens\nv 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\no hood\nv 0 0 1\nv 1 0 1\nv 0 1 1\nf 4 5 6\n")
    g = geo('[[parts]]\nname = "cam"\nshape = "mesh"\nfile = "inst.obj"\n'
            'front = { coating = "w", nodes = "per-group" }\n', tmp_path)
    assert sorted(g.nodes.names) == ["cam.hood", "cam.lens"]
    with pytest.raises(MeshError, match="not found") as info:
        geo('[[parts]]\nname = "cam"\nshape = "mesh"\nfile = "gone.stl"\n'
            'front = { coating = "w" }\n', tmp_path)
    assert "g.toml" in str(info.value) and "part 'cam'" in str(info.value)


def test_zero_area_facets_raise_in_strict_mode(tmp_path):
    (tmp_path / "flat.obj").write_text("v 0 0 0\nv 1 0 0\nv 2 0 0\nv 0 1 0\nf 1 2 3\nf 1 2 4\n")
    with pytest.raises(GeometryError, match="zero-area") as info:
        geo('[[parts]]\nname = "f"\nshape = "mesh"\nfile = "flat.obj"\n'
            'front = { coating = "w" }\n', tmp_path)
    assert info.value.facets == (0,)


def test_per_patch_cuts_each_face_into_patches():
    # a 1 m box refined to 0.05 m edges, faces cut into 0.25 m patches: 4 x 4 patches per
    # face; a rectangle (one face) gets PART.K names; the areas add up to the face areas
    # (elementary geometry), every patch lies within one face and one 0.25 m cube
    g = geo("""
[[parts]]
name = "body"
shape = "box"
size = [1, 1, 1]
max_edge = 0.05
front = { coating = "w", nodes = "per-patch", patch_size = 0.25 }
[[parts]]
name = "wing"
shape = "rectangle"
size = [1, 0.5]
center = [0, 2, 0]
max_edge = 0.05
front = { coating = "b", nodes = "per-patch", patch_size = 0.25 }
back = { coating = "w", nodes = "per-patch", patch_size = 0.25 }
""")
    names = g.nodes.names
    assert len(names) == 6 * 16 + 2 * 8
    assert names[:2] == ("body.+x.0", "body.+x.1") and names[16] == "body.-x.0"
    assert names[96] == "wing.0" and names[-1] == "wing.7.back"
    assert g.node_parts().tolist() == [0] * 96 + [1] * 16
    np.testing.assert_allclose(g.nodes.area[:96].reshape(6, 16).sum(axis=1), 1.0, rtol=1e-12)
    np.testing.assert_allclose(g.nodes.area[96:104].sum(), 0.5, rtol=1e-12)
    centroids = g.vertices[g.triangles].mean(axis=1)
    for k in range(96):
        on = g.front_node == k
        assert len(set(map(tuple, np.round(g.normals[on], 12)))) == 1    # one face
        assert np.all(np.ptp(centroids[on], axis=0) < 0.25)               # one cube
    # whole facets of 0.05 m: a patch is 0.0625 m2 to within a row of facets
    assert np.all(np.abs(g.nodes.area[:96] - 0.0625) < 0.25 * 0.05 * 2)


@pytest.mark.parametrize("side, message", [
    ('{ coating = "w", nodes = "per-patch" }', "needs patch_size"),
    ('{ coating = "w", patch_size = 0.1 }', "belongs to nodes"),
    ('{ coating = "w", nodes = "per-patch", patch_size = -1 }', "patch_size"),
])
def test_per_patch_needs_a_positive_patch_size(side, message):
    with pytest.raises(ModelError, match=message) as err:
        geo(f"""
[[parts]]
name = "p"
shape = "rectangle"
size = [1, 1]
front = {side}
""")
    assert "\n" not in str(err.value)


def test_per_patch_on_a_mesh_without_names_spans_the_part(tmp_path):
    # a mesh file without names is split into flat regions only to name faces; its patches
    # are cubes over the whole part (PART.K): a 1 m cube cut by 0.6 m cubes gives at most
    # 2 x 2 x 2 patches, and every facet's centroid lies in its patch's cube
    trimesh.creation.box(extents=[1.0, 1.0, 1.0]).export(tmp_path / "cube.stl")
    g = geo("""
[[parts]]
name = "m"
shape = "mesh"
file = "cube.stl"
front = { coating = "w", nodes = "per-patch", patch_size = 0.6 }
""", tmp_path)
    names = g.nodes.names
    assert 1 < len(names) <= 8 and all(n.count(".") == 1 and n.startswith("m.") for n in names)
    for k in range(len(names)):
        c = g.centroids[g.front_node == k]
        assert np.all(np.ptp(c, axis=0) < 0.6)
    np.testing.assert_allclose(g.nodes.area.sum(), 6.0, rtol=1e-12)
