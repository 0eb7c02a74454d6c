"""Real mesh files in: stated units, stable names of multi-primitive glTF, unit-slip and
node-key guards (vfactor.meshfile.read_mesh, vfactor.model, vfactor.checks).

Outside references:
* glTF 2.0 specification (Khronos Group), section 3.4 "Coordinate System and Units": the
  units of all linear distances are metres; section 5.24 (mesh.primitives): one mesh may
  hold several primitives.
* Areas of the boxes: the closed form 2 (ab + bc + ca) (CRC Standard Mathematical Tables,
  31st ed., mensuration of solids), compared with trimesh's ``Trimesh.area`` of the box as
  it was written (an independent library).
All fixtures are generated in the tests (self-made, no licence needed).
"""

from __future__ import annotations

import json
import struct
from pathlib import Path

import numpy as np
import pytest
import trimesh

from vfactor.checks import check_model, format_check_report
from vfactor.errors import MeshError
from vfactor.geometry import build_geometry
from vfactor.meshfile import read_mesh
from vfactor.model import load_model


def _glb_with_primitives(path, boxes) -> None:
    """Write a GLB whose single mesh (one node) holds one primitive per box.

    ``boxes``: list of (name, extents, offset) in metres. trimesh writes each box as its
    own mesh; the JSON is then rewritten so that one mesh carries them all as primitives,
    the layout that CAD exporters produce for a multi-material body.
    """
    scene = trimesh.Scene()
    for name, extents, offset in boxes:
        box = trimesh.creation.box(extents=extents)
        box.apply_translation(offset)
        scene.add_geometry(box, geom_name=name, node_name=name)
    data = scene.export(file_type="glb")
    (json_len,) = struct.unpack_from("<I", data, 12)
    doc = json.loads(data[20:20 + json_len])
    rest = data[20 + json_len:]
    prims = [p for m in doc["meshes"] for p in m["primitives"]]
    doc["meshes"] = [{"name": "bus", "primitives": prims}]
    doc["nodes"] = [{"name": "bus", "mesh": 0}]
    doc["scenes"] = [{"nodes": [0]}]
    doc["scene"] = 0
    text = json.dumps(doc).encode()
    text += b" " * (-len(text) % 4)
    body = struct.pack("<II", len(text), 0x4E4F534A) + text + rest
    path.write_bytes(struct.pack("<4sII", b"glTF", 2, 12 + len(body)) + body)


BOXES = [("panel", (0.2, 0.3, 0.01), (0.0, 0.0, 0.0)),
         ("panel", (0.2, 0.3, 0.01), (0.0, 0.0, 0.5)),
         ("frame", (0.1, 0.1, 0.1), (1.0, 0.0, 0.0))]


def test_multi_primitive_glb_names_are_stable(tmp_path):
    # the loader itself names such frames at random on every load (the defect guarded)
    path = tmp_path / "bus.glb"
    _glb_with_primitives(path, BOXES)
    frames = [set(trimesh.load_scene(path).graph.nodes_geometry) for _ in range(2)]
    assert frames[0] != frames[1]
    first = read_mesh(str(path))
    second = read_mesh(str(path))
    assert first.labels == second.labels
    assert np.array_equal(first.vertices, second.vertices)
    assert np.array_equal(first.triangles, second.triangles)
    assert np.array_equal(first.face, second.face)
    # glTF primitives carry no name: the pieces take the name of the node holding the
    # mesh, numbered in the order of a hash of their coordinates (not the loader's)
    assert first.labels == ("bus", "bus.1", "bus.2")
    areas = []
    for k in range(len(BOXES)):
        v = first.vertices[first.triangles[first.face == k]]
        areas.append(0.5 * np.linalg.norm(np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]),
                                          axis=1).sum())
    exact = [2 * (a * b + b * c + c * a) for _, (a, b, c), _ in BOXES]
    # glTF stores float32 coordinates: relative rounding up to ~6e-8 per coordinate
    assert sorted(areas) == pytest.approx(sorted(exact), rel=1e-6)


def _bus_model(tmp_path, extra=""):
    """A model of one part, the multi-primitive GLB of BOXES, one node per group."""
    _glb_with_primitives(tmp_path / "bus.glb", BOXES)
    model_file = tmp_path / "m.toml"
    model_file.write_text(
        '[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n' + extra +
        '[[parts]]\nname = "sat"\nshape = "mesh"\nfile = "bus.glb"\n'
        'front = { coating = "w", nodes = "per-group" }\n')
    return model_file


