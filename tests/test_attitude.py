"""Tests of vfactor.attitude: rotations are proper, named axes point where they should."""

from __future__ import annotations

import math

import numpy as np
import pytest

from vfactor.attitude import DEFAULT_ATTITUDE_NOTE, attitude_from_table, axis_vector
from vfactor.errors import ModelError
from vfactor.orbittable import orbit_from_table

EPOCH = "2027-06-01T00:00:00Z"
ANGLE_TOL = 1e-9  # rad, the pointing requirement


def angle(u, v):
    """Angle between rows of u and v [rad], robust near 0 (atan2 of |u x v| and u . v)."""
    u = np.atleast_2d(u)
    v = np.atleast_2d(v)
    return np.arctan2(np.linalg.norm(np.cross(u, v), axis=1), np.einsum("ij,ij->i", u, v))


@pytest.fixture(scope="module")
def states():
    orbit = orbit_from_table({"type": "elements", "perigee_km": 400.0, "apogee_km": 2500.0,
                              "inclination_deg": 63.0, "raan_deg": 35.0,
                              "arg_perigee_deg": 80.0, "epoch": EPOCH, "steps_per_orbit": 97})
    t = orbit.times()
    position, velocity = orbit.propagate(t)
    rng = np.random.default_rng(11)
    sun = rng.normal(size=(t.size, 3))
    sun /= np.linalg.norm(sun, axis=1)[:, None]
    return position, velocity, sun, t


def assert_proper_rotations(rotation):
    eye = np.einsum("tji,tjk->tik", rotation, rotation)
    # orthonormal: R^T R = I within 1e-12; right-handed: det R = +1 within 1e-12
    assert np.max(np.abs(eye - np.eye(3))) < 1e-12
    assert np.max(np.abs(np.linalg.det(rotation) - 1.0)) < 1e-12


TABLES = [
    {"mode": "nadir"},
    {"mode": "nadir", "nadir_axis": "-x", "velocity_axis": "+y", "yaw_deg": 30.0},
    {"mode": "nadir", "nadir_axis": [0.3, 0.0, 1.0], "velocity_axis": "+y"},
    {"mode": "sun", "sun_axis": "-y", "secondary_axis": "+z"},
    {"mode": "sun", "sun_axis": "+x", "secondary_axis": "+z", "secondary_direction": "north"},
    {"mode": "sun", "sun_axis": "+z", "secondary_axis": "+x",
     "secondary_direction": [1.0, 2.0, 3.0]},
    {"mode": "inertial", "quaternion": [0.5, 0.5, 0.5, 0.5]},
    {"mode": "inertial", "primary_axis": "+z", "primary_direction": [0.0, 1.0, 1.0],
     "secondary_axis": "-x", "secondary_direction": [1.0, 0.0, 0.0]},
    {"mode": "spin", "spin_axis": "+y", "spin_direction": "sun", "rate_rpm": 2.0},
    {"mode": "spin", "spin_axis": "-z", "spin_direction": "orbit_normal", "rate_deg_s": 3.0,
     "phase_deg": 40.0, "phase_axis": "+y"},
]


@pytest.mark.parametrize("table", TABLES)
def test_every_rotation_is_orthonormal_and_right_handed(table, states):
    position, velocity, sun, t = states
    rotation = attitude_from_table(table).body_to_inertial(position, velocity, sun, t)
    assert rotation.shape == (t.size, 3, 3)
    assert_proper_rotations(rotation)


def test_nadir_axis_at_nadir_and_velocity_axis_along_track(states):
    position, velocity, sun, t = states
    for table in TABLES[:3]:
        attitude = attitude_from_table(table)
        rotation = attitude.body_to_inertial(position, velocity, sun, t)
        nadir = -position / np.linalg.norm(position, axis=1)[:, None]
        assert np.max(angle(rotation @ attitude.primary_axis, nadir)) < ANGLE_TOL
        # the velocity axis lies in the plane of nadir and velocity, on the velocity side,
        # turned by the yaw angle about nadir
        along = np.cross(np.cross(nadir, velocity), nadir)
        along /= np.linalg.norm(along, axis=1)[:, None]
        secondary = rotation @ attitude.secondary_axis
        secondary -= np.einsum("ij,ij->i", secondary, nadir)[:, None] * nadir
        yaw = np.arctan2(np.einsum("ij,ij->i", np.cross(along, secondary), nadir),
                         np.einsum("ij,ij->i", along, secondary))
        assert np.max(np.abs(yaw - attitude.yaw)) < ANGLE_TOL


