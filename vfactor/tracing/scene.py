"""Scene: a BVH over the facets of a model, with batch ray queries.

Batch queries (:meth:`Scene.closest_hit`, :meth:`Scene.occluded`) take numpy arrays of rays
and run in parallel over the rays; on trees larger than :data:`STREAM_BYTES`
:meth:`Scene.closest_hit` traces 16 rays side by side per thread
(:func:`vfactor.tracing.streams.closest_hit_stream`, bit-identical answers), rays kept in
their input order. Fused kernels (sample -> trace -> tally inside numba)
call the device functions of :mod:`vfactor.tracing.traverse` directly with
:attr:`Scene.arrays`; :func:`count_cosine_hits` is the pattern to copy:

>>> @njit(**JIT_PARALLEL)
... def kernel(arrays, vertices, triangles, normals, task_f, task_k, task_n, seed, out):
...     for q in prange(task_f.shape[0]):               # tasks from ray_tasks()
...         f = task_f[q]                                # the emitting facet
...         for j in range(task_n[q]):
...             k = task_k[q] + j                        # ray index = counter
...             u0, u1, u2, u3 = uniform4(seed, np.uint64(f), np.uint64(k))
...             x, y, z = triangle_point(vertices, triangles, f, u0, u1)
...             dx, dy, dz = cosine_direction(normals[f, 0], ..., u2, u3)
...             hit, t, front = closest_hit(arrays, x, y, z, dx, dy, dz, np.inf, f)
...             ...                                     # tally into out[q, ...] only

then sum the per-task rows per emitter. The loop runs over tasks of at most
:data:`~vfactor.tracing.config.TASK_RAYS` rays rather than over emitters, because numba
hands each thread one contiguous block of iterations: emitters with unequal ray counts
would leave a thread idle. Keep stream and counter arithmetic in uint64 (``uint64 +
int64`` is float64 in numba).

Each iteration writes only its own task's tallies, and every random number is a pure
function of (seed, stream, ray index), so tallies are bit-identical for any thread count and
for any split of the ray indices into chunks.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np
from numba import njit, prange

from ..errors import GeometryError
from . import bvh as _bvh
from .config import JIT, JIT_PARALLEL, TASK_RAYS
from .rng import uniform4
from .sampling import cosine_direction, triangle_point
from .streams import STREAM_RAYS, closest_hit_stream
from .traverse import any_hit, closest_hit

__all__ = ["Scene", "Hits", "CosineTally", "rays_by_area", "ray_tasks", "cosine_rays",
           "count_cosine_hits"]


class Hits(NamedTuple):
    """First hits of a batch of rays.

    Attributes
    ----------
    facet : (r,) int64
        Original facet index hit, -1 for a miss.
    distance : (r,) float64 [m]
        Distance from the origin to the hit (``inf`` or the given ``tmax`` on a miss).
    front : (r,) bool
        True when the ray met the side the facet normal points to (dot(d, n) < 0).
    """

    facet: np.ndarray
    distance: np.ndarray
    front: np.ndarray


class CosineTally(NamedTuple):
    """Tallies of :func:`count_cosine_hits`, per emitting facet.

    Attributes
    ----------
    rays : (f,) int64
        Rays emitted.
    hits : (f,) int64
        Rays that hit a facet (the rest escaped).
    front_hits : (f,) int64
        Hits on the front side of the facet hit.
    facet_sum : (f,) int64
        Sum of the indices of the facets hit (a checksum of which facets were hit).
    """

    rays: np.ndarray
    hits: np.ndarray
    front_hits: np.ndarray
    facet_sum: np.ndarray


@njit(**JIT)
def _facet_normals(vertices, triangles, out):
    for i in range(triangles.shape[0]):
        a = triangles[i, 0]
        b = triangles[i, 1]
        c = triangles[i, 2]
        e1x = vertices[b, 0] - vertices[a, 0]
        e1y = vertices[b, 1] - vertices[a, 1]
        e1z = vertices[b, 2] - vertices[a, 2]
        e2x = vertices[c, 0] - vertices[a, 0]
        e2y = vertices[c, 1] - vertices[a, 1]
        e2z = vertices[c, 2] - vertices[a, 2]
        nx = e1y * e2z - e1z * e2y
        ny = e1z * e2x - e1x * e2z
        nz = e1x * e2y - e1y * e2x
        n = np.sqrt(nx * nx + ny * ny + nz * nz)
        if n > 0.0:
            out[i, 0] = nx / n
            out[i, 1] = ny / n
            out[i, 2] = nz / n
        else:
            out[i, 0] = 0.0
            out[i, 1] = 0.0
            out[i, 2] = 0.0


def _clean_mesh(vertices, triangles, where):
    vertices = np.asarray(vertices)
    triangles = np.asarray(triangles)
    if vertices.ndim != 2 or vertices.shape[1] != 3:
        raise GeometryError(f"vertices must have shape (v, 3), got {vertices.shape}",
                            where=where)
    if triangles.ndim != 2 or triangles.shape[1] != 3:
        raise GeometryError(f"triangles must have shape (f, 3), got {triangles.shape}",
                            where=where)
    if triangles.size and triangles.dtype.kind not in "iu":
        raise GeometryError(f"triangles must be integers, got dtype {triangles.dtype}",
                            where=where)
    vertices = np.ascontiguousarray(vertices, dtype=np.float64)
    triangles = np.ascontiguousarray(triangles, dtype=np.int64)
    bad = ~np.isfinite(vertices).all(axis=1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise GeometryError(f"vertex {i} is not finite: {vertices[i].tolist()}", where=where)
    if triangles.size:
        out = (triangles < 0) | (triangles >= vertices.shape[0])
        if out.any():
            f = int(np.flatnonzero(out.any(axis=1))[0])
            last = vertices.shape[0] - 1
            raise GeometryError(
                f"facet {f} refers to vertex {triangles[f].tolist()} outside 0..{last}",
                where=where, facets=np.flatnonzero(out.any(axis=1)))
    return vertices, triangles


@njit(**JIT)
def _normalise_rays(origins, directions, out):
    """Copy unit directions into ``out``; return (first bad ray, reason) or (-1, 0).

    Reasons: 1 origin not finite, 2 direction not finite, 3 direction zero.
    """
    for i in range(origins.shape[0]):
        ox = origins[i, 0]
        oy = origins[i, 1]
        oz = origins[i, 2]
        if not (np.isfinite(ox) and np.isfinite(oy) and np.isfinite(oz)):
            return i, 1
        dx = directions[i, 0]
        dy = directions[i, 1]
        dz = directions[i, 2]
        if not (np.isfinite(dx) and np.isfinite(dy) and np.isfinite(dz)):
            return i, 2
        n = np.sqrt(dx * dx + dy * dy + dz * dz)
        if not n > 0.0:
            return i, 3
        out[i, 0] = dx / n
        out[i, 1] = dy / n
        out[i, 2] = dz / n
    return -1, 0


@njit(**JIT)
def _first_bad_exclude(exclude, n_facets):
    for i in range(exclude.shape[0]):
        if exclude[i] < -1 or exclude[i] >= n_facets:
            return i
    return -1


def _clean_rays(origins, directions, tmax, exclude, n_facets, name):
    origins = np.ascontiguousarray(origins, dtype=np.float64)
    directions = np.ascontiguousarray(directions, dtype=np.float64)
    if origins.ndim != 2 or origins.shape[1] != 3:
        raise ValueError(f"Scene.{name}: origins must have shape (r, 3), got {origins.shape}")
    if directions.shape != origins.shape:
        raise ValueError(f"Scene.{name}: directions must have shape {origins.shape}, "
                         f"got {directions.shape}")
    r = origins.shape[0]
    unit = np.empty_like(directions)
    bad, reason = _normalise_rays(origins, directions, unit)
    if bad >= 0:
        what = {1: f"origin {bad} is not finite: {origins[bad].tolist()}",
                2: f"direction {bad} is not finite: {directions[bad].tolist()}",
                3: f"direction {bad} is zero"}[reason]
        raise ValueError(f"Scene.{name}: {what}")
    tmax = np.asarray(tmax, dtype=np.float64)
    if tmax.ndim == 0:
        if np.isnan(tmax) or tmax < 0:
            raise ValueError(f"Scene.{name}: tmax must be >= 0, got {float(tmax)}")
        tmax = np.full(r, float(tmax))
    if tmax.shape != (r,):
        raise ValueError(f"Scene.{name}: tmax must be a scalar or shape ({r},), got {tmax.shape}")
    if not (tmax >= 0).all():
        i = int(np.flatnonzero(~(tmax >= 0))[0])
        raise ValueError(f"Scene.{name}: tmax[{i}] must be >= 0, got {tmax[i]}")
    tmax = np.ascontiguousarray(tmax)
    if exclude is None:
        exclude = np.full(r, -1, dtype=np.int64)
    else:
        exclude = np.asarray(exclude)
        if exclude.ndim == 0:
            exclude = np.full(r, int(exclude), dtype=np.int64)
        if exclude.shape != (r,) or (exclude.size and exclude.dtype.kind not in "iu"):
            raise ValueError(f"Scene.{name}: exclude must be None or ({r},) int, got "
                             f"shape {exclude.shape} dtype {exclude.dtype}")
        exclude = np.ascontiguousarray(exclude, dtype=np.int64)
        i = _first_bad_exclude(exclude, n_facets)
        if i >= 0:
            raise ValueError(f"Scene.{name}: exclude[{i}] = {exclude[i]} is not -1 or a "
                             f"facet index below {n_facets}")
    return origins, unit, tmax, exclude


@njit(**JIT_PARALLEL)
def _closest_kernel(arrays, origins, directions, tmax, exclude, facet, distance, front):
    for i in prange(origins.shape[0]):
        f, t, fr = closest_hit(arrays, origins[i, 0], origins[i, 1], origins[i, 2],
                               directions[i, 0], directions[i, 1], directions[i, 2],
                               tmax[i], exclude[i])
        facet[i] = f
        distance[i] = t
        front[i] = fr


#: Most rays per chunk of the batch query (each chunk is traced as one interleaved
#: stream; smaller batches are cut into at least 8 chunks per thread).
_CHUNK = 1024
#: Tree size (nodes and leaf blocks) above which batch queries trace rays side by side
#: (:func:`vfactor.tracing.streams.closest_hit_stream`): where the tree no longer fits in
#: the last-level cache the waits for memory dominate, and interleaving 16 rays per
#: thread hides them (+20-60 % measured at 1e6 triangles); below, one ray at a time is
#: faster (-25 % with streams at 1e4 triangles: the bookkeeping costs more than it hides).
STREAM_BYTES = 32 << 20


@njit(**JIT_PARALLEL)
def _closest_stream_kernel(arrays, origins, directions, tmax, exclude, facet, distance, front,
                           n_lanes, chunk):
    n = origins.shape[0]
    n_chunks = (n + chunk - 1) // chunk
    for c in prange(n_chunks):
        lo = c * chunk
        hi = min(n, lo + chunk)
        closest_hit_stream(arrays, origins, directions, tmax, exclude, lo, hi, facet,
                           distance, front, n_lanes)


@njit(**JIT_PARALLEL)
def _occluded_kernel(arrays, origins, directions, tmax, exclude, out):
    for i in prange(origins.shape[0]):
        out[i] = any_hit(arrays, origins[i, 0], origins[i, 1], origins[i, 2],
                         directions[i, 0], directions[i, 1], directions[i, 2],
                         tmax[i], exclude[i])


class Scene:
    """A triangle mesh with a BVH, answering first-hit and occlusion queries.

    Build with :meth:`Scene.build`. Attributes: ``vertices (v, 3) [m]``,
    ``triangles (f, 3) int64``, ``normals (f, 3) [1]`` (unit, from the counter-clockwise
    winding; zero for degenerate facets), ``bvh`` (:class:`vfactor.tracing.bvh.BVH`) and
    ``arrays`` (the tuple for the device functions).
    """

    def __init__(self, vertices, triangles, tree):
        self.vertices = vertices
        self.triangles = triangles
        self.bvh = tree
        #: Rays traced side by side per thread by :meth:`closest_hit` (0: one at a time);
        #: answers are bit-identical either way, only the speed differs.
        self.stream_lanes = STREAM_RAYS if tree.nbytes > STREAM_BYTES else 0
        self.normals = np.empty((triangles.shape[0], 3))
        _facet_normals(vertices, triangles, self.normals)

    @classmethod
    def build(cls, vertices, triangles, max_leaf=12, n_bins=16):
        """Build the BVH of a triangle mesh.

        Parameters
        ----------
        vertices : (v, 3) float [m], finite
        triangles : (f, 3) int, vertex indices, counter-clockwise seen from the front
        max_leaf : int, optional
            Most triangles in a BVH leaf (1..15).
        n_bins : int, optional
            SAH bins per axis.

        Returns
        -------
        Scene

        Raises
        ------
        vfactor.errors.GeometryError
            Wrong shapes, non-finite vertices, vertex indices out of range.
        """
        vertices, triangles = _clean_mesh(vertices, triangles, "Scene.build")
        vertices = vertices.copy()
        triangles = triangles.copy()
        tree = _bvh.build(vertices, triangles, max_leaf=max_leaf, n_bins=n_bins)
        return cls(vertices, triangles, tree)

    @property
    def arrays(self):
        """``(nodes, nodes_i, leaf_tri, leaf_tri_i)``: what the device functions take."""
        t = self.bvh
        return (t.nodes, t.nodes_i, t.leaf_tri, t.leaf_tri_i)

    @property
    def n_facets(self):
        return self.triangles.shape[0]

    def refit(self, vertices):
        """Move the vertices (same triangles) and refit the BVH boxes in place.

        Parameters
        ----------
        vertices : (v, 3) float [m], finite, same shape as at build

        Raises
        ------
        vfactor.errors.GeometryError
            Wrong shape or non-finite vertices.
        """
        vertices, _ = _clean_mesh(vertices, self.triangles, "Scene.refit")
        if vertices.shape != self.vertices.shape:
            raise GeometryError(f"vertices must keep shape {self.vertices.shape}, got "
                                f"{vertices.shape}", where="Scene.refit")
        self.vertices[...] = vertices
        _bvh.refit(self.bvh, self.vertices, self.triangles)
        _facet_normals(self.vertices, self.triangles, self.normals)

    def closest_hit(self, origins, directions, tmax=np.inf, exclude=None):
        """First facet hit by each ray.

        Parameters
        ----------
        origins : (r, 3) float [m]
        directions : (r, 3) float, non-zero (normalised here)
        tmax : float or (r,) float [m], optional
            Largest distance counted.
        exclude : None or (r,) int, optional
            Facet never hit by each ray (the emitting facet), -1 for none.

        Returns
        -------
        Hits
        """
        o, d, tm, ex = _clean_rays(origins, directions, tmax, exclude, self.n_facets,
                                   "closest_hit")
        r = o.shape[0]
        facet = np.empty(r, dtype=np.int64)
        distance = np.empty(r)
        front = np.empty(r, dtype=np.bool_)
        if r:
            if self.stream_lanes > 0:
                chunk = min(_CHUNK, max(64, -(-r // (8 * numba.get_num_threads()))))
                _closest_stream_kernel(self.arrays, o, d, tm, ex, facet, distance, front,
                                       self.stream_lanes, chunk)
            else:
                _closest_kernel(self.arrays, o, d, tm, ex, facet, distance, front)
        return Hits(facet, distance, front)

    def occluded(self, origins, directions, tmax, exclude=None):
        """Whether each ray hits any facet closer than ``tmax``.

        Parameters are those of :meth:`closest_hit` (``tmax`` required; ``inf`` for rays
        toward the Sun).

        Returns
        -------
        (r,) bool
        """
        o, d, tm, ex = _clean_rays(origins, directions, tmax, exclude, self.n_facets,
                                   "occluded")
        out = np.empty(o.shape[0], dtype=np.bool_)
        if o.shape[0]:
            _occluded_kernel(self.arrays, o, d, tm, ex, out)
        return out


def rays_by_area(areas, n_rays):
    """Split ``n_rays`` over facets in proportion to their areas (largest remainder).

    Parameters
    ----------
    areas : (f,) float [m2], non-negative, not all zero
    n_rays : int

    Returns
    -------
    (f,) int64
        Sums to ``n_rays``; deterministic (ties go to the lower facet index).
    """
    areas = np.asarray(areas, dtype=np.float64)
    if areas.ndim != 1 or not np.isfinite(areas).all() or (areas < 0).any() or areas.sum() <= 0:
        raise ValueError("rays_by_area: areas must be finite, non-negative, not all zero")
    share = areas / areas.sum() * int(n_rays)
    counts = np.floor(share).astype(np.int64)
    rest = int(n_rays) - int(counts.sum())
    if rest > 0:
        order = np.lexsort((np.arange(areas.size), -(share - counts)))
        counts[order[:rest]] += 1
    return counts


def ray_tasks(ray_counts, max_rays=TASK_RAYS):
    """Split the rays of every emitter into tasks of at most ``max_rays`` rays.

    A ``prange`` over tasks (rather than over emitters) gives each thread about the same
    number of rays however unequal the emitters are: numba hands each thread one
    contiguous block of iterations, whatever the threading layer. For the same reason the
    tasks come in blocks of about 2048 rays (consecutive rays of neighbouring emitters,
    for memory locality) put in a fixed pseudo-random block order, so that every
    contiguous share of the task list holds a fair sample of heavy and light emitters. The order is a
    function of ``ray_counts`` alone; tallies made per task and then summed per emitter
    (in task-index order, or exactly for integers) are the same for any thread count.

    Parameters
    ----------
    ray_counts : (f,) int64
        Rays of each emitter.
    max_rays : int
        Largest task.

    Returns
    -------
    emitter, first, count : (t,) int64
        Emitter of each task, index of its first ray (within the emitter), its rays.
    """
    counts = np.asarray(ray_counts, dtype=np.int64)
    per = -(-counts // int(max_rays))                     # ceil, 0 for no rays
    emitter = np.repeat(np.arange(counts.size, dtype=np.int64), per)
    start_of = np.concatenate([[0], np.cumsum(per)[:-1]]).astype(np.int64)
    j = np.arange(emitter.size, dtype=np.int64) - start_of[emitter]
    first = j * int(max_rays)
    count = np.minimum(counts[emitter] - first, int(max_rays))
    # Blocks of about 2048 consecutive rays, in a fixed pseudo-random order.
    ray_start = np.cumsum(count) - count
    block = ray_start // 2048
    rank = np.random.default_rng(20261202).permutation(int(block[-1]) + 1 if block.size else 0)
    order = np.lexsort((np.arange(emitter.size), rank[block]))
    return emitter[order], first[order], count[order]


@njit(**JIT_PARALLEL)
def _cosine_rays_kernel(vertices, triangles, normals, task_f, task_k, task_n, out_start,
                        seed, stream0, counter0, sign, origins, directions, emitter):
    for q in prange(task_f.shape[0]):
        f = task_f[q]
        nx = sign * normals[f, 0]
        ny = sign * normals[f, 1]
        nz = sign * normals[f, 2]
        stream = stream0 + np.uint64(f)
        for j in range(task_n[q]):
            k = task_k[q] + j
            u0, u1, u2, u3 = uniform4(seed, stream, counter0 + np.uint64(k))
            x, y, z = triangle_point(vertices, triangles, f, u0, u1)
            dx, dy, dz = cosine_direction(nx, ny, nz, u2, u3)
            i = out_start[q] + j
            origins[i, 0] = x
            origins[i, 1] = y
            origins[i, 2] = z
            directions[i, 0] = dx
            directions[i, 1] = dy
            directions[i, 2] = dz
            emitter[i] = f


def cosine_rays(scene, ray_counts, seed, side=1, stream_offset=0, counter_start=0):
    """Rays from uniform points on facets in cosine-weighted directions.

    Parameters
    ----------
    scene : Scene
    ray_counts : (f,) int
        Rays per facet (e.g. from :func:`rays_by_area`); degenerate facets must get 0.
    seed : int
    side : {1, -1}
        Emit about the front normal (1) or the back (-1).
    stream_offset, counter_start : int
        Stream of facet ``f`` is ``stream_offset + f``; its ray ``k`` uses counter
        ``counter_start + k``.

    Returns
    -------
    origins (r, 3) [m], directions (r, 3) [1], emitter (r,) int64
        Grouped by facet, rays of a facet in counter order.
    """
    counts = _check_counts(scene, ray_counts)
    task_f, task_k, task_n = ray_tasks(counts)
    facet_start = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
    out_start = facet_start[task_f] + task_k
    r = int(counts.sum())
    origins = np.empty((r, 3))
    directions = np.empty((r, 3))
    emitter = np.empty(r, dtype=np.int64)
    _cosine_rays_kernel(scene.vertices, scene.triangles, scene.normals, task_f, task_k,
                        task_n, out_start, np.uint64(seed), np.uint64(stream_offset),
                        np.uint64(counter_start), float(side), origins, directions, emitter)
    return origins, directions, emitter


def _check_counts(scene, ray_counts):
    counts = np.ascontiguousarray(ray_counts, dtype=np.int64)
    if counts.shape != (scene.n_facets,) or (counts < 0).any():
        raise ValueError(f"ray_counts must be ({scene.n_facets},) non-negative integers")
    degenerate = ~(np.abs(scene.normals).sum(axis=1) > 0)
    if (counts[degenerate] > 0).any():
        f = int(np.flatnonzero(degenerate & (counts > 0))[0])
        raise ValueError(f"ray_counts: facet {f} is degenerate (no area) but gets rays")
    return counts


@njit(**JIT_PARALLEL)
def _count_kernel(arrays, vertices, triangles, normals, task_f, task_k, task_n, seed,
                  stream0, counter0, sign, hits, front_hits, facet_sum):
    for q in prange(task_f.shape[0]):                 # one task: rays of one emitter
        f = task_f[q]
        nx = sign * normals[f, 0]
        ny = sign * normals[f, 1]
        nz = sign * normals[f, 2]
        stream = stream0 + np.uint64(f)
        nh = 0
        nf = 0
        s = 0
        for j in range(task_n[q]):
            k = task_k[q] + j
            u0, u1, u2, u3 = uniform4(seed, stream, counter0 + np.uint64(k))
            x, y, z = triangle_point(vertices, triangles, f, u0, u1)
            dx, dy, dz = cosine_direction(nx, ny, nz, u2, u3)
            g, t, front = closest_hit(arrays, x, y, z, dx, dy, dz, np.inf, f)
            if g >= 0:
                nh += 1
                s += g
                if front:
                    nf += 1
        hits[q] = nh                                  # per-task tallies, summed after
        front_hits[q] = nf
        facet_sum[q] = s


def count_cosine_hits(scene, ray_counts, seed, side=1, stream_offset=0, counter_start=0):
    """Fused kernel: emit cosine-weighted rays from facets, trace them, count the hits.

    Parameters are those of :func:`cosine_rays`; no ray array is ever made.

    Returns
    -------
    CosineTally
    """
    counts = _check_counts(scene, ray_counts)
    task_f, task_k, task_n = ray_tasks(counts)
    t = task_f.shape[0]
    hits = np.zeros(t, dtype=np.int64)
    front_hits = np.zeros(t, dtype=np.int64)
    facet_sum = np.zeros(t, dtype=np.int64)
    _count_kernel(scene.arrays, scene.vertices, scene.triangles, scene.normals, task_f,
                  task_k, task_n, np.uint64(seed), np.uint64(stream_offset),
                  np.uint64(counter_start), float(side), hits, front_hits, facet_sum)
    f = scene.n_facets
    return CosineTally(counts, _sum_by(task_f, hits, f), _sum_by(task_f, front_hits, f),
                       _sum_by(task_f, facet_sum, f))


def _sum_by(index, values, n):
    """Integer sums of ``values`` grouped by ``index`` (exact, order-independent)."""
    out = np.zeros(n, dtype=np.int64)
    np.add.at(out, index, values)
    return out
