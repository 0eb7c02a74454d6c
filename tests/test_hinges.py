"""Hinges: reading ``[[hinges]]``, the laws' angles, and heat loads of turning parts.

Outside references: the cosine loss of a single-axis Sun tracker (the angle between the
panel normal and the Sun is the Sun's angle out of the plane the axis turns in: textbook
geometry, common practice), checked against the trajectory's beta angle (computed from the
orbit in the inertial frame, independently of the hinge code); full pointing of a two-axis
gimbal; the area of a panel's shadow as the projected polygon clipped to the face,
computed by shapely (GEOS polygon intersection) as an independent oracle; direct solar
``alpha S A cos(theta)`` on an unshadowed plate (definition of irradiance).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from vfactor.environment import environment_from_table
from vfactor.errors import ModelError
from vfactor.geometry import build_geometry
from vfactor.heating import compute_heating
from vfactor.hinges import Hinge
from vfactor.kinematics import hinge_angles, motion_of, rotation
from vfactor.model import load_model_text
from vfactor.positions import couplings_at_positions
from vfactor.tracing.scene import Scene
from vfactor.trajectory import trajectory_from_model

COATINGS = """
[coatings.w]
solar_absorptivity = 0.6
ir_emissivity = 0.8
"""

PLATE = """
[[parts]]
name = "panel"
shape = "rectangle"
size = [1.0, 0.5]
front = { coating = "w" }
back = { coating = "w" }
"""

# sun-synchronous 10:30 orbit: beta about 20 deg; nadir pointing (body y = orbit normal)
ORBIT = """
[orbit]
type = "circular"
altitude_km = 600.0
inclination_deg = 97.8
ltan = "10:30"
epoch = "2027-06-21T00:00:00Z"
steps_per_orbit = 12
"""


def _model(text):
    return load_model_text(COATINGS + text, "h.toml")


def _heating(model, **kw):
    g = build_geometry(model)
    tr = trajectory_from_model(model)
    motion = motion_of(g, model.hinges, tr)
    heat = compute_heating(g, Scene.build(g.vertices, g.triangles), tr,
                           environment_from_table(None, "h.toml"), motion=motion,
                           reflections=False, seed=3, **kw)
    return g, tr, motion, heat


def _hinge(law, **keys):
    body = "\n".join(f"{k} = {v}" for k, v in keys.items())
    return f"""
