"""``vfactor check`` findings (vfactor.checks): every problem class gives one clear line.

Outside references: the signed volume of a closed triangulated surface by the divergence
theorem (sum of v0 . (v1 x v2) / 6; e.g. Zhang & Chen, "Efficient feature extraction for
2D/3D objects in mesh representation", ICIP 2001), compared with trimesh's Trimesh.volume;
the separating-axis theorem for coplanar triangles (Ericson, Real-Time Collision
Detection, 2005, section 5.2.1). The demo model's size limits come from the project issue.
"""

from __future__ import annotations

import numpy as np
import pytest
import trimesh
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from vfactor.checks import check_model, format_check_report
from vfactor.errors import VfactorError

BOX = """
[[parts]]
name = "body"
shape = "box"
size = [1, 1, 1]
front = { coating = "w", nodes = "per-face" }
"""


def only_error(report, *needles):
    """The report has exactly one error; its line contains every needle and the file."""
    errors = report.errors
    lines = [p.line() for p in errors]
    assert len(errors) == 1, lines
    line = lines[0]
    assert "\n" not in line and report.path in line
    for n in needles:
        assert n in line, line
    text = format_check_report(report)
    assert line in text and "FAILED: 1 error(s)" in text
    assert not report.ok
    return line


def test_demo_model_checks_clean(demo_model_path):
    report = check_model(demo_model_path)
    assert report.ok and not report.warnings, [p.line() for p in report.problems]
    g = report.geometry
    assert 5 <= g.n_nodes <= 20 and 5_000 <= g.n_facets <= 20_000
    text = format_check_report(report)
    assert text.splitlines()[-1].startswith("OK: no errors")
    for name in g.nodes.names:
        assert name in text
    assert "curved part" in text and "dish" in text
    # the demo has a mesh part and every required kind of part
    shapes = set(g.part_shapes)
    assert {"box", "rectangle", "cylinder", "dish", "mesh"} <= shapes


# ---------------------------------------------------------------------------------------
# Loader-level problems
# ---------------------------------------------------------------------------------------

@pytest.mark.parametrize("text,needles", [
    (BOX.replace("size", "colour = 1\nsize"), ["part 'body'", "colour"]),
    (BOX.replace("size = [1, 1, 1]\n", ""), ["part 'body'", "size"]),
    (BOX.replace('"w"', '"chrome"'), ["part 'body' front coating", "chrome"]),
    (BOX.replace("box", "torus"), ["part 'body' shape", "torus"]),
    ("[coatings.bad]\nsolar_absorptivity = 1.5\nir_emissivity = 0.5\n" + BOX,
     ["[coatings.bad] solar_absorptivity", "1.5"]),
    (BOX.replace("size = [1, 1, 1]", "size = [1, 1, 1]\ncenter = [inf, 0, 0]"),
     ["part 'body' center", "inf"]),
    ("[parts]\nname = 1\n", ["[[parts]]"]),
    ("= broken", ["not valid TOML"]),
])
def test_model_problems(write_model, text, needles):
    only_error(check_model(write_model(text)), *needles)


def test_many_problems_are_reported_together(write_model):
    text = ("[coatings.bad]\nsolar_absorptivity = 1.5\nir_emissivity = 0.5\n" +
            BOX.replace("size", "colour = 1\nsize") +
            BOX.replace('"body"', '"b2"').replace("box", "torus"))
    report = check_model(write_model(text))
    assert len(report.errors) == 3


def test_missing_model_file(tmp_path):
    report = check_model(tmp_path / "absent.toml")
    assert report.model is None
    only_error(report, "cannot read")


# ---------------------------------------------------------------------------------------
# Mesh and geometry problems
# ---------------------------------------------------------------------------------------

def mesh_part(file, extra=""):
    return (f'[[parts]]\nname = "m"\nshape = "mesh"\nfile = "{file}"\n{extra}'
            'front = { coating = "w" }\n')


def test_missing_mesh_file(write_model):
    only_error(check_model(write_model(mesh_part("nowhere.stl"))), "part 'm'", "nowhere.stl",
               "not found")


