"""Numba kernels of the heating stage against the planet: cached rays tested against the
planet sphere at each step (:mod:`vfactor.heating`).

Kernels
-------
- :func:`planet_step` : per step, the cached escaping and blocked rays against the planet
  sphere (sides that cannot see it skipped), with the per-ray results of chosen rows.
- :func:`planet_uncached` : the same result re-tracing every ray against the vehicle.
- :func:`planet_ray_cos` : per-ray hit and cos(solar zenith) of chosen cached rows.

Shortcuts that keep the bits
----------------------------
Per step the cached path skips work whose result is known: the rays of a side that cannot
see the planet (each would miss: :func:`_sees_no_planet`), the cos(solar zenith) of rays
at steps where no point of the planet in sight is sunlit (each would be 0) and the
escaping rays of control-variate sides that are not specular (not used). Sums keep their
order, so the results are those of tracing everything (``tests/test_heating.py`` compares
them with ray-by-ray oracles and with the re-traced path, bit for bit).

References
----------
Ray-sphere intersection in the cancellation-free form ``t = c / (b + sqrt(b^2 - c))``:
Haines, Guenther, Akenine-Moller (2019), "Precision improvements for ray/sphere
intersection", Ray Tracing Gems, ch. 7 (the stable ``q`` form of the quadratic roots;
section from memory).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from .config import JIT, JIT_PARALLEL
from .side_rays import side_ray
from .traverse import any_hit

__all__ = ["planet_step", "planet_uncached", "planet_ray_cos", "CULL_MARGIN"]

#: Angle [rad] added to the bound beyond which a side cannot see the planet
#: (:func:`planet_step`): far above the rounding of the ray-sphere test (~1e-16 rad), far
#: below any angle that matters.
CULL_MARGIN = 1e-9


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


@njit(**JIT, inline="always")
def _sees_no_planet(px, py, pz, nx, ny, nz, reach, cx, cy, cz, radius):
    """True when no ray that leaves a point within ``reach`` of ``p`` into the hemisphere
    of ``n`` (``dot(d, n) >= 0``) can meet the sphere of centre ``c``.

    The sphere's half-angle seen from such a point is at most ``asin(R / (D - reach))``
    and the direction to its centre is within ``asin(reach / D)`` of the one seen from
    ``p`` (``D = |c - p|``), so if the normal is farther than ``pi/2`` plus both from that
    direction, every such ray misses (plane element to sphere, the view factor's "nothing
    seen" branch; :mod:`vfactor.planetview`), with :data:`CULL_MARGIN` to spare.
    """
    wx = cx - px
    wy = cy - py
    wz = cz - pz
    dist = math.sqrt(wx * wx + wy * wy + wz * wz)
    if dist - reach <= radius or reach >= dist:
        return False
    cos_lam = (nx * wx + ny * wy + nz * wz) / dist
    cos_lam = min(1.0, max(-1.0, cos_lam))
    limit = (0.5 * math.pi + math.asin(radius / (dist - reach)) + math.asin(reach / dist)
             + CULL_MARGIN)
    return math.acos(cos_lam) > limit


@njit(**JIT_PARALLEL)
def planet_step(sides, escaping, blocked, planet, replicates, row_slot, out_seen,
                out_blocked, out_rows):
    """Per step: the cached escaping and blocked rays of every (side, replicate) against
    the planet.

    Parameters
    ----------
    sides : tuple (order (s,) int64, position (s, 3) [m], normal (s, 3) [1], reach (s,) [m],
        seen (s,) bool) — the order in which the sides are handed to the threads (any
        permutation: the outputs do not depend on it), each side's centroid, outward
        normal, the largest distance of its points from the centroid, and whether its
        escaping rays are wanted (where not, ``out_seen`` is 0 for the side: a
        control-variate estimate uses the blocked rays alone)
    escaping, blocked : tuples (segment_start (g + 1,) int64, origin (e, 3) [m],
        direction (e, 3) [1]) — rays of segment ``i = side * replicates + r`` are rows
        ``segment_start[i]:[i+1]``
    planet : tuple (centre (3,) [m], radius [m], sun (3,) [1], dark bool) — in the body
        frame; ``dark``: no point of the planet that the vehicle sees is sunlit (every mu
        is 0; only the hits are computed)
    replicates : int
    row_slot : (b, g) int64 — for each of ``b`` row sets: where the per-ray results of
        segment ``i``'s escaping rays go in ``out_rows`` (first row), -1 for none
    out_seen : (2, g) float64, written — escaping rays that meet the planet, and the sum
        over them of max(0, cos solar zenith) at the point met
    out_blocked : (2, g) float64, written — the same for the blocked rays
    out_rows : tuple (hit (u,) bool, mu (u,) float64), written at the slots — per ray

    Notes
    -----
    A side that cannot see the planet (:func:`_sees_no_planet`) gets zeros without
    testing its rays: each of them would miss.
    """
    order, position, normal, reach, wanted = sides
    seg_e, org_e, dir_e = escaping
    seg_b, org_b, dir_b = blocked
    centre, radius, sun, dark = planet
    row_hit, row_mu = out_rows
    n_sets = row_slot.shape[0]
    for j in prange(order.shape[0]):
        s = order[j]
        culled = _sees_no_planet(position[s, 0], position[s, 1], position[s, 2],
                                 normal[s, 0], normal[s, 1], normal[s, 2], reach[s],
                                 centre[0], centre[1], centre[2], radius)
        for r in range(replicates):
            g = s * replicates + r
            slot0 = row_slot[0, g] if n_sets > 0 else -1
            slot1 = row_slot[1, g] if n_sets > 1 else -1
            if culled:
                out_seen[0, g] = 0.0
                out_seen[1, g] = 0.0
                out_blocked[0, g] = 0.0
                out_blocked[1, g] = 0.0
                if slot0 >= 0 or slot1 >= 0:
                    _zero_rows(seg_e[g + 1] - seg_e[g], row_hit, row_mu, slot0, slot1)
                continue
            if not wanted[s]:
                hits, cos_sum = 0.0, 0.0
            elif slot0 >= 0 or slot1 >= 0:
                hits, cos_sum = _segment_rows(seg_e[g], seg_e[g + 1], org_e, dir_e, centre,
                                              radius, sun, dark, row_hit, row_mu, slot0,
                                              slot1)
            else:
                hits, cos_sum = _segment_sums(seg_e[g], seg_e[g + 1], org_e, dir_e, centre,
                                              radius, sun, dark)
            out_seen[0, g] = hits
            out_seen[1, g] = cos_sum
            hits, cos_sum = _segment_sums(seg_b[g], seg_b[g + 1], org_b, dir_b, centre,
                                          radius, sun, dark)
            out_blocked[0, g] = hits
            out_blocked[1, g] = cos_sum


@njit(**JIT, inline="always")
def _sphere_hit(ox, oy, oz, dx, dy, dz, cx, cy, cz, radius):
    """The hit of :func:`_sphere` alone: the same operations up to the decision, without
    branches (a miss and a hit are about equally likely: branches would be mispredicted)."""
    wx = cx - ox
    wy = cy - oy
    wz = cz - oz
    b = dx * wx + dy * wy + dz * wz
    c = wx * wx + wy * wy + wz * wz - radius * radius
    return (b > 0.0) & (b * b - c >= 0.0)


@njit(**JIT, inline="always")
def _segment_sums(first, last, origin, direction, centre, radius, sun, dark):
    """Rays ``first:last`` against the planet: (rays that meet it, sum of their mu); where
    ``dark`` (every point seen has mu <= 0, so every mu is 0) the hits alone."""
    cx = centre[0]
    cy = centre[1]
    cz = centre[2]
    hits = 0.0
    cos_sum = 0.0
    if dark:
        for i in range(first, last):
            hit = _sphere_hit(origin[i, 0], origin[i, 1], origin[i, 2], direction[i, 0],
                              direction[i, 1], direction[i, 2], cx, cy, cz, radius)
            hits += 1.0 if hit else 0.0
        return hits, cos_sum
    sx = sun[0]
    sy = sun[1]
    sz = sun[2]
    for i in range(first, last):
        hit, mu = _sphere(origin[i, 0], origin[i, 1], origin[i, 2], direction[i, 0],
                          direction[i, 1], direction[i, 2], cx, cy, cz, radius, sx, sy, sz)
        if hit:
            hits += 1.0
            cos_sum += mu
    return hits, cos_sum


@njit(**JIT, inline="always")
def _segment_rows(first, last, origin, direction, centre, radius, sun, dark, row_hit,
                  row_mu, slot0, slot1):
    """:func:`_segment_sums`, and per ray whether it meets the planet and its mu, written
    from ``slot0`` and from ``slot1`` on (where >= 0)."""
    cx = centre[0]
    cy = centre[1]
    cz = centre[2]
    sx = sun[0]
    sy = sun[1]
    sz = sun[2]
    hits = 0.0
    cos_sum = 0.0
    for i in range(first, last):
        if dark:
            hit = _sphere_hit(origin[i, 0], origin[i, 1], origin[i, 2], direction[i, 0],
                              direction[i, 1], direction[i, 2], cx, cy, cz, radius)
            mu = 0.0
            hits += 1.0 if hit else 0.0
        else:
            hit, mu = _sphere(origin[i, 0], origin[i, 1], origin[i, 2], direction[i, 0],
                              direction[i, 1], direction[i, 2], cx, cy, cz, radius, sx, sy,
                              sz)
            if hit:
                hits += 1.0
                cos_sum += mu
        if slot0 >= 0:
            row_hit[slot0 + i - first] = hit
            row_mu[slot0 + i - first] = mu
        if slot1 >= 0:
            row_hit[slot1 + i - first] = hit
            row_mu[slot1 + i - first] = mu
    return hits, cos_sum


@njit(**JIT, inline="always")
def _zero_rows(count, row_hit, row_mu, slot0, slot1):
    """Rows of a side that cannot see the planet: no ray meets it."""
    for i in range(count):
        if slot0 >= 0:
            row_hit[slot0 + i] = False
            row_mu[slot0 + i] = 0.0
        if slot1 >= 0:
            row_hit[slot1 + i] = False
            row_mu[slot1 + i] = 0.0


@njit(**JIT_PARALLEL)
def planet_uncached(arrays, vertices, triangles, normals, side_facet, side_sign, side_key,
                    seed, replicates, per_replicate, centre, radius, sun, out_seen, out_blocked):
    """Per step, without the cache: re-trace every ray against the vehicle, then the planet.

    Same outputs (segment ``s * replicates + r``) and the same rays as
    :func:`vfactor.tracing.heat_kernels.trace_targets` + ``fill_cache`` +
    :func:`planet_step`, hence the same numbers; used as the reference of the benchmark.

    Parameters
    ----------
    side_key : tuple (stream (s,) uint64, rank (s,) int64) — each side's planet-ray
        sequence (:func:`vfactor.tracing.side_rays.planet_ray_keys`)
    out_seen : (2, g) float64, written — rays that escape the vehicle and meet the planet,
        and the sum over them of max(0, cos solar zenith)
    out_blocked : (2, g) float64, written — the same for the rays the vehicle blocks (the
        blocked rays of ``fill_cache`` against the planet)
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
        stream = side_key[0][s]
        k0 = side_key[1][s] * per_replicate
        for r in range(replicates):
            hits = 0.0
            cos_sum = 0.0
            blocked = 0.0
            blocked_cos = 0.0
            for k in range(per_replicate):
                x, y, z, dx, dy, dz = side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k0 + k)
                hit, mu = _sphere(x, y, z, dx, dy, dz, cx, cy, cz, radius, sx, sy, sz)
                if not hit:
                    continue
                if any_hit(arrays, x, y, z, dx, dy, dz, np.inf, f):
                    blocked += 1.0
                    blocked_cos += mu
                    continue
                hits += 1.0
                cos_sum += mu
            g = s * replicates + r
            out_seen[0, g] = hits
            out_seen[1, g] = cos_sum
            out_blocked[0, g] = blocked
            out_blocked[1, g] = blocked_cos


@njit(**JIT_PARALLEL)
def planet_ray_cos(origin, direction, rows, centre, radius, sun, out_hit, out_cos):
    """Per-ray form of :func:`planet_step` for selected cached rows.

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
