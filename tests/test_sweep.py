"""Beta-angle sweep (vfactor.sweep, vfactor.sweepplot, ``vfactor sweep``).

Outside references: the eclipse fraction of a circular orbit against the beta angle
(closed form for a cylindrical shadow, e.g. Gilmore (ed.), Spacecraft Thermal Control
Handbook, Vol. I, 2nd ed., 2002, ch. 2 — formula quoted from memory), and the direct solar
power a sphere absorbs, alpha S pi r^2 (its cross-section; common practice), here bounded
for the faceted sphere between its inscribed and circumscribed spheres (a convex body's
shadow contains that of a body inside it: elementary geometry).
"""

from __future__ import annotations

import csv
import math

import numpy as np
import pytest

from vfactor import cli
from vfactor.errors import ArgumentError
from vfactor.geometry import build_geometry
from vfactor.model import load_model_text
from vfactor.planet import EARTH
from vfactor.sweep import compute_sweep, parse_beta_list

ALTITUDE_KM = 500.0
STEPS = 180
ALPHA = 0.6
SOLAR = 1361.0
RADIUS = 0.5

# a grey sphere on a 500 km polar orbit (invented test case); small ray counts: the sphere
# is convex, so its direct solar has no self-shadow to sample
SPHERE = f"""
[model]
name = "sphere"
[coatings.grey]
solar_absorptivity = {ALPHA}
ir_emissivity = 0.8
[[parts]]
name = "ball"
shape = "sphere"
radius = {RADIUS}
segments = 32
front = {{ coating = "grey", node = "ball" }}
[radiation]
rays_per_node = 2000
planet_rays_per_facet = 16
sun_rays_per_facet = 8
[orbit]
type = "circular"
altitude_km = {ALTITUDE_KM}
inclination_deg = 97.4
ltan = "10:30"
epoch = "2027-03-21T00:00:00Z"
steps_per_orbit = {STEPS}
[environment]
case = "custom"
solar_constant = {SOLAR}
albedo = 0.3
planet_ir = 237.0
"""

BETAS = (0.0, 40.0, 60.0, 66.0, 75.0)


def closed_form_eclipse_fraction(beta_deg: float, altitude_km: float,
                                 radius_km: float) -> float:
    """f_E = (1/pi) acos(sqrt(h^2 + 2 R h) / ((R + h) cos beta)) for |beta| < beta* =
    asin(R / (R + h)), else 0 (Gilmore 2002, ch. 2; from memory)."""
    h, r = altitude_km, radius_km
    beta = math.radians(beta_deg)
    if abs(beta) >= math.asin(r / (r + h)):
        return 0.0
    return math.acos(math.sqrt(h * h + 2.0 * r * h) / ((r + h) * math.cos(beta))) / math.pi


@pytest.fixture(scope="module")
def sphere_sweep():
    model = load_model_text(SPHERE, "sphere.toml")
    geometry = build_geometry(model)
    return geometry, compute_sweep(model, geometry, BETAS)


def test_eclipse_fraction_follows_the_closed_form(sphere_sweep):
    _, sweep = sphere_sweep
    np.testing.assert_array_equal(sweep.beta_deg, BETAS)
    expected = [closed_form_eclipse_fraction(b, ALTITUDE_KM, EARTH.radius / 1e3)
                for b in BETAS]
    # the closed form is for a cylindrical shadow; the sweep's conical shadow counts the
    # penumbra by the share of the disk hidden, which matches the cylinder's edge to far
    # below a step here. Tolerance: one time step of the orbit (1/steps_per_orbit), the
    # resolution of a sampled shadow passage
    assert np.max(np.abs(sweep.eclipse_fraction - expected)) <= 1.0 / STEPS, \
        (sweep.eclipse_fraction, expected)
    # and the shadow shrinks with beta, to none above beta* (68.0 deg at 500 km)
    assert expected[0] > 0.37 and expected[-1] == 0.0 and sweep.eclipse_fraction[-1] == 0.0
    assert np.all(np.diff(sweep.eclipse_fraction) < 0.0)


