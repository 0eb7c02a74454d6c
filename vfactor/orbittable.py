"""The ``[orbit]`` table of a model file -> :class:`vfactor.orbit.Orbit`.

Keys per ``type`` (``circular``, ``elements``, ``tle``; README, ``[orbit]``), each read
strictly: an unknown key (with a near miss suggested, also among the keys of the other
types), a value out of its legal range, an epoch outside the ephemeris, a perigee inside
the atmosphere or a node given twice (``raan_deg``, ``ltan``, ``beta_deg``) is one
:class:`vfactor.errors.ModelError` line naming ``[orbit] KEY``; implausible but legal
values (a step below a tenth of a second, angles of more than a turn) are warnings.
Two-line element sets are checked for their line length and checksums (the modulo-10
checksum of the format, common practice) before SGP4 sees them.
"""

from __future__ import annotations

import datetime as _dt
import math

from vfactor import ephemeris
from vfactor.errors import ModelError
from vfactor.orbit import (
    DEFAULT_STEPS_PER_ORBIT,
    HILL_RADIUS_KM,
    KARMAN_LINE_KM,
    MAX_ANGLE_DEG,
    MAX_STEP_S,
    MAX_STEPS,
    MIN_PLAUSIBLE_STEP_S,
    Orbit,
    _step_count,
    raan_from_beta,
    raan_from_ltan,
    sun_synchronous_inclination,
)
from vfactor.planet import EARTH, Planet
from vfactor.tomlread import TableReader

__all__ = ["orbit_from_table", "tle_checksum", "tle_line_problem", "TLE_LINE_LENGTH"]


_COMMON_KEYS = {"type", "epoch", "orbits", "steps_per_orbit", "step_s", "shadow"}
_KEYS = {
    "circular": _COMMON_KEYS | {"altitude_km", "inclination_deg", "raan_deg", "ltan",
                                "beta_deg", "sun_synchronous", "argument_of_latitude_deg",
                                "j2_drift"},
    "elements": _COMMON_KEYS | {"perigee_km", "apogee_km", "semi_major_axis_km",
                                "eccentricity", "inclination_deg", "raan_deg", "ltan",
                                "sun_synchronous", "arg_perigee_deg", "true_anomaly_deg",
                                "j2_drift"},
    "tle": _COMMON_KEYS | {"tle"},
}


def _parse_ltan(reader: TableReader) -> float:
    value = reader.table["ltan"]
    if isinstance(value, bool):
        raise reader.error("ltan", f"must be \"HH:MM\" or hours, got {value!r}")
    if isinstance(value, _dt.time):  # TOML local time, ltan = 10:30:00
        hours = value.hour + value.minute / 60.0 + (value.second + value.microsecond / 1e6) / 3600.0
    elif isinstance(value, (int, float)):
        hours = float(value)
    elif isinstance(value, str):
        parts = value.strip().split(":")
        try:
            if not 2 <= len(parts) <= 3:
                raise ValueError
            numbers = [float(p) for p in parts]
            if any(x < 0 for x in numbers) or numbers[1] >= 60 or (len(numbers) == 3 and numbers[2] >= 60):
                raise ValueError
        except ValueError:
            raise reader.error("ltan", f"must be \"HH:MM\" (local time of the ascending "
                               f"node), got {value!r}") from None
        hours = numbers[0] + numbers[1] / 60.0 + (numbers[2] / 3600.0 if len(numbers) == 3 else 0.0)
    else:
        raise reader.error("ltan", f"must be \"HH:MM\" or hours, got {value!r}")
    if not 0.0 <= hours < 24.0:
        raise reader.error("ltan", f"must be between 00:00 and 24:00, got {value!r}")
    return hours


