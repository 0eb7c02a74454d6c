"""Fused numba kernels of the orbital heating stage (:mod:`vfactor.heating`).

A *side* is one active side of one facet (``side_facet[s]``, ``side_sign[s]`` = +1 front,
-1 back); its outward normal is ``side_sign * normals[facet]``. Every random number is
``rqmc_uniform4(seed, stream, replicate, k)`` with ``stream = purpose * STREAM_STRIDE + 2 *
facet + (0 front | 1 back)``, so each side's rays are a pure function of the seed and the
side: results are bit-identical for any thread count.

Each side draws ``replicates`` independent randomised quasi-Monte Carlo sequences of
``per_replicate`` points (see :mod:`vfactor.tracing.sampling`); the kernels tally per
(side, replicate), which gives an honest one-sigma error from the spread of the
replicates.

Kernels
-------
- :func:`trace_targets` : cosine-weighted rays from each side, first hit -> target node
  (``-1`` escapes, ``-2`` lost on an inert side). Done once for rigid geometry.
- :func:`fill_escaping` : origins and directions of the escaping rays, or of the blocked
  ones (regenerated, not traced), grouped by (side, replicate).
- :func:`segment_escapes` : escaping rays per (side, replicate).
- :func:`mirror_rays` : mirror images of cached rays about their side's normal.
- :func:`planet_cached` : per step, escaping rays against the planet sphere.
- :func:`planet_uncached` : the same result re-tracing every ray against the vehicle.
- :func:`sun_lit_mask` : per step, sample points of each side traced toward the solar disk.
- :func:`sun_mirror_rays`, :func:`planet_ray_cos` : rays and weights of specular shares.
- :func:`specular_chains` : specular reflection chains of given rays inside the vehicle.

References
----------
Ray-sphere intersection in the cancellation-free form ``t = c / (b + sqrt(b^2 - c))``:
Haines, Guenther, Akenine-Moller (2019), "Precision improvements for ray/sphere
intersection", Ray Tracing Gems, ch. 7 (the stable ``q`` form of the quadratic roots;
section from memory).
Mirror reflection ``r = d - 2 (d.n) n``: law of specular reflection (common practice).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from .config import JIT, JIT_PARALLEL
from .rng import STREAM_STRIDE
from .sampling import cone_direction, cosine_direction, rqmc_uniform4, triangle_point
from .traverse import any_hit, closest_hit

__all__ = [
    "PURPOSE_PLANET",
    "PURPOSE_SUN",
    "side_stream",
    "trace_targets",
    "fill_escaping",
    "segment_escapes",
    "mirror_rays",
    "planet_cached",
    "planet_uncached",
    "sun_lit_mask",
    "sun_mirror_rays",
    "planet_ray_cos",
    "specular_chains",
    "TARGET_ESCAPE",
    "TARGET_INERT",
]

#: Purpose offsets of the random streams (times STREAM_STRIDE).
PURPOSE_PLANET = 21
PURPOSE_SUN = 22

TARGET_ESCAPE = -1
TARGET_INERT = -2

_STRIDE = np.uint64(STREAM_STRIDE)


@njit(**JIT)
def side_stream(purpose, facet, sign):
    """Random stream of one facet side for one purpose (uint64)."""
    side = 0 if sign > 0 else 1
    return np.uint64(purpose) * _STRIDE + np.uint64(2 * facet + side)


@njit(**JIT, inline="always")
def _side_ray(vertices, triangles, normals, facet, sign, seed, stream, replicate, k):
    u0, u1, u2, u3 = rqmc_uniform4(seed, stream, replicate, k)
    x, y, z = triangle_point(vertices, triangles, facet, u0, u1)
    nx = sign * normals[facet, 0]
    ny = sign * normals[facet, 1]
    nz = sign * normals[facet, 2]
    dx, dy, dz = cosine_direction(nx, ny, nz, u2, u3)
    return x, y, z, dx, dy, dz


@njit(**JIT_PARALLEL)
def trace_targets(arrays, vertices, triangles, normals, side_facet, side_sign, facet_node,
                  seed, replicates, per_replicate, out_target):
    """First hit of every cosine-weighted ray of every side.

    Parameters
    ----------
    arrays : tuple — ``Scene.arrays``
    vertices (v, 3) [m], triangles (f, 3) int64, normals (f, 3) [1]
    side_facet (s,) int64, side_sign (s,) int64 (+1 front, -1 back)
    facet_node : (f, 2) int64 — node of the front (column 0) and back (column 1) side, -1 inert
    seed : uint64
    replicates, per_replicate : int
    out_target : (s, replicates * per_replicate) int32, written
        Node index of the side hit first, ``TARGET_ESCAPE`` or ``TARGET_INERT``; column
        ``replicate * per_replicate + k``.
    """
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        stream = side_stream(PURPOSE_PLANET, f, sign)
        for r in range(replicates):
            for k in range(per_replicate):
                x, y, z, dx, dy, dz = _side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k)
                hit, t, front = closest_hit(arrays, x, y, z, dx, dy, dz, np.inf, f)
                if hit < 0:
                    target = TARGET_ESCAPE
                else:
                    node = facet_node[hit, 0] if front else facet_node[hit, 1]
                    target = node if node >= 0 else TARGET_INERT
                out_target[s, r * per_replicate + k] = target


@njit(**JIT_PARALLEL)
def fill_escaping(vertices, triangles, normals, side_facet, side_sign, seed, replicates,
                  per_replicate, target, segment_start, escaping, use, out_origin,
                  out_direction):
    """Store origin and direction of the escaping (or of the blocked) rays, grouped by
    (side, replicate).

    Parameters
    ----------
    target : (s, replicates * per_replicate) int32 — from :func:`trace_targets`
    segment_start : (s * replicates + 1,) int64 — first row of segment ``s * replicates + r``
    escaping : bool — True: the rays that escape the vehicle; False: the rays it blocks
    use : (s,) bool — sides whose rays are stored (the others have empty segments)
    out_origin, out_direction : (e, 3) float64, written [m], [1]
    """
    for s in prange(side_facet.shape[0]):
        if not use[s]:
            continue
        f = side_facet[s]
        sign = side_sign[s]
        stream = side_stream(PURPOSE_PLANET, f, sign)
        for r in range(replicates):
            row = segment_start[s * replicates + r]
            for k in range(per_replicate):
                if (target[s, r * per_replicate + k] == TARGET_ESCAPE) != escaping:
                    continue
                x, y, z, dx, dy, dz = _side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k)
                out_origin[row, 0] = x
                out_origin[row, 1] = y
                out_origin[row, 2] = z
                out_direction[row, 0] = dx
                out_direction[row, 1] = dy
                out_direction[row, 2] = dz
                row += 1


@njit(**JIT_PARALLEL)
def segment_escapes(target, replicates, per_replicate, out):
    """Escaping rays (``TARGET_ESCAPE``) of each (side, replicate): ``out[s * replicates +
    r]`` counts row ``s``, columns ``r * per_replicate ..`` of ``target`` (int64, written)."""
    for s in prange(target.shape[0]):
        for r in range(replicates):
            count = 0
            for k in range(per_replicate):
                if target[s, r * per_replicate + k] == TARGET_ESCAPE:
                    count += 1
            out[s * replicates + r] = count


@njit(**JIT_PARALLEL)
def mirror_rays(rows, owner, origin, direction, side_normal, out_origin, out_direction):
    """Mirror images of cached rays: ``out_direction[i] = -d + 2 (d.n) n`` for ``d =
    direction[rows[i]]`` and ``n = side_normal[owner[i]]`` (a ray arriving along ``-d``
    leaves along the mirror direction), ``out_origin[i] = origin[rows[i]]``."""
    for i in prange(rows.shape[0]):
        q = rows[i]
        o = owner[i]
        dn = (direction[q, 0] * side_normal[o, 0] + direction[q, 1] * side_normal[o, 1]
              + direction[q, 2] * side_normal[o, 2])
        for c in range(3):
            out_direction[i, c] = -direction[q, c] + 2.0 * dn * side_normal[o, c]
            out_origin[i, c] = origin[q, c]


@njit(**JIT, inline="always")
def _sphere(ox, oy, oz, dx, dy, dz, cx, cy, cz, radius, sx, sy, sz):
    """Ray against the planet sphere: (hit, cosine of the solar zenith at the hit point)."""
    wx = cx - ox
    wy = cy - oy
    wz = cz - oz
    b = dx * wx + dy * wy + dz * wz
    if b <= 0.0:
        return False, 0.0
    c = wx * wx + wy * wy + wz * wz - radius * radius
    disc = b * b - c
    if disc < 0.0:
        return False, 0.0
    t = c / (b + math.sqrt(disc)) if c > 0.0 else 0.0
    px = ox + t * dx - cx
    py = oy + t * dy - cy
    pz = oz + t * dz - cz
    mu = (px * sx + py * sy + pz * sz) / radius
    return True, mu if mu > 0.0 else 0.0


@njit(**JIT_PARALLEL)
def planet_cached(segment_start, origin, direction, centre, radius, sun, out_hits, out_cos):
    """Per step: the cached escaping rays of every (side, replicate) against the planet.

    Parameters
    ----------
    segment_start : (g + 1,) int64 — rows of segment ``i`` are ``segment_start[i]:[i+1]``
    origin, direction : (e, 3) float64 [m], [1]
    centre : (3,) float64 — planet centre in the body frame [m]
    radius : float — planet radius [m]
    sun : (3,) float64 — unit vector toward the Sun [1]
    out_hits : (g,) float64, written — rays that meet the planet
    out_cos : (g,) float64, written — sum over those rays of max(0, cos solar zenith)
    """
    cx = centre[0]
    cy = centre[1]
    cz = centre[2]
    sx = sun[0]
    sy = sun[1]
    sz = sun[2]
    for g in prange(segment_start.shape[0] - 1):
        hits = 0.0
        cos_sum = 0.0
        for i in range(segment_start[g], segment_start[g + 1]):
            hit, mu = _sphere(origin[i, 0], origin[i, 1], origin[i, 2], direction[i, 0],
                              direction[i, 1], direction[i, 2], cx, cy, cz, radius,
                              sx, sy, sz)
            if hit:
                hits += 1.0
                cos_sum += mu
        out_hits[g] = hits
        out_cos[g] = cos_sum


@njit(**JIT_PARALLEL)
def planet_uncached(arrays, vertices, triangles, normals, side_facet, side_sign, seed,
                    replicates, per_replicate, centre, radius, sun, out_hits, out_cos,
                    out_blocked):
    """Per step, without the cache: re-trace every ray against the vehicle, then the planet.

    Same outputs (segment ``s * replicates + r``) and the same rays as
    :func:`trace_targets` + :func:`fill_escaping` + :func:`planet_cached`, hence the same
    numbers; used for articulated geometry and as the reference of the benchmark.
    ``out_blocked`` (g,) float64, written: rays the vehicle blocks that would meet the
    planet (the blocked cache of ``fill_escaping(..., escaping=False)`` against the planet).
    """
    cx = centre[0]
    cy = centre[1]
    cz = centre[2]
    sx = sun[0]
    sy = sun[1]
    sz = sun[2]
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        stream = side_stream(PURPOSE_PLANET, f, sign)
        for r in range(replicates):
            hits = 0.0
            cos_sum = 0.0
            blocked = 0.0
            for k in range(per_replicate):
                x, y, z, dx, dy, dz = _side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k)
                hit, mu = _sphere(x, y, z, dx, dy, dz, cx, cy, cz, radius, sx, sy, sz)
                if not hit:
                    continue
                if any_hit(arrays, x, y, z, dx, dy, dz, np.inf, f):
                    blocked += 1.0
                    continue
                hits += 1.0
                cos_sum += mu
            out_hits[s * replicates + r] = hits
            out_cos[s * replicates + r] = cos_sum
            out_blocked[s * replicates + r] = blocked


@njit(**JIT)
def _chain(arrays, normals, facet_node, facet_absorptivity, facet_specular, ox, oy, oz,
           dx, dy, dz, exclude, weight, max_bounces, absorbed, diffuse):
    """Follow one specularly reflected ray; returns (escaped, inert) power [W].

    At each side met: ``absorptivity`` is absorbed there, ``(1 - a)(1 - s)`` joins that
    node's diffuse pool, ``(1 - a) s`` is reflected on as a mirror ray. After
    ``max_bounces`` the rest joins the diffuse pool of the last node, so no energy is lost.
    """
    w = weight
    escaped = 0.0
    inert = 0.0
    node = -1
    for bounce in range(max_bounces):
        hit, t, front = closest_hit(arrays, ox, oy, oz, dx, dy, dz, np.inf, exclude)
        if hit < 0:
            escaped += w
            return escaped, inert
        col = 0 if front else 1
        node = facet_node[hit, col]
        if node < 0:
            inert += w
            return escaped, inert
        a = facet_absorptivity[hit, col]
        sp = facet_specular[hit, col]
        absorbed[node] += w * a
        diffuse[node] += w * (1.0 - a) * (1.0 - sp)
        w = w * (1.0 - a) * sp
        if w <= 0.0:
            return escaped, inert
        ox = ox + t * dx
        oy = oy + t * dy
        oz = oz + t * dz
        nx = normals[hit, 0]
        ny = normals[hit, 1]
        nz = normals[hit, 2]
        dn = dx * nx + dy * ny + dz * nz
        dx = dx - 2.0 * dn * nx
        dy = dy - 2.0 * dn * ny
        dz = dz - 2.0 * dn * nz
        exclude = hit
    diffuse[node] += w
    return escaped, inert


@njit(**JIT_PARALLEL)
def specular_chains(arrays, normals, facet_node, facet_absorptivity, facet_specular,
                    origin, direction, exclude, weight, replicate, chunk, max_bounces,
                    out_absorbed, out_diffuse, out_escaped, out_inert):
    """Specular reflection chains of a batch of rays, tallied per fixed chunk of rays.

    Parameters
    ----------
    arrays : tuple — ``Scene.arrays``
    normals : (f, 3) float64 [1]
    facet_node : (f, 2) int64 — node of the front/back side, -1 inert
    facet_absorptivity, facet_specular : (f, 2) float64 — band properties per side [1]
    origin, direction : (m, 3) float64 — start of each reflected ray [m], unit direction [1]
    exclude : (m,) int64 — facet the ray leaves
    weight : (m,) float64 — power carried [W]
    replicate : (m,) int64 — replicate the ray belongs to (tally column)
    chunk : int — rays per tally row (fixed, so sums do not depend on the thread count)
    max_bounces : int
    out_absorbed, out_diffuse : (c, replicates, n) float64, written — per chunk,
        replicate and node [W]
    out_escaped, out_inert : (c,) float64, written [W]
    """
    m = origin.shape[0]
    for c in prange(out_escaped.shape[0]):
        for r in range(out_absorbed.shape[1]):
            for j in range(out_absorbed.shape[2]):
                out_absorbed[c, r, j] = 0.0
                out_diffuse[c, r, j] = 0.0
        esc = 0.0
        ine = 0.0
        for i in range(c * chunk, min(m, (c + 1) * chunk)):
            r = replicate[i]
            e, q = _chain(arrays, normals, facet_node, facet_absorptivity, facet_specular,
                          origin[i, 0], origin[i, 1], origin[i, 2], direction[i, 0],
                          direction[i, 1], direction[i, 2], exclude[i], weight[i],
                          max_bounces, out_absorbed[c, r], out_diffuse[c, r])
            esc += e
            ine += q
        out_escaped[c] = esc
        out_inert[c] = ine


@njit(**JIT_PARALLEL)
def sun_mirror_rays(vertices, triangles, normals, side_facet, side_sign, seed, replicates,
                    per_replicate, sun, cos_half_angle, lit_mask, out_origin, out_direction):
    """Regenerate the sun sample rays of the given sides and mirror them about the side.

    Parameters
    ----------
    lit_mask : (s, replicates * per_replicate) bool — which samples are unshadowed
    out_origin, out_direction : (s, replicates * per_replicate, 3) float64, written
    """
    sx = sun[0]
    sy = sun[1]
    sz = sun[2]
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        nx = sign * normals[f, 0]
        ny = sign * normals[f, 1]
        nz = sign * normals[f, 2]
        stream = side_stream(PURPOSE_SUN, f, sign)
        for r in range(replicates):
            for k in range(per_replicate):
                j = r * per_replicate + k
                if not lit_mask[s, j]:
                    continue
                u0, u1, u2, u3 = rqmc_uniform4(seed, stream, r, k)
                x, y, z = triangle_point(vertices, triangles, f, u0, u1)
                dx, dy, dz = cone_direction(sx, sy, sz, cos_half_angle, u2, u3)
                # incoming light travels along -d; mirror: -d + 2 (d.n) n
                dn = dx * nx + dy * ny + dz * nz
                out_origin[s, j, 0] = x
                out_origin[s, j, 1] = y
                out_origin[s, j, 2] = z
                out_direction[s, j, 0] = -dx + 2.0 * dn * nx
                out_direction[s, j, 1] = -dy + 2.0 * dn * ny
                out_direction[s, j, 2] = -dz + 2.0 * dn * nz


@njit(**JIT_PARALLEL)
def sun_lit_mask(arrays, vertices, triangles, normals, side_facet, side_sign, seed,
                 replicates, per_replicate, sun, cos_half_angle, out_mask):
    """Per step: which sample points of each side see the Sun.

    Points are uniform on the facet; each is traced toward a point of the solar disk
    (direction uniform in the cone of half-angle ``acos(cos_half_angle)`` about ``sun``),
    so self-shadow edges get the penumbra of the disk. Sides facing away from the Sun
    (``dot(n, sun) <= 0``) are not traced.

    Parameters
    ----------
    arrays : tuple — ``Scene.arrays``
    vertices (v, 3) [m], triangles (f, 3) int64, normals (f, 3) [1]
    side_facet (s,) int64, side_sign (s,) int64
    seed : uint64; replicates, per_replicate : int
    sun : (3,) float64 — unit vector toward the centre of the Sun [1]
    cos_half_angle : float — cosine of the Sun's angular radius [1]
    out_mask : (s, replicates * per_replicate) bool, written — True where unshadowed
    """
    sx = sun[0]
    sy = sun[1]
    sz = sun[2]
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        cos_t = sign * (normals[f, 0] * sx + normals[f, 1] * sy + normals[f, 2] * sz)
        stream = side_stream(PURPOSE_SUN, f, sign)
        for r in range(replicates):
            for k in range(per_replicate):
                j = r * per_replicate + k
                if cos_t <= 0.0:
                    out_mask[s, j] = False
                    continue
                u0, u1, u2, u3 = rqmc_uniform4(seed, stream, r, k)
                x, y, z = triangle_point(vertices, triangles, f, u0, u1)
                dx, dy, dz = cone_direction(sx, sy, sz, cos_half_angle, u2, u3)
                out_mask[s, j] = not any_hit(arrays, x, y, z, dx, dy, dz, np.inf, f)


@njit(**JIT_PARALLEL)
def planet_ray_cos(origin, direction, rows, centre, radius, sun, out_hit, out_cos):
    """Per-ray form of :func:`planet_cached` for selected cached rows.

    rows : (m,) int64 — rows of ``origin``/``direction`` to test
    out_hit : (m,) bool, written; out_cos : (m,) float64, written
    """
    cx = centre[0]
    cy = centre[1]
    cz = centre[2]
    for j in prange(rows.shape[0]):
        i = rows[j]
        hit, mu = _sphere(origin[i, 0], origin[i, 1], origin[i, 2], direction[i, 0],
                          direction[i, 1], direction[i, 2], cx, cy, cz, radius,
                          sun[0], sun[1], sun[2])
        out_hit[j] = hit
        out_cos[j] = mu
