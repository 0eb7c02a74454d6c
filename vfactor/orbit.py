"""Orbits: the ``[orbit]`` table, Kepler propagation, SGP4 for two-line element sets.

Three kinds of orbit are read from a model file (``type = "circular" | "elements" |
"tle"``); the first two are propagated here by two-body motion (Kepler's equation solved by
Newton iteration), optionally with the secular drift that the planet's J2 term gives the
node, the perigee and the mean anomaly; two-line element sets are propagated by skyfield's
SGP4. Positions and velocities are planet-centred with ICRF axes (skyfield's GCRS; the two
are treated as the same axes). For two-body orbits the elements are referred to the ICRF
equator and equinox, and the J2 drift turns the node about the ICRF pole; the true pole of
date differs from it by precession (about 0.15 deg in declination and 0.4 deg in right
ascension by 2027), which is far below what matters to orbital heat loads.

References
----------
Vallado, D. A., Fundamentals of Astrodynamics and Applications, 4th ed., Microcosm Press,
2013: Kepler's equation and its Newton solution (ch. 2), classical elements to position
and velocity (ch. 2, "COE2RV"), secular J2 rates of the node, perigee and mean anomaly
(ch. 9, eqs. 9-41 to 9-43), and the sun-synchronous condition (ch. 11). Algorithm and
equation numbers are from memory.
Hoots, F. R., Roehrich, R. L., 1980, Spacetrack Report No. 3 (SGP4), as implemented by
the ``sgp4`` package used through skyfield's ``EarthSatellite``.
"""

from __future__ import annotations

import datetime as _dt
import functools
import math
from dataclasses import dataclass

import numpy as np

from vfactor import ephemeris
from vfactor.constants import TROPICAL_YEAR_S
from vfactor.errors import ModelError
from vfactor.planet import EARTH, Planet
from vfactor.tomlread import TableReader

__all__ = [
    "Orbit",
    "orbit_from_table",
    "circular_orbit",
    "sun_synchronous_inclination",
    "j2_secular_rates",
    "solve_kepler",
    "elements_to_state",
    "raan_from_ltan",
    "raan_from_beta",
    "beta_range",
    "local_time_of_node",
]

SUN_SYNCHRONOUS_NODE_RATE = 2.0 * math.pi / TROPICAL_YEAR_S
"""Node rate of a sun-synchronous orbit [rad s-1]: one turn per tropical year, the mean
Sun's rate in right ascension (common practice)."""

DEFAULT_STEPS_PER_ORBIT = 72
"""Steps per orbit when neither ``steps_per_orbit`` nor ``step_s`` is given (5 deg)."""

MAX_STEPS = 2_000_000
"""Most time steps an ``[orbit]`` table may ask for (the per-step arrays of the trajectory
and of the heat loads must fit in memory)."""

KARMAN_LINE_KM = 100.0
"""Altitude [km] below which ``check`` warns that the orbit is inside the atmosphere: the
Kármán line, the conventional edge of space (FAI; common practice). No orbit lasts there."""

HILL_RADIUS_KM = 1.5e6
"""Largest altitude, perigee or apogee [km] an ``[orbit]`` table may give: about the radius
of the Earth's Hill sphere (a ((m/(3M))^(1/3)) with a = 1 au: 1.5 million km, from memory),
beyond which an orbit is not bound to the Earth. Larger values are slips (metres as km)."""

MAX_ANGLE_DEG = 1e6
"""Largest magnitude of an angle [deg] read from ``[orbit]``/``[attitude]``: beyond it the
sine and cosine of a float64 angle lose digits; more than a turn draws a warning."""

MAX_STEP_S = 1e10
"""Longest ``step_s`` [s] (about 317 years, more than the whole span of the shipped
ephemeris)."""

MIN_PLAUSIBLE_STEP_S = 0.1
"""``step_s`` [s] below which ``check`` warns (far below any thermal time constant; a value
meant in minutes or hours is the usual cause). Our own threshold."""


