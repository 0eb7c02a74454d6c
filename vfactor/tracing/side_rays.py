"""Rays of the heating stage: each facet side's random streams and its cosine-weighted rays.

A *side* is one active side of one facet (``facet``, ``sign`` = +1 front, -1 back); its
outward normal is ``sign * normals[facet]``. Every random number is
``rqmc_uniform4(seed, stream, replicate, k)`` with ``stream = purpose * STREAM_STRIDE + 2 *
facet + (0 front | 1 back)`` (:func:`side_stream`), so each side's rays are a pure function
of the seed and the side: results are bit-identical for any thread count. Each side draws
``replicates`` independent randomised quasi-Monte Carlo sequences of ``per_replicate``
points (see :mod:`vfactor.tracing.sampling`).

Ray ``(r, k)`` of a side (:func:`side_ray`): a point uniform on the facet and a
cosine-weighted direction about the side's normal, from the four coordinates of point
``k`` of replicate ``r``. The kernels of :mod:`vfactor.tracing.heat_kernels`,
:mod:`vfactor.tracing.planet_kernels` and :mod:`vfactor.tracing.motion_kernels` draw the
same rays from here.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from .config import JIT
from .rng import STREAM_STRIDE
from .sampling import cosine_direction, rqmc_uniform4, triangle_point

__all__ = ["PURPOSE_PLANET", "PURPOSE_SUN", "TARGET_ESCAPE", "TARGET_INERT", "side_stream",
           "side_ray", "put_ray"]

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
