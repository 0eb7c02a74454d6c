"""[[parts.select]]: coatings and nodes per group of one mesh file or primitive
(vfactor.parts, applied by vfactor.geometry).

Outside references:
* Pattern matching: Python's ``fnmatch.fnmatchcase`` (shell-style wildcards, POSIX
  glob(7) without path rules), the documented meaning of ``match``.
* Areas: closed forms of rectangles and boxes, 2 (ab + bc + ca) (CRC Standard
  Mathematical Tables, 31st ed., mensuration), against trimesh's area of the written mesh.
Fixtures are generated here or come from tests/data (self-made, see its README).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest
import trimesh

from vfactor.checks import check_model
from vfactor.errors import ModelError
from vfactor.geometry import build_geometry
from vfactor.model import load_model

DATA = Path(__file__).parent / "data"
COATINGS = ('[coatings.white]\nsolar_absorptivity = 0.2\nir_emissivity = 0.85\n'
            '[coatings.cells]\nsolar_absorptivity = 0.9\nir_emissivity = 0.8\n'
            '[coatings.black]\nsolar_absorptivity = 0.95\nir_emissivity = 0.9\n')


def _obj_assembly(path) -> dict:
    """An OBJ with four named objects; returns name -> trimesh area (the reference)."""
    pieces = {"bus": trimesh.creation.box(extents=(1.0, 1.0, 1.0)),
              "wing_left": trimesh.creation.box(extents=(0.02, 1.0, 0.5)),
              "wing_right": trimesh.creation.box(extents=(0.02, 1.0, 0.5)),
              "bolt": trimesh.creation.box(extents=(0.01, 0.01, 0.01))}
    pieces["wing_left"].apply_translation((-1.0, 0.0, 0.0))
    pieces["wing_right"].apply_translation((1.0, 0.0, 0.0))
    pieces["bolt"].apply_translation((0.0, 0.0, 0.6))
    scene = trimesh.Scene()
    for name, mesh in pieces.items():
        scene.add_geometry(mesh, geom_name=name, node_name=name)
    path.write_text(trimesh.exchange.obj.export_obj(scene, include_normals=False))
    return {name: float(mesh.area) for name, mesh in pieces.items()}


def _model(tmp_path, selects: str, part_sides='front = { coating = "white", nodes = '
           '"per-group" }\n'):
    areas = _obj_assembly(tmp_path / "sat.obj")
    path = tmp_path / "m.toml"
    path.write_text(COATINGS + '[[parts]]\nname = "sat"\nshape = "mesh"\nfile = "sat.obj"\n'
                    + part_sides + selects)
    return path, areas


def test_selected_groups_take_their_own_coating_and_node(tmp_path):
    path, areas = _model(tmp_path, '[[parts.select]]\nmatch = "wing_*"\n'
                         'front = { coating = "cells", node = "wings" }\n'
                         'back = { coating = "black", node = "wings_back" }\n')
    g = build_geometry(load_model(path))
    names = g.nodes.names
    assert set(names) == {"sat.bus", "sat.bolt", "wings", "wings_back"}
    wings = g.nodes.index("wings")
    assert g.nodes.coating[wings] == "cells"
    assert g.nodes.area[wings] == pytest.approx(areas["wing_left"] + areas["wing_right"],
                                                rel=1e-12)
    assert g.nodes.area[g.nodes.index("wings_back")] == pytest.approx(
        g.nodes.area[wings], rel=1e-12)
    assert g.nodes.area[g.nodes.index("sat.bus")] == pytest.approx(areas["bus"], rel=1e-12)
    # the bus keeps the part's inert back
    bus = g.nodes.index("sat.bus")
    assert (g.back_node[g.front_node == bus] == -1).all()
    assert set(g.group_names) == {"sat.bus", "sat.bolt", "sat.wing_left", "sat.wing_right"}


def test_first_matching_selection_wins_and_omit_drops_groups(tmp_path):
    path, areas = _model(tmp_path, '[[parts.select]]\nmatch = "bolt"\nomit = true\n'
                         '[[parts.select]]\nname = "arrays"\nmatch = ["wing_left", "wing*"]\n'
                         'front = { coating = "cells" }\n'
                         '[[parts.select]]\nmatch = "wing_right"\n'
                         'front = { coating = "black" }\n')
    problems = []
    g = build_geometry(load_model(path), problems=problems)
    # the third selection finds its group already taken by the second: an error
    assert any("taken by an earlier selection" in p.message for p in problems)
    path.write_text(path.read_text().replace('[[parts.select]]\nmatch = "wing_right"\n'
                                             'front = { coating = "black" }\n', ""))
    g = build_geometry(load_model(path))
    assert set(g.nodes.names) == {"sat.bus", "sat.arrays"}
    arrays = g.nodes.index("sat.arrays")
    assert g.nodes.coating[arrays] == "cells"
    assert g.nodes.area[arrays] == pytest.approx(areas["wing_left"] + areas["wing_right"],
                                                 rel=1e-12)
    total = sum(a for n, a in areas.items() if n != "bolt")
    assert g.areas.sum() == pytest.approx(total, rel=1e-12)      # the bolt is gone


def test_a_selection_that_matches_nothing_is_an_error_listing_the_groups(tmp_path):
    path, _ = _model(tmp_path, '[[parts.select]]\nmatch = "wings*"\n'
                     'front = { coating = "cells" }\n')
    report = check_model(path)
    assert not report.ok
    line = next(p.line() for p in report.errors)
    assert "select #1" in line and "'wings*'" in line and "wing_left" in line
    with pytest.raises(ModelError, match="matches no group"):
        build_geometry(load_model(path))


def test_back_false_makes_the_selected_side_inert(tmp_path):
    path, _ = _model(tmp_path, '[[parts.select]]\nmatch = "wing_*"\nback = false\n',
                     part_sides='front = { coating = "white" }\nback = { coating = "black" }\n')
    g = build_geometry(load_model(path))
    assert g.nodes.names == ("sat", "sat.back")
    wing_groups = [k for k, n in enumerate(g.group_names) if ".wing_" in n]
    in_wings = (g.group[:, None] == wing_groups).any(axis=1)
    assert (g.back_node[in_wings] == -1).all()
    assert (g.back_node[~in_wings] >= 0).all()
    assert (g.front_node >= 0).all()          # the front is left to the part


def test_selection_on_a_primitive_face(write_model):
    path = write_model('[coatings.r]\nsolar_absorptivity = 0.1\nir_emissivity = 0.9\n'
                       '[[parts]]\nname = "body"\nshape = "box"\nsize = [1, 2, 3]\n'
                       'front = { coating = "w" }\n'
                       '[[parts.select]]\nname = "radiator"\nmatch = "+x"\n'
                       'front = { coating = "r" }\n')
    g = build_geometry(load_model(path))
    # nodes in order of first facet: the +x face is the box's first
    assert g.nodes.names == ("body.radiator", "body")
    assert g.nodes.area[0] == pytest.approx(2.0 * 3.0, rel=1e-12)     # the +x face: 2 x 3
    assert g.nodes.area[1] == pytest.approx(2 * (2 + 6 + 3) - 6.0, rel=1e-12)


@pytest.mark.parametrize("select, needle", [
    ('match = "a"\n', "neither front nor back nor omit"),
    ('front = { coating = "cells" }\n', "missing key 'match'"),
    ('match = []\nfront = { coating = "cells" }\n', "non-empty string or list"),
    ('match = "a"\nomit = true\nfront = { coating = "cells" }\n', "omitted selection"),
    ('match = "a"\nfrnt = { coating = "cells" }\n', "did you mean 'front'"),
])
def test_bad_selection_tables_are_one_clear_error(tmp_path, select, needle):
    path, _ = _model(tmp_path, "[[parts.select]]\n" + select)
    report = check_model(path)
    assert any(needle in p.message for p in report.errors), [p.line() for p in report.errors]


def test_selection_by_pattern_on_a_step_assembly(tmp_path):
    shutil.copy(DATA / "assembly_mm.step", tmp_path / "a.step")
    path = tmp_path / "m.toml"
    path.write_text(COATINGS + '[[parts]]\nname = "inst"\nshape = "mesh"\nfile = "a.step"\n'
                    'front = { coating = "white", nodes = "per-group" }\n'
                    '[[parts.select]]\nmatch = "elec*"\nfront = { coating = "black" }\n')
    g = build_geometry(load_model(path))
    assert g.nodes.names == ("inst.select1", "inst.panel")
    # 50 mm cube: 6 x 0.05^2 m2; 100 x 200 x 10 mm panel: 2 (ab + bc + ca); to the
    # float32 coordinates of the glTF that cascadio converts to (relative 6e-8)
    assert g.nodes.area[0] == pytest.approx(6 * 0.05 ** 2, rel=1e-6)
    assert g.nodes.area[1] == pytest.approx(2 * (0.02 + 0.002 + 0.001), rel=1e-6)
    assert g.nodes.coating == ("black", "white")


def test_a_name_with_brackets_matches_as_written():
    import fnmatch

    from vfactor.parts import Selection

    label = "=>[0:1:1:3]_4"          # a CAD label path, as STEP converters name bodies
    assert not fnmatch.fnmatchcase(label, label)       # as a pattern it is a class
    sel = Selection(patterns=(label,), name="s")
    assert sel.matches(label) and not sel.matches("=>[0:1:1:3]_5")
    assert Selection(patterns=("=>*_4",), name="t").matches(label)