def test_unreadable_and_empty_mesh_files(write_model, tmp_path):
    (tmp_path / "junk.glb").write_bytes(b"glTF\x02\x00\x00\x00garbage-garbage-garbage")
    line = only_error(check_model(write_model(mesh_part("junk.glb"))), "part 'm'", "junk.glb")
    assert "cannot read" in line or "no triangles" in line or "empty" in line
    (tmp_path / "empty.obj").write_text("# nothing\n")
    only_error(check_model(write_model(mesh_part("empty.obj"))), "empty.obj", "empty")


def test_non_finite_mesh_coordinates(write_model, tmp_path):
    (tmp_path / "nan.obj").write_text("v 0 0 0\nv 1 0 nan\nv 0 1 0\nf 1 2 3\n")
    only_error(check_model(write_model(mesh_part("nan.obj"))), "part 'm'", "non-finite")


def test_absurd_sizes_are_refused_before_any_arithmetic(write_model, tmp_path):
    # sizes that would overflow the geometry (1e308 m: numpy warnings, then non-finite
    # coordinates) are refused by the reader; parts over 10 km are a unit slip (common
    # practice: the largest spacecraft is about 100 m across)
    text = BOX.replace("size = [1, 1, 1]", "size = [1e308, 1e308, 1e308]\ncenter = [1.7e308, 0, 0]")
    only_error(check_model(write_model(text)), "part 'body' size", "<= 10000 m", "1e+308")
    text = BOX.replace("size = [1, 1, 1]", "size = [1, 1, 1]\ncenter = [2e4, 0, 0]")
    only_error(check_model(write_model(text)), "part 'body' center", "10 km")
    # in millimetres the limit is the same 10 km
    text = "[model]\nlength_unit = \"mm\"\n" + BOX.replace("[1, 1, 1]", "[2e7, 1, 1]")
    only_error(check_model(write_model(text)), "part 'body' size", "<= 1e+07 mm")
    assert check_model(write_model(text.replace("2e7", "9e6"))).ok
    # a mesh file whose coordinates reach past 10 km once scaled
    (tmp_path / "big.obj").write_text("v 0 0 0\nv 1e303 0 0\nv 0 1e303 0\nf 1 2 3\n")
    only_error(check_model(write_model(mesh_part("big.obj"))), "part 'm'", "big.obj",
               "reaches 1e+303 m")
    (tmp_path / "km.obj").write_text("v 0 0 0\nv 11 0 0\nv 0 11 0\nf 1 2 3\n")
    only_error(check_model(write_model(mesh_part("km.obj", "scale = 1000.0\n"))),
               "part 'm'", "reaches 1.1e+04 m")


def test_degenerate_facets_and_node_without_area(write_model, tmp_path):
    (tmp_path / "deg.obj").write_text(
        "v 0 0 0\nv 1 0 0\nv 0 1 0\nv 2 0 0\nf 1 2 3\nf 1 2 4\n")
    report = check_model(write_model(mesh_part("deg.obj")))
    lines = [p.line() for p in report.errors]
    assert len(lines) == 1 and "1 zero-area or degenerate facets" in lines[0]
    (tmp_path / "all.obj").write_text("v 0 0 0\nv 1 0 0\nv 2 0 0\nf 1 2 3\n")
    report = check_model(write_model(mesh_part("all.obj")))
    lines = [p.line() for p in report.errors]
    # one cause, one line: the node left without area is not reported a second time
    assert len(lines) == 1 and "1 zero-area or degenerate facets" in lines[0], lines
    assert "repair = true" in lines[0]


def test_inward_normals_of_a_closed_mesh(write_model, tmp_path):
    box = trimesh.creation.box(extents=[1, 1, 1])
    trimesh.Trimesh(box.vertices, box.faces[:, ::-1], process=False).export(tmp_path / "inv.stl")
    assert trimesh.load(tmp_path / "inv.stl").volume == pytest.approx(-1.0, rel=1e-6)
    only_error(check_model(write_model(mesh_part("inv.stl"))), "part 'm'", "inward",
               "signed volume -1")


COATED_PLATE = """
[[parts]]
name = "lid"
shape = "rectangle"
size = [0.5, 0.5]
center = [0.1, 0.1, 0.5]
front = { coating = "w" }
"""


