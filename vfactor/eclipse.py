"""Planet shadow: the visible share of the solar disk at the vehicle.

Two models:

- ``"conical"``: the Sun and the planet are seen from the vehicle as two disks of angular
  radii a = asin(R_sun/|s - r|) and b = asin(R_planet/|r|) whose centres are an angle c
  apart; the visible share of the solar disk is one minus the overlap area divided by the
  Sun's disk area. Umbra (0) when c <= b - a, annular phase when c <= a - b, penumbra in
  between, full sun (1) when c >= a + b. The disks are treated as flat (small-angle
  areas), as in the reference.
- ``"cylindrical"``: the shadow is the cylinder of the planet's radius behind it along the
  Earth-Sun line; 0 inside, 1 outside (no penumbra).

The planet is a sphere of its equatorial radius; the atmosphere is not modelled.

References
----------
Montenbruck, O., Gill, E., Satellite Orbits: Models, Methods and Applications, Springer,
2000, §3.4.2 "Shadow models" (conical model and the occulted area of two overlapping disks;
equation numbers not quoted, from memory only).
"""

from __future__ import annotations

import numpy as np

from vfactor.constants import SUN_RADIUS_M
from vfactor.planet import EARTH, Planet

__all__ = ["SHADOW_MODELS", "sun_fraction", "disk_angles", "shadow_margin"]

SHADOW_MODELS = ("conical", "cylindrical")


def _coerce(position_m, sun_position_m):
    position = np.ascontiguousarray(np.atleast_2d(np.asarray(position_m, dtype=np.float64)))
    sun = np.ascontiguousarray(np.atleast_2d(np.asarray(sun_position_m, dtype=np.float64)))
    if position.ndim != 2 or position.shape[1] != 3:
        raise ValueError(f"position_m must have shape (t, 3), got {position.shape}")
    if sun.shape != position.shape:
        raise ValueError(f"sun_position_m must have the shape of position_m {position.shape}, "
                         f"got {sun.shape}")
    if not (np.all(np.isfinite(position)) and np.all(np.isfinite(sun))):
        raise ValueError("position_m and sun_position_m must be finite")
    return position, sun


def disk_angles(position_m, sun_position_m, planet: Planet = EARTH):
    """Apparent radii of the Sun and the planet and their separation, seen from the vehicle.

    Parameters
    ----------
    position_m : (t, 3) float — vehicle position from the planet centre [m]
    sun_position_m : (t, 3) float — Sun position from the planet centre [m]
    planet : Planet

    Returns
    -------
    sun_radius : (t,) float — a, apparent radius of the Sun [rad]
    planet_radius : (t,) float — b, apparent radius of the planet [rad]
    separation : (t,) float — c, angle between the two centres [rad]

    Notes
    -----
    a = asin(R_sun / |s - r|), b = asin(R_planet / |r|),
    c = acos(-r . (s - r) / (|r| |s - r|)); Montenbruck & Gill (2000), §3.4.2.
    """
    position, sun = _coerce(position_m, sun_position_m)
    return _disk_angles(position, sun, planet.radius)


def _disk_angles(position, sun, planet_radius):
    to_sun = sun - position
    d_sun = np.linalg.norm(to_sun, axis=1)
    r = np.linalg.norm(position, axis=1)
    a = np.arcsin(np.minimum(SUN_RADIUS_M / d_sun, 1.0))
    b = np.arcsin(np.minimum(planet_radius / r, 1.0))
    cos_c = -np.einsum("ij,ij->i", position, to_sun) / (r * d_sun)
    c = np.arccos(np.clip(cos_c, -1.0, 1.0))
    return a, b, c


