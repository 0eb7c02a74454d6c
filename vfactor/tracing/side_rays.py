"""Rays of the heating stage: each facet side's random streams and its cosine-weighted rays.

A *side* is one active side of one facet (``facet``, ``sign`` = +1 front, -1 back); its
outward normal is ``sign * normals[facet]``. Every random number is
``rqmc_uniform4(seed, stream, replicate, k)`` (see :mod:`vfactor.tracing.sampling`): point
``k`` of a randomised quasi-Monte Carlo sequence, one independent randomisation per
``replicate``. Rays are pure functions of the seed and the side, so results are
bit-identical for any thread count.

Ray ``(r, k)`` of a side (:func:`side_ray`): a point uniform on the facet and a
cosine-weighted direction about the side's normal, from the four coordinates of point
``k`` of replicate ``r``. The kernels of :mod:`vfactor.tracing.heat_kernels`,
:mod:`vfactor.tracing.planet_kernels` and :mod:`vfactor.tracing.motion_kernels` draw the
same rays from here.

One sequence per node (planet rays)
-----------------------------------
The planet rays of all the sides of one node are consecutive blocks of one sequence per
node and replicate (:func:`planet_ray_keys`: stream ``PURPOSE_PLANET * STREAM_STRIDE +
node``; a side of rank ``q`` among its node's sides takes points ``q n .. q n + n - 1``,
``n = per_replicate``). The sides of a flat node see nearly the same planet and the same
silhouettes of the vehicle, so their directions, taken together, fill the hemisphere as
evenly as one side's would with all the node's rays: the errors of the sides cancel in the
node's sum instead of adding up independently. Each block is uniform on its own (the
random shift is), so every side's estimate stays unbiased; different nodes and different
replicates are independent, so the spread of the replicates remains the node's error
(Owen 2013, "Monte Carlo theory, methods and examples", ch. 17). Measured on the demo
(scripts/bench_heating.py): the per-node planet-IR error about 1.5 x smaller than with one
sequence per side. The Sun samples keep one sequence per side (:func:`side_stream`): their
integrand, the shadow edge across each facet, does not repeat from facet to facet.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .config import JIT
from .rng import STREAM_STRIDE
from .sampling import cosine_direction, rqmc_uniform4, triangle_point

__all__ = ["PURPOSE_PLANET", "PURPOSE_SUN", "COPY_STRIDE", "STREAM_STRIDE", "TARGET_ESCAPE", "TARGET_INERT",
           "side_stream", "planet_ray_keys", "side_ray", "put_ray"]

#: Purpose offsets of the random streams (times STREAM_STRIDE).
PURPOSE_PLANET = 21
PURPOSE_SUN = 22

#: First-hit targets of a planet ray that meets no node: it leaves the vehicle, or it ends
#: on an inert side (the other targets are node indices).
TARGET_ESCAPE = -1
TARGET_INERT = -2

_STRIDE = np.uint64(STREAM_STRIDE)


@njit(**JIT)
def side_stream(purpose, facet, sign):
    """Random stream of one facet side for one purpose (uint64)."""
    side = 0 if sign > 0 else 1
    return np.uint64(purpose) * _STRIDE + np.uint64(2 * facet + side)


#: Stream offset of the further blocks of planet rays of a side (:mod:`vfactor.planetrays`):
#: block ``j`` of a side takes stream ``stream + j * COPY_STRIDE`` (node and facet-side
#: indices stay below it; at most STREAM_STRIDE / COPY_STRIDE = 256 blocks).
COPY_STRIDE = 1 << 32


def planet_ray_keys(side_node):
    """The planet-ray sequence of every side: (stream (s,) uint64, rank (s,) int64).

    ``side_node`` (s,) int — node of each side, sides in their fixed order. ``stream`` is
    the node's sequence, ``rank`` the side's place among its node's sides (in side order):
    ray ``(r, k)`` of side ``i`` is point ``rank[i] * per_replicate + k`` of sequence
    ``stream[i]`` in replicate ``r`` (module notes).
    """
    node = np.asarray(side_node, dtype=np.int64)
    if node.size and node.min() < 0:
        raise ValueError(f"planet_ray_keys: side_node must be >= 0, got {int(node.min())}")
    stream = np.uint64(PURPOSE_PLANET) * _STRIDE + node.astype(np.uint64)
    order = np.argsort(node, kind="stable")
    sorted_node = node[order]
    first = np.searchsorted(sorted_node, sorted_node, side="left")
    rank = np.empty(node.size, dtype=np.int64)
    rank[order] = np.arange(node.size, dtype=np.int64) - first
    return np.ascontiguousarray(stream, dtype=np.uint64), rank


@njit(**JIT, inline="always")
def side_ray(vertices, triangles, normals, facet, sign, seed, stream, replicate, k):
    """Ray ``(replicate, k)`` of side ``(facet, sign)``: origin [m] and unit direction [1]."""
    u0, u1, u2, u3 = rqmc_uniform4(seed, stream, replicate, k)
    x, y, z = triangle_point(vertices, triangles, facet, u0, u1)
    nx = sign * normals[facet, 0]
    ny = sign * normals[facet, 1]
    nz = sign * normals[facet, 2]
    dx, dy, dz = cosine_direction(nx, ny, nz, u2, u3)
    return x, y, z, dx, dy, dz


@njit(**JIT, inline="always")
def put_ray(vertices, triangles, normals, facet, sign, seed, stream, replicate, k, row,
            out_origin, out_direction):
    """Draw ray ``(replicate, k)`` of side ``(facet, sign)`` and write it to row ``row``."""
    x, y, z, dx, dy, dz = side_ray(vertices, triangles, normals, facet, sign, seed, stream,
                                   replicate, k)
    out_origin[row, 0] = x
    out_origin[row, 1] = y
    out_origin[row, 2] = z
    out_direction[row, 0] = dx
    out_direction[row, 1] = dy
    out_direction[row, 2] = dz
