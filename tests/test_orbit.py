"""Tests of vfactor.orbit against published values and independent computations."""

from __future__ import annotations

import math

import numpy as np
import pytest

from vfactor import ephemeris
from vfactor.constants import EARTH_EQUATORIAL_RADIUS_M, EARTH_GM_M3_S2
from vfactor.errors import ModelError
from vfactor.orbit import (
    j2_secular_rates,
    local_time_of_node,
    solve_kepler,
    sun_synchronous_inclination,
)
from vfactor.orbittable import orbit_from_table

EPOCH = "2027-03-21T00:00:00Z"


def circular(**extra):
    table = {"type": "circular", "altitude_km": 400.0, "inclination_deg": 51.6,
             "epoch": EPOCH}
    table.update(extra)
    return orbit_from_table(table, file="model.toml")


def test_period_kepler_third_law_and_leo_rule_of_thumb():
    orbit = circular()
    a = EARTH_EQUATORIAL_RADIUS_M + 400e3
    # Kepler's third law T = 2 pi sqrt(a^3 / GM) (e.g. Vallado 2013, eq. 1-27)
    assert orbit.period == pytest.approx(2 * math.pi * math.sqrt(a ** 3 / EARTH_GM_M3_S2),
                                         rel=1e-12)
    # common practice: a ~400 km low Earth orbit takes about 92.4-92.6 minutes
    assert abs(orbit.period / 60.0 - 92.5) < 0.3  # minutes


def test_propagation_closes_after_one_period_and_keeps_circular_speed():
    orbit = circular(steps_per_orbit=36)
    t = np.array([0.0, orbit.period, 3 * orbit.period])
    position, velocity = orbit.propagate(t)
    # closure of the two-body orbit after whole periods (independent of the period formula
    # only through Kepler's equation): within 1 mm
    assert np.max(np.abs(position[1:] - position[0])) < 1e-3
    r = np.linalg.norm(position, axis=1)
    v = np.linalg.norm(velocity, axis=1)
    # vis-viva for a circle, v = sqrt(GM / r) (Vallado 2013, eq. 1-31): within 1 mm/s
    assert np.max(np.abs(v - np.sqrt(EARTH_GM_M3_S2 / r))) < 1e-3
    # at epoch the vehicle is at the ascending node: z = 0, vz > 0
    assert abs(position[0, 2]) < 1e-3 and velocity[0, 2] > 0.0


def test_elliptic_orbit_perigee_apogee_and_vis_viva():
    orbit = orbit_from_table({"type": "elements", "perigee_km": 300.0, "apogee_km": 35786.0,
                              "inclination_deg": 7.0, "raan_deg": 40.0, "arg_perigee_deg": 178.0,
                              "true_anomaly_deg": 0.0, "epoch": EPOCH, "steps_per_orbit": 2000})
    position, velocity = orbit.propagate(orbit.times())
    r = np.linalg.norm(position, axis=1)
    v = np.linalg.norm(velocity, axis=1)
    # perigee at epoch, apogee half a period later (sampled at 2000 steps: within 1 m)
    assert r[0] - EARTH_EQUATORIAL_RADIUS_M == pytest.approx(300e3, abs=1.0)
    assert r.max() - EARTH_EQUATORIAL_RADIUS_M == pytest.approx(35786e3, abs=1.0)
    a = orbit.semi_major_axis
    # vis-viva v^2 = GM (2/r - 1/a) (Vallado 2013, eq. 1-31): within 1 mm/s
    assert np.max(np.abs(v - np.sqrt(EARTH_GM_M3_S2 * (2 / r - 1 / a)))) < 1e-3
    # angular momentum conserved (Kepler's second law): relative 1e-12
    h = np.linalg.norm(np.cross(position, velocity), axis=1)
    assert np.ptp(h) / h.mean() < 1e-12


