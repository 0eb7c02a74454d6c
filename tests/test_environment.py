"""Tests of vfactor.environment: design cases, overrides, errors, solar constant scaling."""

import numpy as np
import pytest

from vfactor.constants import ASTRONOMICAL_UNIT_M
from vfactor.environment import (
    SOLAR_CONSTANT_COLD,
    SOLAR_CONSTANT_HOT,
    Environment,
    design_case,
    environment_from_table,
    solar_constant_at,
)
from vfactor.errors import ModelError


def test_solar_constant_at_one_au_and_inverse_square():
    # Kopp & Lean 2011, GRL 38, L01706: 1360.8 +/- 0.5 W/m2 at 1 au (we use 1361).
    assert solar_constant_at(ASTRONOMICAL_UNIT_M) == pytest.approx(1360.8, abs=0.5)
    # Inverse-square law: at 2 au a quarter (exact up to rounding).
    assert solar_constant_at(2 * ASTRONOMICAL_UNIT_M) == pytest.approx(
        solar_constant_at(ASTRONOMICAL_UNIT_M) / 4, rel=1e-15)
    arr = solar_constant_at(np.array([1.0, 1.5]) * ASTRONOMICAL_UNIT_M)
    assert arr.shape == (2,)


def test_solar_constant_at_rejects_bad_distance():
    with pytest.raises(ValueError, match="-1"):
        solar_constant_at(-1.0)


def test_hot_and_cold_match_the_published_annual_extremes():
    # Gilmore, Spacecraft Thermal Control Handbook Vol. I, 2nd ed. (2002), ch. 2 (from
    # memory): 1414 W/m2 at perihelion and 1322 W/m2 at aphelion, from a 1367 W/m2 mean.
    # The ratio to the mean must agree to the rounding of the quoted values (+/-0.5 W/m2).
    assert SOLAR_CONSTANT_HOT / 1361.0 == pytest.approx(1414.0 / 1367.0, abs=0.5 / 1367.0)
    assert SOLAR_CONSTANT_COLD / 1361.0 == pytest.approx(1322.0 / 1367.0, abs=0.5 / 1367.0)
    # Perihelion 0.98329 au and aphelion 1.01671 au (Astronomical Almanac, from memory).
    assert SOLAR_CONSTANT_HOT == pytest.approx(
        solar_constant_at(0.98329 * ASTRONOMICAL_UNIT_M), abs=0.05)
    assert SOLAR_CONSTANT_COLD == pytest.approx(
        solar_constant_at(1.01671 * ASTRONOMICAL_UNIT_M), abs=0.05)


def test_cases_and_defaults():
    assert environment_from_table(None) == design_case("nominal")
    nominal = environment_from_table({})
    assert nominal.case == "nominal" and nominal.solar_constant is None
    hot = environment_from_table({"case": "hot"})
    cold = environment_from_table({"case": "cold"})
    # The hot case is hotter than the cold case in every source (definition of the cases).
    assert hot.solar_constant > cold.solar_constant
    assert hot.albedo > nominal.albedo > cold.albedo
    assert hot.planet_ir > nominal.planet_ir > cold.planet_ir
    # Gilmore 2002, ch. 2 (from memory): albedo 0.30 +/- 0.05 and OLR 237 +/- 21 W/m2.
    assert (cold.albedo, nominal.albedo, hot.albedo) == pytest.approx((0.25, 0.30, 0.35))
    assert (cold.planet_ir, nominal.planet_ir, hot.planet_ir) == pytest.approx((216, 237, 258))


def test_nominal_scales_with_sun_distance_and_fixed_cases_do_not():
    d = np.array([0.99, 1.0, 1.01]) * ASTRONOMICAL_UNIT_M
    nominal = environment_from_table({"case": "nominal"})
    np.testing.assert_allclose(nominal.solar_constant_series(d), 1361.0 / np.array(
        [0.99, 1.0, 1.01]) ** 2, rtol=1e-14)
    hot = environment_from_table({"case": "hot"})
    np.testing.assert_array_equal(hot.solar_constant_series(d), SOLAR_CONSTANT_HOT)


def test_overrides_per_key():
    env = environment_from_table({"case": "cold", "albedo": 0.4})
    assert env.albedo == 0.4 and env.planet_ir == design_case("cold").planet_ir
    assert env.solar_constant == SOLAR_CONSTANT_COLD
    env = environment_from_table({"solar_constant": 1300})
    assert env.case == "nominal" and env.solar_constant == 1300.0
    custom = environment_from_table({"case": "custom", "solar_constant": 1000.0,
                                     "albedo": 0.0, "planet_ir": 0})
    assert custom == Environment("custom", 1000.0, 0.0, 0.0)


@pytest.mark.parametrize("table, where, value", [
    ({"case": "warm"}, "[environment] case", "warm"),
    ({"case": 3}, "[environment] case", "3"),
    ({"albedo": 1.2}, "[environment] albedo", "1.2"),
    ({"albedo": "high"}, "[environment] albedo", "high"),
    ({"albedo": True}, "[environment] albedo", "True"),
    ({"planet_ir": -5.0}, "[environment] planet_ir", "-5.0"),
    ({"solar_constant": float("nan")}, "[environment] solar_constant", "nan"),
    ({"olr": 230.0}, "[environment] olr", "230.0"),
    ({"case": "custom", "albedo": 0.3}, "[environment] solar_constant", "custom"),
])
def test_bad_values_name_key_and_value(table, where, value):
    with pytest.raises(ModelError) as info:
        environment_from_table(table, file="sat.toml")
    message = str(info.value)
    assert message.startswith("sat.toml: " + where)
    assert value in message
    assert "\n" not in message


def test_file_may_be_a_path():
    from pathlib import Path

    with pytest.raises(ModelError, match=r"^sat.toml: \[environment\] albedo"):
        environment_from_table({"albedo": -1}, file=Path("sat.toml"))


def test_solar_constant_in_kw_is_a_warning_with_the_fix():
    found = []
    env = environment_from_table({"solar_constant": 1.361}, file="sat.toml", problems=found)
    assert env.solar_constant == 1.361          # legal: used as given
    (p,) = found
    assert p.severity == "warning" and p.where == "[environment] solar_constant"
    assert "kW m-2" in p.message and "write 1361" in p.message
    found = []
    environment_from_table({"solar_constant": 1361.0, "planet_ir": 240.0}, problems=found)
    assert found == []


def test_solar_constant_above_the_sun_surface_is_an_error():
    # sigma T^4 at T = 5772 K is about 6.3e7 W m-2 (IAU 2015 B3 nominal temperature)
    with pytest.raises(ModelError, match=r"\[environment\] solar_constant: must be <= 1e\+08"):
        environment_from_table({"solar_constant": 2e8}, file="sat.toml")
