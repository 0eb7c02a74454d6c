"""Tests of vfactor.trajectory: the per-step vectors in the body frame and the orbit facts."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from vfactor import ephemeris
from vfactor.attitude import DEFAULT_ATTITUDE_NOTE, attitude_from_table
from vfactor.constants import EARTH_EQUATORIAL_RADIUS_M
from vfactor.orbit import orbit_from_table
from vfactor.trajectory import compute_trajectory, trajectory_from_model

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
    # (sin i sin Omega, -sin i cos Omega, cos i) dotted with the Sun direction (Gilmore,
    # Spacecraft Thermal Control Handbook, Vol. I, 2nd ed., 2002, ch. 2; also from the
    # Sun's right ascension and declination, e.g. Rickman, NASA/TP-2014-217544)
    ra, dec, _ = ephemeris.sun_ra_dec(ephemeris.times_from_epoch(EPOCH, tr.time))
    i, node = orbit.inclination, orbit.raan
    expected = np.arcsin(np.cos(dec) * math.sin(i) * np.sin(node - ra) + np.sin(dec) * math.cos(i))
    # within 1e-9 rad (both use the same Sun; this checks the orbit-normal and beta algebra)
    assert np.max(np.abs(tr.beta - expected)) < 1e-9


def test_beta_against_ecliptic_longitude_form(leo):
    orbit, tr = leo
    # Gilmore (2002) ch. 2 / Rickman (NASA/TP-2014-217544): sin beta = cos G sin W sin i
    # - sin G cos e cos W sin i + sin G sin e cos i, with G the Sun's ecliptic longitude,
    # e the obliquity (23.439 deg, J2000), W the RAAN; this form neglects the Sun's
    # ecliptic latitude (< 1 arcsec), so within 2e-5 rad (4 arcsec)
    t = ephemeris.times_from_epoch(EPOCH, tr.time)
    kernel = ephemeris.ephemeris()
    lat, lon, _ = kernel["earth"].at(t).observe(kernel["sun"]).ecliptic_latlon()
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
