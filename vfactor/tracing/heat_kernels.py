"""Fused numba kernels of the heating stage (:mod:`vfactor.heating`): the rays of the facet
sides, traced once against the vehicle, and the Sun's samples traced at every step.

The rays and their random streams are those of :mod:`vfactor.tracing.side_rays`; each
side draws ``replicates`` independent randomised quasi-Monte Carlo sequences of
``per_replicate`` points, and the kernels tally per (side, replicate), which gives an
honest one-sigma error from the spread of the replicates. The planet's kernels are in
:mod:`vfactor.tracing.planet_kernels`, the specular chains in
:mod:`vfactor.tracing.chain_kernels`, the node sums in :mod:`vfactor.tracing.heat_sums`.

Kernels
-------
- :func:`trace_targets` : cosine-weighted rays from each side, first hit -> target node
  (``TARGET_ESCAPE`` escapes, ``TARGET_INERT`` lost on an inert side). Done once for
  rigid geometry.
- :func:`fill_cache` : origins and directions of the escaping rays and of the blocked
  ones (regenerated, not traced), grouped by (side, replicate).
- :func:`segment_escapes` : escaping rays per (side, replicate).
- :func:`segment_rows` : the rows of the escaping-ray cache that belong to given sides.
- :func:`mirror_rays` : mirror images of cached rays about their side's normal.
- :func:`sun_lit_mask` : per step, sample points of each side traced toward the solar disk
  (not those of sides that :func:`vfactor.tracing.beam.beam_clear` proves unshadowed).
- :func:`sun_mirror_rays` : the unshadowed Sun samples of given sides, mirrored (marked
  where the mirror beam provably meets nothing, so their chains need no tracing).

References
----------
Mirror reflection ``r = d - 2 (d.n) n``: law of specular reflection (common practice).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .beam import beam_clear
from .config import JIT, JIT_PARALLEL
from .sampling import cone_direction, rqmc_uniform4, triangle_point
from .side_rays import PURPOSE_SUN, TARGET_ESCAPE, TARGET_INERT, put_ray, side_ray, side_stream
from .traverse import any_hit, closest_hit

__all__ = [
    "trace_targets",
    "fill_cache",
    "segment_escapes",
    "segment_rows",
    "mirror_rays",
    "sun_lit_mask",
    "sun_mirror_rays",
]


@njit(**JIT_PARALLEL)
def trace_targets(arrays, vertices, triangles, normals, side_facet, side_sign, side_key,
                  facet_node, seed, replicates, per_replicate, out_target):
    """First hit of every cosine-weighted ray of every side.

    Parameters
    ----------
    arrays : tuple — ``Scene.arrays``
    vertices (v, 3) [m], triangles (f, 3) int64, normals (f, 3) [1]
    side_facet (s,) int64, side_sign (s,) int64 (+1 front, -1 back)
    side_key : tuple (stream (s,) uint64, rank (s,) int64) — each side's planet-ray
        sequence (:func:`vfactor.tracing.side_rays.planet_ray_keys`)
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
        stream = side_key[0][s]
        k0 = side_key[1][s] * per_replicate
        for r in range(replicates):
            for k in range(per_replicate):
                x, y, z, dx, dy, dz = side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k0 + k)
                hit, t, front = closest_hit(arrays, x, y, z, dx, dy, dz, np.inf, f)
                if hit < 0:
                    target = TARGET_ESCAPE
                else:
                    node = facet_node[hit, 0] if front else facet_node[hit, 1]
                    target = node if node >= 0 else TARGET_INERT
                out_target[s, r * per_replicate + k] = target


