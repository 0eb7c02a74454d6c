"""Tests of vfactor.heating against published formulas, independent quadrature and
energy conservation. Each check names its source beside it.

Monte Carlo checks use the one-sigma error the code reports (spread of independent
replicates at a fixed seed) with K_SIGMA = 4; deterministic checks use rounding-level
tolerances in W.
"""

import math

import numpy as np
import pytest
from scipy import integrate

from heating_helpers import EARTH_R, icosphere, make_geometry, make_trajectory, rectangle
from vfactor.environment import Environment
from vfactor.geometry import Coating
from vfactor.heating import compute_heating, heating_extremes, step_weights
from vfactor.tracing.scene import Scene

K_SIGMA = 4.0
S0 = 1361.0
SUN_ONLY = Environment("custom", S0, 0.0, 0.0)
PLANET_ONLY = Environment("custom", S0, 0.3, 237.0)
FAR = EARTH_R + 500e3


def run(geometry, trajectory, environment, **kw):
    scene = Scene.build(geometry.vertices, geometry.triangles)
    kw.setdefault("seed", 7)
    return compute_heating(geometry, scene, trajectory, environment, **kw)


def plate_geometry(alpha=0.3, eps=0.8, size=1.0, normal_tilt_deg=0.0):
    """A square plate in the x-y plane (front +z), tilted about y by normal_tilt_deg."""
    t = math.radians(normal_tilt_deg)
    u = (math.cos(t), 0.0, -math.sin(t))
    v = (0.0, 1.0, 0.0)
    coats = {"c": Coating("c", alpha, eps)}
    return make_geometry([dict(mesh=rectangle((0, 0, 0), u, v, size, size),
                               front=("c", "front"), back=("c", "back"))], coats)


def howell_plate_to_sphere(H, lam):
    """View factor from a plane element to a sphere; H = distance to the centre / radius,
    lam = angle between the element normal and the line to the centre.

    Howell, "A Catalog of Radiation Heat Transfer Configuration Factors", 3rd ed.,
    differential planar element to sphere, tilted element (fully and partially visible);
    the same formulas are in Gilmore, Spacecraft Thermal Control Handbook Vol. I, 2nd ed.,
    ch. 2 (planet view factor of a flat plate). Case numbers from memory, not given.
    """
    if lam <= math.acos(1.0 / H):
        return math.cos(lam) / H ** 2
    if lam >= math.pi / 2 + math.asin(1.0 / H):
        return 0.0
    x = math.sqrt(H * H - 1.0)
    return (0.5 - math.asin(x / (H * math.sin(lam))) / math.pi
            + (math.cos(lam) * math.acos(-x / math.tan(lam))
               - x * math.sqrt(1.0 - H * H * math.cos(lam) ** 2)) / (math.pi * H * H))


# --- direct solar ---------------------------------------------------------------------

def test_plate_facing_the_sun_absorbs_alpha_S():
    # Definition of solar absorptivity and Lambert's cosine law (common practice;
    # Gilmore 2002, ch. 2, q = alpha S cos(theta) A).
    geo = plate_geometry(alpha=0.3)
    sun = [[0, 0, 1], [math.sin(math.radians(60)), 0, math.cos(math.radians(60))]]
    tr = make_trajectory(sun, [0, 0, -1], FAR)
    h = run(geo, tr, SUN_ONLY, rays_per_facet=64)
    front = geo.nodes.index("front")
    np.testing.assert_allclose(h.node_solar[:, front], 0.3 * S0 * np.array([1.0, 0.5]),
                               rtol=1e-12)
    np.testing.assert_allclose(h.incident_solar[:, front], S0 * np.array([1.0, 0.5]),
                               rtol=1e-12)
    np.testing.assert_allclose(h.facet_solar, 0.3 * S0 * np.array([[1.0], [0.5]]) *
                               np.ones((2, 2)), rtol=1e-12)
    assert np.all(h.node_solar[:, geo.nodes.index("back")] == 0.0)
    np.testing.assert_allclose(h.solar_constant, S0)


def test_umbra_gives_zero_and_penumbra_scales():
    # Eclipse: the trajectory's visible share of the solar disk scales direct solar
    # linearly (definition of sun_fraction, ARCHITECTURE section 7).
    geo = plate_geometry(alpha=0.5)
    tr = make_trajectory([[0, 0, 1]] * 3, [0, 0, -1], FAR, sun_fraction=[0.0, 0.25, 1.0])
    h = run(geo, tr, SUN_ONLY, rays_per_facet=64)
    front = geo.nodes.index("front")
    assert h.node_solar[0, front] == 0.0 and h.facet_solar[0].max() == 0.0
    np.testing.assert_allclose(h.node_solar[1:, front], 0.5 * S0 * np.array([0.25, 1.0]),
                               rtol=1e-12)


def _shield_geometry(shield_center, shield_size):
    coats = {"black": Coating("black", 1.0, 1.0), "grey": Coating("grey", 0.5, 0.5)}
    return make_geometry([
        dict(mesh=rectangle((0, 0, 0), (1, 0, 0), (0, 1, 0), 1.0, 1.0),
             front=("grey", "target")),
        dict(mesh=rectangle(shield_center, (1, 0, 0), (0, 1, 0), *shield_size),
             front=("black", "shield")),          # back of the shield inert
    ], coats)


def test_plate_fully_behind_another_gets_no_sun():
    # Geometric shadow (common practice): a 2 m shield 1 m above a 1 m plate covers it
    # entirely, also for rays to the edge of the solar disk (0.27 deg: 4.7 mm at 1 m).
    geo = _shield_geometry((0, 0, 1.0), (2.0, 2.0))
    tr = make_trajectory([[0, 0, 1]], [0, 0, -1], FAR)
    h = run(geo, tr, SUN_ONLY, rays_per_facet=64, sun_samples=64)
    assert h.incident_solar[0, geo.nodes.index("target")] == 0.0
    assert h.node_solar[0, geo.nodes.index("target")] == 0.0
    np.testing.assert_allclose(h.node_solar[0, geo.nodes.index("shield")], S0 * 4.0,
                               rtol=1e-12)


def test_plate_half_behind_another_gets_half():
    # A shield over the half x > 0 of the plate: the unshadowed share is 1/2 (geometry,
    # common practice; the disk penumbra is symmetric about the edge), within K_SIGMA of
    # the reported error.
    geo = _shield_geometry((0.75, 0, 1.0), (1.5, 2.0))
    tr = make_trajectory([[0, 0, 1]], [0, 0, -1], FAR)
    h = run(geo, tr, SUN_ONLY, rays_per_facet=64, sun_samples=256)
    i = geo.nodes.index("target")
    expected = 0.5 * 0.5 * S0           # alpha * half of S * 1 m2
    sigma = h.node_solar_stderr[0, i]
    # sanity of the reported error: below twice the binomial error of a share of 1/2
    # from 2 x 256 independent points (sqrt(0.25 / 512) = 2.2 %)
    assert 0.0 < sigma < 2 * 0.022 * expected
    assert abs(h.node_solar[0, i] - expected) < K_SIGMA * sigma
    assert h.incident_solar[0, i] == pytest.approx(h.node_solar[0, i] / 0.5, rel=1e-12)


# --- planet IR ------------------------------------------------------------------------

def test_nadir_plate_planet_ir():
    # Howell catalog, plane element facing the centre of a sphere: F = (R / (R + h))^2.
    for altitude in (500e3, 2000e3):
        geo = plate_geometry(eps=0.8)
        tr = make_trajectory([[1, 0, 0]], [0, 0, -1], EARTH_R + altitude)
        h = run(geo, tr, Environment("custom", S0, 0.0, 237.0), rays_per_facet=2048)
        i = geo.nodes.index("back")
        expected = 0.8 * 237.0 * (EARTH_R / (EARTH_R + altitude)) ** 2
        # nothing blocks the plate: the control variate leaves the closed form, exactly
        assert h.node_planet_ir_stderr[0, i] < 1e-12 * expected            # rounding only
        assert h.node_planet_ir[0, i] == pytest.approx(expected, rel=1e-9)
        assert h.node_planet_ir[0, geo.nodes.index("front")] == 0.0