def test_orbit_local_frame_of_architecture(states):
    # ARCHITECTURE §3: orbit-local z toward nadir, y along -h, x completes; nadir mode with
    # +z to nadir and +x along the velocity is exactly that frame
    position, velocity, sun, t = states
    rotation = attitude_from_table({"mode": "nadir"}).body_to_inertial(position, velocity,
                                                                       sun, t)
    h = np.cross(position, velocity)
    assert np.max(angle(rotation[:, :, 1], -h)) < ANGLE_TOL


def test_sun_axis_at_sun_and_secondary_toward_orbit_normal(states):
    position, velocity, sun, t = states
    attitude = attitude_from_table({"mode": "sun", "sun_axis": "-y", "secondary_axis": "+z"})
    rotation = attitude.body_to_inertial(position, velocity, sun, t)
    assert np.max(angle(rotation @ np.array([0.0, -1.0, 0.0]), sun)) < ANGLE_TOL
    # the secondary axis, the Sun and the orbit normal are coplanar, secondary on h's side
    h = np.cross(position, velocity)
    secondary = rotation[:, :, 2]
    coplanar = np.einsum("ij,ij->i", np.cross(sun, h), secondary)
    assert np.max(np.abs(coplanar) / np.linalg.norm(h, axis=1)) < 1e-12
    assert np.all(np.einsum("ij,ij->i", secondary, h) > 0.0)


def test_inertial_axes_fixed(states):
    position, velocity, sun, t = states
    rotation = attitude_from_table(TABLES[7]).body_to_inertial(position, velocity, sun, t)
    target = np.array([0.0, 1.0, 1.0]) / math.sqrt(2.0)
    assert np.max(angle(rotation[:, :, 2], np.tile(target, (t.size, 1)))) < ANGLE_TOL
    assert np.max(angle(-rotation[:, :, 0], np.tile([1.0, 0.0, 0.0], (t.size, 1)))) < ANGLE_TOL
    # quaternion [1/2, 1/2, 1/2, 1/2] is a 120 deg turn about (1,1,1): x -> y, y -> z, z -> x
    # (Hamilton convention, e.g. Wertz 1978, §12.1)
    rotation = attitude_from_table(TABLES[6]).body_to_inertial(position, velocity, sun, t)
    assert np.allclose(rotation[0], [[0, 0, 1], [1, 0, 0], [0, 1, 0]], atol=1e-15)


def test_spin_phase_advances_at_the_given_rate(states):
    position, velocity, sun, t = states
    attitude = attitude_from_table({"mode": "spin", "spin_axis": "+y", "spin_direction": "north",
                                    "rate_rpm": 2.0, "phase_deg": 25.0, "phase_axis": "+z"})
    time = np.linspace(0.0, 40.0, 401)
    n = time.size
    rotation = attitude.body_to_inertial(position[:1].repeat(n, 0), velocity[:1].repeat(n, 0),
                                         sun[:1].repeat(n, 0), time)
    # spin axis body +y along the ICRF pole
    assert np.max(angle(rotation[:, :, 1], np.tile([0.0, 0.0, 1.0], (n, 1)))) < ANGLE_TOL
    # for a spin about the pole the reference direction is ICRF +x; the phase of body +z
    # about +z-inertial, unwrapped, grows at 2 rpm = 12 deg/s from 25 deg
    phase_axis = rotation[:, :, 2]
    phase = np.unwrap(np.arctan2(phase_axis[:, 1], phase_axis[:, 0]))
    expected = math.radians(25.0) + 2.0 * 2 * math.pi / 60.0 * time
    assert np.max(np.abs(phase - expected)) < ANGLE_TOL
    # spin about the Sun direction: the spin axis tracks the Sun
    attitude = attitude_from_table({"mode": "spin", "spin_axis": "-x", "rate_deg_s": 5.0})
    rotation = attitude.body_to_inertial(position, velocity, sun, t)
    assert np.max(angle(-rotation[:, :, 0], sun)) < ANGLE_TOL


def test_default_attitude_is_nadir_and_says_so():
    attitude = attitude_from_table(None)
    assert attitude.mode == "nadir" and attitude.note == DEFAULT_ATTITUDE_NOTE
    assert np.array_equal(attitude.primary_axis, [0, 0, 1])


def test_axis_strings():
    assert np.array_equal(axis_vector("-y"), [0, -1, 0])
    assert np.array_equal(axis_vector("z"), [0, 0, 1])
    with pytest.raises(ValueError, match="'up'"):
        axis_vector("up")


