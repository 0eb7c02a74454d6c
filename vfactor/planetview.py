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

import math

import numpy as np
from numba import njit, prange

from vfactor.tracing.config import JIT, JIT_PARALLEL

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
    _albedo_factors(H, normal, sun, up, _GL_U, _GL_W, out)
    return out


@njit(**JIT_PARALLEL)
def _albedo_factors(H, normal, sun, up, nodes, weights, out):
    for i in prange(H.shape[0]):
        # local frame: z up, x any unit vector across it
        ux = up[i, 0]
        uy = up[i, 1]
        uz = up[i, 2]
        if abs(ux) < 0.9:
            ax, ay, az = 1.0, 0.0, 0.0
        else:
            ax, ay, az = 0.0, 1.0, 0.0
        dot = ax * ux + ay * uy + az * uz
        xx = ax - dot * ux
        xy = ay - dot * uy
        xz = az - dot * uz
        norm = math.sqrt(xx * xx + xy * xy + xz * xz)
        xx /= norm
        xy /= norm
        xz /= norm
        yx = uy * xz - uz * xy
        yy = uz * xx - ux * xz
        yz = ux * xy - uy * xx
        nx = normal[i, 0] * xx + normal[i, 1] * xy + normal[i, 2] * xz
        ny = normal[i, 0] * yx + normal[i, 1] * yy + normal[i, 2] * yz
        nz = normal[i, 0] * ux + normal[i, 1] * uy + normal[i, 2] * uz
        sx = sun[i, 0] * xx + sun[i, 1] * xy + sun[i, 2] * xz
        sy = sun[i, 0] * yx + sun[i, 1] * yy + sun[i, 2] * yz
        sz = sun[i, 0] * ux + sun[i, 1] * uy + sun[i, 2] * uz
        out[i] = _albedo_factor(H[i], nx, ny, nz, sx, sy, sz, nodes, weights)


@njit(**JIT)
def _albedo_factor(H, nx, ny, nz, sx, sy, sz, nodes, weights):
    """Q of one element, its normal ``n`` and the Sun ``s`` in the frame whose z axis
    points from the sphere's centre through the element (radius 1, distance H).

    Directions of sight ``w = (sin p cos phi, sin p sin phi, -cos p)`` about the nadir
    (``p`` up to ``asin(1/H)``) meet the sphere at the central angle
    ``g = asin(H sin p) - p``: ``n . w`` and ``cos Z`` are sinusoids in ``phi`` on a ring.
    """
    pmax = math.asin(1.0 / H)
    gmax = math.acos(1.0 / H)
    # the element's horizon hides the whole cap, or the whole cap is dark
    if math.acos(max(-1.0, min(1.0, -nz))) >= 0.5 * math.pi + pmax:
        return 0.0
    if math.acos(max(-1.0, min(1.0, sz))) >= 0.5 * math.pi + gmax:
        return 0.0
    nu = math.hypot(nx, ny)
    sigma = math.hypot(sx, sy)
    alpha_p = math.atan2(ny, nx)
    alpha_s = math.atan2(sy, sx)
    ca_p, sa_p = (nx / nu, ny / nu) if nu > 0.0 else (1.0, 0.0)
    ca_s, sa_s = (sx / sigma, sy / sigma) if sigma > 0.0 else (1.0, 0.0)
    # rings where an arc appears, vanishes or closes: the element's horizon
    # (sin p nu = cos p |nz|) and the terminator (sin g sigma = cos g |sz|) touch them
    cuts = np.empty(4)
    cuts[0] = 0.0
    count = 1
    p = math.atan2(abs(nz), nu)
    if 0.0 < p < pmax:
        cuts[count] = p
        count += 1
    g = math.atan2(abs(sz), sigma)
    if 0.0 < g < gmax:
        p = math.atan2(math.sin(g), H - math.cos(g))
        if 0.0 < p < pmax:
            cuts[count] = p
            count += 1
    cuts[count] = pmax
    count += 1
    if count == 4 and cuts[1] > cuts[2]:
        cuts[1], cuts[2] = cuts[2], cuts[1]
    total = 0.0
    for piece in range(count - 1):
        a = cuts[piece]
        span = cuts[piece + 1] - a
        if span <= 0.0:
            continue
        for q in range(nodes.shape[0]):
            u = nodes[q]
            p = a + span * u * u * (3.0 - 2.0 * u)
            jac = span * 6.0 * u * (1.0 - u)
            sin_p = math.sin(p)
            cos_p = math.cos(p)
            # g = asin(H sin p) - p, by the angle-difference formulas
            y = min(1.0, H * sin_p)
            root = math.sqrt(1.0 - y * y)
            sin_g = y * cos_p - root * sin_p
            cos_g = root * cos_p + y * sin_p
            ring = _ring_integral(-cos_p * nz, sin_p * nu, alpha_p, ca_p, sa_p,
                                  cos_g * sz, sin_g * sigma, alpha_s, ca_s, sa_s)
            total += weights[q] * jac * sin_p * ring
    return total / math.pi