def test_tilted_plate_planet_view_factor_fully_and_partially_visible():
    # Howell catalog / Gilmore ch. 2, plane element tilted by lam to a sphere (formula in
    # howell_plate_to_sphere). At 1000 km the plate sees the whole cap up to
    # lam = acos(1/H) = 29.8 deg and part of it beyond.
    altitude = 1000e3
    H = (EARTH_R + altitude) / EARTH_R
    lams = np.radians([0.0, 20.0, 45.0, 80.0, 100.0, 115.0])
    # the plate front is +z; put nadir at angle lam from +z
    nadir = np.stack([np.sin(lams), np.zeros_like(lams), np.cos(lams)], axis=1)
    tr = make_trajectory([[0, 1, 0]] * lams.size, nadir, EARTH_R + altitude)
    geo = plate_geometry(eps=1.0)
    h = run(geo, tr, Environment("custom", S0, 0.0, 237.0), rays_per_facet=4096)
    i = geo.nodes.index("front")
    for k, lam in enumerate(lams):
        expected = 237.0 * howell_plate_to_sphere(H, lam)
        assert h.node_planet_ir[k, i] == pytest.approx(expected, rel=1e-9, abs=1e-12), \
            (math.degrees(lam), h.node_planet_ir[k, i], expected)
        assert h.node_planet_ir_stderr[k, i] < 1e-12 * max(expected, 1.0)   # rounding only


def test_partly_hidden_plate_keeps_an_honest_error():
    # A nadir-facing plate (its back side) with a small black panel 0.3 m below it, which
    # hides part of the planet. The control variate leaves only the hidden part to Monte
    # Carlo: the reported one-sigma error must cover the scatter over seeds (replicate
    # spread, Owen 2013 ch. 17), and the estimate must agree with one from 16x the rays.
    coats = {"c": Coating("c", 0.5, 0.8), "k": Coating("k", 0.9, 0.9)}
    geo = make_geometry([
        dict(mesh=rectangle((0, 0, 0), (1, 0, 0), (0, 1, 0), 1.0, 1.0),
             front=("c", "top"), back=("c", "bottom")),
        dict(mesh=rectangle((0.2, 0, -0.3), (1, 0, 0), (0, 1, 0), 0.4, 0.4),
             front=("k", "panel"), back=None)], coats)
    tr = make_trajectory([[1, 0, 0]], [0, 0, -1], EARTH_R + 500e3)
    env = Environment("custom", S0, 0.0, 237.0)
    i = geo.nodes.index("bottom")
    runs = [run(geo, tr, env, rays_per_facet=256, seed=s, reflections=False)
            for s in range(1, 9)]
    values = np.array([h.node_planet_ir[0, i] for h in runs])
    sigmas = np.array([h.node_planet_ir_stderr[0, i] for h in runs])
    assert sigmas.min() > 0.0                      # the hidden part carries an error
    ref = run(geo, tr, env, rays_per_facet=4096, seed=99, reflections=False)
    sigma_ref = ref.node_planet_ir_stderr[0, i]
    assert np.all(np.abs(values - ref.node_planet_ir[0, i])
                  < K_SIGMA * np.hypot(sigmas, sigma_ref))
    scatter = values.std(ddof=1)
    # 8 seeds: the sample std of a normal variable lies within a factor 0.45..1.55 of
    # sigma with probability ~0.99 (chi distribution, 7 degrees of freedom)
    assert 0.45 < scatter / sigmas.mean() < 1.8
    unhidden = 0.8 * 237.0 * (EARTH_R / (EARTH_R + 500e3)) ** 2
    assert ref.node_planet_ir[0, i] < unhidden      # the panel hides some planet


def _plate_behind_a_panel(plate_mesh, panel_size):
    """A 4 m nadir plate (``plate_mesh``, nodes "top" and "bottom") with a black square
    panel of ``panel_size`` [m] 0.3 m below it, 500 km up, planet IR 237 W/m2, no albedo:
    (geometry, the plate alone, trajectory, environment, index of "bottom")."""
    coats = {"c": Coating("c", 0.5, 0.8), "k": Coating("k", 0.9, 0.9)}
    plate = dict(mesh=plate_mesh, front=("c", "top"), back=("c", "bottom"))
    panel = dict(mesh=rectangle((0.2, 0, -0.3), (1, 0, 0), (0, 1, 0), panel_size, panel_size),
                 front=("k", "panel"), back=None)
    geo = make_geometry([plate, panel], coats)
    tr = make_trajectory([[1, 0, 0]], [0, 0, -1], EARTH_R + 500e3)
    env = Environment("custom", S0, 0.0, 237.0)
    return geo, make_geometry([plate], coats), tr, env, geo.nodes.index("bottom")


def test_an_obstruction_no_ray_meets_still_carries_an_error():
    # A 4 m nadir plate of two triangles with a 0.4 m panel 0.3 m in front of it: the
    # panel hides about 25 W of 2580 W of planet IR, about one ray's worth at 64 rays per
    # side, so in a third of the seeds no ray meets it and the control variate gives the
    # unobstructed value with no spread between replicates (measured: 8 of 40 seeds before
    # the error of what the rays cannot resolve was added). Every seed must now report an
    # error, and the errors must cover the scatter about a reference from 256 times the
    # rays: mean z^2 below 3.2 (1.4 expected for errors from 8 replicates, 40 seeds;
    # common practice). A plate with nothing in front keeps its exact value and no error.
    plate_mesh = rectangle((0, 0, 0), (1, 0, 0), (0, 1, 0), 4.0, 4.0)
    geo, alone, tr, env, i = _plate_behind_a_panel(plate_mesh, 0.4)
    ref = run(geo, tr, env, rays_per_facet=16384, seed=999, reflections=False)
    truth = ref.node_planet_ir[0, i]
    z2 = []
    for s in range(1, 41):
        h = run(geo, tr, env, rays_per_facet=64, seed=s, reflections=False)
        sigma = h.node_planet_ir_stderr[0, i]
        assert sigma > 0.0, s
        z2.append(((h.node_planet_ir[0, i] - truth) / sigma) ** 2)
    assert np.mean(z2) < 3.2
    h = run(alone, tr, env, rays_per_facet=64, seed=1, reflections=False)
    assert h.node_planet_ir_stderr[0, alone.nodes.index("bottom")] == 0.0


def test_what_no_ray_of_a_node_meets_carries_one_ray_of_the_node_not_a_sum_over_sides():
    # A 4 m nadir plate of 128 triangles with a 4 cm panel 0.3 m in front of it: the panel
    # hides about 0.23 W of 2608 W of planet IR, less than one of the node's 8192 rays, so
    # in many seeds none of them meets it and every side is left at its unblocked value.
    # The sides draw their rays from one sequence per node, so the node's error is then
    # one ray's worth of its largest side (0.37 W; Laplace's rule on the pooled rays,
    # common practice), not the sum in quadrature over 128 sides (4.2 W, 18 times what is
    # hidden). It must cover what is hidden and be at most 3 times it.
    from radiation_shapes import rectangle as grid

    geo, alone, tr, env, i = _plate_behind_a_panel(
        grid((-2, -2, 0), (4, 0, 0), (0, 4, 0), 8, 8), 0.04)
    truth = run(geo, tr, env, rays_per_facet=16384, seed=999,
                reflections=False).node_planet_ir[0, i]
    unblocked = run(alone, tr, env, rays_per_facet=64, seed=1,
                    reflections=False).node_planet_ir[0, alone.nodes.index("bottom")]
    hidden = unblocked - truth
    assert 0.1 < hidden < 0.5
    one_ray = 0.8 * 237.0 * (4.0 * 4.0 / 128) / 64            # eps E A / N of one side
    unseen = 0
    for s in range(1, 41):
        h = run(geo, tr, env, rays_per_facet=64, seed=s, reflections=False)
        if h.node_planet_ir[0, i] != unblocked:
            continue                                          # some ray met the panel
        unseen += 1
        sigma = h.node_planet_ir_stderr[0, i]
        assert sigma == pytest.approx(one_ray, rel=1e-9), s
        assert hidden < sigma < 3.0 * hidden, (s, sigma, hidden)
    assert unseen >= 5