[[hinges]]
name = "root"
parts = ["panel"]
point = [0.0, 0.0, 0.0]
axis = [0.0, 1.0, 0.0]
law = "{law}"
{body}
"""


# -- reading ----------------------------------------------------------------------------
@pytest.mark.parametrize("change, message", [
    ('parts = ["panel"]', None),
    ('parts = ["pannel"]', "unknown part 'pannel'"),
    ('axis = [0.0, 0.0, 0.0]', "zero vector"),
    ('normal = [0.0, 1.0, 0.0]', "along the axis"),
    ('law = "track"', "unknown law"),
    ('parent = "nothing"', "unknown hinge 'nothing'"),
    ('max_deg = -10', "must exceed min_deg"),
])
def test_reading_and_one_line_errors(change, message):
    text = _hinge("sun", normal="[0.0, 0.0, 1.0]", min_deg=0)
    key = change.split(" = ")[0]
    lines = [ln for ln in text.splitlines() if not ln.startswith(key + " ")]
    text = "\n".join(lines) + "\n" + change + "\n"
    if message is None:
        (h,) = _model(PLATE + text).hinges
        assert h.name == "root" and h.parts == ("panel",) and h.lower == 0.0
        np.testing.assert_array_equal(h.axis, [0.0, 1.0, 0.0])
        return
    with pytest.raises(ModelError, match=message) as err:
        _model(PLATE + text)
    assert "\n" not in str(err.value) and "hinge" in str(err.value)


def test_a_part_follows_one_hinge_and_parents_form_no_loop():
    two = _hinge("fixed") + _hinge("fixed").replace('"root"', '"again"')
    with pytest.raises(ModelError, match="already turns with hinge 'root'"):
        _model(PLATE + two)
    loop = PLATE + PLATE.replace('"panel"', '"other"') + \
        _hinge("fixed", parent='"b"').replace('"root"', '"a"') + \
        _hinge("fixed", parent='"a"').replace('"root"', '"b"').replace('["panel"]', '["other"]')
    with pytest.raises(ModelError, match="loop"):
        _model(loop)


# -- laws -------------------------------------------------------------------------------
def _bare(law, **kw):
    base = dict(name="h", parts=("p",), point=np.zeros(3), axis=np.array([0.0, 0.0, 1.0]),
                parent=None, law=law)
    base.update(kw)
    return Hinge(**base)


def test_rate_table_fixed_and_limits():
    t = np.array([0.0, 10.0, 20.0, 30.0])
    sun = np.tile([1.0, 0.0, 0.0], (4, 1))
    rate = _bare("rate", rate=math.radians(2.0), start=math.radians(5.0))
    np.testing.assert_allclose(np.degrees(hinge_angles((rate,), t, sun)[:, 0]),
                               [5.0, 25.0, 45.0, 65.0], rtol=1e-13)
    table = _bare("table", times=(10.0, 20.0), angles=(0.0, math.radians(40.0)))
    np.testing.assert_allclose(np.degrees(hinge_angles((table,), t, sun)[:, 0]),
                               [0.0, 0.0, 40.0, 40.0], atol=1e-12)   # held beyond the ends
    limited = dataclasses.replace(rate, upper=math.radians(30.0))
    np.testing.assert_allclose(np.degrees(hinge_angles((limited,), t, sun)[:, 0]),
                               [5.0, 25.0, 30.0, 30.0], rtol=1e-13)
    slow = dataclasses.replace(rate, max_rate=math.radians(1.0))   # 10 deg per 10 s step
    np.testing.assert_allclose(np.degrees(hinge_angles((slow,), t, sun)[:, 0]),
                               [5.0, 15.0, 25.0, 35.0], rtol=1e-13)
    fixed = _bare("fixed", angle=math.radians(-12.0))
    np.testing.assert_allclose(np.degrees(hinge_angles((fixed,), t, sun)[:, 0]), -12.0)


def test_edge_on_keeps_the_normal_square_to_the_sun():
    rng = np.random.default_rng(4)
    sun = rng.normal(size=(50, 3))
    sun /= np.linalg.norm(sun, axis=1)[:, None]
    normal = np.array([1.0, 0.0, 0.0])
    h = _bare("edge-on", normal=normal)
    angles = hinge_angles((h,), np.arange(50.0), sun)[:, 0]
    dots = [float(np.dot(rotation(h.axis, a) @ normal, s)) for a, s in zip(angles, sun)]
    np.testing.assert_allclose(dots, 0.0, atol=1e-12)     # n square to the axis: reachable


# -- heat loads of turning parts --------------------------------------------------------
def test_single_axis_tracker_loses_the_cosine_of_beta():
    model = _model(PLATE + _hinge("sun", normal="[0.0, 0.0, 1.0]") + ORBIT)
    g, tr, motion, heat = _heating(model)
    lit = tr.sun_fraction > 0
    assert lit.sum() >= 6 and (~lit).sum() >= 2
    normal = np.array([rotation([0.0, 1.0, 0.0], a) @ [0.0, 0.0, 1.0]
                       for a in motion.angles[:, 0]])
    angle = np.arccos(np.clip(np.einsum("ij,ij->i", normal, tr.sun_body), -1, 1))
    # the Sun's angle out of the plane the axis turns in is |beta| (axis = orbit normal);
    # beta is taken from the planet centre, the Sun vector from the vehicle: they differ by
    # the parallax, at most r / (1 au) = 4.7e-5 rad here
    np.testing.assert_allclose(angle[lit], np.abs(tr.beta[lit]), atol=5e-5)
    assert np.degrees(np.abs(tr.beta)).min() > 10.0           # a real cosine loss
    expected = 0.6 * heat.solar_constant * 0.5 * np.cos(tr.beta) * tr.sun_fraction
    front = g.nodes.names.index("panel")
    np.testing.assert_allclose(heat.node_solar[:, front], expected, rtol=3e-5, atol=1e-12)


def test_two_axis_gimbal_points_the_panel_at_the_sun():
    yoke = PLATE.replace('"panel"', '"yoke"').replace("[1.0, 0.5]", "[0.1, 0.1]") \
        .replace("[[parts]]", "[[parts]]\ncenter = [0.0, 0.0, -1.0]", 1)
    hinges = """
