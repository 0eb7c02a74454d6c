"""Tests of vfactor.eclipse against published closed forms and a brute-force disk oracle."""

from __future__ import annotations

import math

import numpy as np
import pytest

from vfactor.constants import ASTRONOMICAL_UNIT_M, SUN_RADIUS_M
from vfactor.eclipse import disk_angles, shadow_margin, sun_fraction
from vfactor.planet import EARTH

R = EARTH.radius


def sun_at(beta_rad, n=1):
    """Sun 1 AU away, at angle beta above the x-y plane (the orbit plane below)."""
    s = ASTRONOMICAL_UNIT_M * np.array([math.cos(beta_rad), 0.0, math.sin(beta_rad)])
    return np.tile(s, (n, 1))


def circle(radius_m, n):
    """Positions on a circle in the x-y plane, n samples, starting on the Sun side."""
    u = (np.arange(n) + 0.5) * 2 * math.pi / n
    return radius_m * np.stack([np.cos(u), np.sin(u), np.zeros(n)], axis=1)


def gilmore_eclipse_fraction(h, beta):
    """Share of a circular orbit in a cylindrical shadow.

    Gilmore (ed.), Spacecraft Thermal Control Handbook, Vol. I, 2nd ed., 2002, ch. 2:
    f_E = (1/180 deg) acos( sqrt(h^2 + 2 R h) / ((R + h) cos beta) ) for |beta| < beta*,
    beta* = asin(R / (R + h)); 0 otherwise.
    """
    if abs(beta) >= math.asin(R / (R + h)):
        return 0.0
    return math.degrees(math.acos(math.sqrt(h * h + 2 * R * h) / ((R + h) * math.cos(beta)))) / 180.0


@pytest.mark.parametrize("altitude_km", [300.0, 500.0, 800.0, 1500.0, 20200.0, 35786.0])
@pytest.mark.parametrize("beta_deg", [0.0, 20.0, 45.0, 60.0, 70.0])
def test_cylindrical_eclipse_fraction_against_gilmore(altitude_km, beta_deg):
    h = altitude_km * 1e3
    n = 200_000
    position = circle(R + h, n)
    fraction = sun_fraction(position, sun_at(math.radians(beta_deg), n), EARTH,
                            model="cylindrical")
    share = float(np.mean(fraction == 0.0))
    # sampling error: one sample at each of the two shadow boundaries, 2 / n of the orbit
    assert share == pytest.approx(gilmore_eclipse_fraction(h, math.radians(beta_deg)), abs=2.0 / n)


@pytest.mark.parametrize("altitude_km", [400.0, 800.0, 2000.0])
def test_no_shadow_above_critical_beta(altitude_km):
    h = altitude_km * 1e3
    critical = math.asin(R / (R + h))  # Gilmore (2002) ch. 2, beta* = asin(R / (R + h))
    n = 100_000
    position = circle(R + h, n)
    for model in ("cylindrical", "conical"):
        above = sun_fraction(position, sun_at(critical + math.radians(0.3), n), EARTH, model)
        # conical: the penumbra reaches a little beyond beta* (by the Sun's 0.27 deg
        # radius), hence 0.3 deg above
        assert np.all(above == 1.0), model
        below = sun_fraction(position, sun_at(critical - math.radians(0.5), n), EARTH, model)
        assert np.any(below < 1.0), model


def overlap_oracle(a, b, c, n=2001):
    """Visible share of a disk of radius a whose centre is c from a disk of radius b.

    Brute force: midpoint grid over the Sun's disk (flat, small angles), counting the
    cells outside the planet's disk. Error ~ perimeter / n cells, about 2e-3 at n = 2001.
    """
    x = (np.arange(n) + 0.5) / n * 2 * a - a
    xx, yy = np.meshgrid(x, x)
    inside_sun = xx ** 2 + yy ** 2 <= a * a
    hidden = (xx - c) ** 2 + yy ** 2 <= b * b
    return float(np.sum(inside_sun & ~hidden) / np.sum(inside_sun))