def test_one_ray_sequence_per_node_lowers_the_error_of_a_many_facet_plate():
    # The planet rays of all the sides of a node are blocks of one randomised QMC sequence
    # (vfactor.tracing.side_rays): where the sides see nearly the same silhouette (a
    # 0.2 m plate of 128 facets, facing nadir, a 1 m panel 2 m below it hiding part of the
    # planet), their errors cancel in the node's sum. At equal rays the scatter over seeds
    # must be well below that of one sequence per side (2.7 x over these 32 seeds, 3.7 x
    # over 80; 1 to 2.3 x on other layouts, hence the margin), both designs must agree (unbiased, within
    # K_SIGMA), and the reported one-sigma error must still cover the scatter (replicate
    # spread, Owen 2013 ch. 17).
    from radiation_shapes import rectangle as grid
    from vfactor import heatstep
    from vfactor.heating import HeatingSteps

    coats = {"c": Coating("c", 0.5, 0.8), "k": Coating("k", 0.9, 0.9)}
    geo = make_geometry([
        dict(mesh=grid((-0.1, -0.1, 0), (0.2, 0, 0), (0, 0.2, 0), 8, 8),
             front=("c", "top"), back=("c", "bottom")),
        dict(mesh=rectangle((0.6, 0, -2.0), (1, 0, 0), (0, 1, 0), 1.0, 1.0),
             front=("k", "panel"), back=None)], coats)
    scene = Scene.build(geo.vertices, geo.triangles)
    tr = make_trajectory([[1, 0, 0]], [0, 0, -1], EARTH_R + 500e3)
    env = Environment("custom", S0, 0.0, 237.0)
    i = geo.nodes.index("bottom")
    seeds = 32
    node_design, side_design, sigmas = [], [], []
    for seed in range(1, seeds + 1):
        task = HeatingSteps.of(geo, scene, tr, env, seed=seed, rays_per_facet=64,
                               reflections=False)
        model, _ = task.prepare(geo, scene)
        ours = task.assemble(task.run((model, None), [0]))
        other = task.assemble(task.run((heatstep.side_sequences(model, _Bar()), None), [0]))
        node_design.append(ours.node_planet_ir[0, i])
        sigmas.append(ours.node_planet_ir_stderr[0, i])
        side_design.append(other.node_planet_ir[0, i])
    node_design, side_design = np.array(node_design), np.array(side_design)
    scatter, side_scatter = node_design.std(ddof=1), side_design.std(ddof=1)
    assert scatter < 0.7 * side_scatter
    assert abs(node_design.mean() - side_design.mean()) < K_SIGMA * math.hypot(
        scatter, side_scatter) / math.sqrt(seeds)
    # 32 seeds: the sample std lies within 0.68..1.33 of sigma with probability 0.99
    # (chi distribution, 31 degrees of freedom, scipy.stats.chi2); sigma as the rms of the
    # reported errors (measured 1.23 here, 1.01 over 80 seeds)
    rms_sigma = math.sqrt(np.mean(np.square(sigmas)))
    assert 0.68 < scatter / rms_sigma < 1.33


def test_small_sphere_planet_ir():
    # Small sphere to planet: F = (1 - sqrt(1 - (R/(R+h))^2)) / 2 (Gilmore 2002, ch. 2;
    # Howell catalog, sphere to sphere, small sphere limit). The icosphere's facets are
    # checked one by one against the plate-to-sphere formula (Howell), and the faceted
    # total against the smooth-sphere value within the faceting allowance below.
    altitude = 500e3
    d = EARTH_R + altitude
    H = d / EARTH_R
    coats = {"c": Coating("c", 0.5, 0.9)}
    geo = make_geometry([dict(mesh=icosphere(0.5, 2), front=("c", "sphere"))], coats)
    tr = make_trajectory([[1, 0, 0]], [0, 0, -1], d)
    h = run(geo, tr, Environment("custom", S0, 0.0, 237.0), rays_per_facet=512)
    lam = np.arccos(np.clip(geo.normals @ np.array([0, 0, -1.0]), -1, 1))
    faceted = 237.0 * sum(a * howell_plate_to_sphere(H, l) for a, l in zip(geo.areas, lam))
    # a convex body blocks none of its own rays: each facet is its closed form
    assert h.node_planet_ir[0, 0] == pytest.approx(0.9 * faceted, rel=1e-9)
    smooth = 237.0 * geo.areas.sum() * (1.0 - math.sqrt(1.0 - 1.0 / H ** 2)) / 2.0
    # faceting allowance: an icosphere(2) (320 facets) is within 1 % of a sphere here
    assert faceted == pytest.approx(smooth, rel=0.01)
    assert h.incident_planet_ir[0, 0] == pytest.approx(h.node_planet_ir[0, 0] / 0.9,
                                                       rel=1e-12)


# --- albedo -----------------------------------------------------------------------------

def albedo_quadrature(altitude, sun, normal=(0.0, 0.0, -1.0)):
    """Independent oracle: irradiance on a plate (unit ``normal``, default facing nadir)
    from a Lambertian planet of radiance a S max(0, cos Z) / pi, by double quadrature
    (scipy.integrate.dblquad) over the visible cap, for a = 1, S = 1.

    E = int L cos(theta_plate) cos(theta_ground) / s^2 dA, dA = R^2 sin(phi) dphi dpsi,
    with phi the central angle from the sub-vehicle point (Siegel & Howell, 4th ed.,
    eq. 2.13 with the radiance definition; common practice)."""
    R = EARTH_R
    d = EARTH_R + altitude
    sun = np.asarray(sun, float) / np.linalg.norm(sun)
    normal = np.asarray(normal, float)

    def integrand(phi, psi):
        m = np.array([math.sin(phi) * math.cos(psi), math.sin(phi) * math.sin(psi),
                      math.cos(phi)])
        p = R * m                                   # ground point, planet-centred
        w = np.array([0.0, 0.0, d]) - p             # ground -> vehicle
        s = np.linalg.norm(w)
        cos_ground = (m @ w) / s
        cos_plate = -(normal @ w) / s               # w points from the ground to the plate
        if cos_ground <= 0.0 or cos_plate <= 0.0:
            return 0.0
        radiance = max(0.0, m @ sun) / math.pi
        return radiance * cos_plate * cos_ground / s ** 2 * R ** 2 * math.sin(phi)

    phi_max = math.acos(R / d)
    val, err = integrate.dblquad(integrand, 0.0, 2 * math.pi, 0.0, phi_max,
                                 epsabs=1e-9, epsrel=1e-9)
    return val