def test_two_runs_of_a_multi_primitive_glb_give_the_same_nodes(tmp_path):
    model_file = _bus_model(tmp_path)
    names = [build_geometry(load_model(model_file)).nodes.names for _ in range(2)]
    assert names[0] == names[1]
    assert names[0] == ("sat.bus", "sat.bus.1", "sat.bus.2")


def _box_model(tmp_path, suffix, unit="mm", extra=""):
    trimesh.creation.box(extents=(1.0, 2.0, 0.5)).export(tmp_path / f"box.{suffix}")
    path = tmp_path / "m.toml"
    path.write_text(
        f'[model]\nlength_unit = "{unit}"\n'
        '[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'
        f'[[parts]]\nname = "box"\nshape = "mesh"\nfile = "box.{suffix}"\n{extra}'
        'front = { coating = "w" }\n')
    return path


EXACT_BOX_AREA = 2 * (1.0 * 2.0 + 2.0 * 0.5 + 0.5 * 1.0)   # m2, closed form


def test_gltf_coordinates_are_metres_whatever_the_length_unit(tmp_path):
    path = _box_model(tmp_path, "glb")
    g = build_geometry(load_model(path))
    assert g.areas.sum() == pytest.approx(EXACT_BOX_AREA, rel=1e-6)  # float32 in glTF
    report = check_model(path)
    assert report.ok and not report.warnings, format_check_report(report)
    notes = [p.message for p in report.problems if p.severity == "note"]
    assert len(notes) == 2 and "states its unit" in notes[0]
    # the size note shows the part in metres (1 x 2 x 0.5 m), not 1000 times smaller
    assert "1 x 2 x 0.5 m, 7 m2 (1 file unit = 1 m)" in notes[1]


def test_stl_coordinates_take_the_length_unit(tmp_path):
    # STL states no unit: 1 x 2 x 0.5 read in mm is 1e-6 of the area in m2
    g = build_geometry(load_model(_box_model(tmp_path, "stl")))
    assert g.areas.sum() == pytest.approx(EXACT_BOX_AREA * 1e-6, rel=1e-12)


def test_file_unit_overrides_the_stated_unit(tmp_path):
    g = build_geometry(load_model(_box_model(tmp_path, "glb", extra='file_unit = "cm"\n')))
    assert g.areas.sum() == pytest.approx(EXACT_BOX_AREA * 1e-4, rel=1e-6)  # float32


def test_scale_on_a_file_with_a_stated_unit_warns(tmp_path):
    report = check_model(_box_model(tmp_path, "glb", extra="scale = 0.001\n"))
    lines = [p.line() for p in report.warnings]
    assert any("scale = 0.001 multiplies a file that already states its unit" in w
               for w in lines), lines


@pytest.mark.parametrize("unit, needle", [("m", None), ("mm", "outside 0.001..300 m")])
def test_mesh_far_too_small_is_suspected(tmp_path, unit, needle):
    # the 1 x 2 x 0.5 STL box with scale = 0.001: in metres it is 2.3 mm across
    # (plausible); read in mm as well it is 2.3 um across, a unit applied twice
    path = _box_model(tmp_path, "stl", unit=unit, extra="scale = 0.001\n")
    report = check_model(path)
    lines = [p.line() for p in report.warnings]
    if needle is None:
        assert not lines
    else:
        assert any(needle in w and "unit applied twice" in w for w in lines), lines


def test_mesh_far_too_large_is_suspected(tmp_path):
    path = _box_model(tmp_path, "stl", unit="m", extra="scale = 1000.0\n")
    lines = [p.line() for p in check_model(path).warnings]
    assert any('set file_unit = "mm"' in w for w in lines), lines


def test_node_named_like_a_mode_warns(write_model):
    path = write_model('[[parts]]\nname = "p"\nshape = "rectangle"\nsize = [1, 1]\n'
                       'front = { coating = "w", node = "per-face" }\n')
    lines = [p.line() for p in check_model(path).warnings]
    assert any("write nodes = 'per-face'" in w for w in lines), lines


def test_unknown_node_mode_suggests_node(write_model):
    path = write_model('[[parts]]\nname = "p"\nshape = "rectangle"\nsize = [1, 1]\n'
                       'front = { coating = "w", nodes = "antenna" }\n')
    lines = [p.line() for p in check_model(path).errors]
    assert len(lines) == 1 and "write node = 'antenna'" in lines[0], lines