def test_kepler_solver_satisfies_equation():
    rng = np.random.default_rng(5)
    m = rng.uniform(-20.0, 20.0, 500)
    for e in (0.0, 0.1, 0.7, 0.95, 0.999):
        big_e = solve_kepler(m, e)
        # Kepler's equation M = E - e sin E, residual within 1e-12 rad
        assert np.max(np.abs(big_e - e * np.sin(big_e) - m)) < 1e-12


@pytest.mark.parametrize("altitude_km, inclination_deg, source", [
    # from memory: commonly tabulated sun-synchronous inclinations of circular orbits
    # (e.g. Wertz & Larson, Space Mission Analysis and Design, 3rd ed., 1999, ch. 6)
    (500.0, 97.40, "tabulated, from memory"),
    (600.0, 97.79, "tabulated, from memory"),
    (700.0, 98.19, "tabulated, from memory"),
    (800.0, 98.60, "tabulated, from memory"),
    # Landsat 8: 705 km, 98.2 deg (NASA mission facts, from memory)
    (705.0, 98.2, "Landsat 8"),
])
def test_sun_synchronous_inclination_published(altitude_km, inclination_deg, source):
    a = EARTH_EQUATORIAL_RADIUS_M + altitude_km * 1e3
    # 0.06 deg: the published values are rounded to 0.01-0.1 deg, and a mission's quoted
    # altitude may refer to a mean rather than the equatorial radius (+-10 km ~ 0.04 deg)
    assert math.degrees(sun_synchronous_inclination(a)) == pytest.approx(inclination_deg,
                                                                          abs=0.06), source
    orbit = orbit_from_table({"altitude_km": altitude_km, "sun_synchronous": True,
                              "epoch": EPOCH})
    assert orbit.inclination == pytest.approx(sun_synchronous_inclination(a), abs=1e-15)
    # and the J2 node rate it gives is one turn per tropical year (365.2422 d, common practice)
    rate = j2_secular_rates(a, 0.0, orbit.inclination)[0]
    assert rate == pytest.approx(2 * math.pi / (365.24219 * 86400.0), rel=1e-12)


def test_ltan_matches_input_at_epoch_and_after_one_day():
    orbit = orbit_from_table({"altitude_km": 700.0, "sun_synchronous": True, "ltan": "10:30",
                              "j2_drift": True, "epoch": EPOCH})
    times = np.array([0.0, 86400.0])
    hours = local_time_of_node(orbit.raan_at(times), ephemeris.times_from_epoch(EPOCH, times))
    # at epoch: exact inverse, within 0.01 s of time
    assert abs(hours[0] - 10.5) * 3600.0 < 0.01
    # after one day: the node and the mean Sun both turn one revolution per tropical year;
    # within 2 s of time (the sidereal-time and precession rates differ in the 1e-5 of a day)
    assert abs(hours[1] - 10.5) * 3600.0 < 2.0
    # without drift the node stays fixed in inertial space and the local time slips
    # ~3.9 min per day (360 deg / 365.24 d, common practice)
    fixed = orbit_from_table({"altitude_km": 700.0, "sun_synchronous": True, "ltan": "10:30",
                              "epoch": EPOCH})
    slipped = local_time_of_node(fixed.raan_at(times), ephemeris.times_from_epoch(EPOCH, times))
    assert (10.5 - slipped[1]) * 60.0 == pytest.approx(1440.0 / 365.2422, abs=0.05)


