"""Sun position from skyfield and the JPL ephemeris shipped by skyfield-data (offline).

The planetary ephemeris is JPL DE421 (``de421.bsp``), installed as package data by
``skyfield-data``; it covers 1899-07-29 to 2053-10-09. It is opened directly from the
installed package with :class:`skyfield.jpllib.SpiceKernel`, so nothing is ever
downloaded. The time scale is skyfield's built-in one (``builtin=True``: leap seconds and
Delta T tables bundled with skyfield), so no Earth-orientation file is read either.
(``skyfield_data.get_skyfield_data_path`` is not used: it warns when the bundled
``finals2000A.all`` file, which we do not need, is older than its expiry date.)

Frames: positions are geocentric with ICRF axes, as skyfield's GCRS vectors. vfactor
treats the ICRF and GCRS axes as the same (they differ by milliarcseconds).

References
----------
Folkner, W. M., Williams, J. G., Boggs, D. H., 2009, "The Planetary and Lunar Ephemeris
DE 421", JPL IPN Progress Report 42-178.
Rhodes, B., Skyfield: High precision research-grade positions for planets and Earth
satellites, Astrophysics Source Code Library ascl:1907.024.
"""

from __future__ import annotations

import atexit
import datetime as _dt
import functools
import importlib.util
import os

import numpy as np

__all__ = [
    "EPHEMERIS_FILE",
    "timescale",
    "ephemeris",
    "ephemeris_span_utc",
    "parse_epoch",
    "format_epoch",
    "times_from_epoch",
    "sun_position",
    "sun_ra_dec",
]

EPHEMERIS_FILE = "de421.bsp"
"""Name of the JPL ephemeris file shipped by skyfield-data and used here."""


def _data_directory() -> str:
    spec = importlib.util.find_spec("skyfield_data")
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError("the skyfield-data package is not installed; it ships the "
                           "ephemeris vfactor needs (pip install skyfield-data)")
    return os.path.join(list(spec.submodule_search_locations)[0], "data")


@functools.lru_cache(maxsize=1)
def timescale():
    """The skyfield time scale built from skyfield's own bundled tables (no download).

    Returns
    -------
    skyfield.timelib.Timescale
    """
    from skyfield.api import load

    return load.timescale(builtin=True)


@functools.lru_cache(maxsize=1)
def ephemeris():
    """The JPL DE421 kernel from the installed skyfield-data package, opened once.

    Returns
    -------
    skyfield.jpllib.SpiceKernel
    """
    from skyfield.jpllib import SpiceKernel

    path = os.path.join(_data_directory(), EPHEMERIS_FILE)
    if not os.path.isfile(path):
        raise RuntimeError(f"ephemeris file {path} is missing from the skyfield-data package")
    kernel = SpiceKernel(path)
    atexit.register(kernel.close)  # no unclosed-file warning at interpreter exit
    return kernel


@functools.lru_cache(maxsize=1)
def ephemeris_span_utc() -> tuple[_dt.datetime, _dt.datetime]:
    """First and last instant (UTC, timezone-aware) that the shipped ephemeris covers.

    Returns
    -------
    (datetime, datetime)
    """
    kernel = ephemeris()
    start = max(seg.spk_segment.start_jd for seg in kernel.segments)
    end = min(seg.spk_segment.end_jd for seg in kernel.segments)
    ts = timescale()
    # one day of margin at each end: the kernel limits are in TDB, ours in UTC
    return (ts.tdb_jd(start + 1.0).utc_datetime(), ts.tdb_jd(end - 1.0).utc_datetime())


def parse_epoch(value) -> _dt.datetime:
    """Read an ISO 8601 instant (string or ``datetime``) as a timezone-aware UTC datetime.

    A value without a time zone is taken as UTC; other offsets are converted to UTC.

    Parameters
    ----------
    value : str, datetime.datetime or datetime.date
        e.g. ``"2027-03-21T00:00:00Z"``, or the datetime a TOML parser returns for an
        unquoted date-time (a bare date means midnight UTC).

    Returns
    -------
    datetime.datetime
        Timezone-aware, in UTC.

    Raises
    ------
    ValueError
        When the value is not an ISO 8601 date-time.
    """
    if isinstance(value, _dt.datetime):
        moment = value
    elif isinstance(value, _dt.date):  # a TOML date: midnight UTC
        moment = _dt.datetime(value.year, value.month, value.day)
    elif isinstance(value, str):
        text = value.strip()
        if text.endswith(("Z", "z")):
            text = text[:-1] + "+00:00"
        try:
            moment = _dt.datetime.fromisoformat(text)
        except ValueError:
            raise ValueError(f"not an ISO 8601 date-time: {value!r}") from None
    else:
        raise ValueError(f"not an ISO 8601 date-time: {value!r}")
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=_dt.timezone.utc)
    try:
        return moment.astimezone(_dt.timezone.utc)
    except OverflowError:  # e.g. 0001-01-01T00:00:00+01:00 is in year 0 in UTC
        raise ValueError(f"{value!r} is out of range in UTC (years 1 to 9999)") from None


