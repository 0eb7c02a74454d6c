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
- :func:`fill_cache` : both of them in one pass.
- :func:`segment_escapes` : escaping rays per (side, replicate).
- :func:`mirror_rays` : mirror images of cached rays about their side's normal.
- :func:`planet_step` : per step, the cached escaping and blocked rays against the planet
  sphere (sides that cannot see it skipped), with the per-ray results of chosen rows.
- :func:`planet_uncached` : the same result re-tracing every ray against the vehicle.
- :func:`sun_lit_mask` : per step, sample points of each side traced toward the solar disk.
- :func:`sun_mirror_rays`, :func:`planet_ray_cos` : rays and weights of specular shares.
- :func:`specular_chains` : specular reflection chains of given rays inside the vehicle.
- :func:`record_chains` : the facets met by the chains of given rays, once (rigid
  geometry), so that a step replays them instead of tracing (:func:`planet_mirror_tallies`).
- :func:`planet_mirror_tallies` : per step, the specular shares of the cached planet rays
  of a band: weights, then the chains replayed or traced, tallied per chunk.
- :func:`replicate_estimates` : per (side, replicate) estimates of each source.
- :func:`replicate_sums`, :func:`side_tallies`, :func:`pool_sums`, :func:`facet_shares` :
  per node, replicate and facet sums of per-side values, in side order.

Shortcuts that keep the bits
----------------------------
Per step the cached path skips work whose result is known: the rays of a side that cannot
see the planet (each would miss: :func:`_sees_no_planet`), the cos(solar zenith) of rays
at steps where no point of the planet in sight is sunlit (each would be 0), the escaping
rays of control-variate sides that are not specular (not used), and the tracing of the
mirror chains of cached planet rays (replayed from :func:`record_chains`: the same
operations in the same order). Sums keep their order, so the results are those of tracing
everything (``tests/test_heating.py`` compares them with ray-by-ray oracles and with the
re-traced path, bit for bit).

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
    "fill_cache",
    "segment_escapes",
    "mirror_rays",
    "planet_step",
    "planet_uncached",
    "sun_lit_mask",
    "sun_mirror_rays",
    "planet_ray_cos",
    "specular_chains",
    "record_chains",
    "planet_mirror_tallies",
    "replicate_sums",
    "side_tallies",
    "replicate_estimates",
    "pool_sums",
    "facet_shares",
    "CHAIN_ESCAPE",
    "CHAIN_UNUSED",
    "CHAIN_CHUNK",
    "CULL_MARGIN",
    "TARGET_ESCAPE",
    "TARGET_INERT",
]

#: Purpose offsets of the random streams (times STREAM_STRIDE).
PURPOSE_PLANET = 21
PURPOSE_SUN = 22

TARGET_ESCAPE = -1
TARGET_INERT = -2

#: Entry of a recorded chain (:func:`record_chains`) for a ray that leaves the vehicle;
#: the other entries are ``2 * facet + (0 front | 1 back)`` of the side met.
CHAIN_ESCAPE = -1

#: Entry of :func:`record_chains` after the end of a chain.
CHAIN_UNUSED = -2

#: Rays per tally row of the chain kernels (fixed, so that sums do not depend on the
#: thread count).
CHAIN_CHUNK = 4096