@njit(**JIT_PARALLEL)
def fill_cache(vertices, triangles, normals, side_facet, side_sign, side_key, seed,
               replicates, per_replicate, target, escape_start, escape_use, blocked_start,
               blocked_use, out_escape, out_blocked):
    """Store origin and direction of the escaping rays and of the blocked rays, grouped by
    (side, replicate), in one pass (each ray drawn once, only if it is stored).

    Parameters
    ----------
    side_key : as for :func:`trace_targets`
    target : (s, replicates * per_replicate) int32 — from :func:`trace_targets`
    escape_start, blocked_start : (s * replicates + 1,) int64 — first row of segment ``s *
        replicates + r`` in the escaping and in the blocked rays
    escape_use, blocked_use : (s,) bool — sides whose escaping / blocked rays are stored
        (the others have empty segments)
    out_escape, out_blocked : tuples (origin (e, 3), direction (e, 3)) float64, written
        [m], [1]
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
        stream = side_key[0][s]
        k0 = side_key[1][s] * per_replicate
        for r in range(replicates):
            esc_row = escape_start[s * replicates + r]
            blk_row = blocked_start[s * replicates + r]
            for k in range(per_replicate):
                if target[s, r * per_replicate + k] == TARGET_ESCAPE:
                    if keep_escaping:
                        put_ray(vertices, triangles, normals, f, sign, seed, stream, r, k0 + k,
                                esc_row, esc_origin, esc_direction)
                        esc_row += 1
                elif keep_blocked:
                    put_ray(vertices, triangles, normals, f, sign, seed, stream, r, k0 + k,
                            blk_row, blk_origin, blk_direction)
                    blk_row += 1


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


@njit(**JIT)
def segment_rows(sides, segment_start, replicates, out_row, out_owner, out_replicate):
    """Rows of the escaping-ray cache that belong to ``sides`` (int64), side by side, each
    side's segments in replicate order: rows ``segment_start[g] .. segment_start[g + 1] -
    1`` of segment ``g = side * replicates + r``; with the owning side and the replicate of
    each row (int64 outputs of length ``sum`` of those segments' lengths, written)."""
    q = 0
    for side in sides:
        for r in range(replicates):
            g = side * replicates + r
            for row in range(segment_start[g], segment_start[g + 1]):
                out_row[q] = row
                out_owner[q] = side
                out_replicate[q] = r
                q += 1


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


@njit(**JIT_PARALLEL)
def sun_lit_mask(arrays, vertices, triangles, normals, side_facet, side_sign, order, seed,
                 replicates, per_replicate, sun, cos_half_angle, beam_length, out_mask,
                 out_count):
    """Per step: which sample points of each side see the Sun.

    Points are uniform on the facet; each is traced toward a point of the solar disk
    (direction uniform in the cone of half-angle ``acos(cos_half_angle)`` about ``sun``),
    so self-shadow edges get the penumbra of the disk. Sides facing away from the Sun
    (``dot(n, sun) <= 0``) are not traced, nor are sides that nothing can shadow
    (:func:`vfactor.tracing.beam.beam_clear`, when ``beam_length > 0``): all their
    samples are lit, as tracing them would find.

    Parameters
    ----------
    arrays : tuple — ``Scene.arrays``
    vertices (v, 3) [m], triangles (f, 3) int64, normals (f, 3) [1]
    side_facet (s,) int64, side_sign (s,) int64
    order : (s,) int64 — the sides in the order handed to the threads (any permutation:
        the outputs do not depend on it; one that mixes sides of every part balances the
        threads, whose shares are contiguous)
    seed : uint64; replicates, per_replicate : int
    sun : (3,) float64 — unit vector toward the centre of the Sun [1]
    cos_half_angle : float — cosine of the Sun's angular radius [1]
    beam_length : float — diagonal of the bounding box of all facets [m]; 0 traces every
        sample of the sides facing the Sun
    out_mask : (s, replicates * per_replicate) bool, written — True where unshadowed
    out_count : (s, replicates) float64, written — unshadowed points per replicate
    """
    sx = sun[0]
    sy = sun[1]
    sz = sun[2]
    for q in prange(order.shape[0]):
        s = order[q]
        f = side_facet[s]
        sign = side_sign[s]
        cos_t = sign * (normals[f, 0] * sx + normals[f, 1] * sy + normals[f, 2] * sz)
        if cos_t > 0.0 and beam_length > 0.0 and beam_clear(
                arrays, vertices, triangles, normals, f, sign, sx, sy, sz, cos_half_angle,
                beam_length):
            for j in range(replicates * per_replicate):
                out_mask[s, j] = True
            for r in range(replicates):
                out_count[s, r] = float(per_replicate)
            continue
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
def sun_mirror_rays(arrays, vertices, triangles, normals, side_facet, side_sign, seed,
                    replicates, per_replicate, sun, cos_half_angle, beam_length, lit_mask,
                    first, per_sample, out_origin, out_direction, out_exclude, out_weight,
                    out_replicate, out_clear):
    """Regenerate the unshadowed sun sample rays of the given sides and mirror them about
    the side, packed side by side (the order of ``lit_mask[sides][lit]``).

    Parameters
    ----------
    side_facet, side_sign : (q,) int64 — the sides
    lit_mask : (q, replicates * per_replicate) bool — which samples are unshadowed
    first : (q + 1,) int64 — row of each side's first unshadowed sample in the outputs
        (and the end of the last side's)
    per_sample : (q,) float64 — power each sample of the side carries [W]
    out_origin, out_direction : (u, 3) float64, written — sample point [m], mirror
        direction [1]; zeros where ``out_clear`` (the ray is not traced, so it is not
        drawn)
    out_exclude : (u,) int64, written — the side's facet
    out_weight : (u,) float64, written — ``per_sample`` of the side [W]
    out_replicate : (u,) int64, written — replicate of the sample
    arrays : tuple — ``Scene.arrays``; beam_length : float — diagonal of the bounding box
        of all facets [m] (0: no beam test)
    out_clear : (u,) bool, written — True where no facet can meet the mirror ray (the
        mirror images of the solar cone about the side's normal form a cone of the same
        half-angle about the mirror image of ``sun``:
        :func:`vfactor.tracing.beam.beam_clear` of that axis)
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
        clear = False
        if beam_length > 0.0 and first[s + 1] > row:
            sn = sx * nx + sy * ny + sz * nz
            clear = beam_clear(arrays, vertices, triangles, normals, f, sign,
                               -sx + 2.0 * sn * nx, -sy + 2.0 * sn * ny,
                               -sz + 2.0 * sn * nz, cos_half_angle, beam_length)
        for r in range(replicates):
            for k in range(per_replicate):
                j = r * per_replicate + k
                if not lit_mask[s, j]:
                    continue
                out_exclude[row] = f
                out_weight[row] = per_sample[s]
                out_replicate[row] = r
                out_clear[row] = clear
                if clear:      # escapes untraced: its ray is not needed (zeros)
                    for c in range(3):
                        out_origin[row, c] = 0.0
                        out_direction[row, c] = 0.0
                    row += 1
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
                row += 1