def test_coincident_facets_of_different_parts(write_model):
    # a plate lying on the +z face with the same normal: two surfaces in one place
    only_error(check_model(write_model(BOX + COATED_PLATE)), "parts 'body' and 'lid'",
               "coincident overlapping")


def test_face_contact_is_a_warning(write_model):
    # a capped cylinder standing on the +z face: the cap touches the face, normals opposite
    text = BOX + ('[[parts]]\nname = "boom"\nshape = "cylinder"\nradius = 0.05\n'
                  'length = 0.5\ncenter = [0, 0, 0.75]\nfront = { coating = "w" }\n')
    report = check_model(write_model(text))
    assert report.ok
    assert [p.severity for p in report.problems if p.severity != "note"] == ["warning"]
    assert "face-to-face contact" in report.warnings[0].message


def test_intersecting_parts(write_model):
    text = BOX + ('[[parts]]\nname = "boom"\nshape = "cylinder"\nradius = 0.05\n'
                  'length = 1.0\ncenter = [0.1, 0, 0.6]\nfront = { coating = "w" }\n')
    only_error(check_model(write_model(text)), "parts 'body' and 'boom'", "intersect")


def test_plate_through_a_plate(write_model):
    text = ('[[parts]]\nname = "a"\nshape = "rectangle"\nsize = [1, 1]\n'
            'front = { coating = "w" }\n'
            '[[parts]]\nname = "b"\nshape = "rectangle"\nsize = [1, 1]\ncenter = [0.3, 0, 0]\n'
            'z_axis = [1, 0, 0]\nfront = { coating = "w" }\n')
    only_error(check_model(write_model(text)), "parts 'a' and 'b'", "intersect")


@pytest.mark.parametrize("extra", [
    # boom without caps standing exactly on the face
    '[[parts]]\nname = "boom"\nshape = "cylinder"\nradius = 0.05\nlength = 0.5\n'
    'center = [0.2, 0.1, 0.75]\ncaps = false\nfront = { coating = "w" }\n',
    # a panel meeting the box along its edge, perpendicular to the face
    '[[parts]]\nname = "fin"\nshape = "rectangle"\nsize = [1, 0.4]\ncenter = [0, 0, 0.7]\n'
    'z_axis = [0, 1, 0]\nfront = { coating = "w" }\n',
    # a hinged wing touching the body's edge line
    '[[parts]]\nname = "wing"\nshape = "rectangle"\nsize = [1, 1]\ncenter = [0, 1.0, 0.5]\n'
    'front = { coating = "w" }\n',
    # a coplanar panel continuing the +z face beyond its edge
    '[[parts]]\nname = "ext"\nshape = "rectangle"\nsize = [1, 1]\ncenter = [1.0, 0, 0.5]\n'
    'front = { coating = "w" }\n',
    # a sphere touching the +x face at one point
    '[[parts]]\nname = "ball"\nshape = "sphere"\nradius = 0.2\ncenter = [0.7, 0, 0]\n'
    'segments = 16\nfront = { coating = "w" }\n',
])
def test_touching_parts_are_fine(write_model, extra):
    report = check_model(write_model(BOX + extra))
    assert report.ok, [p.line() for p in report.problems]


def test_inconsistent_mesh_winding(write_model, tmp_path):
    box = trimesh.creation.box(extents=[1, 1, 1])
    faces = box.faces.copy()
    faces[0] = faces[0, ::-1]                      # one facet turned over
    trimesh.Trimesh(box.vertices, faces, process=False).export(tmp_path / "flip.stl")
    only_error(check_model(write_model(mesh_part("flip.stl"))), "part 'm'", "winding")


def test_part_inside_a_closed_part_is_a_warning(write_model):
    text = BOX + ('[[parts]]\nname = "core"\nshape = "sphere"\nradius = 0.2\n'
                  'front = { coating = "w" }\n')
    lines = warnings_of(check_model(write_model(text)))
    assert len(lines) == 1 and "part 'core'" in lines[0] and "inside the closed part 'body'" \
        in lines[0]


