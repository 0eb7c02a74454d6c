"""The trajectory: per time step, where the Sun and the planet are in the body frame.

Produced by :func:`compute_trajectory` from an orbit, an attitude and the Sun ephemeris;
read by the heating stage and written to ``/orbit`` in the HDF5 file.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from vfactor import eclipse, ephemeris
from vfactor.attitude import attitude_from_table
from vfactor.orbit import orbit_from_table
from vfactor.planet import EARTH, Planet

__all__ = ["Trajectory", "compute_trajectory", "trajectory_from_model"]


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
