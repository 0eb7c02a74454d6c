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
"""

from __future__ import annotations

import numpy as np

__all__ = ["plate_sphere_view_factor"]


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
