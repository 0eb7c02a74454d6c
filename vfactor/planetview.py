"""View factor of a small flat surface to a sphere (a planet), in closed form.

For a plane element at distance ``d`` from the centre of a sphere of radius ``R``
(``H = d / R > 1``), whose normal makes the angle ``lam`` with the line to the centre::

    lam <= arccos(1/H)               F = cos(lam) / H^2                  (whole cap seen)
    lam >= pi/2 + arcsin(1/H)        F = 0                               (nothing seen)
    otherwise, with x = sqrt(H^2 - 1):
        F = 1/2 - arcsin(x / (H sin lam)) / pi
            + (cos(lam) arccos(-x cot(lam)) - x sqrt(1 - H^2 cos^2 lam)) / (pi H^2)

(J. R. Howell, "A Catalog of Radiation Heat Transfer Configuration Factors", differential
planar element to sphere, element tilted; the same formulas in D. G. Gilmore, Spacecraft
Thermal Control Handbook Vol. I, 2nd ed., 2002, ch. 2, for the planet view factor of a
flat plate; case numbers from memory, not given.) The two branches meet continuously at
both limits. :mod:`vfactor.heating` uses it as the control variate of the planet-IR
estimator; ``tests/test_planetview.py`` checks it against a numerical integration of the
defining double integral.

Albedo factor
-------------
The irradiance of the same element from a diffusely reflecting sphere lit by a distant
Sun (radiance ``a S max(0, cos Z) / pi`` at a point of solar zenith ``Z``; Siegel & Howell,
Thermal Radiation Heat Transfer, definitions of radiance and irradiance) is ``E = a S Q``
with the *albedo factor*::

    Q = (1/pi) int_cap max(0, cos Z) max(0, cos t_e) cos t_g / s^2 dA

over the cap the element sees (``t_e``, ``t_g``: angles of the line of sight from the
element's normal and from the ground normal, ``s``: its length). It has no closed form in
general; :func:`plate_sphere_albedo_factor` computes it by a quadrature of our own
derivation. In polar coordinates ``(g, phi)`` about the sub-element point (``g`` the
central angle, up to ``acos(1/H)``; radius 1), ``cos t_g / s`` and ``s`` depend on ``g``
only, while both ``n . w`` (``w`` the line of sight) and ``cos Z`` are of the form
``A + B cos(phi) + C sin(phi)`` on a ring ``g = const``. The integral over ``phi`` of the
product of their positive parts is therefore elementary (the intersection of two arcs);
the integral over ``g`` is a Gauss-Legendre rule on the pieces between the rings where an
arc appears, vanishes or closes (the element's horizon and the terminator touch the ring,
found in closed form), each piece mapped by ``g = a + (b - a) u^2 (3 - 2u)`` so that the
``(g - g_c)^(3/2)`` behaviour at its ends becomes smooth. With :data:`ALBEDO_NODES` nodes
per piece the result agrees with an adaptive reference to better than 1e-7 of ``1/H^2``
(the value for an element facing the subsolar point; tests).
:mod:`vfactor.heatstep` uses it as the control variate of the albedo estimator.
"""

from __future__ import annotations

import numpy as np
from vfactor.tracing import albedo_kernels

__all__ = ["plate_sphere_view_factor", "plate_sphere_albedo_factor", "ALBEDO_NODES"]

ALBEDO_NODES = 12
"""Gauss-Legendre nodes per piece of the albedo-factor quadrature (at most four pieces)."""

_GL_U, _GL_W = np.polynomial.legendre.leggauss(ALBEDO_NODES)
_GL_U = np.ascontiguousarray((_GL_U + 1.0) / 2.0)     # on [0, 1]
_GL_W = np.ascontiguousarray(_GL_W / 2.0)


def plate_sphere_view_factor(H, cos_lam) -> np.ndarray:
    """View factor [1] of plane elements to a sphere.

    Parameters
    ----------
    H : float or array — distance to the sphere's centre over its radius (> 1)
    cos_lam : float or array — cosine of the angle between the element's normal and the
        direction to the centre

    Returns
    -------
    ndarray (broadcast shape) — the view factor, 0 where the sphere is below the horizon
    """
    H = np.asarray(H, dtype=np.float64)
    c = np.clip(np.asarray(cos_lam, dtype=np.float64), -1.0, 1.0)
    H, c = np.broadcast_arrays(H, c)
    if np.any(~(H > 1.0)):
        raise ValueError("plate_sphere_view_factor: H must be > 1 (outside the sphere)")
    out = np.zeros(H.shape)
    full = c >= 1.0 / H                       # lam <= arccos(1/H)
    out[full] = c[full] / H[full] ** 2
    x_all = np.sqrt(H * H - 1.0)
    partial = ~full & (c > -1.0 / H)           # lam < pi/2 + arcsin(1/H)
    if partial.any():
        h, cc, x = H[partial], c[partial], x_all[partial]
        s = np.sqrt(1.0 - cc * cc)             # sin(lam) > 0 in this branch
        cot = cc / s
        out[partial] = (0.5 - np.arcsin(np.clip(x / (h * s), -1.0, 1.0)) / np.pi
                        + (cc * np.arccos(np.clip(-x * cot, -1.0, 1.0))
                           - x * np.sqrt(np.maximum(1.0 - h * h * cc * cc, 0.0)))
                        / (np.pi * h * h))
    return out


def plate_sphere_albedo_factor(H, normal, sun, up) -> np.ndarray:
    """Albedo factor [1] of plane elements above a sphere lit by a distant Sun.

    The irradiance of an element from a diffusely reflecting sphere of albedo ``a`` under a
    solar constant ``S`` is ``a S Q`` (see the module notes for the definition and the
    quadrature).

    Parameters
    ----------
    H : (k,) float — distance from the sphere's centre over its radius (> 1)
    normal : (k, 3) float — unit normal of each element [1]
    sun : (3,) or (k, 3) float — unit vector toward the Sun [1]
    up : (k, 3) float — unit vector from the sphere's centre toward each element [1]

    Returns
    -------
    (k,) float64 — ``Q``; 0 where the element sees no sunlit point

    Raises
    ------
    ValueError
        Shapes that do not match, values that are not finite, or ``H <= 1``.
    """
    H = np.ascontiguousarray(H, dtype=np.float64).reshape(-1)
    k = H.shape[0]
    normal = np.ascontiguousarray(normal, dtype=np.float64)
    up = np.ascontiguousarray(up, dtype=np.float64)
    sun = np.ascontiguousarray(np.broadcast_to(np.asarray(sun, dtype=np.float64), (k, 3)))
    for name, a in (("normal", normal), ("up", up)):
        if a.shape != (k, 3):
            raise ValueError(f"plate_sphere_albedo_factor: {name} must have shape ({k}, 3), "
                             f"got {a.shape}")
    for name, a in (("H", H), ("normal", normal), ("sun", sun), ("up", up)):
        if not np.all(np.isfinite(a)):
            raise ValueError(f"plate_sphere_albedo_factor: {name} is not finite")
    if np.any(~(H > 1.0)):
        raise ValueError(f"plate_sphere_albedo_factor: H must be > 1 (outside the sphere), "
                         f"got {float(H.min())!r}")
    out = np.empty(k)
    albedo_kernels.albedo_factors(H, normal, sun, up, _GL_U, _GL_W, out)
    return out