# --------------------------------------------------------------------------------------
# physics
# --------------------------------------------------------------------------------------
def solve_kepler(mean_anomaly, eccentricity: float, tolerance: float = 1e-14,
                 max_iterations: int = 50) -> np.ndarray:
    """Eccentric anomaly E from the mean anomaly M by Newton iteration on Kepler's equation.

    Parameters
    ----------
    mean_anomaly : (t,) float — mean anomaly M [rad]
    eccentricity : float — e, 0 <= e < 1 [1]
    tolerance : float — stop when every Newton correction is below this [rad]
    max_iterations : int

    Returns
    -------
    (t,) float — eccentric anomaly E [rad], in the same turn as M

    Notes
    -----
    M = E - e sin E; Newton: E <- E - (E - e sin E - M) / (1 - e cos E), started at
    E = M + e sin M (E = pi for e > 0.8). Vallado (2013), ch. 2 ("KepEqtnE").
    """
    m = np.asarray(mean_anomaly, dtype=np.float64)
    turns = np.floor((m + math.pi) / (2.0 * math.pi))
    m_wrapped = m - 2.0 * math.pi * turns  # in [-pi, pi)
    e = float(eccentricity)
    if e > 0.8:
        anomaly = np.full_like(m_wrapped, math.pi) * np.where(m_wrapped < 0.0, -1.0, 1.0)
    else:
        anomaly = m_wrapped + e * np.sin(m_wrapped)
    for _ in range(max_iterations):
        step = (anomaly - e * np.sin(anomaly) - m_wrapped) / (1.0 - e * np.cos(anomaly))
        anomaly = anomaly - step
        if np.all(np.abs(step) < tolerance):
            break
    else:  # pragma: no cover - Newton converges for every e < 1 from these starts
        raise RuntimeError(f"Kepler's equation did not converge for e = {e}")
    return anomaly + 2.0 * math.pi * turns


def _perifocal_to_inertial(inclination, raan, arg_perigee):
    """(t,3,3) or (3,3) matrix with columns P, Q, W (perigee, 90 deg ahead, orbit normal)."""
    ci, si = np.cos(inclination), np.sin(inclination)
    co, so = np.cos(raan), np.sin(raan)
    cw, sw = np.cos(arg_perigee), np.sin(arg_perigee)
    p = np.stack([co * cw - so * sw * ci, so * cw + co * sw * ci, sw * si], axis=-1)
    q = np.stack([-co * sw - so * cw * ci, -so * sw + co * cw * ci, cw * si], axis=-1)
    w = np.stack([so * si * np.ones_like(cw), -co * si * np.ones_like(cw),
                  ci * np.ones_like(cw)], axis=-1)
    return np.stack([p, q, w], axis=-1)


def elements_to_state(semi_major_axis, eccentricity, inclination, raan, arg_perigee,
                      mean_anomaly, gm):
    """Position and velocity from classical elements (two-body).

    Parameters
    ----------
    semi_major_axis : float — a [m]
    eccentricity : float — e [1]
    inclination, raan : float or (t,) float — i, node right ascension Omega [rad]
    arg_perigee : float or (t,) float — omega [rad]
    mean_anomaly : (t,) float — M [rad]
    gm : float — gravitational parameter [m3 s-2]

    Returns
    -------
    position : (t, 3) float [m]
    velocity : (t, 3) float [m s-1]

    Notes
    -----
    r = a (cos E - e) P + a sqrt(1-e^2) sin E Q,
    v = sqrt(gm a)/|r| (-sin E P + sqrt(1-e^2) cos E Q); Vallado (2013), ch. 2
    (perifocal form of "COE2RV").
    """
    m = np.atleast_1d(np.asarray(mean_anomaly, dtype=np.float64))
    a, e = float(semi_major_axis), float(eccentricity)
    big_e = solve_kepler(m, e)
    root = math.sqrt(1.0 - e * e)
    cos_e, sin_e = np.cos(big_e), np.sin(big_e)
    x, y = a * (cos_e - e), a * root * sin_e
    radius = a * (1.0 - e * cos_e)
    speed_factor = math.sqrt(gm * a) / radius
    vx, vy = -speed_factor * sin_e, speed_factor * root * cos_e
    rot = _perifocal_to_inertial(np.broadcast_to(inclination, m.shape),
                                 np.broadcast_to(raan, m.shape),
                                 np.broadcast_to(arg_perigee, m.shape))
    position = rot[:, :, 0] * x[:, None] + rot[:, :, 1] * y[:, None]
    velocity = rot[:, :, 0] * vx[:, None] + rot[:, :, 1] * vy[:, None]
    return np.ascontiguousarray(position), np.ascontiguousarray(velocity)