def sun_fraction(position_m, sun_position_m, planet: Planet = EARTH,
                 model: str = "conical") -> np.ndarray:
    """Visible share of the solar disk at the vehicle, 0 (umbra) .. 1 (full sun).

    Parameters
    ----------
    position_m : (t, 3) float — vehicle position from the planet centre [m]
    sun_position_m : (t, 3) float — Sun position from the planet centre [m]
    planet : Planet
    model : {"conical", "cylindrical"}

    Returns
    -------
    (t,) float — visible share of the solar disk [1]

    Raises
    ------
    ValueError
        Unknown model, wrong shapes, non-finite input.

    Notes
    -----
    Conical (Montenbruck & Gill 2000, §3.4.2): with a, b, c from :func:`disk_angles`,
    in penumbra (|a - b| < c < a + b) the overlap area is
    A = a^2 acos(x/a) + b^2 acos((c - x)/b) - c y, x = (c^2 + a^2 - b^2)/(2c),
    y = sqrt(a^2 - x^2), and the visible share is 1 - A/(pi a^2); when the planet disk
    lies inside the Sun's (c <= a - b) the share is 1 - b^2/a^2.
    Cylindrical: in shadow when r . s_hat < 0 and |r - (r . s_hat) s_hat| < R.
    """
    position, sun = _coerce(position_m, sun_position_m)
    if model == "cylindrical":
        s_hat = sun / np.linalg.norm(sun, axis=1)[:, None]
        along = np.einsum("ij,ij->i", position, s_hat)
        perpendicular = np.linalg.norm(position - along[:, None] * s_hat, axis=1)
        return np.where((along < 0.0) & (perpendicular < planet.radius), 0.0, 1.0)
    if model != "conical":
        raise ValueError(f"shadow model must be one of {SHADOW_MODELS}, got {model!r}")
    a, b, c = _disk_angles(position, sun, planet.radius)
    out = np.ones_like(a)
    umbra = c <= b - a
    out[umbra] = 0.0
    annular = (c <= a - b) & ~umbra
    out[annular] = 1.0 - (b[annular] / a[annular]) ** 2
    partial = (c < a + b) & ~umbra & ~annular
    if np.any(partial):
        ap, bp, cp = a[partial], b[partial], c[partial]
        x = (cp * cp + ap * ap - bp * bp) / (2.0 * cp)
        y = np.sqrt(np.maximum(ap * ap - x * x, 0.0))
        area = (ap * ap * np.arccos(np.clip(x / ap, -1.0, 1.0))
                + bp * bp * np.arccos(np.clip((cp - x) / bp, -1.0, 1.0)) - cp * y)
        out[partial] = np.clip(1.0 - area / (np.pi * ap * ap), 0.0, 1.0)
    return out


def shadow_margin(position_m, sun_position_m, planet: Planet = EARTH,
                  model: str = "conical"):
    """Signed angular margins to the shadow boundaries, continuous in time (for root finding).

    Parameters
    ----------
    position_m, sun_position_m : (t, 3) float [m]
    planet : Planet
    model : {"conical", "cylindrical"}

    Returns
    -------
    outer : (t,) float — > 0 in full sun, < 0 once any of the Sun is hidden [rad, or m
        for "cylindrical"]
    inner : (t,) float — < 0 in umbra [same unit]

    Notes
    -----
    Conical: outer = c - (a + b), inner = c - (b - a). Cylindrical: distance from the
    shadow cylinder's surface (|r| - R on the sunlit side), the same for both.
    """
    position, sun = _coerce(position_m, sun_position_m)
    if model == "cylindrical":
        s_hat = sun / np.linalg.norm(sun, axis=1)[:, None]
        along = np.einsum("ij,ij->i", position, s_hat)
        perpendicular = np.linalg.norm(position - along[:, None] * s_hat, axis=1)
        r = np.linalg.norm(position, axis=1)
        margin = np.where(along < 0.0, perpendicular, r) - planet.radius
        return margin, margin.copy()
    if model != "conical":
        raise ValueError(f"shadow model must be one of {SHADOW_MODELS}, got {model!r}")
    a, b, c = _disk_angles(position, sun, planet.radius)
    return c - (a + b), c - (b - a)