def test_ltan_against_sun_hour_angle_and_almanac_equation_of_time():
    # Independent check: local mean time = local apparent time - equation of time, so the
    # node's hour angle H from the apparent Sun (true equator of date) must satisfy
    # 12 h + H / (15 deg/h) - LTAN = EoT. EoT from the Astronomical Almanac's low-precision
    # solar formulas (section C): EoT = 4 min/deg * (L - alpha).
    from test_ephemeris import almanac_low_precision_sun

    from vfactor.orbit import _node_right_ascension_of_date

    for epoch in ("2027-03-21T00:00:00Z", "2027-11-03T12:00:00Z", "2028-02-11T06:00:00Z",
                  "2030-07-26T18:00:00Z"):
        t = ephemeris.times_from_epoch(epoch, [0.0])
        ra_sun, _, _ = ephemeris.sun_ra_dec(t, frame="date")
        jd = float(t.tt[0])
        mean_longitude = (280.460 + 0.9856474 * (jd - 2451545.0)) % 360.0
        eot_min = 4.0 * math.remainder(
            mean_longitude - math.degrees(almanac_low_precision_sun(jd)[0]), 360.0)
        for ltan in (6.0, 10.5, 13.75, 22.0):
            orbit = orbit_from_table({"altitude_km": 600.0, "inclination_deg": 97.8,
                                      "ltan": ltan, "epoch": epoch})
            node_ra = _node_right_ascension_of_date(np.array([orbit.raan]), t)[0]
            hour_angle_h = math.degrees(math.remainder(node_ra - ra_sun[0], 2 * math.pi)) / 15.0
            difference_min = math.remainder((hour_angle_h + 12.0 - ltan) * 60.0, 1440.0)
            # 3 s of time: the Almanac's alpha is good to 0.01 deg (2.4 s of time)
            assert abs(difference_min - eot_min) * 60.0 < 3.0
            # and the equation of time never exceeds 16.5 min (common practice)
            assert abs(difference_min) < 16.5


def test_j2_drift_rates_against_published_example():
    # the formula evaluated by hand, -1.5 n J2 (R/p)^2 cos i (Vallado 2013, ch. 9), and the
    # common-practice fact that a ~620 km orbit at 98 deg is nearly sun-synchronous
    # (+0.9856 deg/day)
    a, e, i = 7000e3, 0.001, math.radians(98.0)
    n = math.sqrt(EARTH_GM_M3_S2 / a ** 3)
    p = a * (1 - e * e)
    hand = -1.5 * n * 1.08262668e-3 * (EARTH_EQUATORIAL_RADIUS_M / p) ** 2 * math.cos(i)
    rate = j2_secular_rates(a, e, i)[0]
    assert rate == pytest.approx(hand, rel=1e-12)
    assert math.degrees(rate) * 86400.0 == pytest.approx(0.98, abs=0.03)
    # polar orbit: no node drift; critical inclination 63.4349 deg: no perigee drift
    assert abs(j2_secular_rates(a, e, math.pi / 2)[0]) < 1e-20
    assert abs(j2_secular_rates(a, e, math.acos(math.sqrt(0.2)))[1]) < 1e-18


def test_steps_and_step_s():
    orbit = circular(orbits=2, steps_per_orbit=90)
    assert orbit.n_steps == 180 and orbit.step == pytest.approx(orbit.period / 90)
    orbit = circular(step_s=60.0)
    assert orbit.step == 60.0 and orbit.n_steps == math.ceil(orbit.period / 60.0)
    assert orbit.times()[-1] < orbit.period


