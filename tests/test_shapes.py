"""Tessellation of primitives and mesh reading (vfactor.shapes).

Outside references:
* closed-form areas and volumes: CRC Standard Mathematical Tables and Formulae
  (D. Zwillinger ed., 31st ed., 2003), mensuration of solids — sphere 4 pi r^2 and
  (4/3) pi r^3, right circular cone lateral area pi r sqrt(r^2 + h^2), frustum
  pi (R + r) sqrt((R - r)^2 + h^2), cylinder 2 pi r h; paraboloid of revolution
  (pi r / (6 h^2)) ((r^2 + 4 h^2)^(3/2) - r^3) (also: G. B. Thomas, Calculus, surface area
  of a solid of revolution, applied to z = h rho^2 / r^2);
* an independent numerical quadrature (scipy.integrate.quad) of the surface-of-revolution
  integral 2 pi int rho sqrt(1 + z'(rho)^2) d rho for the paraboloid;
* watertightness and volume of closed meshes from trimesh (Trimesh.is_watertight,
  Trimesh.volume) as an independent library.

Inscribed tessellations (vertices on the surface) under-estimate a convex surface's area
by a relative amount of order (edge / radius)^2: the bound used below, (h / r)^2, is the
leading term 1 - sin(t)/t ~ t^2 / 6 of an inscribed polygon with chord angle t <= h / r,
doubled for surfaces curved in two directions and rounded up (derived here).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import tomli_w
import trimesh
from scipy.integrate import quad

from vfactor.errors import MeshError, ModelError
from vfactor.meshfile import read_mesh
from vfactor.model import load_model_text
from vfactor.shapes import (
    MAX_FACETS_PER_PART,
    exact_area,
    max_edge_length,
    tessellate,
    triangle_areas,
)


def make_part(shape, max_edge=None, **params):
    table = {"name": "p", "shape": shape, "front": {"coating": "w"}, **params}
    if max_edge is not None:
        table["max_edge"] = max_edge
    doc = {"coatings": {"w": {"solar_absorptivity": 0.5, "ir_emissivity": 0.5}},
           "parts": [table]}
    return load_model_text(tomli_w.dumps(doc)).parts[0]


def unit_normals(t):
    v = t.vertices[t.triangles]
    n = np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0])
    return n / np.linalg.norm(n, axis=1)[:, None], v.mean(axis=1)


def area(t):
    return float(triangle_areas(t.vertices, t.triangles).sum())


# ----------------------------------------------------------------------------------------
# Exact areas (closed forms)
# ----------------------------------------------------------------------------------------

def test_exact_area_closed_forms():
    # CRC mensuration formulas, evaluated by hand for these parameters
    assert exact_area(make_part("sphere", radius=2.0)) == pytest.approx(16 * math.pi, rel=1e-15)
    # cone r = 3, h = 4: lateral pi * 3 * 5 = 15 pi, base 9 pi
    assert exact_area(make_part("cone", radius=3.0, length=4.0, caps=False)) == \
        pytest.approx(15 * math.pi, rel=1e-15)
    assert exact_area(make_part("cone", radius=3.0, length=4.0)) == \
        pytest.approx(24 * math.pi, rel=1e-15)
    assert exact_area(make_part("cylinder", radius=1.0, length=2.0)) == \
        pytest.approx(6 * math.pi, rel=1e-15)
    assert exact_area(make_part("disk", radius=2.0, inner_radius=1.0)) == \
        pytest.approx(3 * math.pi, rel=1e-15)


def test_paraboloid_area_formula_against_quadrature():
    # closed form (CRC; Thomas' Calculus) against scipy.integrate.quad of the
    # surface-of-revolution integral; quad's own error estimate is ~1e-14 here
    for r, h in [(0.5, 0.2), (1.0, 1.0), (0.3, 0.01)]:
        closed = exact_area(make_part("dish", radius=r, depth=h))
        numeric, err = quad(lambda rho: 2 * math.pi * rho * math.sqrt(1 + (2 * h * rho / r**2) ** 2),
                            0.0, r, epsabs=0, epsrel=1e-13)
        assert closed == pytest.approx(numeric, rel=1e-11)


# ----------------------------------------------------------------------------------------
# Areas, normals and refinement of each primitive
# ----------------------------------------------------------------------------------------

@pytest.mark.parametrize("h", [None, 0.3, 0.1])
def test_rectangle_and_box_exact(h):
    t = tessellate(make_part("rectangle", h, size=[1.2, 0.7]))
    assert area(t) == pytest.approx(1.2 * 0.7, rel=1e-13)   # flat: exact up to rounding
    n, _ = unit_normals(t)
    np.testing.assert_allclose(n, np.tile([0, 0, 1.0], (len(n), 1)), atol=1e-12)
    b = tessellate(make_part("box", h, size=[1.0, 0.5, 0.25]))
    assert area(b) == pytest.approx(2 * (0.5 + 0.125 + 0.25), rel=1e-13)
    n, c = unit_normals(b)
    half = np.array([0.5, 0.25, 0.125])
    for k, label in enumerate(b.labels):
        axis, sign = "xyz".index(label[1]), 1.0 if label[0] == "+" else -1.0
        sel = b.face == k
        expected = np.zeros(3)
        expected[axis] = sign
        np.testing.assert_allclose(n[sel], np.tile(expected, (sel.sum(), 1)), atol=1e-12)
        np.testing.assert_allclose(c[sel, axis], sign * half[axis], atol=1e-12)
    mesh = trimesh.Trimesh(b.vertices, b.triangles, process=False)
    assert mesh.is_watertight
    assert mesh.volume == pytest.approx(0.125, rel=1e-12)
    if h is not None:
        assert max_edge_length(t.vertices, t.triangles) <= h
        assert max_edge_length(b.vertices, b.triangles) <= h


# segments = 3 (the minimum) so that max_edge alone sets the resolution
CURVED = [
    ("sphere", dict(radius=0.5, segments=3), 0.5),
    ("cylinder", dict(radius=0.3, length=1.0, segments=3), 0.3),
    ("cone", dict(radius=0.4, length=0.6, segments=3), 0.4),
    ("cone", dict(radius=0.4, top_radius=0.15, length=0.6, segments=3), 0.15),
    ("dish", dict(radius=0.5, depth=0.2, segments=3), 0.5),
    ("disk", dict(radius=0.5, inner_radius=0.1, segments=3), 0.1),
    ("disk", dict(radius=0.5, segments=3), 0.5),
]


@pytest.mark.parametrize("shape,params,rmin", CURVED)
def test_curved_area_converges_from_below(shape, params, rmin):
    errors = []
    exact = exact_area(make_part(shape, **params))
    for h in (0.2, 0.1, 0.05):
        t = tessellate(make_part(shape, h, **params))
        a = area(t)
        assert max_edge_length(t.vertices, t.triangles) <= h * (1 + 1e-12)
        assert a <= exact * (1 + 1e-12)                   # inscribed: from below
        assert exact - a <= (h / rmin) ** 2 * exact        # bound of the module docstring
        errors.append(exact - a)
    # second-order convergence: halving h divides the error by about 4 (at least 2.5)
    assert errors[1] < errors[0] / 2.5 and errors[2] < errors[1] / 2.5


def _analytic_normal(shape, params, c):
    if shape == "sphere":
        n = c
    elif shape in ("disk",):
        n = np.tile([0, 0, 1.0], (len(c), 1))
    elif shape == "dish":
        k = 2 * params["depth"] / params["radius"] ** 2
        n = np.stack([-k * c[:, 0], -k * c[:, 1], np.ones(len(c))], 1)
    else:
        R = params["radius"]
        r = R if shape == "cylinder" else params.get("top_radius", 0.0)
        L = params["length"]
        n = np.stack([L * c[:, 0], L * c[:, 1], (R - r) * np.hypot(c[:, 0], c[:, 1])], 1)
        top, bottom = c[:, 2] > L / 2 - 1e-12, c[:, 2] < -L / 2 + 1e-12
        n[top] = [0, 0, 1.0]
        n[bottom] = [0, 0, -1.0]
    return n / np.linalg.norm(n, axis=1)[:, None]


@pytest.mark.parametrize("shape,params,rmin", CURVED)
def test_curved_normals_face_the_front(shape, params, rmin):
    # front = outside of closed shapes, +z for disks, the concave side for the dish: each
    # facet normal within the chord angle (max_edge / radius, radians) of the exact normal
    h = 0.05
    t = tessellate(make_part(shape, h, **params))
    n, c = unit_normals(t)
    expected = _analytic_normal(shape, params, c)
    cosang = (n * expected).sum(axis=1)
    assert cosang.min() >= math.cos(h / rmin)


@pytest.mark.parametrize("shape,params", [
    ("sphere", dict(radius=0.5)), ("cylinder", dict(radius=0.3, length=1.0)),
    ("cone", dict(radius=0.4, length=0.6)), ("cone", dict(radius=0.4, top_radius=0.1, length=0.6)),
])
def test_closed_primitives_are_watertight_and_outward(shape, params):
    t = tessellate(make_part(shape, 0.1, **params))
    assert t.closed
    # no vertex merging here: faces must share their edge vertices exactly
    mesh = trimesh.Trimesh(t.vertices, t.triangles, process=False)
    assert mesh.is_watertight and mesh.is_winding_consistent
    assert mesh.volume > 0.0   # outward normals


def test_sphere_vertices_on_surface_and_volume():
    t = tessellate(make_part("sphere", 0.05, radius=0.5))
    np.testing.assert_allclose(np.linalg.norm(t.vertices, axis=1), 0.5, rtol=1e-14)
    vol = trimesh.Trimesh(t.vertices, t.triangles, process=False).volume
    exact = 4 / 3 * math.pi * 0.5**3    # CRC: sphere volume
    assert exact * (1 - (0.05 / 0.5) ** 2) < vol < exact


def test_dish_vertices_on_paraboloid():
    t = tessellate(make_part("dish", 0.05, radius=0.5, depth=0.2))
    rho2 = (t.vertices[:, :2] ** 2).sum(1)
    np.testing.assert_allclose(t.vertices[:, 2], 0.2 * rho2 / 0.25, atol=1e-15)
    assert np.sqrt(rho2).max() == pytest.approx(0.5, rel=1e-15)


def test_cylinder_and_cone_face_labels():
    t = tessellate(make_part("cylinder", 0.1, radius=0.2, length=1.0))
    assert t.labels == ("side", "top", "bottom")
    a = triangle_areas(t.vertices, t.triangles)
    cap = math.pi * 0.04
    assert a[t.face == 1].sum() == pytest.approx(cap, rel=(0.1 / 0.2) ** 2)
    assert a[t.face == 1].sum() == pytest.approx(a[t.face == 2].sum(), rel=1e-12)
    open_cyl = tessellate(make_part("cylinder", 0.1, radius=0.2, length=1.0, caps=False))
    assert set(open_cyl.face.tolist()) == {0} and not open_cyl.closed
    cone = tessellate(make_part("cone", 0.1, radius=0.2, length=1.0))
    assert set(cone.face.tolist()) == {0, 2}     # apex: no top cap


def test_segments_sets_default_resolution():
    coarse = tessellate(make_part("cylinder", radius=1.0, length=1.0, caps=False, segments=8))
    fine = tessellate(make_part("cylinder", radius=1.0, length=1.0, caps=False, segments=64))
    # inscribed regular polygon perimeter n * 2 sin(pi/n) (elementary geometry)
    assert area(coarse) == pytest.approx(8 * 2 * math.sin(math.pi / 8), rel=1e-13)
    assert area(fine) == pytest.approx(64 * 2 * math.sin(math.pi / 64), rel=1e-13)


def test_too_fine_refinement_is_refused():
    with pytest.raises(ModelError, match="facets"):
        tessellate(make_part("sphere", 0.001, radius=1.0))
    assert MAX_FACETS_PER_PART >= 1_000_000


# ----------------------------------------------------------------------------------------
# Mesh files
# ----------------------------------------------------------------------------------------

def _prism_stl(path, reverse=False):
    m = trimesh.creation.cylinder(radius=0.1, height=0.2, sections=8)
    faces = m.faces[:, ::-1] if reverse else m.faces
    trimesh.Trimesh(m.vertices, faces, process=False).export(path)
    return m


def test_read_mesh_groups_scale_and_refinement(tmp_path):
    ref = _prism_stl(tmp_path / "prism.stl")
    t = read_mesh(str(tmp_path / "prism.stl"), scale=2.0)
    assert t.closed
    # scale 2: area x 4; binary STL stores float32 coordinates (relative rounding 6e-8)
    assert area(t) == pytest.approx(4.0 * ref.area, rel=1e-6)
    # flat regions of an octagonal prism: 8 sides + 2 caps
    assert len(t.labels) == 10
    r = read_mesh(str(tmp_path / "prism.stl"), scale=1.0, max_edge=0.05)
    assert max_edge_length(r.vertices, r.triangles) <= 0.05
    assert area(r) == pytest.approx(area(read_mesh(str(tmp_path / "prism.stl"))), rel=1e-12)
    assert len(r.labels) == 10 and set(r.face.tolist()) == set(range(10))


def test_read_mesh_named_objects_are_groups(tmp_path):
    p = tmp_path / "two.obj"
    p.write_text("o lens\nv 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n"
                 "o hood\nv 0 0 1\nv 1 0 1\nv 0 1 1\nf 4 5 6\nf 4 6 5\n")
    t = read_mesh(str(p))
    assert sorted(t.labels) == ["hood", "lens"]
    counts = {t.labels[k]: int((t.face == k).sum()) for k in range(len(t.labels))}
    assert counts == {"lens": 1, "hood": 2}


@pytest.mark.parametrize("content,match", [
    (None, "not found"),
    ("", "empty"),
    ("solid x\nnot an stl\n", "empty|cannot read"),
    ("v 0 0 0\nv 1 0 0\n", "no triangles|empty"),
    ("v nan 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n", "non-finite"),
])
def test_bad_mesh_files_raise_mesh_error(tmp_path, content, match):
    suffix = ".stl" if content and content.startswith("solid") else ".obj"
    p = tmp_path / f"m{suffix}"
    if content is not None:
        p.write_text(content)
    with pytest.raises(MeshError, match=match):
        read_mesh(str(p), where="part 'x'")


def test_random_bytes_mesh_is_a_mesh_error(tmp_path):
    rng = np.random.default_rng(7)
    for k, suffix in enumerate((".stl", ".obj", ".ply", ".glb", ".off")):
        p = tmp_path / f"r{k}{suffix}"
        p.write_bytes(rng.integers(0, 256, 400, dtype=np.uint8).tobytes())
        with pytest.raises(MeshError):
            read_mesh(str(p))


def test_committed_demo_mesh_matches_its_generator():
    # meshes/camera.stl must be what scripts/make_demo_meshes.py writes (regenerable)
    import importlib.util
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent
    spec = importlib.util.spec_from_file_location("make_demo_meshes",
                                                  root / "scripts" / "make_demo_meshes.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    vertices, faces = module.octagonal_prism(80.0, 150.0)
    expected = trimesh.Trimesh(vertices, faces, process=False)
    t = read_mesh(str(root / "meshes" / "camera.stl"))
    assert t.n_facets == len(faces) and t.closed
    assert area(t) == pytest.approx(expected.area, rel=1e-12)     # ASCII STL, full precision
    got = trimesh.Trimesh(t.vertices, t.triangles, process=False)
    assert got.volume == pytest.approx(expected.volume, rel=1e-12)
