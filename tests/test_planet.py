"""Tests of vfactor.planet."""

from __future__ import annotations

import dataclasses
import math

import pytest

from vfactor.planet import EARTH, Planet


def test_earth_constants_wgs84():
    # WGS 84 (NIMA TR8350.2, 3rd ed., Table 3.1): a = 6 378 137 m, GM = 3.986004418e14,
    # omega = 7.292115e-5 rad/s; EGM96 J2 = 1.0826267e-3 (from memory)
    assert EARTH.radius == 6_378_137.0
    assert EARTH.gm == 3.986004418e14
    assert EARTH.rotation_rate == 7.292115e-5
    assert EARTH.j2 == pytest.approx(1.0826267e-3, rel=1e-7)
    # sidereal day 86 164.09 s (Astronomical Almanac, from memory): within 0.02 s, as the
    # WGS 84 rate is given to 7 digits (1e-7 relative ~ 0.01 s)
    assert 2 * math.pi / EARTH.rotation_rate == pytest.approx(86164.09, abs=0.02)
    assert EARTH.albedo is None and EARTH.planet_ir is None


def test_planet_is_frozen_and_validated():
    with pytest.raises(dataclasses.FrozenInstanceError):
        EARTH.radius = 1.0
    with pytest.raises(ValueError, match="radius"):
        Planet("Flat", radius=-1.0, gm=1.0, j2=0.0, rotation_rate=1.0)
    mars = Planet("Mars", radius=3_396_200.0, gm=4.282837e13, j2=1.96045e-3,
                  rotation_rate=7.088218e-5)  # from memory (Mars GM and J2: JPL, rounded)
    assert mars != EARTH


def test_planet_by_name():
    from vfactor.planet import planet_by_name

    assert planet_by_name("earth") is EARTH and planet_by_name(EARTH) is EARTH
    with pytest.raises(ValueError, match="'Vulcan'"):
        planet_by_name("Vulcan")