@pytest.mark.parametrize("table, where, value", [
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH, "altitud": 3},
     "[orbit] altitud", "3"),
    ({"altitude_km": -5.0, "inclination_deg": 51.6, "epoch": EPOCH}, "[orbit] altitude_km", "-5.0"),
    ({"altitude_km": 400.0, "inclination_deg": 200.0, "epoch": EPOCH},
     "[orbit] inclination_deg", "200.0"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": "yesterday"},
     "[orbit] epoch", "yesterday"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6}, "[orbit] epoch", "required"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": "2060-01-01T00:00:00Z"},
     "[orbit] epoch", "2060"),
    ({"type": "circle", "altitude_km": 400.0}, "[orbit] type", "circle"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH, "ltan": "25:00"},
     "[orbit] ltan", "25:00"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH, "raan_deg": 3.0,
      "ltan": "10:00"}, "[orbit] ltan", "10:00"),
    ({"altitude_km": 400.0, "sun_synchronous": True, "inclination_deg": 97.0,
      "epoch": EPOCH}, "[orbit] inclination_deg", "97.0"),
    ({"altitude_km": 9000.0, "sun_synchronous": True, "epoch": EPOCH},
     "[orbit] sun_synchronous", "sun-synchronous"),
    ({"type": "elements", "semi_major_axis_km": 7000.0, "eccentricity": 1.2,
      "inclination_deg": 10.0, "epoch": EPOCH}, "[orbit] eccentricity", "1.2"),
    ({"type": "elements", "semi_major_axis_km": 7000.0, "eccentricity": 0.2,
      "inclination_deg": 10.0, "epoch": EPOCH}, "[orbit] semi_major_axis_km", "inside"),
    ({"type": "elements", "perigee_km": 900.0, "apogee_km": 500.0,
      "inclination_deg": 10.0, "epoch": EPOCH}, "[orbit] apogee_km", "500.0"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH, "steps_per_orbit": 0},
     "[orbit] steps_per_orbit", "0"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH, "j2_drift": "yes"},
     "[orbit] j2_drift", "yes"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH, "shadow": "round"},
     "[orbit] shadow", "round"),
    ({"type": "tle", "tle": "1 not a tle\n2 either"}, "[orbit] tle", "not a tle"),
    ({"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH, "orbits": 1e5,
      "steps_per_orbit": 1000}, "[orbit] steps_per_orbit", "1000"),
    ({"type": "tle", "tle": "x", "j2_drift": True}, "[orbit] j2_drift", "True"),
])
def test_bad_tables_name_file_key_and_value(table, where, value):
    with pytest.raises(ModelError) as info:
        orbit_from_table(table, file="model.toml")
    message = str(info.value)
    assert message.startswith("model.toml: ")
    assert where in message and value in message


# --- two-line element sets -------------------------------------------------------------
def _with_checksum(line: str) -> str:
    """Append the modulo-10 checksum of a TLE line (digits, '-' counts 1; NORAD format)."""
    total = sum(int(ch) if ch.isdigit() else (1 if ch == "-" else 0) for ch in line[:68])
    return line[:68] + str(total % 10)


# an invented, near-circular element set (51.6 deg, 15.5 rev/day, e = 1e-5)
TLE_LINE1 = _with_checksum("1 99999U 27001A   27080.50000000  .00000000  00000-0  00000-0 0  999")
TLE_LINE2 = _with_checksum("2 99999  51.6000 120.0000 0000100   0.0000   0.0000 15.50000000    1")


def test_tle_propagation_identical_to_skyfield_and_sgp4():
    from sgp4.api import Satrec
    from skyfield.api import EarthSatellite

    orbit = orbit_from_table({"type": "tle", "tle": f"INVENTED-SAT\n{TLE_LINE1}\n{TLE_LINE2}",
                              "steps_per_orbit": 60}, file="model.toml")
    assert orbit.epoch_utc == "2027-03-21T12:00:00.000000Z"  # day 080.5 of 2027
    # period from the mean motion: 86400 s / 15.5
    assert orbit.period == pytest.approx(86400.0 / 15.5, rel=1e-12)
    t = orbit.times()
    position, velocity = orbit.propagate(t)
    # skyfield's own propagation of the same element set (EarthSatellite.at): identical
    sat = EarthSatellite(TLE_LINE1, TLE_LINE2, "x", ephemeris.timescale())
    state = sat.at(ephemeris.times_from_epoch(orbit.epoch_utc, t))
    assert np.array_equal(position, state.position.m.T)
    assert np.array_equal(velocity, state.velocity.m_per_s.T)
    # the sgp4 package directly (TEME frame): the radius does not depend on the frame;
    # within 1 mm
    satrec = Satrec.twoline2rv(TLE_LINE1, TLE_LINE2)
    jd = np.full(t.size, satrec.jdsatepoch)
    err, r_teme, _ = satrec.sgp4_array(jd, satrec.jdsatepochF + t / 86400.0)
    assert np.all(err == 0)
    assert np.max(np.abs(np.linalg.norm(r_teme, axis=1) * 1e3
                         - np.linalg.norm(position, axis=1))) < 1e-3


