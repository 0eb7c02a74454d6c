"""Physical constants and reference values, each with its unit and source.

Values that come from memory rather than from a document at hand say so.
Sections are kept per concept; add new constants to the section they belong to.
"""

from __future__ import annotations

# --- Fundamental -------------------------------------------------------------------------
STEFAN_BOLTZMANN = 5.670374419e-8
"""Stefan-Boltzmann constant sigma [W m-2 K-4]; CODATA 2018 (exact in the 2019 SI)."""

ASTRONOMICAL_UNIT_M = 149_597_870_700.0
"""Astronomical unit [m]; IAU 2012 Resolution B2 (exact by definition)."""

SPEED_OF_LIGHT_M_S = 299_792_458.0
"""Speed of light in vacuum [m s-1]; exact in the SI."""

DEEP_SPACE_TEMPERATURE_K = 2.7
"""Effective sink temperature of deep space [K]; common practice (cosmic background ~2.725 K,
Fixsen 2009, ApJ 707, 916)."""

# --- Sun ------------------------------------------------------------------------------------
SOLAR_CONSTANT_1AU = 1361.0
"""Total solar irradiance at 1 AU [W m-2]; Kopp & Lean 2011, Geophys. Res. Lett. 38, L01706."""

SUN_RADIUS_M = 695_700_000.0
"""Nominal solar radius [m]; IAU 2015 Resolution B3."""

# --- Earth ----------------------------------------------------------------------------------
EARTH_EQUATORIAL_RADIUS_M = 6_378_137.0
"""Earth equatorial radius [m]; WGS 84 (NIMA TR8350.2, 3rd ed., Table 3.1)."""

EARTH_GM_M3_S2 = 3.986004418e14
"""Earth gravitational parameter GM [m3 s-2]; WGS 84 (NIMA TR8350.2, Table 3.1)."""

EARTH_J2 = 1.08262668e-3
"""Earth second zonal harmonic J2 [1]; EGM96 / WGS 84 value (from memory: 1.082 626 68e-3)."""

EARTH_ROTATION_RATE_RAD_S = 7.292115e-5
"""Earth rotation rate [rad s-1]; WGS 84 (NIMA TR8350.2, Table 3.1)."""

TROPICAL_YEAR_S = 365.24219 * 86400.0
"""Mean tropical year [s]; common practice (365.242 19 d). Used for sun-synchronous precession."""

# --- Environment design cases ---------------------------------------------------------------
# Used by vfactor.environment. The hot and cold solar constants are derived there from
# SOLAR_CONSTANT_1AU and EARTH_ORBIT_ECCENTRICITY (inverse-square law at perihelion and
# aphelion), not stored as numbers.
EARTH_ORBIT_ECCENTRICITY = 0.0167086
"""Eccentricity of the Earth's orbit about the Sun [1], J2000 mean value; Simon et al. 1994,
A&A 282, 663, Table 6 (from memory). Perihelion 1 - e = 0.98329 au, aphelion 1 + e = 1.01671 au."""

ALBEDO_NOMINAL = 0.30
"""Earth orbit-averaged Bond albedo, nominal design value [1]; Gilmore (ed.), Spacecraft
Thermal Control Handbook, Vol. I, 2nd ed. (2002), ch. 2, "0.30 +/- 0.05" (from memory)."""

ALBEDO_HOT = 0.35
"""Earth albedo, hot design case [1]; Gilmore 2002, ch. 2, upper end of 0.30 +/- 0.05
(from memory)."""

ALBEDO_COLD = 0.25
"""Earth albedo, cold design case [1]; Gilmore 2002, ch. 2, lower end of 0.30 +/- 0.05
(from memory)."""

PLANET_IR_NOMINAL = 237.0
"""Earth outgoing long-wave radiation at the top of the atmosphere, nominal [W m-2];
Gilmore 2002, ch. 2, "237 +/- 21 W/m2" (from memory); consistent with the ERBE global
annual mean of about 237-240 W m-2 (common practice)."""

PLANET_IR_HOT = 258.0
"""Earth outgoing long-wave radiation, hot design case [W m-2]; Gilmore 2002, ch. 2,
237 + 21 (from memory)."""

PLANET_IR_COLD = 216.0
"""Earth outgoing long-wave radiation, cold design case [W m-2]; Gilmore 2002, ch. 2,
237 - 21 (from memory)."""
