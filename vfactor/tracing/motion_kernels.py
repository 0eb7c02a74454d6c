"""Numba kernels of the heating stage when parts turn (:mod:`vfactor.heatmotion`).

The rays are those of :mod:`vfactor.tracing.side_rays` (same sides, same random
streams): a ray drawn here, stored or traced in part of the vehicle, has the bits of the
same ray traced in the whole vehicle, and the nearest of the hits found in two parts is
the hit in their union.

Kernels
-------
- :func:`trace_targets_in` : first hits of the rays of some sides in a scene holding part
  of the vehicle, nearer than a given distance.
- :func:`near_spheres` : which rays pass through any of some spheres.
- :func:`store_rays` : origins and directions of chosen rays, side by side.
- :func:`nearest_stored` : stored rays against a scene, nearer than a given distance.
- :func:`compose_escaping` : the escaping-ray cache of a step from the stored rays of the
  rigid sides (copied) and the rays of the turning sides (drawn).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .config import JIT_PARALLEL
from .side_rays import TARGET_ESCAPE, TARGET_INERT, put_ray, side_ray
from .traverse import closest_hit

__all__ = ["trace_targets_in", "near_spheres", "store_rays", "nearest_stored",
           "compose_escaping"]


@njit(**JIT_PARALLEL)
def trace_targets_in(arrays, local_node, local_of, vertices, triangles, normals, side_facet,
                     side_sign, side_key, seed, replicates, per_replicate, tmax, keep_miss, only,
                     out_target, out_distance):
    """First hits of the rays of :func:`trace_targets` in another scene (a part of the
    vehicle), nearer than ``tmax``.

    The rays are those of the whole vehicle (``vertices``, ``triangles``, ``normals`` and
    the global facet indices ``side_facet``: same random streams); the scene ``arrays``
    holds some of its facets, numbered locally.

    Parameters
    ----------
    side_key : tuple (stream (s,) uint64, rank (s,) int64) — the planet-ray sequence of
        each side (:func:`vfactor.tracing.side_rays.planet_ray_keys`), as for
        :func:`vfactor.tracing.heat_kernels.trace_targets`
    local_node : (g, 2) int64 — node of the front and back side of each facet of the scene
    local_of : (f,) int64 — local index of each global facet in the scene, -1 if absent
    tmax : (s, replicates * per_replicate) float64 — hits at this distance or beyond do not
        count [m]
    keep_miss : bool — a ray that hits nothing keeps its ``out_target`` and
        ``out_distance`` (True), or is marked ``TARGET_ESCAPE`` at infinity (False)
    only : (s, replicates * per_replicate) bool — the rays traced (the others are left)
    out_target : (s, replicates * per_replicate) int32 — node hit first (read when
        ``keep_miss``, written on a hit)
    out_distance : same shape, float64 — distance of that hit [m]
    """
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        stream = side_key[0][s]
        k0 = side_key[1][s] * per_replicate
        own = local_of[f]
        for r in range(replicates):
            for k in range(per_replicate):
                j = r * per_replicate + k
                if not only[s, j]:
                    continue
                x, y, z, dx, dy, dz = side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k0 + k)
                hit, t, front = closest_hit(arrays, x, y, z, dx, dy, dz, tmax[s, j], own)
                if hit >= 0:
                    node = local_node[hit, 0] if front else local_node[hit, 1]
                    out_target[s, j] = node if node >= 0 else TARGET_INERT
                    out_distance[s, j] = t
                elif not keep_miss:
                    out_target[s, j] = TARGET_ESCAPE
                    out_distance[s, j] = np.inf


@njit(**JIT_PARALLEL)
def near_spheres(vertices, triangles, normals, side_facet, side_sign, side_key, seed,
                 replicates, per_replicate, tmax, centres, radii, out):
    """Which rays of :func:`trace_targets` pass through any of some spheres before
    ``tmax`` (the segment from the origin to ``tmax`` comes closer than the radius to the
    centre).

    Parameters
    ----------
    side_key : as for :func:`trace_targets_in`
    tmax : (s, replicates * per_replicate) float64 [m] (inf: the whole ray)
    centres : (q, 3) float64 [m], radii : (q,) float64 [m]
    out : (s, replicates * per_replicate) bool, written
    """
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        stream = side_key[0][s]
        k0 = side_key[1][s] * per_replicate
        for r in range(replicates):
            for k in range(per_replicate):
                j = r * per_replicate + k
                x, y, z, dx, dy, dz = side_ray(vertices, triangles, normals, f, sign, seed,
                                                stream, r, k0 + k)
                near = False
                for q in range(centres.shape[0]):
                    wx = centres[q, 0] - x
                    wy = centres[q, 1] - y
                    wz = centres[q, 2] - z
                    t = wx * dx + wy * dy + wz * dz
                    t = min(max(t, 0.0), tmax[s, j])
                    ex = wx - t * dx
                    ey = wy - t * dy
                    ez = wz - t * dz
                    if ex * ex + ey * ey + ez * ez <= radii[q] * radii[q]:
                        near = True
                        break
                out[s, j] = near


@njit(**JIT_PARALLEL)
def store_rays(vertices, triangles, normals, side_facet, side_sign, side_key, seed,
               replicates, per_replicate, select, row_start, out_origin, out_direction):
    """Origin and direction of the chosen rays of every side, side by side and in column
    order within a side.

    Parameters
    ----------
    side_key : as for :func:`trace_targets_in`
    select : (s, replicates * per_replicate) bool — the rays stored
    row_start : (s + 1,) int64 — first row of side ``s``
    out_origin, out_direction : (row_start[-1], 3) float64, written [m], [1]
    """
    for s in prange(side_facet.shape[0]):
        f = side_facet[s]
        sign = side_sign[s]
        stream = side_key[0][s]
        k0 = side_key[1][s] * per_replicate
        row = row_start[s]
        for r in range(replicates):
            for k in range(per_replicate):
                if not select[s, r * per_replicate + k]:
                    continue
                put_ray(vertices, triangles, normals, f, sign, seed, stream, r, k0 + k, row,
                         out_origin, out_direction)
                row += 1


@njit(**JIT_PARALLEL)
def nearest_stored(arrays, local_node, origin, direction, tmax, out_target, out_distance):
    """Stored rays (from facets not in the scene) against a scene, hits nearer than ``tmax``.

    Parameters
    ----------
    local_node : (g, 2) int64 — node of the front and back side of each facet of the scene
    origin, direction : (q, 3) float64 [m], [1]
    tmax : (q,) float64 [m]
    out_target : (q,) int32 — node hit (written on a hit, kept otherwise)
    out_distance : (q,) float64 — its distance (written on a hit) [m]
    """
    for i in prange(origin.shape[0]):
        hit, t, front = closest_hit(arrays, origin[i, 0], origin[i, 1], origin[i, 2],
                                    direction[i, 0], direction[i, 1], direction[i, 2],
                                    tmax[i], -1)
        if hit >= 0:
            node = local_node[hit, 0] if front else local_node[hit, 1]
            out_target[i] = node if node >= 0 else TARGET_INERT
            out_distance[i] = t


@njit(**JIT_PARALLEL)
def compose_escaping(vertices, triangles, normals, side_facet, side_sign, side_key, seed,
                     replicates, per_replicate, target, segment_start, rigid_index, rigid_target,
                     rigid_start, rigid_origin, rigid_direction, out_origin, out_direction):
    """Origins and directions of the escaping rays of a step, grouped by (side, replicate)
    as :func:`vfactor.tracing.heat_kernels.fill_cache` lays them out.

    Parameters
    ----------
    side_key : as for :func:`trace_targets_in`
    target : (s, replicates * per_replicate) int32 — first hits at this step
    segment_start : (s * replicates + 1,) int64 — rows of the output per (side, replicate)
    rigid_index : (s,) int64 — row of the side in ``rigid_target``, -1 for a turning side
        (its rays are drawn here)
    rigid_target : (r, replicates * per_replicate) int32 — first hits among the rigid facets
    rigid_start : (r + 1,) int64 — rows of each rigid side in ``rigid_origin``, which holds
        its rays that escape the rigid facets (:func:`store_rays`)
    out_origin, out_direction : (segment_start[-1], 3) float64, written
    """
    for s in prange(side_facet.shape[0]):
        q = rigid_index[s]
        f = side_facet[s]
        sign = side_sign[s]
        stream = side_key[0][s]
        k0 = side_key[1][s] * per_replicate
        src = rigid_start[q] if q >= 0 else 0
        for r in range(replicates):
            row = segment_start[s * replicates + r]
            for k in range(per_replicate):
                j = r * per_replicate + k
                if q >= 0:
                    if rigid_target[q, j] != TARGET_ESCAPE:
                        continue
                    if target[s, j] == TARGET_ESCAPE:     # not blocked by a turning part
                        for c in range(3):
                            out_origin[row, c] = rigid_origin[src, c]
                            out_direction[row, c] = rigid_direction[src, c]
                        row += 1
                    src += 1
                elif target[s, j] == TARGET_ESCAPE:
                    put_ray(vertices, triangles, normals, f, sign, seed, stream, r, k0 + k, row,
                             out_origin, out_direction)
                    row += 1