@njit(**JIT, inline="always")
def _arc(a, rho):
    """Where ``a + rho cos(phi - alpha) > 0``: (kind, half-width, cos and sin of it); kind
    0 nowhere, 1 the arc ``alpha -+ half``, 2 everywhere."""
    if rho <= abs(a):
        return (2 if a > 0.0 else 0), 0.0, 0.0, 0.0
    c = -a / rho
    return 1, math.acos(c), c, math.sqrt(max(0.0, 1.0 - c * c))


@njit(**JIT, inline="always")
def _primitive(a1, b1, c1, a2, b2, c2, x, c, s):
    """Antiderivative of (a1 + b1 cos x + c1 sin x)(a2 + b2 cos x + c2 sin x) at ``x``,
    with ``c = cos x`` and ``s = sin x``."""
    return (a1 * a2 * x + (a1 * b2 + b1 * a2) * s - (a1 * c2 + c1 * a2) * c
            + b1 * b2 * 0.5 * (x + s * c) + c1 * c2 * 0.5 * (x - s * c)
            + (b1 * c2 + c1 * b2) * 0.5 * s * s)


@njit(**JIT)
def _ring_integral(a1, rho1, alpha1, ca1, sa1, a2, rho2, alpha2, ca2, sa2):
    """Integral over phi in [0, 2 pi) of max(0, f1) max(0, f2), f = a + rho cos(phi - alpha)
    (``ca``, ``sa``: cosine and sine of ``alpha``).

    The ends of the arcs (and so of their intersection) are ``alpha -+ half``; their
    cosines and sines come from those of ``alpha`` and ``half`` (angle addition)."""
    k1, h1, ch1, sh1 = _arc(a1, rho1)
    k2, h2, ch2, sh2 = _arc(a2, rho2)
    if k1 == 0 or k2 == 0:
        return 0.0
    b1 = rho1 * ca1
    c1 = rho1 * sa1
    b2 = rho2 * ca2
    c2 = rho2 * sa2
    two_pi = 2.0 * math.pi
    if k1 == 2 and k2 == 2:
        return two_pi * (a1 * a2 + 0.5 * (b1 * b2 + c1 * c2))
    # ends (angle, cos, sin) of arc 1 (when partial) and arc 2
    x10 = alpha1 - h1
    c10 = ca1 * ch1 + sa1 * sh1
    s10 = sa1 * ch1 - ca1 * sh1
    x11 = alpha1 + h1
    c11 = ca1 * ch1 - sa1 * sh1
    s11 = sa1 * ch1 + ca1 * sh1
    x20 = alpha2 - h2
    c20 = ca2 * ch2 + sa2 * sh2
    s20 = sa2 * ch2 - ca2 * sh2
    x21 = alpha2 + h2
    c21 = ca2 * ch2 - sa2 * sh2
    s21 = sa2 * ch2 + ca2 * sh2
    if k1 == 2:
        return (_primitive(a1, b1, c1, a2, b2, c2, x21, c21, s21)
                - _primitive(a1, b1, c1, a2, b2, c2, x20, c20, s20))
    if k2 == 2:
        return (_primitive(a1, b1, c1, a2, b2, c2, x11, c11, s11)
                - _primitive(a1, b1, c1, a2, b2, c2, x10, c10, s10))
    # both partial: arc 2 shifted by whole turns to start within [x10, x10 + 2 pi)
    turns = math.floor((x20 - x10) / two_pi)
    lo2 = x20 - turns * two_pi
    total = 0.0
    for shift in (0.0, -two_pi):
        start = lo2 + shift
        end = start + 2.0 * h2
        if start >= x11 or end <= x10:
            continue
        if start > x10:
            lo = _primitive(a1, b1, c1, a2, b2, c2, start, c20, s20)
        else:
            lo = _primitive(a1, b1, c1, a2, b2, c2, x10, c10, s10)
        if end < x11:
            hi = _primitive(a1, b1, c1, a2, b2, c2, end, c21, s21)
        else:
            hi = _primitive(a1, b1, c1, a2, b2, c2, x11, c11, s11)
        total += hi - lo
    return total