def j2_secular_rates(semi_major_axis: float, eccentricity: float, inclination: float,
                     planet: Planet = EARTH):
    """Secular rates of the node, the perigee and the mean anomaly under J2.

    Parameters
    ----------
    semi_major_axis : float — a [m]
    eccentricity : float — e [1]
    inclination : float — i [rad]
    planet : Planet

    Returns
    -------
    raan_rate : float — dOmega/dt [rad s-1]
    arg_perigee_rate : float — domega/dt [rad s-1]
    mean_anomaly_rate : float — dM/dt, the Keplerian n included [rad s-1]

    Notes
    -----
    With n = sqrt(GM/a^3) and p = a (1 - e^2):
    dOmega/dt = -3/2 n J2 (R/p)^2 cos i,
    domega/dt =  3/4 n J2 (R/p)^2 (4 - 5 sin^2 i),
    dM/dt = n [1 + 3/4 J2 (R/p)^2 sqrt(1-e^2) (2 - 3 sin^2 i)].
    Vallado (2013), ch. 9, eqs. 9-41 to 9-43 (equation numbers from memory).
    """
    n = math.sqrt(planet.gm / semi_major_axis ** 3)
    p = semi_major_axis * (1.0 - eccentricity ** 2)
    k = planet.j2 * (planet.radius / p) ** 2
    s2 = math.sin(inclination) ** 2
    raan_rate = -1.5 * n * k * math.cos(inclination)
    arg_perigee_rate = 0.75 * n * k * (4.0 - 5.0 * s2)
    mean_anomaly_rate = n * (1.0 + 0.75 * k * math.sqrt(1.0 - eccentricity ** 2) * (2.0 - 3.0 * s2))
    return raan_rate, arg_perigee_rate, mean_anomaly_rate


def sun_synchronous_inclination(semi_major_axis: float, eccentricity: float = 0.0,
                                planet: Planet = EARTH) -> float:
    """Inclination at which J2 turns the node at the mean Sun's rate (one turn a year).

    Parameters
    ----------
    semi_major_axis : float — a [m]
    eccentricity : float — e [1]
    planet : Planet

    Returns
    -------
    float — inclination [rad], retrograde (> pi/2)

    Raises
    ------
    ValueError
        Above the altitude where no inclination gives the rate (about 5980 km for Earth).

    Notes
    -----
    Setting dOmega/dt = -3/2 n J2 (R/p)^2 cos i equal to 2 pi / (tropical year) gives
    cos i = -(2/3) (dOmega/dt) p^2 / (n J2 R^2), i.e. for a circular orbit
    cos i = -(2/3) (dOmega/dt) a^(7/2) / (J2 R^2 sqrt(GM)).
    Vallado (2013), ch. 9, eq. 9-41 for the node rate, ch. 11 for the sun-synchronous
    condition; also Wertz & Larson, Space Mission Analysis and Design, 3rd ed., 1999, §6.
    """
    n = math.sqrt(planet.gm / semi_major_axis ** 3)
    p = semi_major_axis * (1.0 - eccentricity ** 2)
    cos_i = -(2.0 / 3.0) * SUN_SYNCHRONOUS_NODE_RATE * p ** 2 / (n * planet.j2 * planet.radius ** 2)
    if cos_i < -1.0:
        raise ValueError(f"no sun-synchronous inclination at semi-major axis "
                         f"{semi_major_axis / 1e3:.1f} km (cos i = {cos_i:.3f})")
    return math.acos(cos_i)


def _ut1_hours(t) -> np.ndarray:
    return np.mod(np.asarray(t.ut1) - 0.5, 1.0) * 24.0


def _node_right_ascension_of_date(raan, t) -> np.ndarray:
    rot = np.asarray(t.M)  # ICRS -> true equator and equinox of date
    raan = np.asarray(raan, dtype=np.float64)
    if rot.ndim == 2:
        node = np.stack([np.cos(raan), np.sin(raan), np.zeros_like(raan)], axis=0)
        v = np.einsum("ij,j...->i...", rot, node)
    else:
        raan = np.broadcast_to(raan.ravel() if raan.size == 1 else raan, (rot.shape[2],))
        node = np.stack([np.cos(raan), np.sin(raan), np.zeros_like(raan)], axis=0)
        v = np.einsum("ijt,jt->it", rot, node)
    return np.arctan2(v[1], v[0])