def test_circular_tle_consistent_with_two_body_orbit():
    from skyfield.sgp4lib import TEME

    from vfactor.orbit import circular_orbit
    from vfactor.planet import EARTH

    orbit = orbit_from_table({"tle": f"{TLE_LINE1}\n{TLE_LINE2}", "steps_per_orbit": 200})
    model = orbit._satellite.model
    # the element set's mean plane, carried from TEME to ICRF axes with skyfield's rotation
    rotation = np.asarray(TEME.rotation_at(ephemeris.times_from_epoch(orbit.epoch_utc, 0.0)))
    rotation = rotation.reshape(3, 3)  # GCRS -> TEME
    i, node = model.inclo, model.nodeo
    normal = rotation.T @ [math.sin(i) * math.sin(node), -math.sin(i) * math.cos(node), math.cos(i)]
    node_vec = rotation.T @ [math.cos(node), math.sin(node), 0.0]
    inclination = math.acos(normal[2])
    raan = math.atan2(normal[0], -normal[1])
    icrf_node = np.array([math.cos(raan), math.sin(raan), 0.0])
    shift = math.atan2(np.dot(np.cross(icrf_node, node_vec), normal), np.dot(icrf_node, node_vec))
    # Brouwer mean semi-major axis of SGP4 (satrec.a, Earth radii) and J2 secular drift
    a = model.a * model.radiusearthkm * 1e3
    ours = circular_orbit((a - EARTH.radius) / 1e3, math.degrees(inclination), math.degrees(raan),
                          orbit.epoch_utc, steps_per_orbit=200,
                          argument_of_latitude_deg=math.degrees(shift + model.argpo + model.mo),
                          j2_drift=True)
    t = orbit.times()
    sgp4_position, _ = orbit.propagate(t)
    two_body_position, _ = ours.propagate(t)
    distance = np.linalg.norm(sgp4_position - two_body_position, axis=1)
    radius_swing = np.ptp(np.linalg.norm(sgp4_position, axis=1))
    # over one revolution within 15 km: SGP4 includes the J2 short-period terms that mean
    # two-body motion omits; they make the "circular" SGP4 radius itself swing by ~12 km
    assert radius_swing < 15e3
    assert np.max(distance) < 15e3


def test_epoch_as_toml_date_time():
    import datetime as dt
    import tomllib

    table = tomllib.loads("[orbit]\naltitude_km = 500.0\ninclination_deg = 40.0\n"
                          "epoch = 2027-03-21T01:00:00+01:00\n")["orbit"]
    assert isinstance(table["epoch"], dt.datetime)
    assert orbit_from_table(table).epoch_utc == "2027-03-21T00:00:00.000000Z"
    table = tomllib.loads("[orbit]\naltitude_km = 500.0\ninclination_deg = 40.0\n"
                          "epoch = 2027-03-21T00:00:00\n")["orbit"]  # local date-time: UTC
    assert orbit_from_table(table).epoch_utc == "2027-03-21T00:00:00.000000Z"


def test_ltan_as_toml_time_and_epoch_as_toml_date():
    import tomllib

    table = tomllib.loads("[orbit]\naltitude_km = 600.0\nsun_synchronous = true\n"
                          "ltan = 13:45:00\nepoch = 2027-03-21\n")["orbit"]
    orbit = orbit_from_table(table)
    assert orbit.epoch_utc == "2027-03-21T00:00:00.000000Z"
    hours = local_time_of_node(orbit.raan, ephemeris.times_from_epoch(orbit.epoch_utc, [0.0]))
    assert abs(hours[0] - 13.75) * 3600.0 < 0.01  # s of time


