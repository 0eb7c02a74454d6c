"""Orbital heating: absorbed solar, albedo and planet IR per facet and node along the orbit."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Heating"]


@dataclass(frozen=True)
class Heating:
    """Absorbed environmental heat per step, per node and per facet.

    Attributes
    ----------
    node_solar, node_albedo, node_planet_ir : (t, n) float — absorbed power per node [W],
        reflections inside the vehicle included
    facet_solar, facet_albedo, facet_planet_ir : (t, f) float — absorbed flux per facet
        (both sides summed, divided by the facet area) [W m-2]
    incident_solar, incident_albedo, incident_planet_ir : (t, n) float — incident power on
        each node before absorption [W]
    solar_constant : (t,) float — solar irradiance used at each step [W m-2]
    albedo : float — planet albedo used [1]
    planet_ir : float — planet outgoing long-wave flux used [W m-2]
    case : str — environment case name
    """

    node_solar: np.ndarray
    node_albedo: np.ndarray
    node_planet_ir: np.ndarray
    facet_solar: np.ndarray
    facet_albedo: np.ndarray
    facet_planet_ir: np.ndarray
    incident_solar: np.ndarray
    incident_albedo: np.ndarray
    incident_planet_ir: np.ndarray
    solar_constant: np.ndarray
    albedo: float
    planet_ir: float
    case: str