def local_time_of_node(raan, t) -> np.ndarray:
    """Local mean solar time at the ascending node [h], 0..24.

    Parameters
    ----------
    raan : float or (t,) float — right ascension of the ascending node, ICRF [rad]
    t : skyfield Time (scalar or (t,))

    Returns
    -------
    (t,) float — hours

    Notes
    -----
    The node is carried to the true equator and equinox of date (skyfield ``Time.M``), its
    geographic longitude is lambda = alpha_date - GAST, and the local mean solar time is
    UT1 + lambda / (15 deg/h) (e.g. Meeus, Astronomical Algorithms, 2nd ed., 1998, ch. 12
    for sidereal time; the mean-solar-time convention of the local time of the ascending
    node is common practice).
    """
    alpha = _node_right_ascension_of_date(raan, t)
    longitude = alpha - np.asarray(t.gast) * (math.pi / 12.0)
    return np.atleast_1d(np.mod(_ut1_hours(t) + longitude * (12.0 / math.pi), 24.0))


def raan_from_ltan(epoch_utc, ltan_hours: float) -> float:
    """ICRF right ascension of the ascending node that has the given local time at epoch.

    Parameters
    ----------
    epoch_utc : str or datetime — ISO 8601 UTC
    ltan_hours : float — local mean solar time of the ascending node [h]

    Returns
    -------
    float — RAAN [rad], 0..2 pi

    Notes
    -----
    Inverse of :func:`local_time_of_node`, solved by fixed-point iteration (the of-date
    and ICRF node right ascensions differ by the precession, under half a degree).
    """
    t = ephemeris.times_from_epoch(epoch_utc, [0.0])
    target = ((ltan_hours - _ut1_hours(t)[0]) * (math.pi / 12.0)
              + float(np.asarray(t.gast).ravel()[0]) * (math.pi / 12.0))
    raan = target
    for _ in range(8):
        alpha = float(_node_right_ascension_of_date(np.array([raan]), t).ravel()[0])
        raan += math.remainder(target - alpha, 2.0 * math.pi)
    return math.fmod(raan + 4.0 * math.pi, 2.0 * math.pi)


def _sun_direction_at(epoch_utc) -> np.ndarray:
    """(3,) unit vector from the planet centre to the Sun at the epoch, ICRF axes: the
    direction :func:`vfactor.trajectory.compute_trajectory` takes the beta angle from."""
    sun = ephemeris.sun_position(ephemeris.times_from_epoch(epoch_utc, [0.0]))[0]
    return sun / np.linalg.norm(sun)


def beta_range(epoch_utc, inclination: float) -> tuple:
    """Smallest and largest beta angle an orbit of this inclination can have at the epoch.

    Parameters
    ----------
    epoch_utc : str or datetime — ISO 8601 UTC
    inclination : float — i, ICRF equator [rad]

    Returns
    -------
    (low, high) : float — beta angles [rad], over every right ascension of the node

    Notes
    -----
    From sin beta = cos i sin delta + sin i cos delta sin(Omega - alpha) (see
    :func:`raan_from_beta`), linear in sin(Omega - alpha) in [-1, 1] with a coefficient
    sin i cos delta >= 0: sin(delta - i) <= sin beta <= sin(delta + i).
    """
    s = _sun_direction_at(epoch_utc)
    delta = math.asin(max(-1.0, min(1.0, float(s[2]))))
    return math.asin(math.sin(delta - inclination)), math.asin(math.sin(delta + inclination))