def test_j2_drift_turns_the_propagated_orbit_plane():
    orbit = orbit_from_table({"type": "elements", "perigee_km": 600.0, "apogee_km": 900.0,
                              "sun_synchronous": True, "raan_deg": 10.0,
                              "arg_perigee_deg": 30.0, "j2_drift": True, "epoch": EPOCH})
    t = np.array([0.0, 86400.0, 10 * 86400.0])
    position, velocity = orbit.propagate(t)
    h = np.cross(position, velocity)
    raan = np.arctan2(h[:, 0], -h[:, 1])
    inclination = np.arccos(h[:, 2] / np.linalg.norm(h, axis=1))
    # the plane of the propagated states turns at one revolution per tropical year
    # (elliptic sun-synchronous condition with p = a (1 - e^2), Vallado 2013 ch. 11),
    # within 1e-9 rad, and keeps its inclination
    expected = math.radians(10.0) + 2 * math.pi / (365.24219 * 86400.0) * t
    assert np.max(np.abs(np.remainder(raan - expected + math.pi, 2 * math.pi) - math.pi)) < 1e-9
    assert np.max(np.abs(inclination - orbit.inclination)) < 1e-12
    # the perigee moves too: domega/dt = 3/4 n J2 (R/p)^2 (4 - 5 sin^2 i) (Vallado ch. 9)
    e_vec = (np.cross(velocity, h) / EARTH_GM_M3_S2
             - position / np.linalg.norm(position, axis=1)[:, None])
    node = np.stack([np.cos(raan), np.sin(raan), np.zeros(3)], axis=1)
    argp = np.arctan2(np.einsum("ij,ij->i", np.cross(node, e_vec), h / np.linalg.norm(h, axis=1)[:, None]),
                      np.einsum("ij,ij->i", node, e_vec))
    rate = j2_secular_rates(orbit.semi_major_axis, orbit.eccentricity, orbit.inclination)[1]
    assert np.max(np.abs(np.remainder(argp - math.radians(30.0) - rate * t + math.pi, 2 * math.pi)
                         - math.pi)) < 1e-9


def test_tle_trajectory_end_to_end():
    from vfactor.attitude import attitude_from_table
    from vfactor.trajectory import compute_trajectory, orbit_facts

    orbit = orbit_from_table({"tle": f"{TLE_LINE1}\n{TLE_LINE2}", "orbits": 2,
                              "epoch": "2027-03-22T00:00:00Z"})
    tr = compute_trajectory(orbit, attitude_from_table({"mode": "nadir"}))
    facts = orbit_facts(tr)
    assert tr.n_steps == 144 and tr.epoch_utc == "2027-03-22T00:00:00.000000Z"
    # 15.5 rev/day: about 420 km altitude (Kepler's third law); eclipses every orbit
    assert 380.0 < facts.altitude_min_km < facts.altitude_max_km < 460.0
    assert len(facts.eclipses) >= 2


def test_epoch_outside_the_ephemeris_names_the_epoch_not_an_empty_span():
    # an epoch in 2300 was reported as "the span 2300-... to 2300-..." (same instant twice)
    with pytest.raises(ModelError) as info:
        orbit_from_table({"altitude_km": 550.0, "inclination_deg": 50.0,
                          "epoch": "2300-03-21T00:00:00Z"}, "m.toml")
    message = str(info.value)
    assert "m.toml" in message and "[orbit] epoch" in message
    assert "the epoch 2300-03-21T00:00:00" in message and "lies outside" in message
    assert " to 2300" not in message


def test_tle_checksum_and_length_are_checked():
    from vfactor.orbittable import tle_checksum, tle_line_problem

    assert tle_line_problem(TLE_LINE1) == "" and tle_line_problem(TLE_LINE2) == ""
    # the modulo-10 rule (CelesTrak "NORAD Two-Line Element Set Format"): digits summed,
    # '-' counts 1, letters, spaces, '.' and '+' count 0
    assert tle_checksum("1 2-3 A+.9" + " " * 58) == (1 + 2 + 1 + 3 + 9) % 10
    wrong = TLE_LINE1[:-1] + str((int(TLE_LINE1[-1]) + 1) % 10)
    with pytest.raises(ModelError) as info:
        orbit_from_table({"tle": f"{wrong}\n{TLE_LINE2}"}, file="model.toml")
    message = str(info.value)
    assert message.startswith("model.toml: [orbit] tle: element line 1 has the checksum")
    assert f"give {TLE_LINE1[-1]}" in message
    assert "68 characters" in tle_line_problem(TLE_LINE2[:-1])