[[hinges]]
name = "outer"
parts = ["yoke"]
axis = [0.0, 1.0, 0.0]
law = "sun"
normal = [0.0, 0.0, 1.0]

[[hinges]]
name = "inner"
parent = "outer"
parts = ["panel"]
axis = [1.0, 0.0, 0.0]
law = "sun"
normal = [0.0, 0.0, 1.0]
"""
    model = _model(PLATE + yoke + hinges + ORBIT)
    g, tr, motion, heat = _heating(model)
    lit = tr.sun_fraction > 0
    front = g.nodes.names.index("panel")
    expected = 0.6 * heat.solar_constant * 0.5 * tr.sun_fraction
    np.testing.assert_allclose(heat.node_solar[lit, front], expected[lit], rtol=1e-9)


@pytest.mark.parametrize("angle_deg", [0.0, 35.0, 70.0])
def test_shadow_of_a_turning_panel_matches_the_projected_polygon(angle_deg):
    shapely = pytest.importorskip("shapely")
    from shapely.geometry import Polygon, box

    # a 2 m x 2 m floor (front up) under a 1 m x 0.6 m panel at 0.5 m, turned about the
    # x axis through its centre; Sun pointing holds the Sun at a fixed slant in the body
    sun_axis = np.array([0.3, 0.2, 1.0]) / np.linalg.norm([0.3, 0.2, 1.0])
    text = f"""
[[parts]]
name = "floor"
shape = "rectangle"
size = [2.0, 2.0]
max_edge = 0.1
front = {{ coating = "w" }}

[[parts]]
name = "panel"
shape = "rectangle"
size = [1.0, 0.6]
center = [0.0, 0.0, 0.5]

[[hinges]]
name = "turn"
parts = ["panel"]
point = [0.0, 0.0, 0.5]
axis = [1.0, 0.0, 0.0]
law = "fixed"
angle_deg = {angle_deg}