def test_sphere_solar_scales_with_the_sunlit_share(sphere_sweep):
    geometry, sweep = sphere_sweep
    solar = sweep.average[:, sweep.sources.index("solar"), 0]
    sigma = sweep.average_stderr[:, sweep.sources.index("solar"), 0]
    # orbit-average solar = alpha S pi r^2 (1 - f_E) (sphere cross-section, common
    # practice). The faceted sphere's shadow lies between that of its inscribed sphere
    # (radius = nearest facet plane) and that of the exact sphere; f_E is the closed form
    # to one step (previous test); 3 sigma of the reported error bound on top
    r_in = float(np.min(np.abs(np.einsum("ij,ij->i", geometry.normals, geometry.centroids))))
    assert 0.97 * RADIUS < r_in < RADIUS          # 32 segments: a bound of a few per cent
    for k, beta in enumerate(BETAS):
        f_e = closed_form_eclipse_fraction(beta, ALTITUDE_KM, EARTH.radius / 1e3)
        upper = ALPHA * SOLAR * math.pi * RADIUS ** 2 * (1.0 - f_e + 1.0 / STEPS)
        lower = ALPHA * SOLAR * math.pi * r_in ** 2 * (1.0 - f_e - 1.0 / STEPS)
        assert lower - 3 * sigma[k] <= solar[k] <= upper + 3 * sigma[k], (beta, solar[k])
    # the peak is the full-Sun value, the same at every beta to the faceting (2 per cent)
    peak = sweep.peak[:, sweep.sources.index("solar"), 0]
    assert np.ptp(peak) / peak.max() < 0.02
    # the hottest orbit of a sphere is the one without eclipse, the coldest the longest one
    assert sweep.beta_deg[sweep.hottest[0]] == 75.0 and sweep.beta_deg[sweep.coldest[0]] == 0.0


# --------------------------------------------------------------------------------------
# the list of values
# --------------------------------------------------------------------------------------
def test_beta_list_values_and_ranges():
    assert parse_beta_list("0,15,30") == (0.0, 15.0, 30.0)
    assert parse_beta_list("0:75:15") == (0.0, 15.0, 30.0, 45.0, 60.0, 75.0)
    assert parse_beta_list("60:0:-30, 75") == (0.0, 30.0, 60.0, 75.0)
    assert parse_beta_list("0:1:0.1")[-1] == 1.0 and len(parse_beta_list("0:1:0.1")) == 11
    assert parse_beta_list("-10:10:7") == (-10.0, -3.0, 4.0)     # STOP not reached: left out


@pytest.mark.parametrize("text, words", [
    ("", "no value"), ("0,,30", "empty item"), ("abc", "'abc' is not a number"),
    ("0:30", "START:STOP:STEP"), ("0:30:0", "never reaches"), ("0:30:-5", "never reaches"),
    ("0,95", "95 deg is outside -90 .. 90"), ("30,30", "30 is given twice"),
    ("0:90:0.01", "more than 1000"), ("nan", "not finite")])
def test_beta_list_errors_name_the_item(text, words):
    with pytest.raises(ArgumentError, match="--beta") as err:
        parse_beta_list(text)
    assert words in str(err.value)


# --------------------------------------------------------------------------------------
# the escaping directions are traced once
# --------------------------------------------------------------------------------------
SMALL = """
[model]
name = "box and panel"
[coatings.w]
solar_absorptivity = 0.3
ir_emissivity = 0.8
solar_specular = 0.2
[[parts]]
name = "body"
shape = "box"
size = [0.4, 0.4, 0.4]
front = { coating = "w", nodes = "per-face" }
[[parts]]
name = "panel"
shape = "rectangle"
size = [0.4, 0.6]
center = [0.0, 0.6, -0.1]
z_axis = [0, 0, -1]
front = { coating = "w", node = "panel.front" }
back = { coating = "w", node = "panel.back" }
[radiation]
rays_per_node = 800
planet_rays_per_facet = 16
sun_rays_per_facet = 8
[orbit]
altitude_km = 600.0
inclination_deg = 97.8
raan_deg = 30.0
epoch = "2027-03-21T00:00:00Z"
steps_per_orbit = 12
"""


def test_escaping_directions_traced_once_and_same_bits_as_a_single_run(monkeypatch):
    # the sweep prepares the heating stage's vehicle once and runs every swept orbit on
    # it; each value gives exactly the heat loads of compute_heating on that orbit alone
    # (same view factors, same seed), so the reuse changes nothing
    import vfactor.heating as heating_module
    from vfactor.attitude import attitude_from_table
    from vfactor.environment import environment_from_table
    from vfactor.heating import compute_heating, heating_extremes
    from vfactor.orbittable import orbit_from_table
    from vfactor.radiation import compute_view_factors
    from vfactor.tracing.scene import Scene
    from vfactor.trajectory import compute_trajectory

    calls = []
    real = heating_module.trace_once

    def counting(*args, **kw):
        calls.append(1)
        return real(*args, **kw)

    monkeypatch.setattr(heating_module, "trace_once", counting)
    model = load_model_text(SMALL, "small.toml")
    geometry = build_geometry(model)
    sweep = compute_sweep(model, geometry, [10.0, 35.0, -20.0])
    assert len(calls) == 1
    np.testing.assert_array_equal(sweep.beta_deg, [-20.0, 10.0, 35.0])

    scene = Scene.build(geometry.vertices, geometry.triangles)
    vf = compute_view_factors(geometry, scene, rays_per_node=800, seed=1)
    table = {k: v for k, v in model.orbit_table.items() if k != "raan_deg"}
    for k in (0, 2):
        orbit = orbit_from_table({**table, "beta_deg": sweep.beta_deg[k]})
        tr = compute_trajectory(orbit, attitude_from_table(None))
        alone = compute_heating(geometry, scene, tr, environment_from_table(None),
                                view_factors=vf, rays_per_facet=16, sun_samples=8, seed=1)
        ext = heating_extremes(alone)
        np.testing.assert_array_equal(sweep.average[k], ext.average)
        np.testing.assert_array_equal(sweep.peak[k], ext.maximum)
        assert sweep.raan_deg[k] == math.degrees(orbit.raan)
    assert len(calls) == 3           # the two single runs traced for themselves