def _inclination_and_node(reader, a, e, epoch, planet):
    sun_sync = reader.boolean("sun_synchronous", False)
    if sun_sync:
        if reader.has("inclination_deg"):
            raise reader.error("inclination_deg", f"is computed when sun_synchronous = true; "
                               f"remove it (got {reader.table['inclination_deg']!r})")
        try:
            inclination = sun_synchronous_inclination(a, e, planet)
        except ValueError as exc:
            raise reader.error("sun_synchronous", str(exc)) from None
    else:
        inclination = math.radians(reader.number("inclination_deg", minimum=0.0, maximum=180.0,
                                                 unit="deg"))
    if reader.has("raan_deg") and reader.has("ltan"):
        raise reader.error("ltan", f"give raan_deg or ltan, not both (ltan = "
                           f"{reader.table['ltan']!r}, raan_deg = {reader.table['raan_deg']!r})")
    if reader.has("beta_deg"):
        other = next((k for k in ("raan_deg", "ltan") if reader.has(k)), None)
        if other is not None:
            raise reader.error("beta_deg", f"give beta_deg or {other}, not both (beta_deg = "
                               f"{reader.table['beta_deg']!r}, {other} = "
                               f"{reader.table[other]!r})")
        beta = math.radians(reader.number("beta_deg", minimum=-90.0, maximum=90.0,
                                          unit="deg"))
        try:
            raan = raan_from_beta(epoch, inclination, beta)
        except ValueError as exc:
            raise reader.error("beta_deg", str(exc)) from None
    elif reader.has("ltan"):
        raan = raan_from_ltan(epoch, _parse_ltan(reader))
    else:
        raan = math.radians(_angle(reader, "raan_deg"))
    return inclination, raan


def _angle(reader, key: str, default: float = 0.0) -> float:
    """An angle in degrees: finite, of magnitude <= MAX_ANGLE_DEG; more than a turn warns."""
    return reader.quantity(key, default, "deg", -MAX_ANGLE_DEG, MAX_ANGLE_DEG,
                           plausible=(-360.0, 360.0),
                           advice_low="more than a full turn; write the angle within "
                                      "-360 .. 360 deg",
                           advice_high="more than a full turn; write the angle within "
                                       "-360 .. 360 deg")


def _altitude(reader, key: str) -> float:
    """An altitude in km above the equatorial radius (> 0, within the Hill sphere)."""
    return reader.number(key, exclusive_minimum=0.0, maximum=HILL_RADIUS_KM, unit="km",
                         why="beyond about 1.5 million km an orbit is not bound to the "
                             "Earth",
                         advice_high="were metres given where km are asked?")


def _step_count_checked(reader, period: float, orbits: float, steps_per_orbit, step_s):
    """:func:`_step_count` after refusing more than MAX_STEPS steps (counted in floating
    point first, so that a tiny step_s or a huge orbits gives this error, not an
    overflow)."""
    count = orbits * period / step_s if step_s is not None else orbits * steps_per_orbit
    if not count <= MAX_STEPS + 0.5:
        key = "step_s" if reader.has("step_s") else ("steps_per_orbit" if reader.has(
            "steps_per_orbit") else "orbits")
        shown = f"{count:.3g}" if math.isfinite(count) else "infinitely many"
        raise reader.error(key, f"asks for {shown} time steps, more than {MAX_STEPS}; use "
                           f"fewer orbits or a longer step (got {reader.table.get(key)!r})")
    n_steps, step = _step_count(period, orbits, steps_per_orbit, step_s)
    if step_s is not None and n_steps == 1 and step_s > orbits * period * (1.0 + 1e-9):
        reader.warning("step_s", f"step_s = {step_s:g} s is longer than the span of "
                       f"{orbits:g} orbit(s) ({orbits * period:.0f} s): the orbit is sampled "
                       f"at one instant only; give a step of a fraction of the period")
    return n_steps, step


def _check_ephemeris_span(reader, epoch: _dt.datetime, span_s: float):
    """The epoch and the end of the span must lie inside the shipped ephemeris (compared
    in seconds, so that no date past year 9999 is ever formed)."""
    start, end = ephemeris.ephemeris_span_utc()
    after_start = (epoch - start).total_seconds()
    before_end = (end - epoch).total_seconds()
    if after_start < 0.0 or before_end < 0.0:
        raise reader.error("epoch", f"the epoch {ephemeris.format_epoch(epoch)} lies outside "
                           f"the shipped ephemeris {ephemeris.EPHEMERIS_FILE} "
                           f"({start:%Y-%m-%d} to {end:%Y-%m-%d})")
    if span_s > before_end:
        room = (_dt.datetime.max.replace(tzinfo=_dt.timezone.utc) - epoch).total_seconds()
        last = (ephemeris.format_epoch(epoch + _dt.timedelta(seconds=span_s))
                if span_s < room else f"{span_s / (365.25 * 86400.0):.3g} years later")
        raise reader.error("epoch", f"the span {ephemeris.format_epoch(epoch)} to {last} "
                           f"leaves the shipped ephemeris {ephemeris.EPHEMERIS_FILE} "
                           f"({start:%Y-%m-%d} to {end:%Y-%m-%d})")