@pytest.mark.parametrize("altitude, sun", [
    (500e3, (0.0, 0.0, 1.0)),            # subsolar point
    (2000e3, (0.0, 0.0, 1.0)),           # subsolar point, higher
    (800e3, (math.sin(math.radians(80)), 0.0, math.cos(math.radians(80)))),  # near terminator
])
def test_albedo_nadir_plate_against_quadrature(altitude, sun):
    geo = plate_geometry(alpha=0.4)
    tr = make_trajectory([sun], [0, 0, -1], EARTH_R + altitude)
    env = Environment("custom", S0, 0.3, 0.0)
    h = run(geo, tr, env, rays_per_facet=256)
    i = geo.nodes.index("back")
    expected = 0.4 * 0.3 * S0 * albedo_quadrature(altitude, sun)
    # nothing blocks the plate: the control variate leaves the albedo factor of
    # vfactor.planetview with no Monte Carlo part (its quadrature is good to 1e-7 of the
    # subsolar value, the oracle's to 1e-9: 1e-6 relative covers both here)
    assert h.node_albedo_stderr[0, i] < 1e-12 * expected                   # rounding only
    assert h.node_albedo[0, i] == pytest.approx(expected, rel=1e-6)
    assert h.node_albedo[0, geo.nodes.index("front")] == 0.0


@pytest.mark.parametrize("altitude, tilt_deg, zenith_deg", [
    (800e3, 40.0, 30.0),
    (800e3, 100.0, 60.0),      # plate past the horizontal: its horizon cuts the cap
    (5000e3, 70.0, 80.0),      # the terminator crosses the cap
])
def test_tilted_plate_albedo_against_quadrature(altitude, tilt_deg, zenith_deg):
    # Unobstructed tilted plates: the albedo is the quadrature of the defining integral
    # (albedo_quadrature, scipy.integrate.dblquad), with no Monte Carlo error.
    geo = plate_geometry(alpha=0.4, normal_tilt_deg=tilt_deg)
    i = geo.nodes.index("back")
    normal = -geo.normals[0]                               # the back side
    z = math.radians(zenith_deg)
    sun = (math.sin(z) * math.cos(0.4), math.sin(z) * math.sin(0.4), math.cos(z))
    tr = make_trajectory([sun], [0, 0, -1], EARTH_R + altitude)
    h = run(geo, tr, Environment("custom", S0, 0.3, 0.0), rays_per_facet=256)
    expected = 0.4 * 0.3 * S0 * albedo_quadrature(altitude, sun, normal)
    assert expected > 1.0
    assert h.node_albedo_stderr[0, i] < 1e-12 * expected                   # rounding only
    # 1e-7 of the subsolar value (quadrature, vfactor.planetview) over a value at least
    # a tenth of it here
    assert h.node_albedo[0, i] == pytest.approx(expected, rel=2e-6)


def test_partly_hidden_plate_albedo_keeps_an_honest_error():
    # The plate of test_partly_hidden_plate_keeps_an_honest_error under an oblique Sun:
    # the control variate leaves only the hidden part of the albedo to Monte Carlo. The
    # reported one-sigma error must cover the scatter over seeds (replicate spread, Owen
    # 2013 ch. 17; chi distribution with 7 degrees of freedom), the estimate must agree
    # with one from 16x the rays, and its error must be below that of the plain estimate
    # from the same rays (control variates, Owen 2013 ch. 8). The gain is modest here: the
    # randomised quasi-Monte Carlo rays already integrate the smooth unblocked part well,
    # the panel's edges are what is left to both estimators.
    from vfactor import heatstep
    from vfactor.heating import HeatingSteps

    coats = {"c": Coating("c", 0.5, 0.8), "k": Coating("k", 0.9, 0.9)}
    geo = make_geometry([
        dict(mesh=rectangle((0, 0, 0), (1, 0, 0), (0, 1, 0), 1.0, 1.0),
             front=("c", "top"), back=("c", "bottom")),
        dict(mesh=rectangle((0.2, 0, -0.3), (1, 0, 0), (0, 1, 0), 0.4, 0.4),
             front=("k", "panel"), back=None)], coats)
    sun = (0.5, 0.2, 1.0)
    tr = make_trajectory([sun], [0, 0, -1], EARTH_R + 500e3)
    env = Environment("custom", S0, 0.3, 0.0)
    i = geo.nodes.index("bottom")
    runs = [run(geo, tr, env, rays_per_facet=256, seed=s, reflections=False)
            for s in range(1, 9)]
    values = np.array([h.node_albedo[0, i] for h in runs])
    sigmas = np.array([h.node_albedo_stderr[0, i] for h in runs])
    assert sigmas.min() > 0.0                      # the hidden part carries an error
    ref = run(geo, tr, env, rays_per_facet=4096, seed=99, reflections=False)
    sigma_ref = ref.node_albedo_stderr[0, i]
    assert np.all(np.abs(values - ref.node_albedo[0, i])
                  < K_SIGMA * np.hypot(sigmas, sigma_ref))
    scatter = values.std(ddof=1)
    assert 0.45 < scatter / sigmas.mean() < 1.8    # as in the planet-IR test above
    unhidden = 0.5 * 0.3 * S0 * albedo_quadrature(500e3, sun)
    assert ref.node_albedo[0, i] < unhidden - K_SIGMA * sigma_ref   # the panel hides some
    # the plain estimates from the very same rays, for comparison
    scene = Scene.build(geo.vertices, geo.triangles)
    plain_values, plain_sigmas = [], []
    for s in range(1, 9):
        task = HeatingSteps.of(geo, scene, tr, env, rays_per_facet=256, seed=s,
                               reflections=False)
        model, _ = task.prepare(geo, scene)
        plain = task.assemble(task.run((heatstep.plain_estimates(model), None), [0]))
        plain_values.append(plain.node_albedo[0, i])
        plain_sigmas.append(plain.node_albedo_stderr[0, i])
    assert np.mean(plain_sigmas) > 1.2 * sigmas.mean()
    assert np.all(np.abs(np.array(plain_values) - values)
                  < K_SIGMA * np.hypot(plain_sigmas, sigmas))


# --- reflections ---------------------------------------------------------------------

def _target_facing_mirror(specular, target_alpha=1.0):
    coats = {"mirror": Coating("mirror", 0.1, 0.05, solar_specular=specular,
                               ir_specular=specular),
             "black": Coating("black", target_alpha, 1.0)}
    # target: vertical square at x = 3, y in [-1.5, 1.5], z in [1.5, 4.5], normal -x
    return make_geometry([
        dict(mesh=rectangle((0, 0, 0), (1, 0, 0), (0, 1, 0), 2.0, 2.0), front=("mirror", "M")),
        dict(mesh=rectangle((3.0, 0, 3.0), (0, 0, 1), (0, 1, 0), 3.0, 3.0),
             front=("black", "T")),
    ], coats)


def test_specular_mirror_reflects_sun_onto_target():
    # Law of specular reflection (common practice): sun at 45 deg on a mirror of solar
    # absorptivity 0.1; every mirror ray reaches the black target, which also sees the
    # Sun directly at 45 deg: Q_T = S cos45 (A_T + 0.9 A_M), Q_M = 0.1 S cos45 A_M.
    geo = _target_facing_mirror(specular=1.0)
    c45 = math.cos(math.radians(45))
    tr = make_trajectory([[-c45, 0, c45]], [0, 0, -1], FAR)
    h = run(geo, tr, SUN_ONLY, rays_per_facet=64, sun_samples=64)
    m, t = geo.nodes.index("M"), geo.nodes.index("T")
    assert h.node_solar[0, m] == pytest.approx(0.1 * S0 * c45 * 4.0, rel=1e-12)
    assert h.node_solar[0, t] == pytest.approx(S0 * c45 * (9.0 + 0.9 * 4.0), rel=1e-12)
    assert h.escaped_solar[0] == pytest.approx(0.0, abs=1e-9)