def test_implausible_orbit_values_are_warnings_with_the_key():
    found = []
    orbit = orbit_from_table({"altitude_km": 50.0, "inclination_deg": 51.6, "epoch": EPOCH,
                              "raan_deg": 400.0}, file="model.toml", problems=found)
    assert orbit.semi_major_axis == pytest.approx(EARTH_EQUATORIAL_RADIUS_M + 50e3)
    where = sorted(p.where for p in found if p.severity == "warning")
    assert where == ["[orbit] altitude_km", "[orbit] raan_deg"]
    # no list: no warnings kept, the same orbit
    assert orbit_from_table({"altitude_km": 50.0, "inclination_deg": 51.6,
                             "epoch": EPOCH}).semi_major_axis == orbit.semi_major_axis


@pytest.mark.parametrize("extra, key, words", [
    ({"step_s": 1e-320}, "step_s", ["infinitely many"]),
    ({"orbits": 1e6, "steps_per_orbit": 72}, "steps_per_orbit", ["7.2e+07"]),
    ({"epoch": "0001-01-01T00:00:00+01:00"}, "epoch", ["out of range"]),
    ({"epoch": "1900-01-01T00:00:00Z", "orbits": 1e6, "steps_per_orbit": 1}, "epoch",
     ["leaves the shipped ephemeris"]),
])
def test_extreme_values_are_model_errors_not_overflows(extra, key, words):
    table = {"altitude_km": 400.0, "inclination_deg": 51.6, "epoch": EPOCH}
    table.update(extra)
    with pytest.raises(ModelError) as info:
        orbit_from_table(table, file="model.toml")
    message = str(info.value)
    assert message.startswith(f"model.toml: [orbit] {key}: ")
    for word in words:
        assert word in message, message


def test_epochs_before_year_1000_keep_four_digits():
    import datetime as dt

    assert ephemeris.format_epoch(dt.datetime(1, 3, 21, tzinfo=dt.timezone.utc)) == \
        "0001-03-21T00:00:00.000000Z"


# --------------------------------------------------------------------------------------
# beta_deg: the node that gives a beta angle at the epoch
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("epoch", ["2027-03-21T00:00:00Z", "2027-06-21T12:00:00Z",
                                   "2027-12-02T06:30:00Z"])
@pytest.mark.parametrize("inclination_deg", [28.5, 51.6, 97.8, 135.0])
def test_beta_deg_gives_that_beta_angle_at_step_0(epoch, inclination_deg):
    # the beta angle is asin(h_hat . s_hat), h = r x v (Gilmore (ed.), Spacecraft Thermal
    # Control Handbook, Vol. I, 2nd ed., 2002, ch. 2; common practice); the trajectory
    # computes it from the propagated state, independently of raan_from_beta's inverse
    from vfactor.attitude import attitude_from_table
    from vfactor.orbit import beta_range
    from vfactor.trajectory import compute_trajectory

    low, high = np.degrees(beta_range(epoch, math.radians(inclination_deg)))
    betas = [b for b in (-75.0, -40.0, -10.0, 0.0, 12.5, 45.0, 70.0) if low < b < high]
    assert len(betas) >= 3                       # every case checks several values
    for beta in betas:
        orbit = orbit_from_table({"type": "circular", "altitude_km": 550.0,
                                  "inclination_deg": inclination_deg, "beta_deg": beta,
                                  "epoch": epoch, "steps_per_orbit": 8}, file="m.toml")
        tr = compute_trajectory(orbit, attitude_from_table(None))
        # to 1e-6 deg, as asked of the inverse
        assert abs(math.degrees(tr.beta[0]) - beta) < 1e-6, (beta, math.degrees(tr.beta[0]))
        # the node chosen is the one on the sunlit side: local mean time of the ascending
        # node within 06:00 .. 18:00 up to the equation of time (under 16.5 min, common
        # practice)
        hours = local_time_of_node(orbit.raan, ephemeris.times_from_epoch(epoch, [0.0]))[0]
        assert 6.0 - 16.5 / 60.0 < hours < 18.0 + 16.5 / 60.0, hours
        # the other node with that beta, Omega' - alpha = 180 deg - (Omega - alpha) (same
        # sine), gives the same beta: the choice was between these two
        ra, _, _ = ephemeris.sun_ra_dec(ephemeris.times_from_epoch(epoch, [0.0]))
        mirror = math.degrees(2.0 * ra[0] + math.pi - orbit.raan) % 360.0
        other = orbit_from_table({"type": "circular", "altitude_km": 550.0,
                                  "inclination_deg": inclination_deg, "raan_deg": mirror,
                                  "epoch": epoch, "steps_per_orbit": 8})
        assert abs(math.degrees(compute_trajectory(other, attitude_from_table(None)).beta[0])
                   - beta) < 1e-6