def _check_perigee(reader, a: float, e: float, planet: Planet, key: str) -> None:
    """Warn when the perigee lies below the Kármán line (inside the atmosphere)."""
    perigee_km = (a * (1.0 - e) - planet.radius) / 1e3
    if perigee_km < KARMAN_LINE_KM:
        value = reader.table.get(key)
        shown = f" (from {key} = {value!r})" if key != "tle" and value is not None else ""
        reader.warning(key, f"perigee altitude {perigee_km:.3g} km{shown} is below the "
                       f"Karman line ({KARMAN_LINE_KM:g} km): the vehicle would fly in the "
                       f"atmosphere; altitudes are in km above the equatorial radius "
                       f"(550 km is a typical low Earth orbit)")


def orbit_from_table(table: dict, file: str | None = None, planet: Planet = EARTH,
                     problems: list | None = None) -> Orbit:
    """Build an :class:`Orbit` from the ``[orbit]`` table of a model file.

    Parameters
    ----------
    table : dict
        The parsed ``[orbit]`` table. Keys (ARCHITECTURE §4 and issue 5):

        - ``type`` = "circular" | "elements" | "tle" (default: "tle" when ``tle`` is
          given, "circular" when ``altitude_km`` is, else "elements");
        - ``epoch`` ISO 8601 UTC (string or TOML date-time; required except for "tle",
          whose default is the element-set epoch);
        - ``orbits`` (default 1), and ``steps_per_orbit`` (default 72) or ``step_s``;
        - ``shadow`` = "conical" (default, with penumbra) | "cylindrical";
        - circular: ``altitude_km``, ``inclination_deg`` or ``sun_synchronous = true``,
          ``raan_deg`` (default 0) or ``ltan = "HH:MM"`` or ``beta_deg`` (the node that
          gives this beta angle at the epoch, :func:`raan_from_beta`),
          ``argument_of_latitude_deg``
          (position at epoch, from the ascending node; default 0), ``j2_drift``;
        - elements: ``perigee_km`` and ``apogee_km`` (altitudes above the equatorial
          radius) or ``semi_major_axis_km`` and ``eccentricity``; ``inclination_deg`` or
          ``sun_synchronous``; ``raan_deg`` or ``ltan``; ``arg_perigee_deg``,
          ``true_anomaly_deg`` (default 0), ``j2_drift``;
        - tle: ``tle`` = the two element lines (a name line before them is allowed).
    file : str, optional
        Model file named in error messages.
    planet : Planet
        Central body (Earth by default; "tle" requires Earth).
    problems : list, optional
        Receives the warnings (:class:`vfactor.errors.Problem`) about legal but
        implausible values: a perigee below the Karman line, a step longer than the span,
        an angle of more than a turn.

    Returns
    -------
    Orbit

    Raises
    ------
    vfactor.errors.ModelError
        Unknown key, wrong type, value out of range, orbit inside the planet, span outside
        the ephemeris; the message names the file, ``[orbit] key`` and the bad value.
    """
    reader = TableReader(table, file, "[orbit]", problems)
    if reader.has("type"):
        kind = reader.string("type", choices=("circular", "elements", "tle"))
    elif reader.has("tle"):
        kind = "tle"
    elif reader.has("altitude_km"):
        kind = "circular"
    else:
        kind = "elements"
    reader.check_keys(_KEYS[kind], f"for type = {kind!r}",
                      {k: v for k, v in _KEYS.items() if k != kind})
    if not reader.has("type") and kind == "elements" and not any(
            reader.has(k) for k in ("perigee_km", "apogee_km", "semi_major_axis_km",
                                    "eccentricity")):
        raise reader.error(None, "no orbit size given: write altitude_km (a circular orbit), "
                           "perigee_km and apogee_km or semi_major_axis_km and eccentricity "
                           "(type = \"elements\"), or tle")

    orbits = reader.number("orbits", 1.0, exclusive_minimum=0.0, maximum=float(MAX_STEPS),
                           why=f"each orbit takes at least one of the {MAX_STEPS} steps")
    if reader.has("steps_per_orbit") and reader.has("step_s"):
        raise reader.error("step_s", f"give steps_per_orbit or step_s, not both (step_s = "
                           f"{reader.table['step_s']!r})")
    steps_per_orbit = reader.integer("steps_per_orbit", DEFAULT_STEPS_PER_ORBIT, minimum=1,
                                     maximum=MAX_STEPS)
    step_s = reader.number("step_s", None, exclusive_minimum=0.0, maximum=MAX_STEP_S,
                           unit="s", plausible=(MIN_PLAUSIBLE_STEP_S, None),
                           why="longer than the span of the shipped ephemeris",
                           advice_low="step_s is in seconds; was a value in minutes or "
                                      "hours meant?")
    shadow = reader.string("shadow", "conical", choices=("conical", "cylindrical"))

    if kind == "tle":
        return _tle_orbit(reader, orbits, steps_per_orbit, step_s, shadow, planet)

    try:
        epoch = ephemeris.parse_epoch(reader.table["epoch"]) if reader.has("epoch") else None
    except ValueError as exc:
        raise reader.error("epoch", f"must be an ISO 8601 UTC date-time such as "
                           f"\"2027-03-21T00:00:00Z\", got {reader.table['epoch']!r}"
                           f"{_epoch_reason(exc)}") from None
    if epoch is None:
        raise reader.error("epoch", "is required (ISO 8601 UTC, e.g. \"2027-03-21T00:00:00Z\")")
    # provisional span check with the epoch itself, before RAAN-from-LTAN needs the ephemeris
    _check_ephemeris_span(reader, epoch, 0.0)

    if kind == "circular":
        altitude = _altitude(reader, "altitude_km") * 1e3
        a, e = planet.radius + altitude, 0.0
        size_key = "altitude_km"
        inclination, raan = _inclination_and_node(reader, a, e, epoch, planet)
        arg_perigee = 0.0
        mean_anomaly = math.radians(_angle(reader, "argument_of_latitude_deg"))
    else:
        has_pa = reader.has("perigee_km") or reader.has("apogee_km")
        has_ae = reader.has("semi_major_axis_km") or reader.has("eccentricity")
        if has_pa and has_ae:
            raise reader.error("perigee_km", "give perigee_km/apogee_km or "
                               "semi_major_axis_km/eccentricity, not both")
        if has_pa:
            size_key = "perigee_km"
            perigee = _altitude(reader, "perigee_km") * 1e3 + planet.radius
            apogee = _altitude(reader, "apogee_km") * 1e3 + planet.radius
            if apogee < perigee:
                raise reader.error("apogee_km", f"must not be below perigee_km "
                                   f"({reader.table['perigee_km']!r}), got "
                                   f"{reader.table['apogee_km']!r}")
            a = 0.5 * (perigee + apogee)
            e = (apogee - perigee) / (apogee + perigee)
        else:
            size_key = "semi_major_axis_km"
            a = reader.number("semi_major_axis_km", exclusive_minimum=0.0,
                              maximum=HILL_RADIUS_KM + planet.radius / 1e3, unit="km",
                              why="beyond about 1.5 million km an orbit is not bound to "
                                  "the Earth",
                              advice_high="were metres given where km are asked?") * 1e3
            e = reader.number("eccentricity", minimum=0.0)
            if e >= 1.0:
                raise reader.error("eccentricity", f"must be below 1 (closed orbits only), "
                                   f"got {reader.table['eccentricity']!r}")
            if a * (1.0 - e) <= planet.radius:
                raise reader.error("semi_major_axis_km", f"perigee radius "
                                   f"{a * (1.0 - e) / 1e3:.1f} km is inside the planet "
                                   f"(radius {planet.radius / 1e3:.1f} km); got "
                                   f"{reader.table['semi_major_axis_km']!r}")
        inclination, raan = _inclination_and_node(reader, a, e, epoch, planet)
        arg_perigee = math.radians(_angle(reader, "arg_perigee_deg"))
        nu = math.radians(_angle(reader, "true_anomaly_deg"))
        big_e = 2.0 * math.atan2(math.sqrt(1.0 - e) * math.sin(0.5 * nu),
                                 math.sqrt(1.0 + e) * math.cos(0.5 * nu))
        mean_anomaly = big_e - e * math.sin(big_e)
    j2_drift = reader.boolean("j2_drift", False)
    _check_perigee(reader, a, e, planet, size_key)
    period = 2.0 * math.pi * math.sqrt(a ** 3 / planet.gm)
    n_steps, step = _step_count_checked(reader, period, orbits, steps_per_orbit, step_s)
    _check_ephemeris_span(reader, epoch, n_steps * step)
    return Orbit(kind=kind, epoch_utc=ephemeris.format_epoch(epoch), semi_major_axis=a,
                 eccentricity=e, inclination=inclination, raan=raan, arg_perigee=arg_perigee,
                 mean_anomaly=mean_anomaly, n_steps=n_steps, step=step, j2_drift=j2_drift,
                 planet=planet, source_file=file, shadow_model=shadow)