def test_check_prints_problems_first_in_the_one_line_form(write_model):
    path = write_model('[[parts]]\nname = "p"\nshape = "rectangle"\nsize = [1, 1]\n'
                       'front = { coating = "w", nodes = "antenna" }\n')
    text = format_check_report(check_model(path))
    assert text.splitlines()[0].startswith(f"vfactor: error: {path}: part 'p' front nodes:")


STEP_FIXTURE = __import__("pathlib").Path(__file__).parent / "data" / "assembly_mm.step"
"""Two bodies in millimetres, written by scripts/make_step_fixture.py (self-made)."""


def test_step_assembly_in_mm_keeps_names_and_true_areas(tmp_path):
    # the file is in mm (SI_UNIT(.MILLI.,.METRE.)); a model in mm must not scale it again
    model_file = tmp_path / "m.toml"
    model_file.write_text(
        '[model]\nlength_unit = "mm"\n'
        '[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'
        f'[[parts]]\nname = "inst"\nshape = "mesh"\nfile = "{STEP_FIXTURE.as_posix()}"\n'
        'front = { coating = "w", nodes = "per-group" }\n')
    g = build_geometry(load_model(model_file))
    assert g.nodes.names == ("inst.electronics", "inst.panel")
    # closed-form box areas 2 (ab + bc + ca) in m2; the STEP-to-glTF route stores float32
    expected = {"inst.electronics": 2 * 3 * 0.05 * 0.05,
                "inst.panel": 2 * (0.1 * 0.2 + 0.2 * 0.01 + 0.01 * 0.1)}
    for k, name in enumerate(g.nodes.names):
        assert g.nodes.area[k] == pytest.approx(expected[name], rel=1e-6), name
    report = check_model(model_file)
    assert report.ok and not report.warnings, format_check_report(report)
    assert any("STEP, converted to metres" in p.message for p in report.problems)


@pytest.mark.parametrize("rays, warns", [(50, True), (9_800, True), (200_000, False)])
def test_too_few_rays_warn(write_model, rays, warns):
    # binomial relative error sqrt((1 - F) / (F N)) of F = 0.01 (Howell, Menguc & Siegel,
    # Thermal Radiation Heat Transfer, 6th ed., ch. 7): 141 % at N = 50, 10.05 % at 9 800
    path = write_model(f'[radiation]\nrays_per_node = {rays}\n'
                       '[[parts]]\nname = "p"\nshape = "rectangle"\nsize = [1, 1]\n'
                       'front = { coating = "w" }\n')
    lines = [p.line() for p in check_model(path).warnings]
    assert any("rays per node leave a view factor" in w for w in lines) == warns, lines
    if rays == 50:
        assert any("141 %" in w and "use at least 9900 rays" in w for w in lines), lines


# ---- messages that named the wrong thing (the fixes of the list) -------------
BOX = ('[[parts]]\nname = "p"\nshape = "box"\nsize = [1, 1, 1]\n'
       'front = { coating = "w" }\n')
EPOCH = 'epoch = "2027-03-21T00:00:00Z"\n'


@pytest.mark.parametrize("orbit, needle", [
    ("inclination_deg = 97\n", "[orbit]: no orbit size given: write altitude_km"),
    ("altitude = 500\n", "did you mean 'altitude_km', a key of type = 'circular'?"),
    ('type = "circular"\naltitude = 500\n', "(did you mean 'altitude_km'?)"),
    ('type = "circular"\naltitude_km = 500\napogee_km = 600\n',
     "('apogee_km' is a key of type = 'elements')"),
])
def test_orbit_messages_name_the_right_key(write_model, orbit, needle):
    path = write_model(BOX + "[orbit]\n" + EPOCH + orbit)
    lines = [p.line() for p in check_model(path).errors]
    assert len(lines) == 1 and needle in lines[0], lines


def test_one_coating_typo_is_one_error(write_model):
    text = ('[coatings.v]\nsolar_absorptivty = 0.2\nir_emissivity = 0.8\n'
            '[[parts]]\nname = "p"\nshape = "box"\nsize = [1, 1, 1]\n'
            'front = { coating = "v" }\nback = { coating = "v" }\n')
    lines = [p.line() for p in check_model(write_model(text)).errors]
    assert len(lines) == 1 and "did you mean 'solar_absorptivity'?" in lines[0], lines