@pytest.mark.parametrize("table, where, value", [
    ({"mode": "nadri"}, "[attitude] mode", "nadri"),
    ({"mode": "nadir", "nadir_axis": "+w"}, "[attitude] nadir_axis", "+w"),
    ({"mode": "nadir", "nadir_axis": "+x", "velocity_axis": "-x"},
     "[attitude] velocity_axis", "-x"),
    ({"mode": "nadir", "sun_axis": "+x"}, "[attitude] sun_axis", "+x"),
    ({"mode": "sun", "secondary_direction": "moon"}, "[attitude] secondary_direction", "moon"),
    ({"mode": "inertial", "quaternion": [1.0, 1.0, 0.0, 0.0]}, "[attitude] quaternion", "1.0"),
    ({"mode": "inertial", "primary_direction": [0, 0, 1], "secondary_direction": [0, 0, 2]},
     "[attitude] secondary_direction", "2"),
    ({"mode": "spin", "spin_axis": "+z"}, "[attitude] rate_rpm", "rate_rpm"),
    ({"mode": "spin", "rate_rpm": "fast"}, "[attitude] rate_rpm", "fast"),
    ({"mode": "spin", "rate_rpm": 1.0, "phase_axis": "+z"}, "[attitude] phase_axis", "+z"),
])
def test_bad_tables_name_file_key_and_value(table, where, value):
    with pytest.raises(ModelError) as info:
        attitude_from_table(table, file="model.toml")
    message = str(info.value)
    assert message.startswith("model.toml: ") and where in message and value in message


def test_sun_mode_when_the_sun_is_along_the_orbit_normal():
    # beta = 90 deg: the secondary target is parallel to the Sun; the documented fallback
    # (ICRF pole, then +x) keeps the rotation proper and the Sun axis on the Sun
    position = np.array([[7.0e6, 0.0, 0.0]])
    velocity = np.array([[0.0, 7.5e3, 0.0]])
    sun = np.array([[0.0, 0.0, 1.0]])
    for secondary_direction in ("orbit_normal", [0.0, 0.0, 5.0]):
        attitude = attitude_from_table({"mode": "sun", "sun_axis": "+y",
                                        "secondary_direction": secondary_direction})
        rotation = attitude.body_to_inertial(position, velocity, sun, np.zeros(1))
        assert np.all(np.isfinite(rotation))
        assert_proper_rotations(rotation)
        assert angle(rotation[:, :, 1], sun)[0] < ANGLE_TOL


def test_random_axis_pairs_give_proper_rotations():
    # seeded random body axes and inertial directions: TRIAD output always orthonormal,
    # right-handed, primary exact (Shuster & Oh 1981)
    from vfactor.attitude import _triad

    rng = np.random.default_rng(2027)
    for _ in range(50):
        b1, b2 = rng.normal(size=3), rng.normal(size=3)
        d1, d2 = rng.normal(size=(4, 3)), rng.normal(size=(4, 3))
        rotation = _triad(b1, b2, d1, d2)
        assert_proper_rotations(rotation)
        assert np.max(angle(rotation @ (b1 / np.linalg.norm(b1)), d1)) < ANGLE_TOL


def test_table_without_mode_is_nadir_as_the_readme_says():
    # README [attitude]: "optional; default nadir" — a table that only sets the nadir axis
    # (or an empty [attitude]) is nadir pointing, not an error
    from vfactor.attitude import attitude_from_table

    att = attitude_from_table({"nadir_axis": "-z"}, "m.toml")
    assert att.mode == "nadir"
    assert np.array_equal(att.primary_axis, [0.0, 0.0, -1.0])
    assert attitude_from_table({}, "m.toml").mode == "nadir"


def test_empty_axis_and_zero_spin_are_model_errors():
    with pytest.raises(ValueError, match="got ''"):
        axis_vector("")
    with pytest.raises(ModelError, match=r"^model.toml: \[attitude\] nadir_axis: .*got ''"):
        attitude_from_table({"nadir_axis": ""}, file="model.toml")
    with pytest.raises(ModelError, match=r"\[attitude\] rate_deg_s: is 0: a spin mode"):
        attitude_from_table({"mode": "spin", "rate_deg_s": 0.0}, file="model.toml")
    found = []
    attitude = attitude_from_table({"mode": "spin", "rate_rpm": -5.0}, problems=found)
    assert attitude.spin_rate == pytest.approx(-5.0 * 2 * np.pi / 60.0) and found == []
