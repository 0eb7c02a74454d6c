"""Opt-in repair and simplification of mesh files (vfactor.meshrepair via the mesh keys
``repair`` and ``simplify``).

Outside references: the closed-form area of the unit cube (6 m2) and of a sphere
(4 pi r^2, approached from below by an inscribed triangulation); trimesh's
``is_winding_consistent`` and ``volume`` (an independent library) on the repaired mesh.
Fixture: tests/data/messy_box.stl (self-made by scripts/make_mesh_fixtures.py).
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest
import trimesh

from vfactor.checks import check_model
from vfactor.geometry import build_geometry
from vfactor.meshrepair import repair_piece, simplify_piece
from vfactor.model import load_model

DATA = Path(__file__).parent / "data"


def _messy_model(tmp_path, extra=""):
    shutil.copy(DATA / "messy_box.stl", tmp_path / "box.stl")
    path = tmp_path / "m.toml"
    path.write_text('[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'
                    '[[parts]]\nname = "box"\nshape = "mesh"\nfile = "box.stl"\n'
                    f'{extra}front = {{ coating = "w" }}\n')
    return path


def test_messy_box_is_refused_with_the_defects_named(tmp_path):
    report = check_model(_messy_model(tmp_path))
    lines = [p.line() for p in report.errors]
    assert any("1 zero-area or degenerate facets" in line for line in lines), lines
    winding = next(line for line in lines if "inconsistent facet winding" in line)
    assert "about 2 of its 13 facets face the other way" in winding
    assert "repair = true" in winding


def test_repair_fixes_the_messy_box_and_says_what_it_did(tmp_path):
    report = check_model(_messy_model(tmp_path, "repair = true\n"))
    assert report.ok, [p.line() for p in report.errors]
    note = next(p.message for p in report.problems if "repair of" in p.message)
    assert ("dropped 1 degenerate facets; dropped 1 duplicate facets; turned 2 facets to "
            "agree with their neighbours") in note
    g = report.geometry
    assert g.n_facets == 12
    assert g.areas.sum() == pytest.approx(6.0, rel=1e-12)          # unit cube
    mesh = trimesh.Trimesh(g.vertices, g.triangles, process=False)
    mesh.merge_vertices()
    assert mesh.is_winding_consistent and mesh.volume == pytest.approx(1.0, rel=1e-12)
    assert g.part_closed == (True,)


def test_repair_turns_an_inside_out_body_outward():
    box = trimesh.creation.box()
    v, f, counts = repair_piece(box.vertices, box.faces[:, ::-1])
    assert counts["bodies_turned_outward"] == 1 and counts["flipped_facets"] == 12
    assert trimesh.Trimesh(v, f, process=False).volume == pytest.approx(1.0, rel=1e-12)


def test_repair_keeps_the_majority_orientation_of_an_open_sheet():
    # 4 x 4 grid of quads facing +z, with 3 of its 32 facets wound the other way
    n = 4
    idx = np.arange((n + 1) ** 2).reshape(n + 1, n + 1)
    xy = np.stack(np.meshgrid(np.arange(n + 1.0), np.arange(n + 1.0), indexing="xy"), -1)
    v = np.column_stack([xy.reshape(-1, 2), np.zeros((n + 1) ** 2)])
    a, b, c, d = idx[:-1, :-1], idx[:-1, 1:], idx[1:, 1:], idx[1:, :-1]
    f = np.concatenate([np.stack([a, b, c], -1).reshape(-1, 3),
                        np.stack([a, c, d], -1).reshape(-1, 3)])
    f[[2, 9, 20]] = f[[2, 9, 20]][:, ::-1]
    v2, f2, counts = repair_piece(v, f)
    assert counts["flipped_facets"] == 3
    normals = trimesh.Trimesh(v2, f2, process=False).face_normals
    assert (normals[:, 2] > 0.99).all()


def test_simplify_to_a_target_facet_count(tmp_path):
    sphere = trimesh.creation.icosphere(subdivisions=5, radius=0.5)     # 20480 facets
    sphere.export(tmp_path / "s.stl")
    path = tmp_path / "m.toml"
    path.write_text('[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'
                    '[[parts]]\nname = "tank"\nshape = "mesh"\nfile = "s.stl"\n'
                    'simplify = 2000\nfront = { coating = "w" }\n')
    report = check_model(path)
    assert report.ok
    g = report.geometry
    assert 1800 <= g.n_facets <= 2000
    note = next(p.message for p in report.problems if "simplified" in p.message)
    assert "simplified from 20480 to" in note
    # an inscribed sphere mesh of ~2000 facets keeps its area within 1 % of 4 pi r^2
    assert g.areas.sum() == pytest.approx(4 * math.pi * 0.25, rel=0.01)
    assert g.part_closed == (True,)


def test_simplify_leaves_a_coarse_mesh_alone():
    box = trimesh.creation.box()
    v, f = simplify_piece(box.vertices, box.faces, 100)
    assert np.array_equal(f, box.faces)