def raan_from_beta(epoch_utc, inclination: float, beta: float) -> float:
    """ICRF right ascension of the ascending node that gives the beta angle ``beta`` at epoch.

    Parameters
    ----------
    epoch_utc : str or datetime — ISO 8601 UTC
    inclination : float — i, ICRF equator [rad], 0..pi
    beta : float — beta angle wanted at the epoch [rad]: the angle between the geocentric
        Sun direction and the orbit plane, positive toward the orbit normal h = r x v

    Returns
    -------
    float — RAAN [rad], 0..2 pi. Of the two nodes that give ``beta``, the one on the
    sunlit side of the planet: |Omega - alpha| <= 90 deg, i.e. a local apparent solar time
    of the ascending node between 06:00 and 18:00. The other node is at the local time
    mirrored about 06:00 (at an equinox, ascending nodes at 10:30 and 01:30 give the same
    beta); give ``raan_deg`` or ``ltan`` for it.

    Raises
    ------
    ValueError
        ``beta`` outside :func:`beta_range` for this inclination at the epoch (the message
        gives the range in degrees).

    Notes
    -----
    The orbit normal is h = (sin i sin Omega, -sin i cos Omega, cos i) (third column of
    the perifocal-to-inertial rotation, Vallado 2013, ch. 2) and the Sun direction
    s = (cos delta cos alpha, cos delta sin alpha, sin delta), so
    sin beta = h . s = cos i sin delta + sin i cos delta sin(Omega - alpha)
    (the beta angle as asin(h . s): Gilmore (ed.), Spacecraft Thermal Control Handbook,
    Vol. I, 2nd ed., 2002, ch. 2, who writes it with ecliptic angles; this equatorial form
    is derived here from h . s). Hence Omega = alpha + asin(x),
    x = (sin beta - cos i sin delta) / (sin i cos delta). For i = 0 or pi every node gives
    beta = +-delta and the node is taken at alpha.
    """
    s = _sun_direction_at(epoch_utc)
    delta = math.asin(max(-1.0, min(1.0, float(s[2]))))
    alpha = math.atan2(float(s[1]), float(s[0]))
    low, high = beta_range(epoch_utc, inclination)
    slack = 1e-12   # rad: rounding of the range ends
    if not low - slack <= beta <= high + slack:
        reachable = (f"only {math.degrees(low):.3f} deg is" if high - low < 1e-9 else
                     f"the reachable range is {math.degrees(low):.3f} .. "
                     f"{math.degrees(high):.3f} deg")
        raise ValueError(f"a beta angle of {math.degrees(beta):g} deg cannot be reached "
                         f"with an inclination of {math.degrees(inclination):.4g} deg at this "
                         f"epoch (Sun declination {math.degrees(delta):.3f} deg): "
                         f"{reachable}")
    coefficient = math.sin(inclination) * math.cos(delta)
    if coefficient < 1e-15:
        x = 0.0
    else:
        x = (math.sin(beta) - math.cos(inclination) * math.sin(delta)) / coefficient
    raan = alpha + math.asin(max(-1.0, min(1.0, x)))
    return math.fmod(raan + 4.0 * math.pi, 2.0 * math.pi)


# --------------------------------------------------------------------------------------
# the Orbit object
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Orbit:
    """An orbit and its time sampling.

    Attributes
    ----------
    kind : str — "circular", "elements" or "tle"
    epoch_utc : str — ISO 8601 UTC instant of time zero and of the elements
    semi_major_axis : float — a [m] (for "tle": from the element set's mean motion)
    eccentricity : float — e [1]
    inclination : float — i [rad], ICRF equator (for "tle": TEME of the element epoch)
    raan : float — right ascension of the ascending node Omega at epoch [rad]
    arg_perigee : float — argument of perigee omega at epoch [rad] (0 for circular orbits)
    mean_anomaly : float — mean anomaly at epoch [rad] (circular: argument of latitude)
    n_steps : int — number of time steps
    step : float — time between steps [s]
    j2_drift : bool — secular J2 drift of node, perigee and mean anomaly (two-body kinds)
    planet : Planet
    tle_lines : tuple of str or None — the two element lines ("tle" only)
    source_file : str or None — model file, for messages
    shadow_model : str — planet shadow model asked for by ``[orbit] shadow``
        ("conical", default, or "cylindrical")
    """

    kind: str
    epoch_utc: str
    semi_major_axis: float
    eccentricity: float
    inclination: float
    raan: float
    arg_perigee: float
    mean_anomaly: float
    n_steps: int
    step: float
    j2_drift: bool = False
    planet: Planet = EARTH
    tle_lines: tuple | None = None
    source_file: str | None = None
    shadow_model: str = "conical"

    @property
    def period(self) -> float:
        """Orbital period [s]: Keplerian 2 pi sqrt(a^3/GM) (Kepler's third law); for a
        two-line element set, one turn at the set's mean motion."""
        if self.kind == "tle":
            return 2.0 * math.pi / (self._satellite.model.no_kozai / 60.0)
        return 2.0 * math.pi * math.sqrt(self.semi_major_axis ** 3 / self.planet.gm)

    @property
    def span(self) -> float:
        """Time covered by the steps, n_steps * step [s]."""
        return self.n_steps * self.step

    def times(self) -> np.ndarray:
        """(n_steps,) float — time of each step since the epoch [s]."""
        return np.arange(self.n_steps, dtype=np.float64) * self.step

    def raan_at(self, time_s) -> np.ndarray:
        """(t,) float — node right ascension at ``time_s`` [rad] (J2 drift if enabled)."""
        time_s = np.atleast_1d(np.asarray(time_s, dtype=np.float64))
        if self.j2_drift and self.kind != "tle":
            rate = j2_secular_rates(self.semi_major_axis, self.eccentricity,
                                    self.inclination, self.planet)[0]
            return self.raan + rate * time_s
        return np.full_like(time_s, self.raan)

    @functools.cached_property
    def _satellite(self):
        from skyfield.api import EarthSatellite

        lines = self.tle_lines
        return EarthSatellite(lines[0], lines[1], "vehicle", ephemeris.timescale())

    def propagate(self, time_s):
        """Position and velocity at ``time_s`` seconds after the epoch.

        Parameters
        ----------
        time_s : (t,) float [s]

        Returns
        -------
        position : (t, 3) float — planet-centred, ICRF axes [m]
        velocity : (t, 3) float — same frame [m s-1]

        Notes
        -----
        Two-body kinds: mean anomaly M = M0 + n t and Kepler's equation; with ``j2_drift``
        the node, perigee and mean anomaly advance at the rates of
        :func:`j2_secular_rates` (the velocity is the two-body velocity of the
        instantaneous ellipse; the drift adds under 1 m/s). "tle": skyfield
        ``EarthSatellite.at`` (SGP4, TEME converted to GCRS).
        """
        time_s = np.atleast_1d(np.asarray(time_s, dtype=np.float64))
        if self.kind == "tle":
            t = ephemeris.times_from_epoch(self.epoch_utc, time_s)
            state = self._satellite.at(t)
            position = np.asarray(state.position.m, dtype=np.float64).reshape(3, -1).T
            velocity = np.asarray(state.velocity.m_per_s, dtype=np.float64).reshape(3, -1).T
            if not (np.all(np.isfinite(position)) and np.all(np.isfinite(velocity))):
                bad = int(np.argmax(~np.isfinite(position).all(axis=1)))
                raise ModelError(f"SGP4 failed at {time_s[bad]:.1f} s after the epoch "
                                 f"(error code {self._satellite.model.error}); the element "
                                 f"set is not valid over the span", file=self.source_file,
                                 where="[orbit] tle")
            return np.ascontiguousarray(position), np.ascontiguousarray(velocity)
        n = math.sqrt(self.planet.gm / self.semi_major_axis ** 3)
        if self.j2_drift:
            raan_rate, argp_rate, m_rate = j2_secular_rates(
                self.semi_major_axis, self.eccentricity, self.inclination, self.planet)
        else:
            raan_rate, argp_rate, m_rate = 0.0, 0.0, n
        return elements_to_state(self.semi_major_axis, self.eccentricity, self.inclination,
                                 self.raan + raan_rate * time_s,
                                 self.arg_perigee + argp_rate * time_s,
                                 self.mean_anomaly + m_rate * time_s, self.planet.gm)


