"""Numba kernels of the albedo factor of plane elements above a sunlit sphere.

The quadrature and its sources are described in :mod:`vfactor.planetview`, whose
:func:`vfactor.planetview.plate_sphere_albedo_factor` validates the arguments and calls
:func:`albedo_factors`.
"""

from __future__ import annotations

import math

from numba import njit, prange

from .config import JIT, JIT_PARALLEL

__all__ = ["albedo_factors"]


@njit(**JIT_PARALLEL)
def albedo_factors(H, normal, sun, up, nodes, weights, out):
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
    # the cuts 0 <= c1 <= c2 <= pmax, in scalars (no allocation per element); a missing
    # cut is pmax, which leaves an empty piece
    c1 = pmax
    c2 = pmax
    p = math.atan2(abs(nz), nu)
    if 0.0 < p < pmax:
        c1 = p
    g = math.atan2(abs(sz), sigma)
    if 0.0 < g < gmax:
        p = math.atan2(math.sin(g), H - math.cos(g))
        if 0.0 < p < pmax:
            if p < c1:
                c1, c2 = p, c1
            else:
                c2 = p
    total = 0.0
    for piece in range(3):
        if piece == 0:
            a, b = 0.0, c1
        elif piece == 1:
            a, b = c1, c2
        else:
            a, b = c2, pmax
        span = b - a
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
def _arc_ends(alpha, ca, sa, half, ch, sh):
    """The ends ``alpha -+ half`` of an arc with their cosines and sines (angle addition,
    from ``ca, sa`` of ``alpha`` and ``ch, sh`` of ``half``)."""
    return (alpha - half, ca * ch + sa * sh, sa * ch - ca * sh,
            alpha + half, ca * ch - sa * sh, sa * ch + ca * sh)


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
    x10, c10, s10, x11, c11, s11 = _arc_ends(alpha1, ca1, sa1, h1, ch1, sh1)
    x20, c20, s20, x21, c21, s21 = _arc_ends(alpha2, ca2, sa2, h2, ch2, sh2)
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