TLE_LINE_LENGTH = 69
"""Characters of each line of a two-line element set, the checksum digit the last
(CelesTrak, "NORAD Two-Line Element Set Format"; Vallado, Crawford, Hujsak & Kelso 2006,
"Revisiting Spacetrack Report #3", AIAA 2006-6753, appendix)."""


def tle_checksum(line: str) -> int:
    """The modulo-10 checksum of a two-line element line.

    Parameters
    ----------
    line : str — one element line (the first 68 characters are summed)

    Returns
    -------
    int — 0..9, the digit column 69 must hold

    Notes
    -----
    The sum of all digits of columns 1-68, each minus sign counting 1 and every other
    character 0, modulo 10 (CelesTrak, "NORAD Two-Line Element Set Format"; Vallado et al.
    2006, "Revisiting Spacetrack Report #3").
    """
    return sum(int(c) if c.isdigit() else (1 if c == "-" else 0) for c in line[:68]) % 10


def tle_line_problem(line: str) -> str:
    """What is wrong with the length or checksum of an element line ('' when nothing)."""
    if len(line) != TLE_LINE_LENGTH:
        return (f"has {len(line)} characters; the format has {TLE_LINE_LENGTH}, the last "
                f"being the checksum")
    expected = tle_checksum(line)
    if not line[-1].isdigit() or int(line[-1]) != expected:
        return (f"has the checksum {line[-1]!r} but its columns 1-68 give {expected} (the "
                f"modulo-10 sum of the digits, '-' counting 1): the line is damaged or "
                f"was edited")
    return ""


