"""Contacts inside one part: crossing bodies and duplicate facets of one mesh file
(vfactor.geomchecks through vfactor.checks.check_model).

Outside references: elementary solid geometry (two unit cubes whose centres are closer
than 1 m on every axis interpenetrate; a facet listed twice coincides with itself), and
trimesh's ``unique_faces`` (an independent library) for which facets are duplicates.
Fixtures: tests/data/crossing_boxes.stl and messy_box.stl (self-made by
scripts/make_mesh_fixtures.py); the GLB below is written here.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import trimesh

from vfactor.checks import check_model

DATA = Path(__file__).parent / "data"
COATING = '[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'


def _mesh_model(tmp_path, file, extra=""):
    path = tmp_path / "m.toml"
    path.write_text(COATING + f'[[parts]]\nname = "p"\nshape = "mesh"\nfile = "{file}"\n'
                    f'{extra}front = {{ coating = "w" }}\n')
    return path


def test_one_file_with_crossing_bodies_is_refused(tmp_path):
    shutil.copy(DATA / "crossing_boxes.stl", tmp_path / "x.stl")
    report = check_model(_mesh_model(tmp_path, "x.stl"))
    lines = [p.line() for p in report.errors]
    assert len(lines) == 1 and "part 'p': intersects itself:" in lines[0], lines
    assert "omit = true" in lines[0]
    # the pair it names crosses: the two facets lie in different cubes
    facets = report.errors[0].facets
    assert min(facets) < 12 <= max(facets)


def test_named_bodies_that_cross_are_named(tmp_path):
    scene = trimesh.Scene()
    for name, offset in (("bus", (0, 0, 0)), ("antenna", (0.5, 0.2, 0.3))):
        box = trimesh.creation.box(extents=(1.0, 1.0, 1.0))
        box.apply_translation(offset)
        scene.add_geometry(box, geom_name=name, node_name=name)
    scene.add_geometry(trimesh.creation.box(extents=(0.2, 0.2, 0.2)).apply_translation(
        (3, 0, 0)), geom_name="far", node_name="far")
    scene.export(tmp_path / "sat.glb")
    report = check_model(_mesh_model(tmp_path, "sat.glb"))
    line = next(p.line() for p in report.errors if "intersects itself" in p.message)
    assert "between 'p.antenna' and 'p.bus'" in line
    assert "'p.far'" not in line


def test_duplicate_facet_within_a_part_is_found_and_repair_drops_it(tmp_path):
    shutil.copy(DATA / "messy_box.stl", tmp_path / "box.stl")
    # one node for the whole box: the repeat only counts its 1/6 m2 twice (a warning)
    report = check_model(_mesh_model(tmp_path, "box.stl"))
    dup = next(p for p in report.warnings if "coincident overlapping facets facing the "
               "same way" in p.message)
    assert dup.message.startswith("1 pairs") and "repair = true drops" in dup.message
    assert "about 0.5 m2 twice" in dup.message          # one facet: half of a 1 m face
    mesh = trimesh.load(tmp_path / "box.stl", process=False)
    mesh.merge_vertices()
    assert int((~mesh.unique_faces()).sum()) == 1                   # trimesh agrees: one
    # one node per facet: a ray may hit either copy, so either node: an error
    path = _mesh_model(tmp_path, "box.stl")
    path.write_text(path.read_text().replace('{ coating = "w" }',
                                             '{ coating = "w", nodes = "per-facet" }'))
    assert any("hits either node" in p.message for p in check_model(path).errors)
    repaired = check_model(_mesh_model(tmp_path, "box.stl", "repair = true\n"))
    assert repaired.ok and not any("coincident" in p.message for p in repaired.problems)


def test_self_crossing_warn_lets_the_run_go_on(tmp_path):
    shutil.copy(DATA / "crossing_boxes.stl", tmp_path / "x.stl")
    report = check_model(_mesh_model(tmp_path, "x.stl", 'self_crossing = "warn"\n'))
    assert report.ok
    line = next(p.message for p in report.warnings if "intersects itself" in p.message)
    assert "allowed by self_crossing = 'warn'" in line and "% of the part's area" in line
    bad = check_model(_mesh_model(tmp_path, "x.stl", 'self_crossing = "ignore"\n'))
    assert any("self_crossing" in p.where for p in bad.errors)


def test_a_surface_written_both_ways_is_face_to_face_contact(tmp_path):
    plate = trimesh.Trimesh([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0]],
                            [[0, 1, 2], [0, 2, 3], [2, 1, 0], [3, 2, 0]], process=False)
    plate.export(tmp_path / "plate.obj")
    report = check_model(_mesh_model(tmp_path, "plate.obj"))
    warning = next(p.message for p in report.warnings if "face-to-face" in p.message)
    assert "opposite normals" in warning and "about 1 m2" in warning
    assert "written twice" in warning