def _pyviewfactor_plates():
    import pyvista as pv
    from pyviewfactor import compute_viewfactor

    mirror = pv.PolyData(np.array([[-1, -1, 0], [1, -1, 0], [1, 1, 0], [-1, 1, 0]], float),
                         faces=[4, 0, 1, 2, 3])
    target = pv.PolyData(np.array([[3, -1.5, 4.5], [3, 1.5, 4.5], [3, 1.5, 1.5],
                                   [3, -1.5, 1.5]], float), faces=[4, 0, 1, 2, 3])  # normal -x
    return compute_viewfactor(target, mirror)      # F(mirror -> target)


def test_diffuse_reflection_matches_reference_view_factor():
    # Diffuse reflector lit at 45 deg off the target's side; the black target receives
    # (1 - alpha) S cos(theta) A_M F_MT. F_MT from pyviewfactor 1.1 (compute_viewfactor,
    # semi-analytic contour integral), checked against our own ray estimate within
    # K_SIGMA binomial errors, and exactly when the reference view factors are passed in.
    from vfactor.radiation import ViewFactors

    f_mt = _pyviewfactor_plates()
    assert 0.01 < f_mt < 0.2
    geo = _target_facing_mirror(specular=0.0)
    sun = np.array([0.1, -0.7, 0.7])
    sun /= np.linalg.norm(sun)
    tr = make_trajectory([sun], [0, 0, -1], FAR)
    m, t = geo.nodes.index("M"), geo.nodes.index("T")
    reflected = 0.9 * S0 * sun[2] * 4.0
    h = run(geo, tr, SUN_ONLY, rays_per_facet=8192, sun_samples=16)
    assert h.incident_solar[0, t] == 0.0
    n_rays = 2 * h.rays_per_facet
    sigma = reflected * math.sqrt(f_mt * (1 - f_mt) / n_rays)
    assert abs(h.node_solar[0, t] - reflected * f_mt) < K_SIGMA * sigma

    n = geo.n_nodes
    matrix = np.zeros((n, n))
    matrix[m, t] = f_mt
    matrix[t, m] = f_mt * 4.0 / 9.0                       # reciprocity A_M F_MT = A_T F_TM
    vf = ViewFactors(matrix=matrix, space=1.0 - matrix.sum(axis=1), inert=np.zeros(n),
                     stderr=np.zeros((n, n)), stderr_space=np.zeros(n), raw_matrix=matrix,
                     raw_space=1.0 - matrix.sum(axis=1), raw_inert=np.zeros(n),
                     rays=np.zeros(n, np.int64), adjustment_sigma=0.0, method="given",
                     converged=True)
    h2 = run(geo, tr, SUN_ONLY, rays_per_facet=64, view_factors=vf)
    assert h2.node_solar[0, t] == pytest.approx(reflected * f_mt, rel=1e-12)


def _cavity_geometry():
    """An open box (5 faces, inside active) with a lid plate above, mixed coatings,
    some inert sides: every reflection path of the code is exercised."""
    coats = {"white": Coating("white", 0.2, 0.85, solar_specular=0.3, ir_specular=0.1),
             "foil": Coating("foil", 0.15, 0.05, solar_specular=0.9, ir_specular=0.9),
             "black": Coating("black", 0.95, 0.9)}
    parts = [
        dict(mesh=rectangle((0, 0, -0.5), (1, 0, 0), (0, 1, 0), 1, 1), front=("white", "floor"),
             back=("black", "floor.out")),
        dict(mesh=rectangle((0.5, 0, 0), (0, 1, 0), (0, 0, 1), 1, 1), front=None,
             back=("foil", "wall+x")),
        dict(mesh=rectangle((-0.5, 0, 0), (0, 1, 0), (0, 0, 1), 1, 1), front=("foil", "wall-x"),
             back=None),
        dict(mesh=rectangle((0, 0.5, 0), (0, 0, 1), (1, 0, 0), 1, 1), front=None,
             back=("white", "wall+y")),
        dict(mesh=rectangle((0, -0.5, 0), (0, 0, 1), (1, 0, 0), 1, 1), front=("black", "wall-y"),
             back=("white", "wall-y.out")),
        dict(mesh=rectangle((0.8, 0.3, 1.2), (1, 0, 0), (0, 1, 0), 0.8, 0.8),
             front=("foil", "lid.top"), back=("white", "lid.bottom")),
    ]
    return make_geometry(parts, coats)


def test_energy_is_conserved_at_every_step():
    # Conservation of energy: absorbed + reflected out of the vehicle + lost on inert
    # sides = incident, per source and step, to rounding (1e-9 relative).
    geo = _cavity_geometry()
    rng = np.random.default_rng(5)
    sun = rng.normal(size=(6, 3))
    sun[:, 2] = np.abs(sun[:, 2]) + 0.3
    nadir = rng.normal(size=(6, 3))
    tr = make_trajectory(sun, nadir, FAR, sun_fraction=[1, 1, 0.5, 1, 1, 0.0])
    h = run(geo, tr, PLANET_ONLY, rays_per_facet=256, sun_samples=32)
    for src in ("solar", "albedo", "planet_ir"):
        absorbed = getattr(h, f"node_{src}").sum(axis=1)
        out = getattr(h, f"escaped_{src}") + getattr(h, f"inert_{src}")
        incident = getattr(h, f"incident_{src}").sum(axis=1)
        assert incident.max() > 0.0
        np.testing.assert_allclose(absorbed + out, incident, rtol=1e-9, atol=1e-9)
        # facet fluxes times areas add up to the node totals
        facet_power = (getattr(h, f"facet_{src}") * geo.areas).sum(axis=1)
        np.testing.assert_allclose(facet_power, absorbed, rtol=1e-9, atol=1e-9)
        assert np.all(getattr(h, f"node_{src}") >= -1e-12)


def test_cache_and_retrace_give_identical_numbers_and_are_deterministic():
    # Design requirement (ARCHITECTURE section 3): the same rays with and without the
    # escaping-direction cache, bit-identical; same seed, same numbers. With the cache the
    # mirror chains of the specular sides' planet rays are replayed from their records,
    # without it they are traced at every step: the same bits too.
    geo = _cavity_geometry()
    tr = make_trajectory([[0.3, 0.2, 1.0], [1, 0, 0.2]], [[0.1, 0.2, -1.0], [0, 1, 0]], FAR)
    a = run(geo, tr, PLANET_ONLY, rays_per_facet=128, sun_samples=16)
    b = run(geo, tr, PLANET_ONLY, rays_per_facet=128, sun_samples=16, use_cache=False)
    c = run(geo, tr, PLANET_ONLY, rays_per_facet=128, sun_samples=16)
    for src in ("solar", "albedo", "planet_ir"):
        np.testing.assert_array_equal(getattr(a, f"node_{src}"), getattr(b, f"node_{src}"))
        np.testing.assert_array_equal(getattr(a, f"facet_{src}"), getattr(c, f"facet_{src}"))
    d = run(geo, tr, PLANET_ONLY, rays_per_facet=128, sun_samples=16, seed=8)
    assert not np.array_equal(a.node_planet_ir, d.node_planet_ir)
    # bit-identical for any thread count (counter-based randomness, fixed tally order)
    import numba

    threads = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        e = run(geo, tr, PLANET_ONLY, rays_per_facet=128, sun_samples=16)
    finally:
        numba.set_num_threads(threads)
    for src in ("solar", "albedo", "planet_ir"):
        np.testing.assert_array_equal(getattr(a, f"node_{src}"), getattr(e, f"node_{src}"))


# --- orbit average ----------------------------------------------------------------------

