"""One step of the heating stage, and what it keeps from step to step (internal).

:func:`vfactor.heating.compute_heating` prepares a :class:`Model` (the vehicle: active
facet sides, their properties, the cached escaping directions of the planet rays, the
band tables for reflections) once, then fills one row of every output per trajectory
step with :func:`one_step`. Physics, estimators and sources are in the docstring of
:mod:`vfactor.heating`; the numba kernels in :mod:`vfactor.tracing.heat_kernels`,
:mod:`vfactor.tracing.planet_kernels` and :mod:`vfactor.tracing.heat_sums`.

Planet IR and albedo are estimated by control variates on the sides the vehicle blocks
little (:mod:`vfactor.heatplanet`: the unblocked value in closed form or by quadrature,
minus the Monte Carlo estimate of what the vehicle hides); reflections inside the vehicle
are in :mod:`vfactor.heatreflect`. :func:`plain_estimates` switches both control variates
off (for comparisons).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vfactor.heatplanet import (CONTROL_BLOCKED_SHARE, albedo_groups, albedo_view, dark_cap,
                                planet_view, vertex_extent)
from vfactor.heatreflect import PlanetRays, reflect
from vfactor.tracing import beam, heat_kernels, heat_sums, planet_kernels, side_rays

__all__ = ["Model", "Step", "prepare", "trace_once", "cache_targets", "reuse_trace",
           "plain_estimates", "side_sequences", "one_step", "unit"]


@dataclass(frozen=True)
class _Sides:
    """Active facet sides and per-side properties (internal)."""

    facet: np.ndarray        # (s,) int64
    sign: np.ndarray         # (s,) int64, +1 front, -1 back
    node: np.ndarray         # (s,) int64
    area: np.ndarray         # (s,) m2
    normal: np.ndarray       # (s, 3) outward unit normal
    absorptivity: np.ndarray  # (s,) solar band
    emissivity: np.ndarray   # (s,) infrared band
    solar_specular: np.ndarray
    ir_specular: np.ndarray
    ray_stream: np.ndarray   # (s,) uint64: the planet-ray sequence of the side's node
    ray_rank: np.ndarray     # (s,) int64: the side's block in it (side_rays.planet_ray_keys)
    copies: np.ndarray       # (s,) int64: blocks of planet rays of the entry's facet side
    #                          (vfactor.planetrays): c blocks are c entries of area A / c
    first: np.ndarray = None  # (u,) the first entry of each facet side, None: one entry each
    side_of: np.ndarray = None  # (s,) index into ``first`` of each entry's facet side

    @property
    def count(self) -> int:
        return int(self.facet.shape[0])

    def key(self, index=slice(None)) -> tuple:
        """``side_key`` of the planet-ray kernels for the sides ``index``."""
        return (np.ascontiguousarray(self.ray_stream[index]),
                np.ascontiguousarray(self.ray_rank[index]))


def _band_tables(geometry):
    """(f, 2) node and band properties of the front (col 0) and back (col 1) sides."""
    f = geometry.n_facets
    node = np.stack([geometry.front_node, geometry.back_node], axis=1).astype(np.int64)
    coat = np.stack([geometry.front_coating, geometry.back_coating], axis=1).astype(np.int64)
    props = np.zeros((4, f, 2))
    for ci, c in enumerate(geometry.coatings):
        mask = coat == ci
        props[0][mask] = c.solar_absorptivity
        props[1][mask] = c.ir_emissivity
        props[2][mask] = c.solar_specular
        props[3][mask] = c.ir_specular
    inert = node < 0
    for p in props:
        p[inert] = 0.0
    return node, [np.ascontiguousarray(p) for p in props]


def _sides(geometry, normals, facet_node, props, blocks=None) -> _Sides:
    """The active facet sides, facet-major, front before back. A side of a node with
    ``blocks[node] = c > 1`` is ``c`` consecutive entries of area ``A / c``, block ``j``
    drawing the side's planet rays from the node's sequence ``j COPY_STRIDE`` further on
    (an independent randomisation: :mod:`vfactor.planetrays`), so that every sum over
    the entries is the mean of ``c`` independent estimates of the side's. ``blocks`` None
    or all 1: one entry per side."""
    facet_idx = []
    signs = []
    for col, sign in ((0, 1), (1, -1)):
        active = (facet_node[:, col] >= 0) & (geometry.areas > 0.0)
        idx = np.flatnonzero(active)
        facet_idx.append(idx)
        signs.append(np.full(idx.size, sign, dtype=np.int64))
    facet = np.concatenate(facet_idx).astype(np.int64)
    sign = np.concatenate(signs)
    order = np.lexsort((-sign, facet))       # facet-major, front before back
    facet = np.ascontiguousarray(facet[order])
    sign = np.ascontiguousarray(sign[order])
    col = np.where(sign > 0, 0, 1)
    node = facet_node[facet, col]
    ray_stream, ray_rank = side_rays.planet_ray_keys(node)
    count = np.ones(facet.size, dtype=np.int64)
    first = side_of = None
    if blocks is not None and (np.asarray(blocks)[node] > 1).any():
        count = np.asarray(blocks, dtype=np.int64)[node]
        copy = _copy_index(count)
        side_of = np.repeat(np.arange(facet.size, dtype=np.int64), count)
        first = np.ascontiguousarray(np.cumsum(count) - count)
        facet, sign, col, node, ray_stream, ray_rank, count = (
            np.repeat(a, count) for a in (facet, sign, col, node, ray_stream, ray_rank, count))
        ray_stream = ray_stream + copy.astype(np.uint64) * np.uint64(side_rays.COPY_STRIDE)
    return _Sides(facet=facet, sign=sign, node=node, ray_stream=ray_stream, ray_rank=ray_rank,
                  copies=count, first=first, side_of=side_of,
                  area=np.asarray(geometry.areas, dtype=np.float64)[facet] / count,
                  normal=normals[facet] * sign[:, None],
                  absorptivity=props[0][facet, col], emissivity=props[1][facet, col],
                  solar_specular=props[2][facet, col], ir_specular=props[3][facet, col])


def _copy_index(count) -> np.ndarray:
    """Block ``j`` of each entry when side ``i`` has ``count[i]`` consecutive entries:
    ``[2, 1, 3]`` -> ``[0, 1, 0, 0, 1, 2]``."""
    return np.arange(int(count.sum()), dtype=np.int64) - np.repeat(np.cumsum(count) - count,
                                                                     count)


def unit(v):
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v)


@dataclass
class Model:
    """Everything about the vehicle that does not change along the orbit (internal)."""

    arrays: tuple
    vertices: np.ndarray
    triangles: np.ndarray
    normals: np.ndarray
    facet_node: np.ndarray       # (f, 2)
    props: tuple                 # (f, 2) alpha, eps, solar specular, ir specular
    sides: "_Sides"
    node_area: np.ndarray
    facet_area: np.ndarray
    node_area_safe: np.ndarray   # node_area, 1 where it is 0 (a divisor)
    facet_area_safe: np.ndarray  # facet_area, 1 where it is 0
    node_positive: np.ndarray    # node_area > 0
    facet_positive: np.ndarray   # facet_area > 0
    n_nodes: int
    extent: float                # largest distance of a vertex from the body origin [m]
    diagonal: float              # of the vertices' bounding box, a little more [m]
    m: int
    k_planet: int
    k_sun: int
    seed: np.uint64
    max_bounces: int
    targets: np.ndarray = None           # (s, m k_planet) int32
    segment_start: np.ndarray = None     # (s m + 1,) int64
    stored: np.ndarray = None            # (s,) bool: the side's escaping rays are kept
    esc_origin: np.ndarray = None        # (e, 3)
    esc_dir: np.ndarray = None           # (e, 3)
    position: np.ndarray = None          # (s, 3) centroid of each side's facet [m]
    reach: np.ndarray = None             # (s,) largest distance of its points from it [m]
    order: np.ndarray = None             # (s,) sides in the order handed to the threads
    rigid: bool = False                  # the cache is a one-off trace (trace_once)
    control: np.ndarray = None           # (s,) bool: planet IR and albedo by control variate
    albedo_group: np.ndarray = None      # (s,) int64: group of a control side, else -1
    albedo_normal: np.ndarray = None     # (q, 3) normal of each group's sides
    albedo_position: np.ndarray = None   # (q, 3) area-weighted centre of its sides [m]
    blk_start: np.ndarray = None         # (s m + 1,) int64, blocked rays of control sides
    blk_origin: np.ndarray = None        # (b, 3)
    blk_dir: np.ndarray = None           # (b, 3)
    unseen: np.ndarray = None            # (s,) bool: control side no ray of which is blocked,
    #                                      though something rises in front of it


@dataclass(frozen=True)
class Step:
    """The environment at one step (internal)."""

    sun: np.ndarray          # (3,) unit, body frame
    centre: np.ndarray       # (3,) planet centre, body frame [m]
    solar: float             # solar constant [W m-2]
    fraction: float          # visible share of the solar disk
    cos_half: float          # cosine of the Sun's angular radius
    radius: float            # planet radius [m]
    olr: float               # planet IR [W m-2]
    albedo: float            # [1]


def prepare(geometry, scene, m, rays_per_facet, sun_samples, seed, max_bounces,
            blocks=None) -> Model:
    """The :class:`Model` of the vehicle, not yet traced; ``blocks`` (n,) int: blocks of
    ``rays_per_facet`` planet rays per side of each node (:func:`_sides`; None: one)."""
    vertices = np.ascontiguousarray(scene.vertices, dtype=np.float64)
    triangles = np.ascontiguousarray(scene.triangles, dtype=np.int64)
    normals = np.ascontiguousarray(scene.normals, dtype=np.float64)
    facet_node, props = _band_tables(geometry)
    sides = _sides(geometry, normals, facet_node, props, blocks)
    node_area = np.asarray(geometry.nodes.area, dtype=np.float64)
    facet_area = np.asarray(geometry.areas, dtype=np.float64)
    return Model(arrays=scene.arrays, vertices=vertices, triangles=triangles, normals=normals,
                  facet_node=facet_node, props=tuple(props), sides=sides,
                  node_area=node_area, facet_area=facet_area,
                  node_area_safe=np.where(node_area > 0.0, node_area, 1.0),
                  facet_area_safe=np.where(facet_area > 0.0, facet_area, 1.0),
                  node_positive=node_area > 0.0, facet_positive=facet_area > 0.0,
                  n_nodes=geometry.n_nodes, extent=vertex_extent(vertices),
                  diagonal=_diagonal(vertices), m=m,
                  k_planet=-(-rays_per_facet // m), k_sun=-(-sun_samples // m),
                  seed=np.uint64(seed), max_bounces=max_bounces)


def _diagonal(vertices) -> float:
    """Diagonal of the bounding box of the vertices [m] (a little more, for rounding): no
    ray from a facet meets another facet beyond this distance."""
    if vertices.shape[0] == 0:
        return 0.0
    return float(np.linalg.norm(np.ptp(vertices, axis=0))) * (1.0 + 1e-12)


_TRACE_BATCH = 512
def trace_once(model: Model, bar, need_rays: bool, all_escaping: bool = False) -> None:
    """First hits of every planet ray (batches of sides, for progress), and the cache
    (:func:`cache_targets`; ``all_escaping``: keep the escaping rays of every side, as
    :func:`plain_estimates` needs)."""
    s = model.sides
    n_rays = model.m * model.k_planet
    targets = np.empty((s.count, n_rays), dtype=np.int32)
    for a in range(0, s.count, _TRACE_BATCH):
        b = min(s.count, a + _TRACE_BATCH)
        heat_kernels.trace_targets(model.arrays, model.vertices, model.triangles, model.normals,
                                   s.facet[a:b], s.sign[a:b], s.key(slice(a, b)), model.facet_node,
                                   model.seed, model.m, model.k_planet, targets[a:b])
        bar.advance(b - a)
    cache_targets(model, targets, need_rays, all_escaping=all_escaping)
    model.rigid = True


_TRACED = ("targets", "segment_start", "stored", "esc_origin", "esc_dir", "position", "reach",
           "order", "rigid", "control", "albedo_group", "albedo_normal", "albedo_position",
           "blk_start", "blk_origin", "blk_dir", "unseen")


def reuse_trace(model: Model, traced: Model) -> bool:
    """Give ``model`` the cache of :func:`trace_once` of ``traced`` when both are the same
    facets, nodes, seed and rays (only coating values may differ: the rays do not depend
    on them); True when it did."""
    same = (traced is not None and traced.targets is not None
            and (model.m, model.k_planet, model.seed) == (traced.m, traced.k_planet, traced.seed)
            and np.array_equal(model.vertices, traced.vertices)
            and np.array_equal(model.triangles, traced.triangles)
            and np.array_equal(model.facet_node, traced.facet_node)
            and np.array_equal(model.sides.facet, traced.sides.facet)
            and np.array_equal(model.sides.sign, traced.sides.sign)
            # the escaping rays this model needs were kept (specular sides depend on the
            # coating values)
            and bool(np.all(traced.stored[_needs_escaping(model, traced.control)])))
    if same:
        for name in _TRACED:
            setattr(model, name, getattr(traced, name))
    return same


def _needs_escaping(model: Model, control) -> np.ndarray:
    """(s,) bool: the sides whose escaping rays a step uses: those with the plain estimates
    (not ``control``) and those that reflect specularly in a band (their mirror rays)."""
    s = model.sides
    specular = (((1.0 - s.absorptivity) * s.solar_specular > 0.0)
                | ((1.0 - s.emissivity) * s.ir_specular > 0.0))
    return ~np.asarray(control, dtype=np.bool_) | specular


def cache_targets(model: Model, targets, need_rays: bool, fill=None,
                  all_escaping: bool = False) -> None:
    """The cache of :func:`trace_once` from the first hits ``targets`` (s, m k_planet) of
    every planet ray: escaping rays by (side, replicate), control-variate sides and their
    blocked rays. ``fill(segment_start, origin, direction)``, if given, writes the escaping
    rays of every side instead of :func:`vfactor.tracing.heat_kernels.fill_cache` (same
    layout). Otherwise only the sides that need them (:func:`_needs_escaping`) keep their
    escaping rays (the others have empty segments), or every side with ``all_escaping``."""
    s = model.sides
    m, k = model.m, model.k_planet
    n_rays = m * k
    escapes = np.empty(s.count * m, dtype=np.int64)
    if s.count:
        heat_kernels.segment_escapes(targets, m, k, escapes)
    # control variate for planet IR where the vehicle blocks less than half of the rays
    blocked_per_segment = (k - escapes).reshape(s.count, m)
    model.control = blocked_per_segment.sum(axis=1) / n_rays < CONTROL_BLOCKED_SHARE \
        if s.count else np.zeros(0, bool)
    model.stored = (np.ones(s.count, dtype=np.bool_) if fill is not None or all_escaping
                    else _needs_escaping(model, model.control))
    # control sides whose rays met nothing though the vehicle rises in front of them: what
    # hides a part of their planet too small for their rays is not seen (see unseen_variance)
    model.unseen = model.control & (blocked_per_segment.sum(axis=1) == 0) \
        if s.count else np.zeros(0, bool)
    if model.unseen.any():
        pick = np.flatnonzero(model.unseen)
        model.unseen[pick] = ~beam.open_sides(model.arrays, model.vertices, model.triangles,
                                              model.normals, s.facet[pick], s.sign[pick])
    segment_start = np.zeros(s.count * m + 1, dtype=np.int64)
    np.cumsum(np.where(np.repeat(model.stored, m), escapes, 0), out=segment_start[1:])
    n_esc = int(segment_start[-1]) if need_rays else 0
    model.targets = targets
    model.segment_start = segment_start
    model.esc_origin = np.empty((n_esc, 3))
    model.esc_dir = np.empty((n_esc, 3))
    corners = model.vertices[model.triangles[s.facet]]                 # (s, 3, 3)
    model.position = corners.mean(axis=1)
    model.reach = np.sqrt(((corners - model.position[:, None, :]) ** 2).sum(axis=2)).max(
        axis=1) * (1.0 + 1e-12) if s.count else np.zeros(0)
    model.order = _thread_order(s.count)
    albedo_groups(model)
    counted = np.where(model.control[:, None], blocked_per_segment, 0).ravel()
    model.blk_start = np.zeros(s.count * m + 1, dtype=np.int64)
    np.cumsum(counted, out=model.blk_start[1:])
    n_blk = int(model.blk_start[-1]) if need_rays else 0
    model.blk_origin = np.empty((n_blk, 3))
    model.blk_dir = np.empty((n_blk, 3))
    if not (need_rays and s.count):
        return
    # rays of sides without the control variate are not stored among the blocked ones
    if fill is None:
        heat_kernels.fill_cache(model.vertices, model.triangles, model.normals, s.facet, s.sign,
                                s.key(), model.seed, m, k, targets, segment_start, model.stored,
                                model.blk_start, model.control, (model.esc_origin, model.esc_dir),
                                (model.blk_origin, model.blk_dir))
        return
    fill(segment_start, model.esc_origin, model.esc_dir)
    if n_blk:
        # the blocked rays alone: no escaping segment is stored here
        heat_kernels.fill_cache(model.vertices, model.triangles, model.normals, s.facet, s.sign,
                                s.key(), model.seed, m, k, targets, segment_start,
                                np.zeros(s.count, dtype=np.bool_), model.blk_start, model.control,
                                (np.empty((0, 3)), np.empty((0, 3))),
                                (model.blk_origin, model.blk_dir))


def _thread_order(count, block=64):
    """The sides in blocks of ``block`` neighbours, the blocks in a fixed pseudo-random
    order: a ``prange`` over this order gives each thread (a contiguous share) a fair mix
    of sides that see much and little of the planet. A function of ``count`` only; the
    outputs of the kernels that use it do not depend on it."""
    blocks = -(-count // block)
    perm = np.random.default_rng(20260).permutation(blocks) if blocks else np.zeros(0, np.int64)
    order = (perm[:, None] * block + np.arange(block)[None, :]).ravel()
    return np.ascontiguousarray(order[order < count], dtype=np.int64)


def unseen_variance(model: Model, step: Step, views):
    """Per node, the variance of what the planet rays of the control-variate sides cannot
    resolve: {"planet_ir": (n,), "albedo": (n,)} [W2], or None when no side needs it.

    A control side none of whose ``N`` rays the vehicle blocks gets its unblocked value,
    with no spread between replicates; yet where something rises in front of it
    (:func:`vfactor.tracing.beam.open_sides`), a part of its planet too small for ``N``
    rays may be hidden. With none of ``N`` directions blocked, the hidden share of the
    (cosine-weighted) hemisphere has a posterior standard deviation of about ``1 / N``
    (uniform prior: a Beta(1, N + 1) law; Laplace's rule of succession, common practice),
    so its error is one ray's worth: ``eps E A / N`` for planet IR and ``alpha a S A mu /
    N`` for albedo, ``mu`` the mean cosine of the solar zenith over the directions that
    meet the planet (the albedo factor over the view factor), on sides that see the planet
    (or its sunlit part) at all. The sides of a node draw their rays from one sequence
    (:mod:`vfactor.tracing.side_rays`), so the rule applies to their pooled rays: none of
    the ``n N`` rays of the node's ``n`` such sides was blocked, and the node's error is
    one ray's worth of the pool, taken as that of its largest such side (not ``sqrt(n)``
    times it, as the sum in quadrature of independent sides would give).
    """
    if model.unseen is None or not model.unseen.any():
        return None
    s = model.sides
    n_rays = model.m * model.k_planet
    pick = np.flatnonzero(model.unseen)
    view, albedo = views
    out = {}
    sees = view[pick] > 0.0
    mu = np.where(sees, albedo[pick] / np.where(sees, view[pick], 1.0), 0.0)
    for src, flux, absorb in (("planet_ir", step.olr * sees, s.emissivity),
                              ("albedo", step.albedo * step.solar * mu, s.absorptivity)):
        ray = absorb[pick] * flux * s.area[pick] / n_rays
        out[src] = np.zeros(model.n_nodes)
        np.maximum.at(out[src], s.node[pick], ray * ray)
    return out


def plain_estimates(model: Model) -> Model:
    """A copy of a traced ``model`` that uses the plain Monte Carlo estimates of planet IR
    and albedo on every side (no control variates), from the same rays: for comparisons
    of the two estimators (``scripts/bench_heating.py``, tests). Its cache keeps the
    escaping rays of every side (made again from the first hits of ``model``); build its
    bands with :func:`vfactor.heatreflect.bands_of`."""
    import dataclasses

    plain = dataclasses.replace(model)
    cache_targets(plain, model.targets, need_rays=True, all_escaping=True)
    count = plain.sides.count
    return dataclasses.replace(
        plain, control=np.zeros(count, dtype=np.bool_), unseen=np.zeros(count, dtype=np.bool_),
        albedo_group=np.full(count, -1, dtype=np.int64), albedo_normal=np.zeros((0, 3)),
        albedo_position=np.zeros((0, 3)),
        blk_start=np.zeros(count * model.m + 1, dtype=np.int64),
        blk_origin=np.zeros((0, 3)), blk_dir=np.zeros((0, 3)))


def side_sequences(model: Model, bar) -> Model:
    """A copy of a prepared ``model`` whose planet rays come from one sequence per side
    (stream ``PURPOSE_PLANET * STREAM_STRIDE + 2 facet + (0 front | 1 back)``, the design
    before :func:`vfactor.tracing.side_rays.planet_ray_keys`), traced once with the
    escaping rays of every side kept: for comparisons of the two designs at equal rays
    (``scripts/bench_heating.py``). ``bar``: progress, advanced per side."""
    import dataclasses

    s = model.sides
    stream = (np.uint64(side_rays.PURPOSE_PLANET) * np.uint64(side_rays.STREAM_STRIDE)
              + (2 * s.facet + (s.sign < 0)).astype(np.uint64))
    # block j of a side (vfactor.planetrays) takes the sequence j COPY_STRIDE further on
    block = s.ray_stream // np.uint64(side_rays.COPY_STRIDE) % np.uint64(
        side_rays.STREAM_STRIDE // side_rays.COPY_STRIDE)
    sides = dataclasses.replace(s, ray_stream=np.ascontiguousarray(
        stream + block * np.uint64(side_rays.COPY_STRIDE), dtype=np.uint64),
        ray_rank=np.zeros(s.count, dtype=np.int64))
    copy = dataclasses.replace(model, sides=sides)
    trace_once(copy, bar, need_rays=True, all_escaping=True)
    return copy


def one_step(model: Model, bands, step: Step, use_cache: bool, k: int, out: dict) -> None:
    """Fill row ``k`` of every output for one step.

    ``use_cache``: the planet rays are the cached escaping (and blocked) rays and, on a
    vehicle traced once (:func:`trace_once`), the mirror chains of specular sides are
    replayed from their records; otherwise every planet ray and every chain is traced.
    """
    s = model.sides
    m = model.m
    n_nodes = model.n_nodes
    g = s.count * m

    # direct solar: unshadowed sample points per (side, sample); the blocks of planet rays
    # of a side (vfactor.planetrays) share its Sun samples, traced once
    cos_t = np.maximum(s.normal @ step.sun, 0.0)
    sunlit = bool(s.count and step.fraction > 0.0 and step.solar > 0.0)
    blank = np.empty if sunlit else np.zeros        # the kernel writes every entry
    one = s.first if s.first is not None else slice(None)
    n_sun = s.count if s.first is None else s.first.size
    lit_mask = blank((n_sun, m * model.k_sun), dtype=np.bool_)
    lit = blank((n_sun, m))
    if sunlit:
        order = model.order if s.first is None else _thread_order(n_sun)
        heat_kernels.sun_lit_mask(model.arrays, model.vertices, model.triangles, model.normals,
                                  np.ascontiguousarray(s.facet[one]),
                                  np.ascontiguousarray(s.sign[one]), order, model.seed, m,
                                  model.k_sun, step.sun, step.cos_half, model.diagonal,
                                  lit_mask, lit)
    if s.side_of is not None:
        lit_mask, lit = lit_mask[s.side_of], lit[s.side_of]

    # planet: hits and albedo cosines per (side, replicate); per ray for specular sides
    blank = np.empty if s.count else np.zeros       # the kernels write every entry
    seen = blank((2, g))
    blocked = blank((2, g))
    n_rows = 0 if bands is None else bands.n_rows
    row_hit = blank(n_rows, dtype=np.bool_)
    row_mu = blank(n_rows)
    dark = dark_cap(model, step)
    if s.count:
        if use_cache:
            planet = (step.centre, step.radius, step.sun, dark)
            slots = bands.row_slot if bands is not None else np.full((0, g), -1, np.int64)
            # a control-variate estimate needs the side's blocked rays only; the escaping
            # ones where the plain estimate is used, or to carry specular shares
            wanted = ~model.control if bands is None else ~model.control | bands.specular
            planet_kernels.planet_step(
                (model.order, model.position, s.normal, model.reach, wanted),
                (model.segment_start, model.esc_origin, model.esc_dir),
                (model.blk_start, model.blk_origin, model.blk_dir), planet, m, slots, seen,
                blocked, (row_hit, row_mu))
        else:
            planet_kernels.planet_uncached(model.arrays, model.vertices, model.triangles,
                                           model.normals, s.facet, s.sign, s.key(), model.seed, m,
                                           model.k_planet, step.centre, step.radius, step.sun,
                                           seen, blocked)
            if bands is not None:
                for band in (bands.solar, bands.ir):
                    a = band["row_offset"]
                    b = a + band["rows"].size
                    if b > a:
                        planet_kernels.planet_ray_cos(model.esc_origin, model.esc_dir,
                                                      band["rows"], step.centre, step.radius,
                                                      step.sun, row_hit[a:b], row_mu[a:b])
    # control variates (CONTROL_BLOCKED_SHARE): the unblocked value of the side, minus
    # the Monte Carlo estimate of what the vehicle hides from the same cached directions
    views = (planet_view(model, step), albedo_view(model, step, dark))
    solar_rep = np.empty((s.count, m))
    ir_rep = np.empty((s.count, m))
    alb_rep = np.empty((s.count, m))
    heat_sums.replicate_estimates(
        (s.area, cos_t, model.control), (lit, seen, blocked),
        views,
        (step.solar * step.fraction, step.olr, step.albedo * step.solar, model.k_sun,
         model.k_planet), (solar_rep, ir_rep, alb_rep))

    planet_rays = PlanetRays(seen, row_hit, row_mu, use_cache)
    unseen = unseen_variance(model, step, views)
    n_facets = model.facet_area.shape[0]
    for src, rep, absorb in (("solar", solar_rep, s.absorptivity),
                             ("albedo", alb_rep, s.absorptivity),
                             ("planet_ir", ir_rep, s.emissivity)):
        # per node: incident, absorbed; per facet: absorbed; and the independent replicate
        # estimates (m, n) of each node's absorbed power
        node_sums = np.empty((2, n_nodes))
        facet_power = np.empty(n_facets)
        node_rep = np.empty((m, n_nodes))
        heat_sums.side_tallies(s.node, s.facet, absorb, rep, node_sums, facet_power, node_rep)
        out[f"incident_{src}"][k] = node_sums[0]
        absorbed_node = node_sums[1]
        coupling_var = None
        if bands is not None and s.count:
            band = bands.ir if src == "planet_ir" else bands.solar
            extra_rep, escaped, lost, coupling_var = reflect(
                model, bands, src, band, step, rep, lit_mask, lit, cos_t, planet_rays)
            node_rep = node_rep + extra_rep
            extra = extra_rep.mean(axis=0)
            absorbed_node = absorbed_node + extra
            share = np.where(model.node_positive, extra / model.node_area_safe, 0.0)
            spread = np.empty(n_facets)
            heat_sums.facet_shares(s.facet, s.node, share, s.area, spread)
            facet_power = facet_power + spread
            out[f"escaped_{src}"][k] = escaped
            out[f"inert_{src}"][k] = lost
        # the replicates' spread and, apart, the couplings' error (independent rays) and
        # what the rays cannot resolve (unseen_variance)
        spread_error = node_rep.std(axis=0, ddof=1) / math.sqrt(m)
        if src != "solar" and unseen is not None:
            spread_error = np.hypot(spread_error, np.sqrt(unseen[src]))
        if src != "solar":
            out[f"node_{src}_ray_stderr"][k] = spread_error
        out[f"node_{src}_stderr"][k] = (spread_error if coupling_var is None else
                                        np.hypot(spread_error, np.sqrt(coupling_var)))
        out[f"node_{src}"][k] = absorbed_node
        out[f"facet_{src}"][k] = np.where(model.facet_positive,
                                          facet_power / model.facet_area_safe, 0.0)



