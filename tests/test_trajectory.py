"""Tests of vfactor.trajectory: the per-step vectors in the body frame and the orbit facts."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from vfactor import ephemeris
from vfactor.attitude import DEFAULT_ATTITUDE_NOTE, attitude_from_table
from vfactor.constants import EARTH_EQUATORIAL_RADIUS_M, SUN_RADIUS_M
from vfactor.orbittable import orbit_from_table
from vfactor.trajectory import compute_trajectory, orbit_facts, trajectory_from_model

EPOCH = "2027-03-21T00:00:00Z"


@pytest.fixture(scope="module")
def leo():
    orbit = orbit_from_table({"altitude_km": 500.0, "inclination_deg": 51.6, "raan_deg": 30.0,
                              "epoch": EPOCH, "steps_per_orbit": 120, "orbits": 2})
    attitude = attitude_from_table({"mode": "nadir", "nadir_axis": "-z", "velocity_axis": "+y"})
    return orbit, compute_trajectory(orbit, attitude)


def test_every_field_has_its_shape_and_units(leo):
    orbit, tr = leo
    n = orbit.n_steps
    assert tr.n_steps == n == 240
    for name in ("position", "velocity", "sun_inertial", "sun_body", "nadir_body"):
        assert getattr(tr, name).shape == (n, 3), name
        assert getattr(tr, name).flags.c_contiguous, name
    for name in ("time", "sun_distance", "sun_fraction", "beta", "planet_distance"):
        assert getattr(tr, name).shape == (n,), name
    assert tr.body_to_inertial.shape == (n, 3, 3)
    for name in ("sun_inertial", "sun_body", "nadir_body"):
        assert np.max(np.abs(np.linalg.norm(getattr(tr, name), axis=1) - 1.0)) < 1e-12
    assert np.allclose(tr.planet_distance, EARTH_EQUATORIAL_RADIUS_M + 500e3, atol=1e-3)
    # Sun distance in March: 0.996 AU (Astronomical Almanac, perihelion ~0.983 AU in
    # January, 1 AU near the equinoxes; from memory) -- within 0.003 AU
    assert np.all(np.abs(tr.sun_distance / 1.495978707e11 - 0.996) < 0.003)
    assert tr.period == orbit.period and tr.epoch_utc == orbit.epoch_utc
    assert tr.shadow_model == "conical"
    assert 0.0 <= tr.sun_fraction.min() and tr.sun_fraction.max() <= 1.0
    assert np.any(tr.sun_fraction == 0.0) and np.any(tr.sun_fraction == 1.0)


def test_body_vectors_follow_the_attitude(leo):
    _, tr = leo
    # nadir at body -z within 1e-9 rad
    assert np.max(np.abs(tr.nadir_body - [0.0, 0.0, -1.0])) < 1e-9
    # sun_body is the inertial Sun vector seen in the body axes
    back = np.einsum("tij,tj->ti", tr.body_to_inertial, tr.sun_body)
    assert np.max(np.abs(back - tr.sun_inertial)) < 1e-12


def test_beta_against_published_formula_from_sun_ra_dec(leo):
    orbit, tr = leo
    # sin beta = cos(dec) sin(i) sin(Omega - ra) + sin(dec) cos(i): the orbit normal
    # (sin i sin Omega, -sin i cos Omega, cos i) dotted with the Sun direction given by its
    # right ascension and declination (Gilmore, Spacecraft Thermal Control Handbook,
    # Vol. I, 2nd ed., 2002, ch. 2)
    ra, dec, _ = ephemeris.sun_ra_dec(ephemeris.times_from_epoch(EPOCH, tr.time))
    i, node = orbit.inclination, orbit.raan
    expected = np.arcsin(np.cos(dec) * math.sin(i) * np.sin(node - ra) + np.sin(dec) * math.cos(i))
    # within 1e-9 rad (both use the same Sun; this checks the orbit-normal and beta algebra)
    assert np.max(np.abs(tr.beta - expected)) < 1e-9


def test_beta_against_ecliptic_longitude_form(leo):
    orbit, tr = leo
    # Gilmore (2002) ch. 2: sin beta = cos G sin W sin i
    # - sin G cos e cos W sin i + sin G sin e cos i, with G the Sun's ecliptic longitude,
    # e the obliquity (23.439 deg, J2000), W the RAAN; this form neglects the Sun's
    # ecliptic latitude (< 1 arcsec), so within 2e-5 rad (4 arcsec)
    t = ephemeris.times_from_epoch(EPOCH, tr.time)
    kernel = ephemeris.ephemeris()
    _, lon, _ = kernel["earth"].at(t).observe(kernel["sun"]).ecliptic_latlon()
    g = lon.radians
    eps = math.radians(23.4392911)  # IAU 1980 obliquity at J2000 (Astronomical Almanac)
    i, w = orbit.inclination, orbit.raan
    s = (np.cos(g) * math.sin(w) * math.sin(i) - np.sin(g) * math.cos(eps) * math.cos(w) * math.sin(i)
         + np.sin(g) * math.sin(eps) * math.cos(i))
    assert np.max(np.abs(tr.beta - np.arcsin(s))) < 2e-5


def test_trajectory_from_model():
    assert trajectory_from_model(SimpleNamespace(orbit_table=None, attitude_table=None)) is None
    model = SimpleNamespace(orbit_table={"altitude_km": 600.0, "inclination_deg": 98.0,
                                         "epoch": EPOCH, "steps_per_orbit": 24},
                            attitude_table=None, path="sat.toml")
    tr = trajectory_from_model(model)
    assert tr.attitude_note == DEFAULT_ATTITUDE_NOTE
    assert np.max(np.abs(tr.nadir_body - [0.0, 0.0, 1.0])) < 1e-9
    model.orbit_table = dict(model.orbit_table, shadow="cylindrical")
    assert set(np.unique(trajectory_from_model(model).sun_fraction)) <= {0.0, 1.0}


# --- orbit facts -----------------------------------------------------------------------


def polar_orbit_at_beta(altitude_km, beta_deg, shadow, steps_per_orbit=72, **extra):
    """Polar orbit whose plane is beta_deg from the Sun at the epoch (Sun near the equator:
    Omega = RA_sun + beta gives sin beta' = cos(dec) sin(beta))."""
    ra, _, _ = ephemeris.sun_ra_dec([EPOCH])
    table = {"altitude_km": altitude_km, "inclination_deg": 90.0,
             "raan_deg": math.degrees(ra[0]) + beta_deg, "epoch": EPOCH,
             "steps_per_orbit": steps_per_orbit, "shadow": shadow}
    table.update(extra)
    orbit = orbit_from_table(table)
    return orbit, compute_trajectory(orbit, attitude_from_table(None), shadow=shadow)


def beta_at(tr, time_s):
    return float(np.interp(time_s, tr.time, tr.beta))


@pytest.mark.parametrize("altitude_km", [400.0, 600.0, 800.0])
def test_penumbra_duration_from_geometry(altitude_km):
    orbit, tr = polar_orbit_at_beta(altitude_km, 0.0, "conical")
    facts = orbit_facts(tr)
    assert len(facts.eclipses) == 1 and facts.eclipses[0].complete
    # Derived from the geometry: at beta = 0 on a circular orbit the direction to the
    # planet centre turns at the orbital rate n, so the separation c of the two disk
    # centres sweeps the penumbra band b - a < c < a + b (width 2a, a = asin(R_sun/d),
    # Montenbruck & Gill 2000 §3.4.2) in 2a/n, at entry and at exit.
    n = 2 * math.pi / orbit.period
    a = math.asin(SUN_RADIUS_M / float(np.mean(tr.sun_distance)))
    expected = 2 * (2 * a / n)
    # 0.1 s: the Sun's motion (1 deg/day) and the residual beta (< 0.1 deg) change the
    # sweep rate by under 0.5 %
    assert facts.penumbra_s == pytest.approx(expected, abs=0.1)
    # common practice: "a few seconds" per crossing in LEO, about 8-10 s at these heights
    assert 8.0 < facts.penumbra_s / 2 < 10.0


@pytest.mark.parametrize("altitude_km, beta_deg", [(400.0, 0.0), (500.0, 30.0),
                                                   (800.0, 55.0), (1200.0, 40.0)])
def test_cylindrical_eclipse_duration_against_gilmore(altitude_km, beta_deg):
    orbit, tr = polar_orbit_at_beta(altitude_km, beta_deg, "cylindrical")
    facts = orbit_facts(tr)
    (passage,) = facts.eclipses
    h = altitude_km * 1e3
    beta = beta_at(tr, 0.5 * (passage.start_s + passage.end_s))
    # Gilmore, Spacecraft Thermal Control Handbook, Vol. I, 2nd ed., 2002, ch. 2:
    # f_E = (1/180 deg) acos(sqrt(h^2 + 2 R h) / ((R + h) cos beta))
    r = EARTH_EQUATORIAL_RADIUS_M
    f_e = math.degrees(math.acos(math.sqrt(h * h + 2 * r * h) / ((r + h) * math.cos(beta)))) / 180
    # 1 s: the closed form holds beta fixed; here it drifts by < 0.1 deg over the passage
    assert passage.duration_s == pytest.approx(f_e * orbit.period, abs=1.0)
    assert passage.penumbra_s == 0.0 and passage.umbra_s == passage.duration_s
    assert facts.eclipse_share == pytest.approx(f_e, abs=1.0 / orbit.period)


def test_conical_umbra_shorter_than_cylindrical_shadow():
    _, conical = polar_orbit_at_beta(600.0, 20.0, "conical")
    _, cylindrical = polar_orbit_at_beta(600.0, 20.0, "cylindrical")
    cone, cyl = orbit_facts(conical).eclipses[0], orbit_facts(cylindrical).eclipses[0]
    assert cone.umbra_s < cyl.duration_s < cone.duration_s


def test_no_eclipse_above_critical_beta():
    # beta* = asin(R / (R + h)) = 64.2 deg at 800 km (Gilmore 2002, ch. 2)
    _, tr = polar_orbit_at_beta(800.0, 66.0, "conical")
    facts = orbit_facts(tr)
    assert facts.eclipses == () and facts.eclipse_share == 0.0 and facts.longest_eclipse_s == 0.0


def test_eclipse_cut_by_the_span_is_joined_on_a_whole_orbit():
    # start in the middle of the shadow: the passage wraps around the end of the span
    _, reference = polar_orbit_at_beta(500.0, 10.0, "conical")
    ref = orbit_facts(reference).eclipses[0]
    middle = 0.5 * (ref.start_s + ref.end_s)
    u0 = 360.0 * middle / reference.period
    _, wrapped = polar_orbit_at_beta(500.0, 10.0, "conical", argument_of_latitude_deg=u0)
    facts = orbit_facts(wrapped)
    (passage,) = facts.eclipses
    assert passage.complete and passage.start_s < facts.span_s < passage.end_s
    # same passage, within 0.5 s (the Sun moved by half an orbit between the two cases)
    assert passage.duration_s == pytest.approx(ref.duration_s, abs=0.5)
    assert passage.penumbra_s == pytest.approx(ref.penumbra_s, abs=0.05)


def test_facts_ranges_on_an_elliptic_orbit():
    orbit = orbit_from_table({"type": "elements", "perigee_km": 350.0, "apogee_km": 1400.0,
                              "inclination_deg": 30.0, "raan_deg": 10.0, "epoch": EPOCH,
                              "steps_per_orbit": 360, "orbits": 3})
    tr = compute_trajectory(orbit, attitude_from_table(None))
    facts = orbit_facts(tr)
    # 360 samples per orbit: extremes sampled within 1 degree of anomaly (< 1 km)
    assert facts.altitude_min_km == pytest.approx(350.0, abs=1.0)
    assert facts.altitude_max_km == pytest.approx(1400.0, abs=1.0)
    assert facts.period_s == orbit.period and facts.span_s == pytest.approx(3 * orbit.period)
    assert facts.beta_min_deg <= facts.beta_max_deg
    assert len(facts.eclipses) == 3
    # the share from the located contacts agrees with the share of sampled steps in shadow
    # within two steps per passage
    sampled = float(np.mean(tr.sun_fraction < 1.0))
    assert facts.eclipse_share == pytest.approx(sampled, abs=2 * 3 / orbit.n_steps)


def test_facts_of_a_trajectory_read_back_from_a_results_file():
    # h5io stores the planet by name and positions in km; the facts must not change
    # beyond the float round trip (1 ms)
    import dataclasses

    _, tr = polar_orbit_at_beta(500.0, 25.0, "conical")
    by_name = dataclasses.replace(tr, planet="Earth")
    a, b = orbit_facts(tr), orbit_facts(by_name)
    assert b.longest_eclipse_s == pytest.approx(a.longest_eclipse_s, abs=1e-3)
    assert b.penumbra_s == pytest.approx(a.penumbra_s, abs=1e-3)


def with_fixed_sun(tr, beta_rad):
    """The trajectory with the Sun held 1 AU away at beta_rad from its orbit plane (for
    comparing with closed forms that hold the Sun fixed)."""
    import dataclasses

    h = np.cross(tr.position[0], tr.velocity[0])
    h /= np.linalg.norm(h)
    in_plane = np.cross(h, [0.0, 0.0, 1.0])
    in_plane /= np.linalg.norm(in_plane)
    sun = 1.495978707e11 * (math.cos(beta_rad) * in_plane + math.sin(beta_rad) * h)
    to_sun = sun[None, :] - tr.position
    distance = np.linalg.norm(to_sun, axis=1)
    return dataclasses.replace(tr, sun_inertial=to_sun / distance[:, None], sun_distance=distance)


@pytest.mark.parametrize("duration_s", [30.0, 60.0, 300.0])
def test_short_eclipse_between_samples_is_found(duration_s):
    # near the critical beta the shadow passage is shorter than the 79 s step: the contacts
    # are still located (Gilmore 2002 ch. 2 closed form, cylindrical, Sun held fixed)
    orbit, tr = polar_orbit_at_beta(500.0, 0.0, "cylindrical")
    h, r = 500e3, EARTH_EQUATORIAL_RADIUS_M
    x = math.sqrt(h * h + 2 * r * h) / (r + h)
    beta = math.acos(x / math.cos(math.pi * duration_s / orbit.period))
    facts = orbit_facts(with_fixed_sun(tr, beta))
    (passage,) = facts.eclipses
    # 0.05 s: linear interpolation of the margin between 0.5 s sub-steps near a grazing
    # contact, where the margin is curved
    assert passage.duration_s == pytest.approx(duration_s, abs=0.05)