def test_isothermal_sphere_orbit_average_matches_closed_form():
    # Closed-form energy balance of a sphere of radius r in a circular orbit at beta = 0,
    # albedo 0, cylindrical shadow (derivation, common practice; Gilmore 2002, ch. 2):
    #   sunlit while not (cos(theta) < 0 and |sin(theta)| < R/d): the eclipse lasts
    #   2 eta of the 2 pi of the orbit, eta = asin(R/d), so the sunlit share is 1 - eta/pi;
    #   direct solar on a sphere: alpha S pi r^2 (projected area);
    #   planet IR: eps E 4 pi r^2 F, F = (1 - cos(eta)) / 2 (small sphere to planet).
    #   <Q> = alpha S pi r^2 (1 - eta/pi) + eps E 4 pi r^2 (1 - cos(eta)) / 2.
    # The faceted sphere stands in with r^2 = A / (4 pi) (Cauchy: mean projected area of a
    # convex body = A / 4); the projected area of icosphere(2) varies by < 0.8 % with
    # direction (measured below), and the sampling of the eclipse at N steps changes the
    # sunlit share by at most 1/N: both go into the tolerance.
    n_steps = 180
    r_alt = 700e3
    d = EARTH_R + r_alt
    alpha, eps, olr = 0.6, 0.8, 237.0
    theta = 2 * math.pi * (np.arange(n_steps) + 0.5) / n_steps
    pos = d * np.stack([np.cos(theta), np.sin(theta), np.zeros_like(theta)], axis=1)
    sunlit = ~((pos[:, 0] < 0) & (np.abs(pos[:, 1]) < EARTH_R))
    coats = {"c": Coating("c", alpha, eps)}
    geo = make_geometry([dict(mesh=icosphere(0.4, 2), front=("c", "sphere"))], coats)
    tr = make_trajectory(np.tile([1.0, 0, 0], (n_steps, 1)), -pos, d,
                         sun_fraction=sunlit.astype(float), time=theta / (2 * math.pi) * 6000)
    h = run(geo, tr, Environment("custom", S0, 0.0, olr), rays_per_facet=128, sun_samples=8)
    ext = heating_extremes(h)
    area = geo.areas.sum()
    eta = math.asin(EARTH_R / d)
    closed = (alpha * S0 * area / 4 * (1 - eta / math.pi)
              + eps * olr * area * (1 - math.cos(eta)) / 2)
    dirs = np.random.default_rng(0).normal(size=(500, 3))
    dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
    proj = np.maximum(dirs @ geo.normals.T, 0) @ geo.areas
    facet_var = float(np.abs(proj / (area / 4) - 1).max())
    assert facet_var < 0.008
    tol = (alpha * S0 * area / 4 * (facet_var + 1.0 / n_steps)
           + eps * olr * area * 0.01                      # faceting of the IR view factor
           + K_SIGMA * float(np.sqrt((h.node_planet_ir_stderr[:, 0] ** 2).mean())))
    assert abs(ext.average[ext.row("total"), 0] - closed) < tol
    assert ext.minimum[ext.row("solar"), 0] == 0.0


def test_heating_extremes_weights_and_values():
    # Time-weighted average (midpoint rule on the step times; common practice).
    class H:
        node_solar = np.array([[1.0, 0.0], [3.0, 2.0], [5.0, 4.0]])
        node_albedo = np.zeros((3, 2))
        node_planet_ir = np.ones((3, 2))
        time = None

    ext = heating_extremes(H, time=np.array([0.0, 10.0, 20.0]))
    np.testing.assert_allclose(ext.weights, [1 / 3, 1 / 3, 1 / 3])
    np.testing.assert_allclose(ext.average[0], [3.0, 2.0])
    np.testing.assert_allclose(ext.average[3], [4.0, 3.0])
    np.testing.assert_array_equal(ext.minimum[0], [1.0, 0.0])
    np.testing.assert_array_equal(ext.step_of_maximum[0], [2, 2])
    w = step_weights([0.0, 10.0, 40.0])      # intervals 10, 30: weights 10, 20, 30 of 60
    np.testing.assert_allclose(w, [10 / 60, 20 / 60, 30 / 60])
    with pytest.raises(ValueError, match="increase"):
        step_weights([0.0, 0.0])


def test_bad_arguments_are_named():
    geo = plate_geometry()
    tr = make_trajectory([[0, 0, 1]], [0, 0, -1], FAR)
    scene = Scene.build(geo.vertices, geo.triangles)
    with pytest.raises(ValueError, match="rays_per_facet"):
        compute_heating(geo, scene, tr, SUN_ONLY, rays_per_facet=0, seed=1)
    with pytest.raises(TypeError, match="environment"):
        compute_heating(geo, scene, tr, {"albedo": 0.3}, seed=1)
    low = make_trajectory([[0, 0, 1]], [0, 0, -1], EARTH_R - 1.0)
    with pytest.raises(ValueError, match="step 0"):
        compute_heating(geo, scene, low, SUN_ONLY, seed=1)


def test_nominal_case_scales_the_solar_constant_with_the_sun_distance():
    # Inverse-square law on the 1 au value (Kopp & Lean 2011, 1361 W/m2): at 0.99 au the
    # plate receives 1361 / 0.99^2.
    from vfactor.constants import ASTRONOMICAL_UNIT_M

    geo = plate_geometry(alpha=1.0, eps=1.0)
    tr = make_trajectory([[0, 0, 1]], [0, 0, -1], FAR, sun_distance=0.99 * ASTRONOMICAL_UNIT_M)
    h = run(geo, tr, Environment("nominal", None, 0.0, 0.0), rays_per_facet=16)
    assert h.solar_constant[0] == pytest.approx(1361.0 / 0.99 ** 2, rel=1e-12)
    assert h.node_solar[0, geo.nodes.index("front")] == pytest.approx(1361.0 / 0.99 ** 2,
                                                                      rel=1e-12)


def test_reporter_sees_both_stages():
    from contextlib import contextmanager

    from vfactor.progress import Reporter

    class Recorder(Reporter):
        def __init__(self):
            self.stages = []

        @contextmanager
        def stage(self, description, total, unit="items"):
            record = [description, total, 0]
            self.stages.append(record)

            class Bar:
                def advance(self, n=1):
                    record[2] += n

            yield Bar()

    geo = plate_geometry()
    tr = make_trajectory([[0, 0, 1]] * 3, [0, 0, -1], FAR)
    rec = Recorder()
    run(geo, tr, SUN_ONLY, rays_per_facet=16, reporter=rec)
    assert rec.stages[-1] == ["heating", 3, 3]
    assert rec.stages[0][0] == "heating: escaping directions" and rec.stages[0][2] == 4


def _sphere_hit(origin, direction, centre, radius):
    """numpy ray-sphere test (textbook quadratic), for the oracle below."""
    w = origin - centre
    b = np.einsum("ij,ij->i", direction, w)
    c = np.einsum("ij,ij->i", w, w) - radius ** 2
    return (b < 0.0) & (b * b - c >= 0.0)