def _step_count(period: float, orbits: float, steps_per_orbit, step_s):
    if step_s is not None:
        n_steps = max(1, math.ceil(orbits * period / step_s - 1e-9))
        return n_steps, float(step_s)
    n_steps = max(1, int(round(orbits * steps_per_orbit)))
    return n_steps, period / steps_per_orbit


def circular_orbit(altitude_km: float, inclination_deg: float, raan_deg: float,
                   epoch_utc: str, orbits: float = 1.0,
                   steps_per_orbit: int = DEFAULT_STEPS_PER_ORBIT,
                   argument_of_latitude_deg: float = 0.0, j2_drift: bool = False,
                   planet: Planet = EARTH) -> Orbit:
    """A circular orbit from plain numbers (the API twin of ``type = "circular"``).

    Parameters
    ----------
    altitude_km : float — height above the equatorial radius [km]
    inclination_deg, raan_deg : float — ICRF inclination and node [deg]
    epoch_utc : str — ISO 8601 UTC
    orbits : float — number of revolutions to sample
    steps_per_orbit : int
    argument_of_latitude_deg : float — angle from the node at epoch [deg]
    j2_drift : bool
    planet : Planet

    Returns
    -------
    Orbit
    """
    a = planet.radius + altitude_km * 1e3
    period = 2.0 * math.pi * math.sqrt(a ** 3 / planet.gm)
    n_steps, step = _step_count(period, orbits, steps_per_orbit, None)
    return Orbit(kind="circular", epoch_utc=ephemeris.format_epoch(ephemeris.parse_epoch(epoch_utc)),
                 semi_major_axis=a, eccentricity=0.0, inclination=math.radians(inclination_deg),
                 raan=math.radians(raan_deg), arg_perigee=0.0,
                 mean_anomaly=math.radians(argument_of_latitude_deg), n_steps=n_steps,
                 step=step, j2_drift=j2_drift, planet=planet)


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