def _epoch_reason(exc: Exception) -> str:
    text = str(exc)
    return f" ({text})" if "out of range" in text else ""


def _tle_orbit(reader, orbits, steps_per_orbit, step_s, shadow, planet):
    from skyfield.api import EarthSatellite

    if planet.name != "Earth":
        raise reader.error("tle", f"two-line element sets are for Earth orbits only, the "
                           f"planet is {planet.name!r}")
    text = reader.string("tle")
    lines = [line.strip() for line in text.strip().splitlines() if line.strip()]
    if len(lines) == 3:
        lines = lines[1:]
    if len(lines) != 2 or not lines[0].startswith("1 ") or not lines[1].startswith("2 "):
        raise reader.error("tle", f"must hold two element lines starting with '1 ' and "
                           f"'2 ' (optionally after a name line), got {text!r}")
    for number, line in enumerate(lines, start=1):
        problem = tle_line_problem(line)
        if problem:
            raise reader.error("tle", f"element line {number} {problem}: {line!r}")
    try:
        satellite = EarthSatellite(lines[0], lines[1], "vehicle", ephemeris.timescale())
    except (ValueError, IndexError) as exc:
        raise reader.error("tle", f"is not a valid two-line element set ({exc}): "
                           f"{text!r}") from None
    model = satellite.model
    if model.error != 0 or not model.no_kozai > 0.0:
        raise reader.error("tle", f"is not a valid two-line element set (SGP4 error "
                           f"{model.error}): {text!r}")
    if reader.has("epoch"):
        try:
            epoch = ephemeris.parse_epoch(reader.table["epoch"])
        except ValueError as exc:
            raise reader.error("epoch", f"must be an ISO 8601 UTC date-time, got "
                               f"{reader.table['epoch']!r}{_epoch_reason(exc)}") from None
    else:
        epoch = satellite.epoch.utc_datetime()
    n = model.no_kozai / 60.0
    period = 2.0 * math.pi / n
    n_steps, step = _step_count_checked(reader, period, orbits, steps_per_orbit, step_s)
    _check_ephemeris_span(reader, epoch, n_steps * step)
    a = (planet.gm / n ** 2) ** (1.0 / 3.0)
    _check_perigee(reader, a, float(model.ecco), planet, "tle")
    orbit = Orbit(kind="tle", epoch_utc=ephemeris.format_epoch(epoch), semi_major_axis=a,
                  eccentricity=float(model.ecco), inclination=float(model.inclo),
                  raan=float(model.nodeo), arg_perigee=float(model.argpo),
                  mean_anomaly=float(model.mo), n_steps=n_steps, step=step, j2_drift=False,
                  planet=planet, tle_lines=(lines[0], lines[1]), source_file=reader.file,
                  shadow_model=shadow)
    orbit.__dict__["_satellite"] = satellite
    return orbit