def test_planet_ir_mirrored_by_a_specular_plate_matches_image_oracle():
    # A vertical IR mirror (emissivity 0.1, fully specular) faces a black plate 1 m away.
    # Oracle (independent of the production code): from the black plate, cosine-weighted
    # rays in numpy; a ray that meets the mirror continues as its mirror image (law of
    # reflection) with weight 1 - eps; what reaches the planet brings the radiance
    # OLR / pi (irradiance = pi * mean radiance, Siegel & Howell ch. 2). The code instead
    # traces forward from the mirror's own planet rays, so this checks the specular path
    # of planet IR from the other direction. Tolerance: K_SIGMA times the reported error
    # (reflections included) plus K_SIGMA times the oracle's error; the reported error is
    # checked against the binomial error of the mirror rays that end on the plate.
    altitude = 1000e3
    d = EARTH_R + altitude
    coats = {"mirror": Coating("mirror", 0.1, 0.1, solar_specular=1.0, ir_specular=1.0),
             "black": Coating("black", 1.0, 1.0)}
    geo = make_geometry([
        dict(mesh=rectangle((0, 0, 0), (0, 1, 0), (0, 0, 1), 3.0, 3.0), front=("mirror", "M")),
        dict(mesh=rectangle((1.0, 0, 0), (0, 0, 1), (0, 1, 0), 1.0, 1.0), front=("black", "T")),
    ], coats)
    assert np.allclose(geo.normals[:2], [1, 0, 0]) and np.allclose(geo.normals[2:], [-1, 0, 0])
    tr = make_trajectory([[0, 1, 0]], [0, 0, -1], d)
    olr = 237.0
    h = run(geo, tr, Environment("custom", S0, 0.0, olr), rays_per_facet=8192)
    m, t = geo.nodes.index("M"), geo.nodes.index("T")

    rng = np.random.default_rng(11)
    n = 400_000
    p = np.stack([np.ones(n), rng.uniform(-0.5, 0.5, n), rng.uniform(-0.5, 0.5, n)], axis=1)
    r2 = rng.uniform(size=n)
    phi = rng.uniform(0, 2 * np.pi, n)
    sin_t = np.sqrt(r2)                                   # cosine-weighted about -x
    dirs = np.stack([-np.sqrt(1 - r2), sin_t * np.cos(phi), sin_t * np.sin(phi)], axis=1)
    centre = np.array([0.0, 0.0, -d])
    hit_m = p + dirs * (1.0 / -dirs[:, 0])[:, None]        # where the ray meets x = 0
    on_mirror = (np.abs(hit_m[:, 1]) <= 1.5) & (np.abs(hit_m[:, 2]) <= 1.5)
    refl = dirs * np.array([-1.0, 1.0, 1.0])
    back_at = hit_m + refl * (1.0 / refl[:, 0])[:, None]   # where it comes back to x = 1
    blocked = (np.abs(back_at[:, 1]) <= 0.5) & (np.abs(back_at[:, 2]) <= 0.5)
    radiance = np.where(on_mirror,
                        0.9 * (~blocked & _sphere_hit(hit_m, refl, centre, EARTH_R)),
                        1.0 * _sphere_hit(p, dirs, centre, EARTH_R)) * olr / np.pi
    oracle = np.pi * radiance.mean() * 1.0                # W on the 1 m2 plate
    oracle_sigma = np.pi * radiance.std() / math.sqrt(n)

    via_mirror = h.node_planet_ir[0, t] - h.incident_planet_ir[0, t]   # T is black
    assert via_mirror > 0.2 * oracle                      # most of T's planet IR is mirrored
    reflected = 0.9 * h.incident_planet_ir[0, m]
    share = via_mirror / reflected
    mirror_rays_on_planet = h.rays_per_facet * 2 * h.incident_planet_ir[0, m] / (olr * 9.0)
    binomial = via_mirror * math.sqrt((1 - share) / (share * mirror_rays_on_planet))
    sigma = h.node_planet_ir_stderr[0, t]
    assert binomial / 3 < sigma < 3 * binomial
    assert abs(h.node_planet_ir[0, t] - oracle) < K_SIGMA * (sigma + oracle_sigma), \
        (h.node_planet_ir[0, t], oracle, sigma, oracle_sigma)


# --- kernels against slow oracles --------------------------------------------------------

class _Bar:
    def advance(self, n):
        pass


def _sphere_oracle(o, d, centre, radius, sun):
    """One ray against the planet in plain Python: the stable root t = c / (b + sqrt(b^2 -
    c)) (Haines et al. 2019, Ray Tracing Gems ch. 7, as planet_kernels documents) and
    max(0, cos solar zenith) at the point met."""
    wx, wy, wz = centre[0] - o[0], centre[1] - o[1], centre[2] - o[2]
    b = d[0] * wx + d[1] * wy + d[2] * wz
    if b <= 0.0:
        return False, 0.0
    c = wx * wx + wy * wy + wz * wz - radius * radius
    disc = b * b - c
    if disc < 0.0:
        return False, 0.0
    t = c / (b + math.sqrt(disc)) if c > 0.0 else 0.0
    px = o[0] + t * d[0] - centre[0]
    py = o[1] + t * d[1] - centre[1]
    pz = o[2] + t * d[2] - centre[2]
    mu = (px * sun[0] + py * sun[1] + pz * sun[2]) / radius
    return True, mu if mu > 0.0 else 0.0


def test_planet_step_matches_a_ray_by_ray_oracle():
    # planet_step skips the sides that cannot see the planet and, where nothing sunlit is
    # in sight, the cos(solar zenith) of every ray: neither may change a bit of the sums
    # (in ray order) or of the per-ray results, against every cached ray tested one by one.
    from vfactor import heatplanet, heatreflect, heatstep
    from vfactor.tracing import planet_kernels

    geo = _cavity_geometry()
    scene = Scene.build(geo.vertices, geo.triangles)
    model = heatstep.prepare(geo, scene, 4, 64, 8, 3, 16)
    heatstep.trace_once(model, _Bar(), need_rays=True)
    bands = heatreflect.bands_of(model, geo, None)
    s, m = model.sides, model.m
    g = s.count * m
    lit = heatstep.Step(sun=heatstep.unit([0.3, 0.2, 1.0]), centre=np.array([0.0, 0.0, -FAR]),
                        solar=S0, fraction=1.0, cos_half=1.0, radius=EARTH_R, olr=0.0,
                        albedo=0.3)
    dark = heatstep.Step(sun=heatstep.unit([0.1, 0.0, -1.0]),
                         centre=np.array([0.0, 0.0, -FAR]), solar=S0, fraction=0.0,
                         cos_half=1.0, radius=EARTH_R, olr=0.0, albedo=0.3)
    assert not heatplanet.dark_cap(model, lit) and heatplanet.dark_cap(model, dark)
    culled = 0
    every = np.ones(s.count, dtype=np.bool_)
    wanted = ~model.control | bands.specular        # as one_step asks for them
    assert 0 < wanted.sum() < s.count
    for step in (lit, dark):
        outputs = []
        for sides in (every, wanted):
            seen, blocked = np.zeros((2, g)), np.zeros((2, g))
            rows = (np.zeros(bands.n_rows, np.bool_), np.zeros(bands.n_rows))
            planet_kernels.planet_step((model.order, model.position, s.normal, model.reach, sides),
                           (model.segment_start, model.esc_origin, model.esc_dir),
                           (model.blk_start, model.blk_origin, model.blk_dir),
                           (step.centre, step.radius, step.sun,
                            heatplanet.dark_cap(model, step)),
                           m, bands.row_slot, seen, blocked, rows)
            outputs.append((seen, blocked, rows))
        (seen, blocked, rows), (seen_w, blocked_w, rows_w) = outputs
        # the escaping rays of the sides not asked for are skipped, nothing else changes
        asked = np.repeat(wanted, m)
        np.testing.assert_array_equal(seen_w[:, asked], seen[:, asked])
        np.testing.assert_array_equal(seen_w[:, ~asked], 0.0)
        np.testing.assert_array_equal(blocked_w, blocked)
        np.testing.assert_array_equal(rows_w[0], rows[0])
        np.testing.assert_array_equal(rows_w[1], rows[1])
        for start, origin, direction, out in (
                (model.segment_start, model.esc_origin, model.esc_dir, seen),
                (model.blk_start, model.blk_origin, model.blk_dir, blocked)):
            expected = np.zeros((2, g))
            for k in range(g):
                for i in range(start[k], start[k + 1]):
                    hit, mu = _sphere_oracle(origin[i], direction[i], step.centre,
                                             step.radius, step.sun)
                    if hit:
                        expected[0, k] += 1.0
                        expected[1, k] += mu
            np.testing.assert_array_equal(out, expected)
        culled += int((seen[0].reshape(s.count, m).sum(axis=1) == 0).sum())
        for band in (bands.solar, bands.ir):
            a = band["row_offset"]
            for j, row in enumerate(band["rows"]):
                hit, mu = _sphere_oracle(model.esc_origin[row], model.esc_dir[row],
                                         step.centre, step.radius, step.sun)
                assert (rows[0][a + j], rows[1][a + j]) == (hit, mu)
    assert culled > 0                    # sides facing away from the planet were skipped