DATA = Path(__file__).parent / "data"


def test_draco_glb_reads_with_names_and_areas(tmp_path):
    # tests/data/bus_wing_draco.glb: box 0.3 x 0.2 x 0.1 m "bus", plate 0.5 x 0.2 m "wing"
    t = read_mesh(str(DATA / "bus_wing_draco.glb"))
    assert t.labels == ("bus", "wing")
    v = t.vertices[t.triangles]
    area = 0.5 * np.linalg.norm(np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]), axis=1)
    # Draco quantises positions (trimesh's default 14 bits over the 0.7 m box: ~4e-5 m)
    assert area[t.face == 0].sum() == pytest.approx(2 * (0.06 + 0.02 + 0.03), rel=1e-3)
    assert area[t.face == 1].sum() == pytest.approx(0.1, rel=1e-3)


def test_draco_glb_without_its_decoder_names_the_package(tmp_path, monkeypatch):
    import builtins

    real = builtins.__import__

    def no_draco(name, *args, **kwargs):
        if name == "DracoPy":
            raise ImportError("No module named 'DracoPy'", name="DracoPy")
        return real(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_draco)
    with pytest.raises(MeshError, match=r"Draco-compressed .*'DracoPy' is not installed"):
        read_mesh(str(DATA / "bus_wing_draco.glb"), shown_name="bus_wing_draco.glb")


def test_repeated_names_never_collide_with_a_name_in_the_file():
    from vfactor.meshfile import _unique_labels

    # a file naming two bodies "a" and one "a.1": the second "a" must not become "a.1"
    assert _unique_labels(["a", "a", "a.1"]) == ["a", "a.2", "a.1"]
    assert _unique_labels(["b", "b", "b", ""]) == ["b", "b.1", "b.2", "group"]


def test_winding_is_checked_per_named_body(tmp_path):
    # two bodies of one file sharing an edge; one of them has a facet turned
    a = trimesh.creation.box()
    b = trimesh.creation.box()
    b.apply_translation((1.0, 1.0, 0.0))
    faces = b.faces.copy()
    faces[4] = faces[4][::-1]
    scene = trimesh.Scene()
    scene.add_geometry(a, geom_name="left", node_name="left")
    scene.add_geometry(trimesh.Trimesh(b.vertices, faces, process=False), geom_name="right",
                       node_name="right")
    scene.export(tmp_path / "two.glb")
    path = tmp_path / "m.toml"
    path.write_text('[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'
                    '[[parts]]\nname = "pair"\nshape = "mesh"\nfile = "two.glb"\n'
                    'front = { coating = "w" }\n')
    errors = [p.line() for p in check_model(path).errors]
    winding = [e for e in errors if "winding" in e]
    assert len(winding) == 1, errors
    assert "group 'pair.right'" in winding[0] and "about 1 of its 12 facets" in winding[0]


def test_per_group_on_a_mesh_without_names_warns_of_many_nodes(tmp_path):
    trimesh.creation.icosphere(subdivisions=2).export(tmp_path / "ball.stl")   # 320 facets
    path = tmp_path / "m.toml"
    path.write_text('[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'
                    '[[parts]]\nname = "ball"\nshape = "mesh"\nfile = "ball.stl"\n'
                    'front = { coating = "w", nodes = "per-group" }\n')
    report = check_model(path)
    warning = next(p.message for p in report.warnings if "names no groups" in p.message)
    assert "split it into 320 nodes" in warning and "nodes = 'single'" in warning


def test_two_runs_of_a_multi_primitive_glb_give_identical_results(tmp_path):
    import h5py

    from vfactor.pipeline import run

    model_file = _bus_model(tmp_path, '[radiation]\nrays_per_node = 2000\n')
    outs = [tmp_path / f"r{k}.h5" for k in range(2)]
    for out in outs:
        run(model_file, out)

    def datasets(path):
        found = {}
        with h5py.File(path, "r") as f:
            f.visititems(lambda name, obj: found.__setitem__(name, obj[()])
                         if isinstance(obj, h5py.Dataset) else None)
        return found

    first, second = (datasets(o) for o in outs)
    assert first.keys() == second.keys()
    for key in first:
        assert np.array_equal(np.asarray(first[key]), np.asarray(second[key])), key
