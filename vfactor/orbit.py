"""Orbits: Kepler propagation, SGP4 for two-line element sets, the orientation of the node.

Three kinds of orbit are read from a model file (``type = "circular" | "elements" |
"tle"``; :mod:`vfactor.orbittable` reads the ``[orbit]`` table); the first two are propagated here by two-body motion (Kepler's equation solved by
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

__all__ = [
    "Orbit",
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