def test_replicate_sums_match_bincount():
    # The per-(replicate, node) sums are np.bincount of each replicate's column, bit for bit.
    from vfactor.tracing import heat_sums

    rng = np.random.default_rng(2)
    node = rng.integers(0, 7, size=500)
    values = rng.normal(size=(500, 5))
    out = np.empty((5, 9))
    heat_sums.replicate_sums(node, values, out)
    expected = np.stack([np.bincount(node, weights=values[:, r], minlength=9)
                         for r in range(5)])
    np.testing.assert_array_equal(out, expected)


def test_target_runs_count_each_sides_targets_like_numpy_unique():
    # Per side: the distinct first-hit targets and their ray counts are those of
    # np.unique(row, return_counts=True) (numpy as the reference), in order of first
    # appearance; escape (-1) and inert (-2) included.
    from vfactor.tracing import heat_sums

    rng = np.random.default_rng(4)
    targets = rng.integers(-2, 40, size=(700, 64)).astype(np.int32)
    targets[5] = -1                                  # a side whose rays all escape
    start, target, count = heat_sums.target_runs(targets)
    assert start[-1] == target.size == count.size
    for s in range(targets.shape[0]):
        got_t = target[start[s]:start[s + 1]]
        got_c = count[start[s]:start[s + 1]]
        values, first, counts = np.unique(targets[s], return_index=True, return_counts=True)
        order = np.argsort(first)
        np.testing.assert_array_equal(got_t, values[order])
        np.testing.assert_array_equal(got_c, counts[order])
    empty = heat_sums.target_runs(np.zeros((0, 8), np.int32))
    assert empty[0].tolist() == [0] and empty[1].size == 0


def test_segment_rows_and_packed_chains_match_numpy():
    # The cache rows of given sides, side by side and segment by segment, are those of
    # np.repeat / np.arange over the segments (numpy as the reference); the packed mirror
    # chains are the records' entries before CHAIN_UNUSED, as a boolean mask picks them.
    from vfactor.tracing import chain_kernels, heat_kernels

    rng = np.random.default_rng(6)
    m = 4
    lengths = rng.integers(0, 5, size=30 * m)
    start = np.zeros(lengths.size + 1, np.int64)
    np.cumsum(lengths, out=start[1:])
    sides = np.array([0, 3, 4, 11, 29], np.int64)
    segments = (sides[:, None] * m + np.arange(m)[None, :]).ravel()
    rows_ref = np.concatenate([np.arange(start[g], start[g + 1]) for g in segments])
    owner_ref = np.repeat(sides, m)[np.repeat(np.arange(segments.size), lengths[segments])]
    rep_ref = (segments % m)[np.repeat(np.arange(segments.size), lengths[segments])]
    out = [np.empty(rows_ref.size, np.int64) for _ in range(3)]
    heat_kernels.segment_rows(sides, start, m, *out)
    for got, ref in zip(out, (rows_ref, owner_ref, rep_ref)):
        np.testing.assert_array_equal(got, ref)

    entry = np.full((50, 6), chain_kernels.CHAIN_UNUSED, np.int32)
    for i, n in enumerate(rng.integers(0, 7, size=50)):
        entry[i, :n] = rng.integers(-1, 99, size=n)
    length = np.empty(50, np.int64)
    count = chain_kernels.pack_chains(entry, length, np.zeros(0, np.int32))
    packed = np.empty(count, np.int32)
    chain_kernels.pack_chains(entry, length, packed)
    used = entry != chain_kernels.CHAIN_UNUSED
    np.testing.assert_array_equal(length, used.sum(axis=1))
    np.testing.assert_array_equal(packed, entry[used])


@pytest.mark.parametrize("carry", [0, 1, 2])
def test_planet_mirror_weights_match_a_row_by_row_oracle(carry):
    # The weights of the rows that carry specular power, and which rows carry it, are
    # those of visiting every row (the kernel skips the (side, replicate) segments without
    # a ray that meets the planet, or without a positive mu): plain Python as the
    # reference, with the formulas of the kernel's notes (CARRY_MU, CARRY_EVEN,
    # CARRY_BY_MU).
    from vfactor.tracing import chain_kernels

    rng = np.random.default_rng(10 + carry)
    m, n_sides = 3, 12
    spec = np.array([1, 4, 5, 9, 11], np.int64)
    per_segment = rng.integers(0, 5, size=spec.size * m)
    first = np.zeros(per_segment.size + 1, np.int64)
    np.cumsum(per_segment, out=first[1:])
    u = int(first[-1])
    replicate = np.concatenate([np.full(k, q % m) for q, k in enumerate(per_segment)])
    owner = np.concatenate([np.full(k, spec[q // m]) for q, k in enumerate(per_segment)])
    hit = rng.random(u) < 0.6
    mu = np.where(hit & (rng.random(u) < 0.7), rng.random(u), 0.0)
    seen = np.zeros((2, n_sides * m))
    for i in range(u):
        g = owner[i] * m + replicate[i]
        seen[0, g] += hit[i]
        seen[1, g] += mu[i] if hit[i] else 0.0
    rep = rng.random((n_sides, m))
    share = rng.random(n_sides)
    coefficient = rng.random(n_sides)
    carry_of = np.full(n_sides, carry, np.int64)
    expected = {}
    for j, s in enumerate(spec):
        for r in range(m):
            g = s * m + r
            for i in range(first[j * m + r], first[j * m + r + 1]):
                if not hit[i]:
                    continue
                wanted = share[s] * rep[s, r] / m
                if carry == chain_kernels.CARRY_MU:
                    w = coefficient[s] * 0.3 * 1361.0 * mu[i]
                elif carry == chain_kernels.CARRY_EVEN:
                    w = wanted / seen[0, g] if seen[0, g] > 0 else 0.0
                else:
                    w = wanted * mu[i] / seen[1, g] if seen[1, g] > 0 else 0.0
                if w != 0.0:
                    expected[i] = w
    # every row's chain escapes at once (CHAIN_ESCAPE): the tallies need no geometry
    chains = (True, np.arange(u + 1, dtype=np.int64), np.full(u, chain_kernels.CHAIN_ESCAPE,
                                                               np.int32))
    geo = _cavity_geometry()
    scene = Scene.build(geo.vertices, geo.triangles)
    f = geo.n_facets
    work = (np.zeros(u), np.zeros(u, np.int64))
    chunks = max(1, -(-u // chain_kernels.CHAIN_CHUNK))
    kept = chain_kernels.planet_mirror_tallies(
        (scene.arrays, scene.normals, np.zeros((f, 2), np.int64), np.zeros((f, 2)),
         np.zeros((f, 2)), 4),
        (spec, first, owner, replicate.astype(np.int64), np.zeros((u, 3)), np.zeros((u, 3)),
         np.zeros(n_sides, np.int64), share, coefficient),
        (hit, mu, seen, rep, carry_of, 0.3, 1361.0), chains, work, np.zeros((n_sides, m)),
        np.empty((chunks, m, 1)), np.empty((chunks, m, 1)), np.empty(chunks),
        np.empty(chunks))
    assert kept == len(expected) > 0
    np.testing.assert_array_equal(work[1][:kept], sorted(expected))
    np.testing.assert_array_equal(work[0][work[1][:kept]],
                                  [expected[i] for i in sorted(expected)])