TRACKER = SMALL + """
[[hinges]]
name = "drive"
parts = ["panel"]
point = [0.0, 0.3, -0.1]
axis = [0.0, 1.0, 0.0]
law = "sun"
normal = [0.0, 0.0, -1.0]
"""


def test_turning_parts_rigid_rays_once_and_positions_once(monkeypatch):
    # with a Sun-tracking panel: the rigid facets' rays are traced once for the sweep, and
    # with hinge_positions the couplings at positions are computed once, over the angles
    # of every swept orbit; without positions each value has the bits of a single run
    import vfactor.heating as heating_module
    import vfactor.positions as positions_module
    from vfactor.attitude import attitude_from_table
    from vfactor.environment import environment_from_table
    from vfactor.heating import compute_heating, heating_extremes
    from vfactor.kinematics import motion_of
    from vfactor.orbittable import orbit_from_table
    from vfactor.radiation import compute_view_factors
    from vfactor.tracing.scene import Scene
    from vfactor.trajectory import compute_trajectory

    rigid_calls, position_calls = [], []
    real_rigid = heating_module.rigid_part
    real_positions = positions_module.couplings_at_positions
    monkeypatch.setattr(heating_module, "rigid_part",
                        lambda *a, **k: rigid_calls.append(1) or real_rigid(*a, **k))
    monkeypatch.setattr(positions_module, "couplings_at_positions",
                        lambda *a, **k: position_calls.append(a[1].angles.shape)
                        or real_positions(*a, **k))

    model = load_model_text(TRACKER, "tracker.toml")
    geometry = build_geometry(model)
    sweep = compute_sweep(model, geometry, [0.0, 40.0])
    assert len(rigid_calls) == 1 and position_calls == []
    scene = Scene.build(geometry.vertices, geometry.triangles)
    vf = compute_view_factors(geometry, scene, rays_per_node=800, seed=1)
    table = {k: v for k, v in model.orbit_table.items() if k != "raan_deg"}
    orbit = orbit_from_table({**table, "beta_deg": 40.0})
    tr = compute_trajectory(orbit, attitude_from_table(None))
    alone = compute_heating(geometry, scene, tr, environment_from_table(None),
                            view_factors=vf, rays_per_facet=16, sun_samples=8, seed=1,
                            motion=motion_of(geometry, model.hinges, tr))
    np.testing.assert_array_equal(sweep.average[1], heating_extremes(alone).average)

    with_positions = load_model_text(TRACKER.replace("sun_rays_per_facet = 8",
                                                     "sun_rays_per_facet = 8\n"
                                                     "hinge_positions = 2"), "tracker.toml")
    sweep = compute_sweep(with_positions, build_geometry(with_positions), [-60.0, 0.0, 40.0])
    # one call, over the 3 x 12 steps of all swept orbits and the one hinge
    assert position_calls == [(36, 1)]
    assert any("hinge position" in note for note in sweep.notes)
    assert np.all(np.isfinite(sweep.average)) and np.all(sweep.average >= 0.0)


def test_models_without_a_circular_orbit_are_refused():
    from vfactor.errors import ModelError

    no_orbit = load_model_text(SMALL.split("[orbit]")[0], "small.toml")
    with pytest.raises(ModelError, match=r"\[orbit\]: has no \[orbit\]"):
        compute_sweep(no_orbit, build_geometry(no_orbit), [0.0])
    elements = load_model_text(SMALL.replace("altitude_km = 600.0",
                                             "perigee_km = 600.0\napogee_km = 800.0"),
                               "small.toml")
    with pytest.raises(ModelError, match="needs a circular orbit, got type = 'elements'"):
        compute_sweep(elements, build_geometry(elements), [0.0])
    # a value the orbit cannot have is refused before any ray is traced, with the range
    model = load_model_text(SMALL.replace("inclination_deg = 97.8", "inclination_deg = 20.0"),
                            "small.toml")
    with pytest.raises(ArgumentError, match=r"--beta 60: .*reachable range is"):
        compute_sweep(model, build_geometry(model), [0.0, 60.0])