def test_node_with_two_coatings(write_model):
    text = ("[coatings.b]\nsolar_absorptivity = 0.5\nir_emissivity = 0.5\n" +
            '[[parts]]\nname = "a"\nshape = "rectangle"\nsize = [1, 1]\n'
            'front = { coating = "w", node = "n1" }\n'
            '[[parts]]\nname = "b"\nshape = "rectangle"\nsize = [1, 1]\ncenter = [0, 0, 1]\n'
            'front = { coating = "b", node = "n1" }\n')
    only_error(check_model(write_model(text)), "part 'b' front", "node 'n1'", "'b'", "'w'")


# ---------------------------------------------------------------------------------------
# Warnings: exit 0
# ---------------------------------------------------------------------------------------

def warnings_of(report):
    assert report.ok, [p.line() for p in report.errors]
    return [p.line() for p in report.warnings]


def test_warnings(write_model, tmp_path):
    (w,) = warnings_of(check_model(write_model(BOX.replace(
        'front = { coating = "w", nodes = "per-face" }\n', "") + (
        '[[parts]]\nname = "plate"\nshape = "rectangle"\nsize = [1, 1]\n'
        'center = [0, 0, 3]\nfront = { coating = "w" }\n'))))
    assert "no front and no back" in w and "part 'body'" in w
    # 8 segments: inscribed octagons, area about 10 % low
    (w,) = warnings_of(check_model(write_model(
        '[[parts]]\nname = "s"\nshape = "sphere"\nradius = 1\nsegments = 8\n'
        'front = { coating = "w" }\n')))
    assert "differs from the exact" in w and "part 's'" in w
    (w,) = warnings_of(check_model(write_model(BOX.replace("[1, 1, 1]", "[1, 1, 0.001]"))))
    assert "very thin" in w
    (w,) = warnings_of(check_model(write_model(BOX + 'back = { coating = "w" }\n')))
    assert "active back side" in w
    (tmp_path / "open.obj").write_text("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n")
    (w,) = warnings_of(check_model(write_model(mesh_part("open.obj", "closed = true\n"))))
    assert "not watertight" in w


def test_signed_volume_matches_trimesh(write_model, tmp_path):
    # the inward check relies on the divergence-theorem volume; compare with trimesh
    from vfactor.geometry import build_geometry
    from vfactor.model import load_model
    m = trimesh.creation.icosphere(subdivisions=2, radius=0.3)
    m.export(tmp_path / "ico.stl")
    g = build_geometry(load_model(write_model(mesh_part("ico.stl"))))
    pv = g.vertices[g.triangles]
    vol = np.einsum("ij,ij->i", pv[:, 0], np.cross(pv[:, 1], pv[:, 2])).sum() / 6
    assert vol == pytest.approx(m.volume, rel=1e-6)   # float32 STL coordinates


# ---------------------------------------------------------------------------------------
# Property-based: random part tables never crash the checker
# ---------------------------------------------------------------------------------------

_num = st.one_of(st.floats(0.05, 2.0), st.floats(-1, 1), st.integers(-2, 3),
                 st.just(float("nan")), st.just("x"))
_part = st.fixed_dictionaries(
    {"shape": st.sampled_from(["rectangle", "disk", "box", "cylinder", "cone", "sphere",
                               "dish", "mesh", "blob"])},
    optional={"size": st.lists(_num, min_size=1, max_size=4), "radius": _num,
              "inner_radius": _num, "top_radius": _num, "length": _num, "depth": _num,
              "caps": st.booleans(), "segments": st.integers(1, 40),
              "center": st.lists(_num, min_size=3, max_size=3),
              "z_axis": st.lists(_num, min_size=3, max_size=3),
              "max_edge": st.one_of(st.floats(0.2, 3.0), st.just(-1.0)),
              "file": st.sampled_from(["none.stl", "ok.stl"]),
              "back": st.just({"coating": "w", "nodes": "per-facet"})},
)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.lists(_part, min_size=1, max_size=3))
def test_random_parts_never_crash_check(tmp_path, parts):
    import tomli_w

    trimesh.creation.box(extents=[0.2, 0.2, 0.2]).export(tmp_path / "ok.stl")
    doc = {"coatings": {"w": {"solar_absorptivity": 0.3, "ir_emissivity": 0.7}},
           "parts": [dict(p, name=f"p{k}", front={"coating": "w", "nodes": "per-face"})
                     for k, p in enumerate(parts)]}
    path = tmp_path / "fuzz.toml"
    path.write_text(tomli_w.dumps(doc))
    try:
        report = check_model(path)
    except VfactorError:   # pragma: no cover - check_model must not raise at all
        pytest.fail("check_model raised for bad input")
    text = format_check_report(report)
    assert text.splitlines()[-1].startswith(("OK", "FAILED"))