[attitude]
mode = "sun"
sun_axis = [{float(sun_axis[0])!r}, {float(sun_axis[1])!r}, {float(sun_axis[2])!r}]
""" + ORBIT
    model = _model(text)
    g, tr, motion, heat = _heating(model, sun_samples=512, rays_per_facet=8)
    k = int(np.argmax(tr.sun_fraction))
    assert tr.sun_fraction[k] == 1.0
    np.testing.assert_allclose(tr.sun_body[k], sun_axis, atol=1e-9)
    # the oracle: the panel's corners as placed, projected along the Sun onto z = 0
    r = rotation([1.0, 0.0, 0.0], math.radians(angle_deg))
    corners = np.array([[x, y, 0.0] for x, y in ((-0.5, -0.3), (0.5, -0.3), (0.5, 0.3),
                                                  (-0.5, 0.3))]) @ r.T + [0.0, 0.0, 0.5]
    s = tr.sun_body[k]
    ground = corners[:, :2] - (corners[:, 2] / s[2])[:, None] * s[:2]
    shadow = Polygon(ground).intersection(box(-1.0, -1.0, 1.0, 1.0)).area
    lit_share = 1.0 - shadow / 4.0
    floor = g.nodes.names.index("floor")
    full = 0.6 * heat.solar_constant[k] * 4.0 * s[2]
    measured = heat.node_solar[k, floor] / full
    # sample points: 512 per facet of ~800 facets, binomial one-sigma error ~0.04 %
    samples = 512 * int((g.front_node == floor).sum())
    sigma = math.sqrt(lit_share * (1.0 - lit_share) / samples)
    assert abs(measured - lit_share) < 5 * sigma, (measured, lit_share)


def test_edge_on_radiator_gets_no_direct_sun():
    model = _model(PLATE + _hinge("edge-on", normal="[0.0, 0.0, 1.0]") + ORBIT)
    g, tr, motion, heat = _heating(model)
    assert np.abs(heat.node_solar).max() < 1e-9
    assert heat.node_albedo.max() > 0.0       # it still sees the planet


@pytest.mark.parametrize("more_rays", [False, True])
def test_a_placed_step_equals_a_rigid_model_built_at_that_position(more_rays):
    # same seed: the step of a turning panel has the bits of a rigid model whose panel is
    # built at that step's angle (both estimate their couplings from their own rays), also
    # with 1 to 3 blocks of planet rays on its nodes (vfactor.planetrays)
    model = _model(PLATE.replace('[[parts]]', '[[parts]]\nmax_edge = 0.2', 1)
                   + PLATE.replace('"panel"', '"box"').replace('shape = "rectangle"',
                                                               'shape = "box"')
                   .replace("size = [1.0, 0.5]", "size = [0.4, 0.4, 0.4]\ncenter = [0, 0, -1.0]")
                   .replace("back = { coating = \"w\" }\n", "")
                   + _hinge("sun", normal="[0.0, 0.0, 1.0]") + ORBIT)
    g = build_geometry(model)
    tr = trajectory_from_model(model)
    env = environment_from_table(None, "h.toml")
    motion = motion_of(g, model.hinges, tr)
    more = dict(planet_blocks=np.arange(g.n_nodes) % 3 + 1) if more_rays else {}
    moving = compute_heating(g, Scene.build(g.vertices, g.triangles), tr, env, motion=motion,
                             seed=9, rays_per_facet=64, **more)
    k = 3
    placed = dataclasses.replace(g, vertices=motion.vertices(g, k),
                                 normals=motion.normals(g, k))
    one = dataclasses.replace(tr, **{name: getattr(tr, name)[k:k + 1] for name in (
        "time", "position", "velocity", "sun_inertial", "sun_distance", "sun_fraction",
        "beta", "body_to_inertial", "sun_body", "nadir_body", "planet_distance")})
    rigid = compute_heating(placed, Scene.build(placed.vertices, placed.triangles), one, env,
                            seed=9, rays_per_facet=64, **more)
    for name in ("node_solar", "node_albedo", "node_planet_ir", "facet_solar"):
        assert getattr(moving, name)[k].tobytes() == getattr(rigid, name)[0].tobytes(), name
    if more_rays:
        return

    # with couplings at hinge positions the step redistributes by its position's view
    # factors: the bits of the rigid model at that step given those view factors
    positions = couplings_at_positions(g, motion, 3, rays_per_node=4000, seed=9)
    by_position = compute_heating(g, Scene.build(g.vertices, g.triangles), tr, env,
                                  motion=motion, positions=positions, seed=9,
                                  rays_per_facet=64)
    view = positions.view_factors[positions.step_position[k]]
    rigid = compute_heating(placed, Scene.build(placed.vertices, placed.triangles), one, env,
                            seed=9, rays_per_facet=64, view_factors=view)
    for name in ("node_solar", "node_albedo", "node_planet_ir", "facet_solar"):
        assert getattr(by_position, name)[k].tobytes() == getattr(rigid, name)[0].tobytes()
    # the reflected part differs from the step's own couplings, the direct part does not
    assert not np.array_equal(by_position.node_solar, moving.node_solar)
    assert np.array_equal(by_position.incident_solar, moving.incident_solar)


# -- check: a turning part must not sweep through another ---------------------------------
CLASH = """
[[parts]]
name = "body"
shape = "box"
size = [1.0, 1.0, 1.0]
front = { coating = "w", nodes = "per-face" }

[[parts]]
name = "flap"
shape = "rectangle"
size = [0.6, 0.8]
center = [0.0, 0.0, 0.8]
front = { coating = "w" }

