"""Tests of vfactor.ephemeris: offline DE421 Sun against the Astronomical Almanac."""

from __future__ import annotations

import datetime as dt
import math
import os

import numpy as np
import pytest

from vfactor import ephemeris


def almanac_low_precision_sun(jd):
    """Apparent RA, Dec [rad] and distance [AU] of the Sun, true equator of date.

    The Astronomical Almanac, section C, "Low precision formulas for the Sun" (stated
    accuracy 0.01 deg in right ascension and declination between 1950 and 2050):
    n = JD - 2451545.0, L = 280.460 + 0.9856474 n, g = 357.528 + 0.9856003 n,
    lambda = L + 1.915 sin g + 0.020 sin 2g, epsilon = 23.439 - 0.0000004 n,
    tan alpha = cos epsilon tan lambda, sin delta = sin epsilon sin lambda,
    R = 1.00014 - 0.01671 cos g - 0.00014 cos 2g.
    """
    n = jd - 2451545.0
    big_l = math.radians((280.460 + 0.9856474 * n) % 360.0)
    g = math.radians((357.528 + 0.9856003 * n) % 360.0)
    lam = big_l + math.radians(1.915) * math.sin(g) + math.radians(0.020) * math.sin(2 * g)
    eps = math.radians(23.439 - 0.0000004 * n)
    ra = math.atan2(math.cos(eps) * math.sin(lam), math.cos(lam)) % (2 * math.pi)
    dec = math.asin(math.sin(eps) * math.sin(lam))
    distance = 1.00014 - 0.01671 * math.cos(g) - 0.00014 * math.cos(2 * g)
    return ra, dec, distance


DATES = ["1955-01-03T00:00:00Z", "1987-04-10T00:00:00Z", "2000-01-01T12:00:00Z",
         "2012-08-15T06:00:00Z", "2027-03-21T00:00:00Z", "2027-06-21T18:00:00Z",
         "2033-09-23T03:00:00Z", "2049-12-22T00:00:00Z"]


@pytest.mark.parametrize("date", DATES)
def test_sun_direction_against_astronomical_almanac(date):
    t = ephemeris.times_from_epoch(date, [0.0])
    ra, dec, distance = ephemeris.sun_ra_dec(t, frame="date")
    ra_aa, dec_aa, distance_aa = almanac_low_precision_sun(float(t.tt[0]))
    u = np.array([math.cos(dec[0]) * math.cos(ra[0]), math.cos(dec[0]) * math.sin(ra[0]),
                  math.sin(dec[0])])
    v = np.array([math.cos(dec_aa) * math.cos(ra_aa), math.cos(dec_aa) * math.sin(ra_aa),
                  math.sin(dec_aa)])
    separation = math.degrees(math.atan2(np.linalg.norm(np.cross(u, v)), np.dot(u, v)))
    # the Almanac's stated accuracy: 0.01 deg (1950-2050)
    assert separation < 0.01
    # distance: the formula's truncation is of order 1e-4 AU (from memory; no accuracy is
    # stated for R), so 3e-4 AU
    assert distance[0] / 1.495978707e11 == pytest.approx(distance_aa, abs=3e-4)


def test_sun_position_is_icrf_and_matches_ra_dec():
    t = ephemeris.times_from_epoch("2027-03-21T00:00:00Z", np.linspace(0.0, 86400.0, 5))
    vector = ephemeris.sun_position(t)
    ra, dec, distance = ephemeris.sun_ra_dec(t, frame="icrf")
    assert vector.shape == (5, 3)
    expected = distance[:, None] * np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra),
                                             np.sin(dec)], axis=1)
    assert np.max(np.abs(vector - expected)) < 1.0  # metres
    # the Sun moves about 0.9856 deg/day along the ecliptic (common practice)
    u0, u1 = vector[0] / distance[0], vector[-1] / distance[-1]
    assert math.degrees(math.acos(np.dot(u0, u1))) == pytest.approx(0.9856, abs=0.03)


def test_accepts_strings_datetimes_and_datetime64():
    a = ephemeris.sun_position(["2027-03-21T00:00:00Z"])
    b = ephemeris.sun_position([dt.datetime(2027, 3, 21, tzinfo=dt.timezone.utc)])
    c = ephemeris.sun_position(np.array(["2027-03-21T00:00:00"], dtype="datetime64[s]"))
    assert np.max(np.abs(a - b)) < 1e-3 and np.max(np.abs(a - c)) < 1e-3


def test_elapsed_time_is_uniform_across_a_leap_second():
    # 2016-12-31 ended with a leap second (IERS Bulletin C 52): 10 s of elapsed time from
    # 23:59:55 UTC ends at 00:00:04 UTC, not 00:00:05
    t = ephemeris.times_from_epoch("2016-12-31T23:59:55Z", [10.0])
    assert t[0].utc_iso() == "2017-01-01T00:00:04Z"


def test_offline_files_shipped_and_span():
    kernel = ephemeris.ephemeris()
    assert os.path.basename(kernel.path) == ephemeris.EPHEMERIS_FILE == "de421.bsp"
    start, end = ephemeris.ephemeris_span_utc()
    # DE421 covers 1899-07-29 to 2053-10-09 (Folkner et al. 2009); one day margin each end
    assert start.year == 1899 and end.year == 2053
    with pytest.raises(ValueError, match="outside the span"):
        ephemeris.sun_position(["2060-01-01T00:00:00Z"])


def test_parse_epoch():
    assert ephemeris.format_epoch(ephemeris.parse_epoch("2027-03-21T02:00:00+02:00")) == \
        "2027-03-21T00:00:00.000000Z"
    assert ephemeris.parse_epoch("2027-03-21T00:00:00") == \
        dt.datetime(2027, 3, 21, tzinfo=dt.timezone.utc)
    with pytest.raises(ValueError, match="'noon'"):
        ephemeris.parse_epoch("noon")