# ---------------------------------------------------------------------------------------
# Optional settings tables are validated by their own readers and reported as lines.

@pytest.mark.parametrize("section, needles", [
    ('[orbit]\naltitude_km = 500.0\ninclination_deg = 51.6\n', ("[orbit] epoch", "required")),
    ('[orbit]\naltitude_km = -5.0\ninclination_deg = 51.6\nepoch = "2027-01-01T00:00:00Z"\n',
     ("[orbit] altitude_km", "-5")),
    ('[orbit]\naltitude_km = 500.0\ninclination_deg = 51.6\nepoch = "2027-01-01T00:00:00Z"\n'
     '[attitude]\nmode = "tumble"\n', ("[attitude] mode", "tumble")),
    ('[environment]\nalbedo = 3.0\n', ("[environment] albedo", "3")),
])
def test_bad_settings_tables_give_one_line(write_model, section, needles):
    report = check_model(write_model(BOX + section))
    only_error(report, *needles)


def test_attitude_without_orbit_is_a_warning(write_model):
    report = check_model(write_model(BOX + '[attitude]\nmode = "nadir"\n'))
    assert report.ok
    assert any("[attitude]" in p.line() for p in report.warnings)


ORBIT = """
[orbit]
altitude_km = {alt}
inclination_deg = 51.6
epoch = "2027-03-21T00:00:00Z"
"""


def test_altitude_that_looks_like_metres_is_a_warning(write_model):
    # 550000 "km" is 550 km written in metres: a geocentric orbit 1.4 times the Moon's
    # distance (384 400 km, from memory) runs, but deserves a line
    (w,) = warnings_of(check_model(write_model(BOX + ORBIT.format(alt=550000.0))))
    assert "[orbit] altitude_km" in w and "550000" in w and "metres" in w
    # geostationary altitude (35 786 km, common practice) is ordinary: no warning
    assert warnings_of(check_model(write_model(BOX + ORBIT.format(alt=35786.0)))) == []


@pytest.mark.parametrize("rays, alpha, eps, warns", [
    (4_000, 0.3, 0.1, True),      # aluminium-like, few rays: the couplings are uncertain
    (4_000, 0.9, 0.9, False),     # little is reflected
    (20_000, 0.3, 0.1, False),    # 7 %: no ray-count warning, the summary sees the shares
    (200_000, 0.3, 0.1, False),   # 2.2 % on a 1 % view factor
])
def test_reflective_coatings_with_few_rays_warn_that_loads_carry_the_couplings_error(
        write_model, rays, alpha, eps, warns):
    # The couplings that redistribute reflected power are the same in every heating
    # replicate; their error enters the loads' +- to first order only. The
    # 1 % view factor's error is the binomial sqrt((1 - F) / (F N)) (Howell, Menguc & Siegel,
    # Thermal Radiation Heat Transfer, 6th ed., ch. 7): 15.7 % at N = 4000.
    path = write_model(f'[coatings.al]\nsolar_absorptivity = {alpha}\n'
                       f'ir_emissivity = {eps}\n[radiation]\nrays_per_node = {rays}\n' + BOX
                       .replace('coating = "w"', 'coating = "al"'), coatings=False)
    lines = [p.line() for p in check_model(path).warnings
             if "heat loads after reflection carry" in p.line()]
    assert bool(lines) == warns, lines
    if warns:
        assert "'al' (90 % of the infrared band)" in lines[0] and "16 %" in lines[0]
        assert "use at least 39600 rays" in lines[0] and "\n" not in lines[0]