@pytest.mark.parametrize("planet_over_sun, separation", [
    (3.0, 3.5), (3.0, 3.0), (3.0, 2.5), (3.0, 2.05),   # LEO-like: planet disk larger
    (0.5, 1.2), (0.5, 0.8), (0.5, 0.3),                # far away: annular and partial
    (1.0, 1.0), (1.0, 0.4),
])
def test_conical_overlap_against_brute_force_disks(planet_over_sun, separation):
    # put the vehicle where the angular radii are a (Sun) and b (planet) and the centres c
    # apart, with c in units of a
    sun = np.array([[ASTRONOMICAL_UNIT_M, 0.0, 0.0]])
    d_sun = ASTRONOMICAL_UNIT_M
    a_guess = math.asin(SUN_RADIUS_M / d_sun)
    b = planet_over_sun * a_guess
    r = R / math.sin(b)
    c = separation * a_guess
    # vehicle behind the planet, offset so that the planet centre appears c from the Sun
    position = np.array([[-r * math.cos(c), r * math.sin(c), 0.0]])
    a_, b_, c_ = disk_angles(position, sun, EARTH)
    expected = overlap_oracle(a_[0], b_[0], c_[0])
    # oracle grid error ~2e-3 (perimeter cells of a 2001 x 2001 grid)
    assert sun_fraction(position, sun, EARTH)[0] == pytest.approx(expected, abs=3e-3)


def test_full_sun_and_umbra_limits():
    sun = sun_at(0.0, 2)
    position = np.array([[R + 500e3, 0.0, 0.0], [-(R + 500e3), 0.0, 0.0]])
    assert np.array_equal(sun_fraction(position, sun, EARTH), [1.0, 0.0])
    outer, inner = shadow_margin(position, sun, EARTH)
    assert outer[0] > 0 and inner[1] < 0


def test_annular_share_is_one_minus_area_ratio():
    # far behind the planet, its disk inside the Sun's: share = 1 - b^2/a^2 (Montenbruck &
    # Gill 2000, §3.4.2); at 3e9 m the Earth's disk is 0.12 deg, the Sun's 0.27 deg
    sun = sun_at(0.0, 1)
    position = np.array([[-3.0e9, 0.0, 0.0]])
    a, b, _ = disk_angles(position, sun, EARTH)
    assert sun_fraction(position, sun, EARTH)[0] == pytest.approx(1 - (b[0] / a[0]) ** 2, rel=1e-12)


def test_conical_umbra_shorter_than_cylinder_and_penumbra_a_few_seconds():
    # Along a circular orbit at beta = 0: conical umbra < cylindrical shadow < conical
    # shadow incl. penumbra (the umbra cone narrows behind the planet, the penumbra cone
    # widens; Montenbruck & Gill 2000, §3.4.2)
    for altitude_km in (400.0, 800.0):
        n = 400_000
        position = circle(R + altitude_km * 1e3, n)
        sun = sun_at(0.0, n)
        conical = sun_fraction(position, sun, EARTH, "conical")
        cylindrical = sun_fraction(position, sun, EARTH, "cylindrical")
        umbra, shadow, any_shadow = (np.mean(conical == 0.0), np.mean(cylindrical == 0.0),
                                     np.mean(conical < 1.0))
        assert umbra < shadow < any_shadow
        period = 2 * math.pi * math.sqrt((R + altitude_km * 1e3) ** 3 / EARTH.gm)
        penumbra_s = (any_shadow - umbra) * period / 2.0  # two crossings per orbit
        # common practice: penumbra crossings last "a few seconds" in LEO, ~8-10 s at beta 0
        assert 7.0 < penumbra_s < 10.0


def test_bad_input():
    with pytest.raises(ValueError, match="'flat'"):
        sun_fraction(np.zeros((1, 3)) + R * 2, sun_at(0.0), EARTH, model="flat")
    with pytest.raises(ValueError, match=r"\(2, 3\)"):
        sun_fraction(np.ones((2, 3)) * R * 2, sun_at(0.0), EARTH)