def test_beta_deg_with_sun_synchronous_inclination():
    orbit = orbit_from_table({"altitude_km": 700.0, "sun_synchronous": True,
                              "beta_deg": -25.0, "epoch": EPOCH, "steps_per_orbit": 4})
    from vfactor.attitude import attitude_from_table
    from vfactor.trajectory import compute_trajectory

    tr = compute_trajectory(orbit, attitude_from_table(None))
    # same definition as above; the inclination is the sun-synchronous one (> 90 deg)
    assert abs(math.degrees(tr.beta[0]) + 25.0) < 1e-6
    assert math.degrees(orbit.inclination) > 90.0


def test_beta_deg_out_of_reach_names_the_reachable_range():
    # sin(delta - i) <= sin(beta) <= sin(delta + i) over every node (from h . s with
    # |sin(Omega - alpha)| <= 1); delta from the ephemeris' own Sun declination
    epoch = "2027-06-21T12:00:00Z"
    _, dec, _ = ephemeris.sun_ra_dec(ephemeris.times_from_epoch(epoch, [0.0]))
    delta = math.degrees(dec[0])
    with pytest.raises(ModelError) as err:
        circular(inclination_deg=28.5, beta_deg=70.0, epoch=epoch)
    e = err.value
    assert e.where == "[orbit] beta_deg" and e.file == "model.toml" and "\n" not in str(e)
    assert "70 deg cannot be reached" in e.message
    assert f"{delta - 28.5:.3f} .. {delta + 28.5:.3f} deg" in e.message, e.message
    # an equatorial orbit has one beta only, the Sun's declination
    with pytest.raises(ModelError, match=rf"only {delta:.3f} deg is"):
        circular(inclination_deg=0.0, beta_deg=0.0, epoch=epoch)


@pytest.mark.parametrize("extra, other", [({"raan_deg": 10.0}, "raan_deg"),
                                          ({"ltan": "10:30"}, "ltan")])
def test_beta_deg_excludes_raan_deg_and_ltan(extra, other):
    with pytest.raises(ModelError) as err:
        circular(beta_deg=20.0, **extra)
    e = err.value
    assert e.where == "[orbit] beta_deg" and "\n" not in str(e)
    assert f"give beta_deg or {other}, not both" in e.message
    assert "beta_deg = 20.0" in e.message and f"{other} = {extra[other]!r}" in e.message


def test_beta_deg_range_and_kind_are_checked():
    with pytest.raises(ModelError, match="beta_deg") as err:
        circular(beta_deg=95.0)
    assert "95" in err.value.message
    # elements orbits take raan_deg or ltan only (the key belongs to circular orbits)
    with pytest.raises(ModelError, match="beta_deg"):
        orbit_from_table({"type": "elements", "perigee_km": 500.0, "apogee_km": 900.0,
                          "inclination_deg": 60.0, "beta_deg": 10.0, "epoch": EPOCH})