def format_epoch(moment: _dt.datetime) -> str:
    """ISO 8601 text of a UTC instant, ``YYYY-MM-DDTHH:MM:SS.ffffffZ`` (four-digit year
    also before year 1000, where ``strftime("%Y")`` drops the zeros on some systems)."""
    m = moment.astimezone(_dt.timezone.utc)
    return f"{m.year:04d}-" + m.strftime("%m-%dT%H:%M:%S.%fZ")


def times_from_epoch(epoch_utc, time_s):
    """Skyfield times at ``time_s`` SI seconds after the epoch.

    Elapsed time is counted on the TT scale (uniform SI seconds), so a leap second inside
    the span does not shift the steps.

    Parameters
    ----------
    epoch_utc : str or datetime.datetime
        ISO 8601 UTC instant.
    time_s : (t,) float
        Seconds since the epoch [s].

    Returns
    -------
    skyfield.timelib.Time
        Array time of shape (t,).
    """
    ts = timescale()
    t0 = ts.from_datetime(parse_epoch(epoch_utc))
    seconds = np.atleast_1d(np.asarray(time_s, dtype=np.float64))
    return ts.tt_jd(t0.whole, t0.tt_fraction + seconds / 86400.0)


def _as_time(times_utc):
    from skyfield.timelib import Time

    if isinstance(times_utc, Time):
        return times_utc
    ts = timescale()
    if isinstance(times_utc, (str, _dt.datetime)):
        return ts.from_datetimes([parse_epoch(times_utc)])
    values = list(np.atleast_1d(np.asarray(times_utc, dtype=object)))
    moments = []
    for v in values:
        if isinstance(v, np.datetime64):
            v = str(np.datetime_as_string(v, unit="us"))
        moments.append(parse_epoch(v))
    return ts.from_datetimes(moments)


def _check_span(t) -> None:
    start, end = ephemeris_span_utc()
    ts = timescale()
    jd = np.atleast_1d(t.tt)
    lo, hi = ts.from_datetime(start).tt, ts.from_datetime(end).tt
    if np.any(jd < lo) or np.any(jd > hi):
        bad = t.utc_iso() if np.ndim(t.tt) == 0 else t[int(np.argmax((jd < lo) | (jd > hi)))].utc_iso()
        raise ValueError(f"time {bad} is outside the span of the shipped ephemeris "
                         f"{EPHEMERIS_FILE} ({start:%Y-%m-%d} to {end:%Y-%m-%d})")


def sun_position(times_utc) -> np.ndarray:
    """Geocentric position of the Sun, ICRF axes.

    The position is astrometric: corrected for light time (the shadow and the sunlight at
    the vehicle come from where the Sun was 8.3 min earlier), not for aberration.

    Parameters
    ----------
    times_utc : skyfield Time, or sequence of ISO 8601 strings / datetimes / datetime64
        Instants, UTC when given as calendar values.

    Returns
    -------
    (t, 3) float
        Vector from the Earth's centre to the Sun's centre [m].

    Raises
    ------
    ValueError
        When an instant is outside the ephemeris span (1899-07-29 to 2053-10-09).
    """
    t = _as_time(times_utc)
    _check_span(t)
    kernel = ephemeris()
    vector = kernel["earth"].at(t).observe(kernel["sun"]).position.m
    return np.ascontiguousarray(np.atleast_2d(np.asarray(vector, dtype=np.float64).T))


def sun_ra_dec(times_utc, frame: str = "icrf"):
    """Right ascension, declination and distance of the Sun seen from the Earth's centre.

    Parameters
    ----------
    times_utc : as for :func:`sun_position`
    frame : {"icrf", "date"}
        ``"icrf"``: astrometric, ICRF axes (the axes of every vfactor inertial vector);
        ``"date"``: apparent (aberration and light deflection included), true equator
        and equinox of date, as almanacs tabulate.

    Returns
    -------
    ra : (t,) float — right ascension [rad], 0..2 pi
    dec : (t,) float — declination [rad]
    distance : (t,) float — Earth-Sun distance [m]
    """
    t = _as_time(times_utc)
    _check_span(t)
    kernel = ephemeris()
    astrometric = kernel["earth"].at(t).observe(kernel["sun"])
    if frame == "icrf":
        ra, dec, dist = astrometric.radec()
    elif frame == "date":
        ra, dec, dist = astrometric.apparent().radec(epoch="date")
    else:
        raise ValueError(f"frame must be 'icrf' or 'date', got {frame!r}")
    return (np.atleast_1d(np.asarray(ra.radians, dtype=np.float64)),
            np.atleast_1d(np.asarray(dec.radians, dtype=np.float64)),
            np.atleast_1d(np.asarray(dist.m, dtype=np.float64)))