#: Angle [rad] added to the bound beyond which a side cannot see the planet
#: (:func:`planet_step`): far above the rounding of the ray-sphere test (~1e-16 rad), far
#: below any angle that matters.
CULL_MARGIN = 1e-9

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
def fill_cache(vertices, triangles, normals, side_facet, side_sign, seed, replicates,
               per_replicate, target, escape_start, escape_use, blocked_start, blocked_use,
               out_escape, out_blocked):
    """:func:`fill_escaping` of the escaping rays and of the blocked rays in one pass (each
    ray drawn once, only if it is stored).

    Parameters
    ----------
    escape_start, blocked_start : (s * replicates + 1,) int64 — first row of each segment
        in the escaping and in the blocked rays
    escape_use, blocked_use : (s,) bool — sides whose escaping / blocked rays are stored
    out_escape, out_blocked : tuples (origin (e, 3), direction (e, 3)) float64, written
    """
    esc_origin, esc_direction = out_escape
    blk_origin, blk_direction = out_blocked
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        keep_escaping = escape_use[s]
        keep_blocked = blocked_use[s]
        if not (keep_escaping or keep_blocked):
            continue
        stream = side_stream(PURPOSE_PLANET, f, sign)
        for r in range(replicates):
            esc_row = escape_start[s * replicates + r]
            blk_row = blocked_start[s * replicates + r]
            for k in range(per_replicate):
                escapes = target[s, r * per_replicate + k] == TARGET_ESCAPE
                if not (keep_escaping if escapes else keep_blocked):
                    continue
                x, y, z, dx, dy, dz = _side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k)
                if escapes:
                    origin, direction, row = esc_origin, esc_direction, esc_row
                    esc_row += 1
                else:
                    origin, direction, row = blk_origin, blk_direction, blk_row
                    blk_row += 1
                origin[row, 0] = x
                origin[row, 1] = y
                origin[row, 2] = z
                direction[row, 0] = dx
                direction[row, 1] = dy
                direction[row, 2] = dz


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
def planet_uncached(arrays, vertices, triangles, normals, side_facet, side_sign, seed,
                    replicates, per_replicate, centre, radius, sun, out_seen, out_blocked):
    """Per step, without the cache: re-trace every ray against the vehicle, then the planet.

    Same outputs (segment ``s * replicates + r``) and the same rays as
    :func:`trace_targets` + :func:`fill_escaping` + :func:`planet_step`, hence the same
    numbers; used as the reference of the benchmark.

    Parameters
    ----------
    out_seen : (2, g) float64, written — rays that escape the vehicle and meet the planet,
        and the sum over them of max(0, cos solar zenith)
    out_blocked : (2, g) float64, written — the same for the rays the vehicle blocks (the
        blocked cache of ``fill_escaping(..., escaping=False)`` against the planet)
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
            blocked_cos = 0.0
            for k in range(per_replicate):
                x, y, z, dx, dy, dz = _side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k)
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
def record_chains(scene, origin, direction, exclude, out_entry):
    """The sides met by the specular chain of each ray, as :func:`_chain` meets them.

    Parameters
    ----------
    scene : tuple (arrays, normals, facet_node, facet_absorptivity, facet_specular,
        max_bounces) — as :func:`specular_chains` takes them
    origin, direction : (r, 3) float64 — start [m] and unit direction [1] of each ray
    exclude : (r,) int64 — facet the ray leaves
    out_entry : (r, max_bounces) int32, written — per bounce ``2 * facet + (0 front | 1
        back)`` of the side met, or :data:`CHAIN_ESCAPE`; then :data:`CHAIN_UNUSED`

    Notes
    -----
    A chain is recorded while it can go on for some positive weight: it stops at an
    escape, on an inert side, where the side reflects nothing specularly (``(1 - a) s``
    is zero: then :func:`_chain` stops for any weight) or after ``max_bounces``. The
    geometry of a chain does not depend on its weight, so :func:`_replay` of a record
    makes the very operations of :func:`_chain` on the same ray, for any weight.
    """
    arrays, normals, facet_node, facet_absorptivity, facet_specular, max_bounces = scene
    for i in prange(origin.shape[0]):
        for b in range(max_bounces):
            out_entry[i, b] = CHAIN_UNUSED
        ox = origin[i, 0]
        oy = origin[i, 1]
        oz = origin[i, 2]
        dx = direction[i, 0]
        dy = direction[i, 1]
        dz = direction[i, 2]
        leave = exclude[i]
        for bounce in range(max_bounces):
            hit, t, front = closest_hit(arrays, ox, oy, oz, dx, dy, dz, np.inf, leave)
            if hit < 0:
                out_entry[i, bounce] = CHAIN_ESCAPE
                break
            col = 0 if front else 1
            out_entry[i, bounce] = 2 * hit + col
            if facet_node[hit, col] < 0:
                break
            if (1.0 - facet_absorptivity[hit, col]) <= 0.0 or facet_specular[hit, col] <= 0.0:
                break
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
            leave = hit


@njit(**JIT)
def _replay(entry, first, last, facet_node, facet_absorptivity, facet_specular, weight,
            absorbed, diffuse):
    """:func:`_chain` of a ray whose chain :func:`record_chains` recorded in
    ``entry[first:last]``: the same operations on the weights, the sides looked up
    instead of traced. Returns (escaped, inert) power [W]."""
    w = weight
    escaped = 0.0
    inert = 0.0
    node = -1
    for q in range(first, last):
        code = entry[q]
        if code == CHAIN_ESCAPE:
            escaped += w
            return escaped, inert
        hit = code >> 1
        col = code & 1
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
    # the record holds max_bounces sides met and the weight is still positive
    diffuse[node] += w
    return escaped, inert


#: How the specular share of a (side, replicate) is carried by its rays that meet the
#: planet (:func:`planet_mirror_tallies`).
CARRY_MU = 0        # weight = coefficient * scale * mu of the ray (plain albedo estimate)
CARRY_EVEN = 1      # the share split evenly over the rays (planet IR)
CARRY_BY_MU = 2     # the share split in proportion to mu (albedo by control variate)


@njit(**JIT_PARALLEL)
def planet_mirror_tallies(scene, band, step, chains, out_work, out_uncarried, out_absorbed,
                          out_diffuse, out_escaped, out_inert):
    """Per step: the specular shares of one band carried by the cached planet rays of its
    specular sides, through their mirror chains; tallied per chunk of
    :data:`CHAIN_CHUNK` carrying rays.

    Parameters
    ----------
    scene : tuple — as :func:`specular_chains` (``arrays, normals, facet_node,
        facet_absorptivity, facet_specular, max_bounces``)
    band : tuple (spec_sides (q,) int64, side_first (q + 1,) int64, owner (u,) int64,
        replicate (u,) int64, mirror_origin (u, 3), mirror_direction (u, 3),
        side_facet (s,) int64, spec_share (s,) float64, coefficient (s,) float64) — the
        band's rows (cached escaping rays of its specular sides, side by side: rows of
        ``spec_sides[j]`` are ``side_first[j]:[j+1]``), the mirror ray of each row, each
        side's facet, specular share ``(1 - a) s`` and the coefficient of ``CARRY_MU``
    step : tuple (row_hit (u,) bool, row_mu (u,) float64, seen (2, s * m) float64,
        rep (s, m) float64, carry (s,) int64, albedo float, solar float) — per row: meets
        the planet, max(0, cos solar zenith) there; per segment: rays that meet the planet
        and the sum of their mu (:func:`planet_step`); the replicate estimates of the
        incident power [W]; how each side's share is carried; the planet albedo [1] and
        solar constant [W m-2] of ``CARRY_MU``
    chains : tuple (replay bool, chain_start (u + 1,) int64, chain_entry (c,) int32) —
        replay the records of :func:`record_chains` (True) or trace the chains
    out_work : tuple (weight (u,) float64, kept (u,) int64) — scratch: the weight of each
        row, and the rows that carry power
    out_uncarried : (s, m) float64, written at the specular sides — specular power of a
        (side, replicate) that no ray carries [W] (to be reflected diffusely)
    out_absorbed, out_diffuse : (c, m, n) float64, written — per chunk, replicate and node
    out_escaped, out_inert : (c,) float64, written

    Returns
    -------
    int — number of carrying rays (rows ``0 .. ceil(kept / CHAIN_CHUNK) - 1`` of the
    tallies are written)

    Notes
    -----
    ``CARRY_MU``: ``w = coefficient * albedo * solar * mu`` (the estimate's own terms);
    ``CARRY_EVEN``: the (side, replicate)'s share ``spec_share * rep / m`` of the mean
    over replicates split evenly over its ``seen`` rays; ``CARRY_BY_MU``: split in
    proportion to their mu. A row carries power when it meets the planet with a non-zero
    weight; chunks follow the row order, so the tallies are those of
    :func:`specular_chains` on the kept rows.
    """
    arrays, normals, facet_node, f_abs, f_spec, max_bounces = scene
    spec_sides, side_first, owner, replicate, m_origin, m_direction, side_facet, \
        spec_share, coefficient = band
    row_hit, row_mu, seen, rep, carry, albedo, solar = step
    replay, chain_start, chain_entry = chains
    m = rep.shape[1]
    weight, kept_rows = out_work
    # weights and the carrying rows in row order (one pass: the work is small, a parallel
    # region would cost more than it saves on a busy machine)
    kept = 0
    for j in range(spec_sides.shape[0]):
        s = spec_sides[j]
        mode = carry[s]
        for r in range(m):
            g = s * m + r
            wanted = spec_share[s] * rep[s, r] / m
            carried = seen[0, g] > 0.0 if mode == CARRY_EVEN else seen[1, g] > 0.0
            out_uncarried[s, r] = 0.0 if carried or mode == CARRY_MU else m * wanted
        for i in range(side_first[j], side_first[j + 1]):
            if not row_hit[i]:
                continue
            r = replicate[i]
            g = s * m + r
            if mode == CARRY_MU:
                w = coefficient[s] * albedo * solar * row_mu[i]
            else:
                wanted = spec_share[s] * rep[s, r] / m
                if mode == CARRY_EVEN:
                    w = wanted / seen[0, g] if seen[0, g] > 0.0 else 0.0
                else:
                    w = wanted * row_mu[i] / seen[1, g] if seen[1, g] > 0.0 else 0.0
            if w != 0.0:
                weight[i] = w
                kept_rows[kept] = i
                kept += 1
    chunks = (kept + CHAIN_CHUNK - 1) // CHAIN_CHUNK
    for c in prange(chunks):
        for r in range(out_absorbed.shape[1]):
            for j in range(out_absorbed.shape[2]):
                out_absorbed[c, r, j] = 0.0
                out_diffuse[c, r, j] = 0.0
        esc = 0.0
        ine = 0.0
        for k in range(c * CHAIN_CHUNK, min(kept, (c + 1) * CHAIN_CHUNK)):
            i = kept_rows[k]
            r = replicate[i]
            if replay:
                e, v = _replay(chain_entry, chain_start[i], chain_start[i + 1], facet_node,
                               f_abs, f_spec, weight[i], out_absorbed[c, r], out_diffuse[c, r])
            else:
                e, v = _chain(arrays, normals, facet_node, f_abs, f_spec, m_origin[i, 0],
                              m_origin[i, 1], m_origin[i, 2], m_direction[i, 0],
                              m_direction[i, 1], m_direction[i, 2], side_facet[owner[i]],
                              weight[i], max_bounces, out_absorbed[c, r], out_diffuse[c, r])
            esc += e
            ine += v
        out_escaped[c] = esc
        out_inert[c] = ine
    return kept


@njit(**JIT)
def replicate_estimates(sides, counts, unblocked, factors, out):
    """Per (side, replicate) estimates of the incident power of the three sources [W].

    Parameters
    ----------
    sides : tuple (area (s,) [m2], cos_sun (s,) [1], control (s,) bool)
    counts : tuple (lit (s, m), seen (2, s * m), blocked (2, s * m)) float64 — unshadowed
        Sun samples; rays that meet the planet and the sum of their mu, of the escaping and
        of the blocked rays (:func:`planet_step`)
    unblocked : tuple (view (s,), albedo (s,)) — unblocked view factor and albedo factor of
        the control-variate sides [1]
    factors : tuple (solar_fraction, olr, albedo_solar, per_sun, per_planet) — ``S f``
        [W m-2], planet IR [W m-2], ``a S`` [W m-2], Sun samples and planet rays per
        replicate
    out : tuple (solar, planet_ir, albedo) of (s, m) float64, written

    Notes
    -----
    ``solar = S f cos A lit / n``; planet IR and albedo: ``E A (view - blocked / n)`` and
    ``a S A (albedo - blocked mu / n)`` on the control-variate sides, ``E A seen / n`` and
    ``a S A seen mu / n`` elsewhere (module notes of :mod:`vfactor.heatstep`); the
    operations in the order of the numpy expressions they replace.
    """
    area, cos_sun, control = sides
    lit, seen, blocked = counts
    view, albedo_view = unblocked
    solar_fraction, olr, albedo_solar, per_sun, per_planet = factors
    out_solar, out_ir, out_albedo = out
    m = lit.shape[1]
    for i in range(area.shape[0]):
        solar_i = solar_fraction * cos_sun[i] * area[i]
        ir_i = olr * area[i]
        albedo_i = albedo_solar * area[i]
        for r in range(m):
            g = i * m + r
            out_solar[i, r] = solar_i * (lit[i, r] / per_sun)
            if control[i]:
                out_ir[i, r] = ir_i * (view[i] - blocked[0, g] / per_planet)
                out_albedo[i, r] = albedo_i * (albedo_view[i] - blocked[1, g] / per_planet)
            else:
                out_ir[i, r] = ir_i * (seen[0, g] / per_planet)
                out_albedo[i, r] = albedo_i * (seen[1, g] / per_planet)


@njit(**JIT)
def side_tallies(node, facet, absorb, rep, incident, out_node, out_facet, out_replicates):
    """Per node and facet sums of one source's per-side values, each added in side order
    (what ``np.bincount`` gives: the sums do not depend on anything but the side order).

    Parameters
    ----------
    node, facet : (s,) int64 — node and facet of each side
    absorb : (s,) float64 — absorptivity of the side in the source's band [1]
    rep : (s, m) float64 — replicate estimates of the power incident on the side [W]
    incident : (s,) float64 — their mean over the replicates [W]
    out_node : (2, n) float64, written — incident and absorbed power per node [W]
    out_facet : (f,) float64, written — absorbed power per facet [W]
    out_replicates : (m, n) float64, written — absorbed power per replicate and node [W]
    """
    out_node[:] = 0.0
    out_facet[:] = 0.0
    out_replicates[:] = 0.0
    for i in range(node.shape[0]):
        j = node[i]
        a = absorb[i]
        absorbed = a * incident[i]
        out_node[0, j] += incident[i]
        out_node[1, j] += absorbed
        out_facet[facet[i]] += absorbed
        for r in range(out_replicates.shape[0]):
            out_replicates[r, j] += a * rep[i, r]


@njit(**JIT)
def pool_sums(node, reflected, diffuse, rep, out):
    """``out[r, j]``: sum over the sides of node ``j`` of ``diffuse * (reflected *
    rep[:, r])`` (the diffusely reflected power per replicate), added in side order."""
    out[:] = 0.0
    for i in range(node.shape[0]):
        j = node[i]
        for r in range(out.shape[0]):
            out[r, j] += diffuse[i] * (reflected[i] * rep[i, r])


@njit(**JIT)
def facet_shares(facet, node, share, area, out):
    """``out[f]``: sum over the sides of facet ``f`` of ``share[node] * area`` [W], in
    side order."""
    out[:] = 0.0
    for i in range(facet.shape[0]):
        out[facet[i]] += share[node[i]] * area[i]


@njit(**JIT)
def replicate_sums(node, values, out):
    """``out[r, j] = sum of values[i, r] over the sides i of node j``, added in side order
    (``np.bincount(node, weights=values[:, r])`` for each replicate ``r``).

    node : (s,) int64; values : (s, m) float64; out : (m, n) float64, written
    """
    for r in range(out.shape[0]):
        for j in range(out.shape[1]):
            out[r, j] = 0.0
    # side by side: each (replicate, node) sum still adds its sides in side order
    for i in range(node.shape[0]):
        j = node[i]
        for r in range(out.shape[0]):
            out[r, j] += values[i, r]


@njit(**JIT_PARALLEL)
def sun_mirror_rays(vertices, triangles, normals, side_facet, side_sign, seed, replicates,
                    per_replicate, sun, cos_half_angle, lit_mask, first, per_sample,
                    out_origin, out_direction, out_exclude, out_weight, out_replicate):
    """Regenerate the unshadowed sun sample rays of the given sides and mirror them about
    the side, packed side by side (the order of ``lit_mask[sides][lit]``).

    Parameters
    ----------
    side_facet, side_sign : (q,) int64 — the sides
    lit_mask : (q, replicates * per_replicate) bool — which samples are unshadowed
    first : (q,) int64 — row of each side's first unshadowed sample in the outputs
    per_sample : (q,) float64 — power each sample of the side carries [W]
    out_origin, out_direction : (u, 3) float64, written — sample point [m], mirror
        direction [1]
    out_exclude : (u,) int64, written — the side's facet
    out_weight : (u,) float64, written — ``per_sample`` of the side [W]
    out_replicate : (u,) int64, written — replicate of the sample
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
        row = first[s]
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
                out_origin[row, 0] = x
                out_origin[row, 1] = y
                out_origin[row, 2] = z
                out_direction[row, 0] = -dx + 2.0 * dn * nx
                out_direction[row, 1] = -dy + 2.0 * dn * ny
                out_direction[row, 2] = -dz + 2.0 * dn * nz
                out_exclude[row] = f
                out_weight[row] = per_sample[s]
                out_replicate[row] = r
                row += 1


@njit(**JIT_PARALLEL)
def sun_lit_mask(arrays, vertices, triangles, normals, side_facet, side_sign, seed,
                 replicates, per_replicate, sun, cos_half_angle, out_mask, out_count):
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
    out_count : (s, replicates) float64, written — unshadowed points per replicate
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
            count = 0.0
            for k in range(per_replicate):
                j = r * per_replicate + k
                if cos_t <= 0.0:
                    out_mask[s, j] = False
                    continue
                u0, u1, u2, u3 = rqmc_uniform4(seed, stream, r, k)
                x, y, z = triangle_point(vertices, triangles, f, u0, u1)
                dx, dy, dz = cone_direction(sx, sy, sz, cos_half_angle, u2, u3)
                lit = not any_hit(arrays, x, y, z, dx, dy, dz, np.inf, f)
                out_mask[s, j] = lit
                if lit:
                    count += 1.0
            out_count[s, r] = count


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
