"""The trajectory: per time step, where the Sun and the planet are in the body frame.

Produced by :func:`compute_trajectory` from an orbit, an attitude and the Sun ephemeris;
read by the heating stage and written to ``/orbit`` in the HDF5 file.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vfactor import eclipse, ephemeris
from vfactor.attitude import attitude_from_table
from vfactor.orbittable import orbit_from_table
from vfactor.planet import EARTH, Planet, planet_by_name

__all__ = ["Trajectory", "compute_trajectory", "trajectory_from_model", "orbit_facts",
           "OrbitFacts", "Eclipse"]


@dataclass(frozen=True)
class Trajectory:
    """Vehicle state along the orbit, per time step.

    Attributes
    ----------
    epoch_utc : str — ISO 8601 UTC instant that ``time`` counts from
    time : (t,) float — time since the epoch [s]
    position : (t, 3) float — vehicle position, planet-centred inertial (ICRF axes) [m]
    velocity : (t, 3) float — vehicle velocity, same frame [m s-1]
    sun_inertial : (t, 3) float — unit vector from the vehicle toward the Sun [1]
    sun_distance : (t,) float — vehicle-to-Sun distance [m]
    sun_fraction : (t,) float — visible share of the solar disk, 0 umbra .. 1 full sun [1]
    beta : (t,) float — angle between the orbit plane and the Sun direction [rad]
    body_to_inertial : (t, 3, 3) float — rotation; columns are the body axes in inertial [1]
    sun_body : (t, 3) float — unit vector toward the Sun in the body frame [1]
    nadir_body : (t, 3) float — unit vector toward the planet centre in the body frame [1]
    planet_distance : (t,) float — distance from the planet centre [m]
    period : float — orbital period [s]
    planet : vfactor.planet.Planet
    shadow_model : str — "conical" or "cylindrical", the model behind ``sun_fraction``
    attitude_note : str — one line describing the attitude law (says when it was a default)
    """

    epoch_utc: str
    time: np.ndarray
    position: np.ndarray
    velocity: np.ndarray
    sun_inertial: np.ndarray
    sun_distance: np.ndarray
    sun_fraction: np.ndarray
    beta: np.ndarray
    body_to_inertial: np.ndarray
    sun_body: np.ndarray
    nadir_body: np.ndarray
    planet_distance: np.ndarray
    period: float
    planet: object
    shadow_model: str = "conical"
    attitude_note: str = ""

    @property
    def n_steps(self) -> int:
        return int(self.time.shape[0])


def _unit_rows(v):
    return v / np.linalg.norm(v, axis=1)[:, None]


def compute_trajectory(orbit, attitude, planet: Planet = EARTH,
                       shadow: str = "conical") -> Trajectory:
    """Sample an orbit and an attitude law into a :class:`Trajectory`.

    Parameters
    ----------
    orbit : vfactor.orbit.Orbit
    attitude : vfactor.attitude.Attitude
    planet : Planet
        Central body of the shadow; must be the orbit's planet.
    shadow : {"conical", "cylindrical"}
        Planet shadow model (vfactor.eclipse).

    Returns
    -------
    Trajectory
        Every field filled; ``time`` from ``orbit.times()``.

    Raises
    ------
    ValueError
        When ``planet`` is not the orbit's planet or ``shadow`` is unknown.

    Notes
    -----
    Sun vector from the vehicle: s - r, s the geocentric Sun of vfactor.ephemeris.
    Beta angle: beta = asin(h_hat . s_hat), h = r x v the orbit normal and s_hat the
    geocentric Sun direction (Gilmore (ed.), Spacecraft Thermal Control Handbook, Vol. I,
    2nd ed., 2002, ch. 2). Body-frame vectors: v_body = R^T v_inertial with R from
    ``attitude.body_to_inertial``.
    """
    if planet != orbit.planet:
        raise ValueError(f"planet {planet.name!r} is not the orbit's planet {orbit.planet.name!r}")
    if shadow not in eclipse.SHADOW_MODELS:
        raise ValueError(f"shadow model must be one of {eclipse.SHADOW_MODELS}, got {shadow!r}")
    time = orbit.times()
    position, velocity = orbit.propagate(time)
    sun_geo = ephemeris.sun_position(ephemeris.times_from_epoch(orbit.epoch_utc, time))
    to_sun = sun_geo - position
    sun_distance = np.linalg.norm(to_sun, axis=1)
    sun_inertial = np.ascontiguousarray(to_sun / sun_distance[:, None])
    fraction = eclipse.sun_fraction(position, sun_geo, planet, model=shadow)
    normal = _unit_rows(np.cross(position, velocity))
    beta = np.arcsin(np.clip(np.einsum("ij,ij->i", normal, _unit_rows(sun_geo)), -1.0, 1.0))
    rotation = attitude.body_to_inertial(position, velocity, sun_inertial, time)
    planet_distance = np.linalg.norm(position, axis=1)
    nadir = -position / planet_distance[:, None]
    sun_body = np.ascontiguousarray(np.einsum("tji,tj->ti", rotation, sun_inertial))
    nadir_body = np.ascontiguousarray(np.einsum("tji,tj->ti", rotation, nadir))
    return Trajectory(
        epoch_utc=orbit.epoch_utc, time=time, position=position, velocity=velocity,
        sun_inertial=sun_inertial, sun_distance=sun_distance, sun_fraction=fraction,
        beta=beta, body_to_inertial=rotation, sun_body=sun_body, nadir_body=nadir_body,
        planet_distance=planet_distance, period=float(orbit.period), planet=planet,
        shadow_model=shadow, attitude_note=getattr(attitude, "note", ""))


def trajectory_from_model(model) -> Trajectory | None:
    """The trajectory of a model, or None when it has no ``[orbit]`` table.

    Parameters
    ----------
    model : vfactor.model.Model
        Uses its raw ``orbit_table`` and ``attitude_table`` dicts (None when absent) and,
        for messages, its file path. Without ``[attitude]`` the default nadir law (+z to
        nadir, +x along the velocity) is used, and ``Trajectory.attitude_note`` says so.

    Returns
    -------
    Trajectory or None

    Raises
    ------
    vfactor.errors.ModelError
        From the ``[orbit]`` and ``[attitude]`` readers.
    """
    orbit_table = getattr(model, "orbit_table", None)
    if orbit_table is None:
        return None
    file = None
    for name in ("path", "file", "source_path"):
        value = getattr(model, name, None)
        if value is not None:
            file = str(value)
            break
    orbit = orbit_from_table(orbit_table, file=file)
    attitude = attitude_from_table(getattr(model, "attitude_table", None), file=file)
    return compute_trajectory(orbit, attitude, planet=orbit.planet, shadow=orbit.shadow_model)


# --------------------------------------------------------------------------------------
# orbit facts for `vfactor summary`
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Eclipse:
    """One passage through the planet's shadow.

    Attributes
    ----------
    start_s, end_s : float — first and last contact with the shadow: the Sun starts to be
        hidden / is whole again [s since epoch]; ``end_s`` may exceed the span when the
        passage wraps around a whole-orbit span
    umbra_s : float — time in umbra (Sun wholly hidden) [s]
    penumbra_s : float — time in penumbra, entry and exit together [s]
    complete : bool — False when the span starts or ends inside this passage
    """

    start_s: float
    end_s: float
    umbra_s: float
    penumbra_s: float
    complete: bool

    @property
    def duration_s(self) -> float:
        """Shadow duration, penumbra included [s]."""
        return self.end_s - self.start_s


@dataclass(frozen=True)
class OrbitFacts:
    """What ``vfactor summary`` reports about a trajectory.

    Attributes
    ----------
    period_s : float — orbital period [s]
    altitude_min_km, altitude_max_km : float — above the planet's equatorial radius [km]
    beta_min_deg, beta_max_deg : float — beta angle range over the span [deg]
    eclipse_share : float — share of the span with any of the Sun hidden [1]
    umbra_share : float — share of the span in umbra [1]
    longest_eclipse_s : float — longest shadow passage, penumbra included [s]
        (complete passages; a truncated one only when there is none complete)
    penumbra_s : float — mean penumbra time per passage, entry and exit together [s]
    eclipses : tuple of Eclipse
    shadow_model : str
    span_s : float — time covered, steps times step [s]

    Notes
    -----
    Shadow contacts are located between the samples: from each sample the two-body
    motion is integrated (fourth-order Runge-Kutta, steps <= 0.5 s) to the next sample,
    the Sun vector is interpolated linearly, and the contact is where the signed margin of
    :func:`vfactor.eclipse.shadow_margin` changes sign (linear interpolation between
    sub-steps). Durations are therefore not limited by the sampling of the trajectory.
    A span of a whole number of periods is treated as periodic: a passage cut by the end
    of the span continues at its start.
    """

    period_s: float
    altitude_min_km: float
    altitude_max_km: float
    beta_min_deg: float
    beta_max_deg: float
    eclipse_share: float
    umbra_share: float
    longest_eclipse_s: float
    penumbra_s: float
    eclipses: tuple
    shadow_model: str
    span_s: float


_SUBSTEP_S = 0.5


def _two_body_rk4(position, velocity, gm, duration, n_sub):
    """(n_sub+1, g, 3) positions from classical RK4 on r'' = -gm r/|r|^3, for g starts."""
    h = duration / n_sub
    out = np.empty((n_sub + 1,) + position.shape)
    r = position.copy()
    v = velocity.copy()
    out[0] = r

    def acc(x):
        return -gm * x / (np.linalg.norm(x, axis=-1) ** 3)[..., None]

    for k in range(n_sub):
        k1v, k1r = acc(r), v
        k2v, k2r = acc(r + 0.5 * h * k1r), v + 0.5 * h * k1v
        k3v, k3r = acc(r + 0.5 * h * k2r), v + 0.5 * h * k2v
        k4v, k4r = acc(r + h * k3r), v + h * k3v
        r = r + h / 6.0 * (k1r + 2 * k2r + 2 * k3r + k4r)
        v = v + h / 6.0 * (k1v + 2 * k2v + 2 * k3v + k4v)
        out[k + 1] = r
    return out


def _crossings(times, values):
    """Times where ``values`` changes sign, by linear interpolation; +1 rising, -1 falling."""
    events = []
    neg = values < 0.0
    for k in np.nonzero(neg[1:] != neg[:-1])[0]:
        v0, v1 = values[k], values[k + 1]
        frac = v0 / (v0 - v1)
        events.append((times[k] + frac * (times[k + 1] - times[k]), 1 if v1 >= 0.0 else -1))
    return events


def _pair(events, start_negative, span, periodic):
    """Intervals [down, up) from sign-change events over [0, span)."""
    events = sorted(events)
    intervals = []
    open_at = 0.0 if start_negative else None
    leading = start_negative
    for time, direction in events:
        if direction < 0 and open_at is None:
            open_at = time
        elif direction > 0 and open_at is not None:
            intervals.append([open_at, time, not (leading and open_at == 0.0)])
            open_at = None
        leading = False if direction > 0 else leading
    if open_at is not None:
        intervals.append([open_at, span, False])
    if periodic and len(intervals) >= 2 and not intervals[0][2] and not intervals[-1][2] \
            and intervals[0][0] == 0.0 and intervals[-1][1] == span:
        first = intervals.pop(0)
        intervals[-1] = [intervals[-1][0], span + first[1], True]
    elif periodic and len(intervals) == 1 and intervals[0][0] == 0.0 and intervals[0][1] == span:
        intervals[0][2] = True  # in shadow all along
    return [tuple(x) for x in intervals]


def orbit_facts(trajectory: Trajectory) -> OrbitFacts:
    """Period, altitude and beta ranges and eclipse times of a trajectory.

    Parameters
    ----------
    trajectory : Trajectory
        As computed, or as read back from a results file (``planet`` given by name).

    Returns
    -------
    OrbitFacts
        See its Notes for how shadow contacts are found between samples.
    """
    tr = trajectory
    planet = planet_by_name(tr.planet)
    model = tr.shadow_model or "conical"  # files written before the attribute existed
    altitude_km = (tr.planet_distance - planet.radius) / 1e3
    beta_deg = np.degrees(tr.beta)
    n = tr.n_steps
    step = float(tr.time[1] - tr.time[0]) if n >= 2 else 0.0
    span = n * step
    sun_geo = tr.position + tr.sun_inertial * tr.sun_distance[:, None]
    outer, inner = eclipse.shadow_margin(tr.position, sun_geo, planet, model)
    periodic = False
    if step > 0.0 and tr.period > 0.0:
        turns = round(span / tr.period)
        periodic = turns >= 1 and abs(span - turns * tr.period) < 1e-6 * tr.period

    outer_events, inner_events = [], []
    if step > 0.0:
        # bound on how fast a margin can change: the planet centre's direction turns at
        # most at |v|/r, its apparent radius b = asin(R/r) at most R |v| / (r sqrt(r^2-R^2));
        # a gap whose end margins are within 1.5 x bound x step of zero is examined
        speed = np.linalg.norm(tr.velocity, axis=1)
        r = tr.planet_distance
        rate = speed / r + planet.radius * speed / (r * np.sqrt(np.maximum(r * r - planet.radius ** 2,
                                                                            1.0)))
        reach = 1.5 * float(np.max(rate)) * step
        if model == "cylindrical":
            reach = 1.5 * np.max(np.linalg.norm(tr.velocity, axis=1)) * step
        n_sub = max(1, math.ceil(step / _SUBSTEP_S))
        local = np.linspace(0.0, step, n_sub + 1)
        following = np.minimum(np.arange(n) + 1, n - 1)  # the last gap extrapolates
        o_end, i_end = outer[following], inner[following]
        near = np.minimum(np.minimum(np.abs(outer), np.abs(o_end)),
                          np.minimum(np.abs(inner), np.abs(i_end))) < reach
        changes = ((outer < 0) != (o_end < 0)) | ((inner < 0) != (i_end < 0))
        gaps = np.nonzero(near | changes)[0]
        if gaps.size:
            path = _two_body_rk4(tr.position[gaps], tr.velocity[gaps], planet.gm, step, n_sub)
            w = (local / step)[:, None, None]
            sun_path = sun_geo[gaps][None] * (1.0 - w) + sun_geo[following[gaps]][None] * w
            o_sub, i_sub = eclipse.shadow_margin(path.reshape(-1, 3), sun_path.reshape(-1, 3),
                                                 planet, model)
            o_sub = o_sub.reshape(n_sub + 1, gaps.size)
            i_sub = i_sub.reshape(n_sub + 1, gaps.size)
            # the samples decide at their own times, so that neighbouring gaps agree
            o_sub[0], i_sub[0] = outer[gaps], inner[gaps]
            inside = gaps + 1 < n
            o_sub[-1, inside], i_sub[-1, inside] = outer[gaps[inside] + 1], inner[gaps[inside] + 1]
            for column, k in enumerate(gaps):
                times = tr.time[k] + local
                outer_events += [e for e in _crossings(times, o_sub[:, column]) if e[0] < span]
                inner_events += [e for e in _crossings(times, i_sub[:, column]) if e[0] < span]

    shadows = _pair(outer_events, bool(outer[0] < 0.0), span, periodic) if n else []
    umbras = _pair(inner_events, bool(inner[0] < 0.0), span, periodic) if n else []
    passages = []
    for start, end, complete in shadows:
        umbra = 0.0
        for u_start, u_end, _ in umbras:
            # umbra intervals lie inside a shadow interval (possibly shifted by one span)
            for shift in (0.0, span, -span):
                if start - 1e-9 <= u_start + shift <= end + 1e-9:
                    umbra += min(u_end + shift, end) - (u_start + shift)
                    break
        passages.append(Eclipse(start_s=float(start), end_s=float(end), umbra_s=float(umbra),
                                penumbra_s=float(end - start - umbra), complete=bool(complete)))
    if span > 0.0:
        eclipse_share = sum(p.duration_s for p in passages) / span
        umbra_share = sum(p.umbra_s for p in passages) / span
    else:
        eclipse_share = float(outer[0] < 0.0) if n else 0.0
        umbra_share = float(inner[0] < 0.0) if n else 0.0
    complete = [p for p in passages if p.complete] or passages
    longest = max((p.duration_s for p in complete), default=0.0)
    penumbra = float(np.mean([p.penumbra_s for p in complete])) if complete else 0.0
    return OrbitFacts(
        period_s=float(tr.period),
        altitude_min_km=float(altitude_km.min()), altitude_max_km=float(altitude_km.max()),
        beta_min_deg=float(beta_deg.min()), beta_max_deg=float(beta_deg.max()),
        eclipse_share=float(eclipse_share), umbra_share=float(umbra_share),
        longest_eclipse_s=float(longest), penumbra_s=penumbra, eclipses=tuple(passages),
        shadow_model=model, span_s=float(span))