[[hinges]]
name = "flap_hinge"
parts = ["flap"]
point = [0.0, 0.0, 0.8]
axis = [1.0, 0.0, 0.0]
law = "rate"
rate_deg_s = 0.2
"""


@pytest.mark.parametrize("orbit", [True, False])
def test_check_reports_the_first_clash_angle(tmp_path, orbit):
    # the flap's edge (0.4 m from the axis, 0.3 m above the box) touches the box top from
    # asin(0.3 / 0.4) = 48.59 deg to 180 - 48.59 deg, and likewise below 0 (elementary
    # geometry); along the orbit the flap turns up from 0, without one the sweep is the
    # whole turn from -180 deg
    from vfactor.checks import check_model

    path = tmp_path / "clash.toml"
    path.write_text(COATINGS + CLASH + (ORBIT if orbit else ""))
    report = check_model(path)
    (error,) = [p for p in report.errors if "hinge" in p.where]
    assert "part 'flap' crosses part 'body'" in error.message and "\n" not in error.line()
    angle = float(error.message.split("hinge angle of ")[1].split(" deg")[0])
    first = math.degrees(math.asin(0.75)) if orbit else -180.0 + math.degrees(math.asin(0.75))
    assert abs(angle - first) < 0.06, (angle, first)
    # within limits that stop it short, the sweep is clear
    path.write_text(COATINGS + CLASH.replace('rate_deg_s = 0.2',
                                             'rate_deg_s = 0.2\nmin_deg = -40\nmax_deg = 40')
                    + (ORBIT if orbit else ""))
    assert not [p for p in check_model(path).errors if "hinge" in p.where]


# a Sun-tracking panel over a box clear of its sweep, small ray counts (invented test case)
TRACKER = (PLATE + PLATE.replace('"panel"', '"box"').replace('shape = "rectangle"', 'shape = "box"')
           .replace("size = [1.0, 0.5]", "size = [0.4, 0.4, 0.4]\ncenter = [0, 0, -1.0]")
           .replace('back = { coating = "w" }\n', "")
           + _hinge("sun", normal="[0.0, 0.0, 1.0]") + ORBIT
           + "\n[radiation]\nrays_per_node = 800\nplanet_rays_per_facet = 32\n")


def test_results_file_runners_and_figures_of_a_turning_part(tmp_path):
    # the file holds the angles and what places the parts: the figures place them as the
    # heating stage did; two worker processes give the same bits as one process
    from vfactor import pipeline, plots
    from vfactor.h5read import read_results
    from vfactor.kinematics import placed_geometry

    text = COATINGS + TRACKER
    path = tmp_path / "turning.toml"
    path.write_text(text)
    one = pipeline.run(path, tmp_path / "one.h5")
    two = pipeline.run(path, tmp_path / "two.h5", workers=2)
    for name in ("node_solar", "node_albedo", "node_planet_ir", "facet_solar"):
        assert getattr(one.heating, name).tobytes() == getattr(two.heating, name).tobytes()
    assert any("hinge" in note for note in one.notes)
    r = read_results(one.output)
    np.testing.assert_array_equal(r.hinges["angle_deg"], np.degrees(one.motion.angles))
    assert np.ptp(r.hinges["angle_deg"]) > 300.0          # it tracked the Sun round
    for k in (0, 5):
        placed = placed_geometry(r.geometry, r.hinges, k)
        # the file keeps degrees: radians come back to rounding
        np.testing.assert_allclose(placed.vertices, one.motion.vertices(one.geometry, k),
                                   rtol=0, atol=1e-12)
    figure = plots.plot_flux_along_orbit(r, tmp_path / "frames.png")
    assert figure.stat().st_size > 10_000
    # hinges.csv reads back to the file's angles bit for bit
    import csv

    from vfactor.export import export_csv

    export_csv(r, tmp_path / "tables")
    with open(tmp_path / "tables" / "hinges.csv", newline="") as fh:
        table = list(csv.reader(fh))
    assert table[0] == ["step [1]", "time [s]", "root [deg]"]
    np.testing.assert_array_equal([float(row[2]) for row in table[1:]],
                                  r.hinges["angle_deg"][:, 0])


def test_resource_estimate_counts_the_turning_parts():
    # our own estimate (vfactor.resources): with a hinge, two more passes over every planet
    # ray per step and 13 bytes per planet ray of the rigid part's cache
    from vfactor import resources

    rigid = _model(PLATE + ORBIT)
    turning = _model(PLATE + _hinge("sun", normal="[0.0, 0.0, 1.0]") + ORBIT)
    a = resources.estimate_resources(rigid, build_geometry(rigid), cores=2)
    b = resources.estimate_resources(turning, build_geometry(turning), cores=2)
    sides, planet, steps = 4, 256, 12          # 2 facets, both sides; 256 rays; 12 steps
    assert b.parts["turning-part ray cache"] == 13.0 * sides * planet
    assert b.heating_seconds - a.heating_seconds == pytest.approx(
        steps * resources.TURNING_PASSES * sides * planet / resources.HEATING_TESTS_PER_S,
        rel=1e-12)


def test_couplings_at_hinge_positions_equal_rigid_models_built_there(tmp_path):
    # [radiation] hinge_positions = 3: positions at the low end, middle and high end of the
    # angles used; each position's raw tallies are those of a rigid model whose panel is
    # built at that angle (same seed and rays), bit for bit; the file, reader and CSV
    # export carry them
    import csv

    from vfactor import pipeline
    from vfactor.export import export_csv
    from vfactor.h5read import read_results
    from vfactor.positions import hinge_positions
    from vfactor.radiation import compute_view_factors

    text = COATINGS + TRACKER + "hinge_positions = 3\n"
    path = tmp_path / "positions.toml"
    path.write_text(text)
    res = pipeline.run(path, tmp_path / "p.h5")
    pc = res.positions
    angles, nearest = hinge_positions(res.motion.angles, 3)
    np.testing.assert_array_equal(pc.angles, angles)
    # the panel tracks the Sun all the way round: three positions a third of a turn apart,
    # from the smallest angle used; each step goes to the nearest modulo a turn
    assert angles[0, 0] == res.motion.angles[:, 0].min()
    np.testing.assert_allclose(np.diff(angles[:, 0]), 2 * np.pi / 3, rtol=1e-12)
    wrapped = (res.motion.angles[:, None, 0] - angles[None, :, 0] + np.pi) % (2 * np.pi) - np.pi
    np.testing.assert_array_equal(pc.step_position, np.argmin(np.abs(wrapped), axis=1))
    g = res.geometry
    for p in range(3):
        # the rigid model: the geometry's vertices turned by the hinge's rotation about its
        # point (Rodrigues), normals and centroids recomputed from them
        r = rotation(res.motion.hinges[0].axis, angles[p, 0])
        turned = np.array(g.vertices)
        mine = np.unique(g.triangles[res.motion.owner == 0])
        turned[mine] = (turned[mine] - res.motion.hinges[0].point) @ r.T \
            + res.motion.hinges[0].point
        placed = dataclasses.replace(
            g, vertices=turned, centroids=turned[g.triangles].mean(axis=1),
            normals=np.where((res.motion.owner == 0)[:, None], np.array(g.normals) @ r.T,
                             g.normals))
        rigid = compute_view_factors(placed, Scene.build(placed.vertices, placed.triangles),
                                     rays_per_node=800, seed=res.seed)
        got = pc.view_factors[p]
        assert got.raw_matrix.toarray().tobytes() == rigid.raw_matrix.toarray().tobytes()
        assert got.raw_space.tobytes() == rigid.raw_space.tobytes()
    # the positions differ: the panel's view of the box changes with its angle
    box, panel = g.nodes.names.index("box"), g.nodes.names.index("panel")
    seen = [pc.view_factors[p].raw_matrix.toarray()[panel, box] for p in range(3)]
    assert max(seen) > min(seen)
    r = read_results(res.output)
    np.testing.assert_array_equal(r.positions["step_position"], pc.step_position)
    written = export_csv(r, tmp_path / "tables")
    assert sorted(p.name for p in written if "position" in p.name) == [
        "couplings_position_0.csv", "couplings_position_1.csv", "couplings_position_2.csv"]
    best = int(np.argmax(seen))
    with open(tmp_path / "tables" / f"couplings_position_{best}.csv", newline="") as fh:
        rows = {(row[0], row[1]): float(row[2]) for row in list(csv.reader(fh))[1:]}
    assert rows[("panel", "box")] == pc.view_factors[best].matrix.toarray()[panel, box]