# --------------------------------------------------------------------------------------
# command line and files
# --------------------------------------------------------------------------------------
def _run(capsys, *argv):
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_cli_writes_the_table_and_the_figure(capsys, tmp_path):
    model = tmp_path / "small.toml"
    model.write_text(SMALL)
    out_dir = tmp_path / "sweep"
    code, out, err = _run(capsys, "sweep", model, "--beta", "0:60:30", "-o", out_dir)
    assert code == 0, err
    assert (out_dir / "sweep.png").stat().st_size > 20_000
    with open(out_dir / "sweep.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    names = ["body.+x", "body.-x", "body.+y", "body.-y", "body.+z", "body.-z",
             "panel.front", "panel.back"]
    assert len(rows) == 3 * len(names)
    assert [r["node"] for r in rows[:8]] == names
    assert sorted({float(r["beta [deg]"]) for r in rows}) == [0.0, 30.0, 60.0]
    for name in names:
        mine = [r for r in rows if r["node"] == name]
        totals = [float(r["average_total [W]"]) for r in mine]
        # the marked rows are the largest and smallest orbit-average total of the node
        assert [int(r["hottest [1]"]) for r in mine] == [int(t == max(totals)) for t in totals]
        assert [int(r["coldest [1]"]) for r in mine] == [int(t == min(totals)) for t in totals]
        for r in mine:
            parts = sum(float(r[f"average_{s} [W]"]) for s in ("solar", "albedo", "planet_ir"))
            assert float(r["average_total [W]"]) == pytest.approx(parts, rel=1e-12)
            assert float(r["peak_total [W]"]) <= sum(
                float(r[f"peak_{s} [W]"]) for s in ("solar", "albedo", "planet_ir")) + 1e-9
    # the vehicle's orbit average is the sum over its nodes
    first = [r for r in rows if float(r["beta [deg]"]) == 0.0]
    assert float(first[0]["vehicle_average_total [W]"]) == pytest.approx(
        sum(float(r["average_total [W]"]) for r in first), rel=1e-12)
    # the printed table: one line per node and the vehicle, and the time taken
    assert "hot beta" in out and "panel.front" in out and out.count("\nvehicle ") == 1
    assert "3 beta values x 12 steps, 8 nodes:" in out and out.rstrip().endswith(" s")
    assert f"wrote {out_dir / 'sweep.csv'}" in out


@pytest.mark.parametrize("beta", ["0,abc", "0:30:0", "100"])
def test_cli_bad_beta_is_one_line_and_exit_2(capsys, tmp_path, beta):
    model = tmp_path / "small.toml"
    model.write_text(SMALL)
    code, out, err = _run(capsys, "sweep", model, "--beta", beta, "-o", tmp_path / "o")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("vfactor: error: argument --beta:")
    assert not (tmp_path / "o").exists()


def test_cli_unreachable_beta_and_help(capsys, tmp_path):
    model = tmp_path / "small.toml"
    model.write_text(SMALL.replace("inclination_deg = 97.8", "inclination_deg = 10.0"))
    code, _, err = _run(capsys, "sweep", model, "--beta", "0,50", "-o", tmp_path / "o")
    assert code == 2 and err.count("\n") == 1 and "--beta 50:" in err
    assert "reachable range" in err and not (tmp_path / "o").exists()
    code, out, _ = _run(capsys, "sweep", "--help")
    assert code == 0 and out.startswith("usage: vfactor sweep") and "examples:" in out


def test_beta_values_from_the_model_file(tmp_path, capsys):
    # [sweep] beta_deg: a list of numbers or a LIST string; a bad value is one line (exit 2)
    from vfactor.cli import main
    from vfactor.sweep import model_beta_list

    base = (tmp_path / "m.toml")
    base.write_text('[sweep]\nbeta_deg = [30.0, 0.0, 60]\n')
    assert model_beta_list(base) == (0.0, 30.0, 60.0)
    base.write_text('[sweep]\nbeta_deg = "0:20:10"\n')
    assert model_beta_list(base) == (0.0, 10.0, 20.0)
    base.write_text('[sweep]\nbeta_deg = [100.0]\n')
    assert main(["sweep", str(base), "-o", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "[sweep] beta_deg" in err[0]
