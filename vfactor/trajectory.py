"""The trajectory: per time step, where the Sun and the planet are in the body frame.

Produced by :func:`compute_trajectory` from an orbit, an attitude and the Sun ephemeris;
read by the heating stage and written to ``/orbit`` in the HDF5 file.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Trajectory"]


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

    @property
    def n_steps(self) -> int:
        return int(self.time.shape[0])
