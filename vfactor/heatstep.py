"""One step of the heating stage, and what it keeps from step to step (internal).

:func:`vfactor.heating.compute_heating` prepares a :class:`Model` (the vehicle: active
facet sides, their properties, the cached escaping directions of the planet rays, the
band tables for reflections) once, then fills one row of every output per trajectory
step with :func:`one_step`. Physics, estimators and sources are in the docstring of
:mod:`vfactor.heating`; the numba kernels in :mod:`vfactor.tracing.heat_kernels`.

Control variates (planet IR and albedo)
---------------------------------------
For a side, the planet term is ``pi`` times the mean over cosine-weighted directions of
what each direction sees: the planet's radiance where the ray meets it, zero where the
vehicle blocks it or it misses. Split by whether the vehicle blocks the ray::

    seen = unblocked - hidden

The *unblocked* mean has a deterministic value: for planet IR the view factor of the
plane element to the sphere (closed form, :func:`vfactor.planetview.
plate_sphere_view_factor`), for albedo the albedo factor (cos of the solar zenith over the
sunlit part of the visible cap, :func:`vfactor.planetview.plate_sphere_albedo_factor`,
a quadrature good to ~1e-7). The *hidden* mean is estimated from the cached rays that the
vehicle blocks, tested against the planet at each step with the cosine of the solar
zenith at the point they meet (planet IR counts them). On the sides the vehicle blocks in
less than :data:`CONTROL_BLOCKED_SHARE` of their rays, the estimate is ``unblocked -
hidden`` (a control variate with coefficient 1, Owen 2013, "Monte Carlo theory, methods
and examples", ch. 8): exact for a side nothing blocks, with Monte Carlo error only from
what is hidden for the others; the replicates of the hidden part give its one-sigma
error. The other sides keep the plain estimate of what they see. The choice is made once
from the vehicle's rays, not per step, so both estimators stay unbiased. The specular
share of a control-variate estimate is carried by the side's rays that meet the planet
(planet IR evenly, albedo in proportion to each ray's cosine), so that the energy
bookkeeping closes; with no such ray it is reflected diffusely.

The albedo factor is evaluated once per step for each group of control-variate sides
with one node and one normal, at the area-weighted centre of the group (it changes with
the position by about the distance over the planet-centre distance, ~1e-7 per metre in
low orbit, and that linear change cancels in the group's area-weighted sum).
:func:`plain_estimates` switches both control variates off (for comparisons).
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
import scipy.sparse as sp
from vfactor.sparsetools import as_csr

__all__ = ["Model", "Step", "Bands", "prepare", "trace_once", "cache_targets", "reuse_trace",
           "plain_estimates", "band_gebhart", "bands_of", "one_step", "unit"]


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

    @property
    def count(self) -> int:
        return int(self.facet.shape[0])


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


def _sides(geometry, normals, facet_node, props) -> _Sides:
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
    return _Sides(facet=facet, sign=sign, node=facet_node[facet, col],
                  area=np.asarray(geometry.areas, dtype=np.float64)[facet],
                  normal=normals[facet] * sign[:, None],
                  absorptivity=props[0][facet, col], emissivity=props[1][facet, col],
                  solar_specular=props[2][facet, col], ir_specular=props[3][facet, col])


def _node_view_factors(sides, targets, n_nodes, node_area):
    """Node-to-node, space and inert view factors from the cached first hits [1]."""
    rays = targets.shape[1]
    weight = np.repeat(sides.area / rays, rays)          # each ray carries A_s / N
    src = np.repeat(sides.node, rays)
    tgt = targets.ravel().astype(np.int64)
    hit = tgt >= 0
    area = np.where(node_area > 0.0, node_area, 1.0)
    matrix = as_csr(sp.coo_array((weight[hit] / area[src[hit]], (src[hit], tgt[hit])),
                                 shape=(n_nodes, n_nodes)))
    space = np.bincount(src[tgt == -1], weights=weight[tgt == -1], minlength=n_nodes)
    inert = np.bincount(src[tgt == -2], weights=weight[tgt == -2], minlength=n_nodes)
    return matrix, space / area, inert / area


def _gebhart(view, absorptivity):
    """(B, B_space, B_inert) of one band from node view factors (matrix, space, inert)."""
    from vfactor.radiation import gebhart_matrix

    matrix, space, inert = view
    geb = gebhart_matrix(matrix, space, inert, absorptivity)
    # the dropped share is redistributed nowhere: count it with the inert (lost) power
    return geb.gebhart, geb.space, geb.inert + geb.dropped


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


def prepare(geometry, scene, m, rays_per_facet, sun_samples, seed, max_bounces) -> Model:
    vertices = np.ascontiguousarray(scene.vertices, dtype=np.float64)
    triangles = np.ascontiguousarray(scene.triangles, dtype=np.int64)
    normals = np.ascontiguousarray(scene.normals, dtype=np.float64)
    facet_node, props = _band_tables(geometry)
    sides = _sides(geometry, normals, facet_node, props)
    node_area = np.asarray(geometry.nodes.area, dtype=np.float64)
    facet_area = np.asarray(geometry.areas, dtype=np.float64)
    return Model(arrays=scene.arrays, vertices=vertices, triangles=triangles, normals=normals,
                  facet_node=facet_node, props=tuple(props), sides=sides,
                  node_area=node_area, facet_area=facet_area,
                  node_area_safe=np.where(node_area > 0.0, node_area, 1.0),
                  facet_area_safe=np.where(facet_area > 0.0, facet_area, 1.0),
                  node_positive=node_area > 0.0, facet_positive=facet_area > 0.0,
                  n_nodes=geometry.n_nodes, extent=_extent(vertices), m=m,
                  k_planet=-(-rays_per_facet // m), k_sun=-(-sun_samples // m),
                  seed=np.uint64(seed), max_bounces=max_bounces)


_TRACE_BATCH = 512
CONTROL_BLOCKED_SHARE = 0.5
"""A side whose rays the vehicle blocks less often than this gets the planet-IR and albedo
control variates: its estimate is the unblocked value (closed-form view factor, albedo
factor) minus the Monte Carlo estimate of the blocked part (Owen 2013, "Monte Carlo
theory, methods and examples", ch. 8, control variates with coefficient 1), whose variance
is that of the blocked part only. A side blocked more often keeps the plain estimate of
the seen part, which is then usually the smaller variance; the choice depends only on the
vehicle, not on the planet samples, so both estimators stay unbiased (see the module
notes)."""


def trace_once(model: Model, bar, need_rays: bool, all_escaping: bool = False) -> None:
    """First hits of every planet ray (batches of sides, for progress), and the cache
    (:func:`cache_targets`; ``all_escaping``: keep the escaping rays of every side, as
    :func:`plain_estimates` needs)."""
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    n_rays = model.m * model.k_planet
    targets = np.empty((s.count, n_rays), dtype=np.int32)
    for a in range(0, s.count, _TRACE_BATCH):
        b = min(s.count, a + _TRACE_BATCH)
        hk.trace_targets(model.arrays, model.vertices, model.triangles, model.normals,
                         s.facet[a:b], s.sign[a:b], model.facet_node, model.seed, model.m,
                         model.k_planet, targets[a:b])
        bar.advance(b - a)
    cache_targets(model, targets, need_rays, all_escaping=all_escaping)
    model.rigid = True


_TRACED = ("targets", "segment_start", "stored", "esc_origin", "esc_dir", "position", "reach",
           "order", "rigid", "control", "albedo_group", "albedo_normal", "albedo_position", "blk_start",
           "blk_origin", "blk_dir")


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
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    m, k = model.m, model.k_planet
    n_rays = m * k
    escapes = np.empty(s.count * m, dtype=np.int64)
    if s.count:
        hk.segment_escapes(targets, m, k, escapes)
    # control variate for planet IR where the vehicle blocks less than half of the rays
    blocked_per_segment = (k - escapes).reshape(s.count, m)
    model.control = blocked_per_segment.sum(axis=1) / n_rays < CONTROL_BLOCKED_SHARE \
        if s.count else np.zeros(0, bool)
    model.stored = (np.ones(s.count, dtype=np.bool_) if fill is not None or all_escaping
                    else _needs_escaping(model, model.control))
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
    _albedo_groups(model)
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
        hk.fill_cache(model.vertices, model.triangles, model.normals, s.facet, s.sign,
                      model.seed, m, k, targets, segment_start, model.stored,
                      model.blk_start, model.control, (model.esc_origin, model.esc_dir),
                      (model.blk_origin, model.blk_dir))
        return
    fill(segment_start, model.esc_origin, model.esc_dir)
    if n_blk:
        hk.fill_escaping(model.vertices, model.triangles, model.normals, s.facet, s.sign,
                         model.seed, m, k, targets, model.blk_start, False, model.control,
                         model.blk_origin, model.blk_dir)


def _albedo_groups(model: Model) -> None:
    """Groups of the control-variate sides that share a node and a normal, for the albedo
    quadrature (:func:`albedo_view`): each group is evaluated once per step at the
    area-weighted centre of its sides. Across a group the value changes linearly with the
    position, by about (distance from the centre) / (distance to the planet's centre),
    ~1e-7 per metre in low orbit; the linear part cancels in the group's (and so the
    node's) area-weighted sum."""
    s = model.sides
    chosen = np.flatnonzero(model.control)
    model.albedo_group = np.full(s.count, -1, dtype=np.int64)
    if chosen.size == 0:
        model.albedo_normal = np.zeros((0, 3))
        model.albedo_position = np.zeros((0, 3))
        return
    key = np.concatenate([s.normal[chosen], s.node[chosen, None].astype(np.float64)], axis=1)
    _, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
    inverse = inverse.reshape(-1)
    count = first.size
    model.albedo_group[chosen] = inverse
    model.albedo_normal = np.ascontiguousarray(s.normal[chosen[first]])
    area = s.area[chosen]
    weight = np.bincount(inverse, weights=area, minlength=count)
    position = np.stack([np.bincount(inverse, weights=area * model.position[chosen, c],
                                     minlength=count) for c in range(3)], axis=1)
    model.albedo_position = np.ascontiguousarray(position / weight[:, None])


def _thread_order(count, block=64):
    """The sides in blocks of ``block`` neighbours, the blocks in a fixed pseudo-random
    order: a ``prange`` over this order gives each thread (a contiguous share) a fair mix
    of sides that see much and little of the planet. A function of ``count`` only; the
    outputs of the kernels that use it do not depend on it."""
    blocks = -(-count // block)
    perm = np.random.default_rng(20260).permutation(blocks) if blocks else np.zeros(0, np.int64)
    order = (perm[:, None] * block + np.arange(block)[None, :]).ravel()
    return np.ascontiguousarray(order[order < count], dtype=np.int64)


def plain_estimates(model: Model) -> Model:
    """A copy of a traced ``model`` that uses the plain Monte Carlo estimates of planet IR
    and albedo on every side (no control variates), from the same rays: for comparisons
    of the two estimators (``scripts/bench_heating.py``, tests). Its cache keeps the
    escaping rays of every side (made again from the first hits of ``model``); build its
    bands with :func:`bands_of`."""
    import dataclasses

    plain = dataclasses.replace(model)
    cache_targets(plain, model.targets, need_rays=True, all_escaping=True)
    count = plain.sides.count
    return dataclasses.replace(
        plain, control=np.zeros(count, dtype=np.bool_),
        albedo_group=np.full(count, -1, dtype=np.int64), albedo_normal=np.zeros((0, 3)),
        albedo_position=np.zeros((0, 3)),
        blk_start=np.zeros(count * model.m + 1, dtype=np.int64),
        blk_origin=np.zeros((0, 3)), blk_dir=np.zeros((0, 3)))


def band_gebhart(model: Model, geometry, view_factors) -> dict:
    """Per band ("solar", "ir"): (B, B_space, B_inert) of the node view factors
    ``view_factors`` (an object with matrix, space, inert), or of the cached rays when it is
    None; None for a band in which every node is black."""
    n = model.n_nodes
    if view_factors is not None:
        view = (as_csr(view_factors.matrix),
                np.asarray(view_factors.space, dtype=np.float64),
                np.asarray(view_factors.inert, dtype=np.float64))
        if view[0].shape != (n, n):
            raise ValueError(f"compute_heating: view_factors.matrix must have shape ({n}, {n}),"
                             f" got {view[0].shape}")
    else:
        view = _node_view_factors(model.sides, model.targets, n, model.node_area)
    out = {}
    for band, node_abs in (("solar", geometry.nodes.solar_absorptivity),
                           ("ir", geometry.nodes.ir_emissivity)):
        node_abs = np.asarray(node_abs, dtype=np.float64)
        black = n == 0 or bool(np.all(node_abs >= 1.0))   # nothing is reflected
        out[band] = None if black else _gebhart(view, node_abs)
    return out


def bands_of(model: Model, geometry, view_factors, gebhart=None) -> "Bands":
    """Per band: Gebhart factors (``gebhart`` from :func:`band_gebhart`, computed here when
    None), side and facet properties, specular sides and their cached rays, and where
    :func:`one_step` puts the per-ray planet results of those rays."""
    from vfactor.tracing import heat_kernels as hk

    if gebhart is None:
        gebhart = band_gebhart(model, geometry, view_factors)
    f_alpha, f_eps, f_sspec, f_ispec = model.props
    s = model.sides
    m = model.m
    per_band = {}
    offset = 0
    row_slot = np.full((2, s.count * m), -1, dtype=np.int64)
    for b, (band, f_abs, f_spec, s_abs, s_spec) in enumerate((
            ("solar", f_alpha, f_sspec, s.absorptivity, s.solar_specular),
            ("ir", f_eps, f_ispec, s.emissivity, s.ir_specular))):
        spec_sides = np.flatnonzero((1.0 - s_abs) * s_spec > 0.0)
        rows, owner, replicate = _rows_of_sides(spec_sides, model.segment_start, m)
        mirror = np.empty((rows.size, 3))
        mirror_origin = np.empty((rows.size, 3))
        if rows.size:
            hk.mirror_rays(rows, owner, model.esc_origin, model.esc_dir,
                           np.ascontiguousarray(s.normal), mirror_origin, mirror)
        # the rows of side spec_sides[j] are side_first[j]:[j + 1] (side by side, as
        # _rows_of_sides lays them out), segment by segment
        per_side = (model.segment_start[(spec_sides + 1) * m]
                    - model.segment_start[spec_sides * m])
        side_first = np.zeros(spec_sides.size + 1, dtype=np.int64)
        np.cumsum(per_side, out=side_first[1:])
        segments = (spec_sides[:, None] * m + np.arange(m)[None, :]).ravel()
        seg_first = (model.segment_start[segments] - np.repeat(
            model.segment_start[spec_sides * m], m) + np.repeat(side_first[:-1], m))
        row_slot[b, segments] = offset + seg_first
        spec_share = (1.0 - s_abs) * s_spec
        geb = gebhart[band]
        per_band[band] = dict(
            gebhart=geb, gebhart_t=None if geb is None else geb[0].T,
            f_abs=f_abs, f_spec=f_spec, s_abs=s_abs, s_spec=s_spec,
            reflected_share=1.0 - s_abs, diffuse_share=1.0 - s_spec, spec_share=spec_share,
            albedo_coefficient=s.area / (m * model.k_planet) * spec_share,
            spec_sides=spec_sides, rows=rows, owner=owner, replicate=replicate,
            side_first=side_first, mirror=mirror, mirror_origin=mirror_origin,
            row_offset=offset)
        offset += int(rows.size)
    specular = np.zeros(s.count, dtype=np.bool_)
    for band in per_band.values():
        specular[band["spec_sides"]] = True
    return Bands(solar=per_band["solar"], ir=per_band["ir"], row_slot=row_slot,
                 n_rows=offset, specular=specular)


@dataclass
class Bands:
    """What the reflections of each band need (internal; from :func:`bands_of`).

    ``solar`` / ``ir``: dictionaries of the band (Gebhart factors, properties, specular
    sides and their rows of the escaping-ray cache with mirror rays). ``row_slot`` (2, s m):
    first row of each (side, replicate) segment in the per-ray planet results of a step
    (band 0 solar, 1 infrared; -1 where the side is not specular in that band).
    ``specular`` (s,): the side is specular in a band. ``chains``: per band, the recorded
    mirror chains of the rows (:func:`_chains_of`, filled at the first step that needs
    them, under ``lock``: the steps of one prepared state may run in threads).
    """

    solar: dict
    ir: dict
    row_slot: np.ndarray
    n_rows: int
    specular: np.ndarray             # (s,) bool: the side reflects specularly in a band
    chains: dict = field(default_factory=dict)
    lock: object = field(default_factory=threading.Lock, repr=False)

    def band(self, name: str) -> dict:
        return self.solar if name == "solar" else self.ir

    def __getstate__(self):
        state = dict(self.__dict__)
        del state["lock"]                      # a lock is not pickled; a new one will do
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self.lock = threading.Lock()


def _chains_of(model: Model, bands: Bands, name: str):
    """Recorded mirror chains of band ``name`` (:func:`vfactor.tracing.heat_kernels.
    record_chains`): ``(True, chain_start (u + 1,), chain_entry)``.

    For a rigid vehicle with the escaping-ray cache the chains of the mirror rays are the
    same at every step; they are traced once, at the first step that needs them, and then
    replayed (the same operations on the weights, the same bits as tracing them).
    """
    from vfactor.tracing import heat_kernels as hk

    with bands.lock:
        if name not in bands.chains:
            band = bands.band(name)
            rows = band["rows"].size
            scene = (model.arrays, model.normals, model.facet_node, band["f_abs"],
                     band["f_spec"], model.max_bounces)
            exclude = model.sides.facet[band["owner"]]
            lengths = np.zeros(rows, dtype=np.int64)
            parts = []
            for a in range(0, rows, _RECORD_BATCH):
                b = min(rows, a + _RECORD_BATCH)
                entry = np.empty((b - a, model.max_bounces), dtype=np.int32)
                hk.record_chains(scene, band["mirror_origin"][a:b], band["mirror"][a:b],
                                 exclude[a:b], entry)
                used = entry != hk.CHAIN_UNUSED
                lengths[a:b] = used.sum(axis=1)
                parts.append(entry[used])
            start = np.zeros(rows + 1, dtype=np.int64)
            np.cumsum(lengths, out=start[1:])
            entries = np.concatenate(parts) if parts else np.zeros(0, dtype=np.int32)
            bands.chains[name] = (True, start, np.ascontiguousarray(entries))
        return bands.chains[name]


_RECORD_BATCH = 1 << 16
_NO_CHAINS = (False, np.zeros(1, dtype=np.int64), np.zeros(0, dtype=np.int32))


def one_step(model: Model, bands, step: Step, use_cache: bool, k: int, out: dict) -> None:
    """Fill row ``k`` of every output for one step.

    ``use_cache``: the planet rays are the cached escaping (and blocked) rays and, on a
    vehicle traced once (:func:`trace_once`), the mirror chains of specular sides are
    replayed from their records; otherwise every planet ray and every chain is traced.
    """
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    m = model.m
    n_nodes = model.n_nodes
    g = s.count * m

    # direct solar: unshadowed sample points per (side, sample)
    cos_t = np.maximum(s.normal @ step.sun, 0.0)
    sunlit = bool(s.count and step.fraction > 0.0 and step.solar > 0.0)
    blank = np.empty if sunlit else np.zeros        # the kernel writes every entry
    lit_mask = blank((s.count, m * model.k_sun), dtype=np.bool_)
    lit = blank((s.count, m))
    if sunlit:
        hk.sun_lit_mask(model.arrays, model.vertices, model.triangles, model.normals, s.facet,
                        s.sign, model.seed, m, model.k_sun, step.sun, step.cos_half, lit_mask,
                        lit)

    # planet: hits and albedo cosines per (side, replicate); per ray for specular sides
    blank = np.empty if s.count else np.zeros       # the kernels write every entry
    seen = blank((2, g))
    blocked = blank((2, g))
    n_rows = 0 if bands is None else bands.n_rows
    row_hit = blank(n_rows, dtype=np.bool_)
    row_mu = blank(n_rows)
    dark = _dark_cap(model, step)
    if s.count:
        if use_cache:
            planet = (step.centre, step.radius, step.sun, dark)
            slots = bands.row_slot if bands is not None else np.full((0, g), -1, np.int64)
            # a control-variate estimate needs the side's blocked rays only; the escaping
            # ones where the plain estimate is used, or to carry specular shares
            wanted = ~model.control if bands is None else ~model.control | bands.specular
            hk.planet_step((model.order, model.position, s.normal, model.reach, wanted),
                           (model.segment_start, model.esc_origin, model.esc_dir),
                           (model.blk_start, model.blk_origin, model.blk_dir), planet, m,
                           slots, seen, blocked, (row_hit, row_mu))
        else:
            hk.planet_uncached(model.arrays, model.vertices, model.triangles, model.normals,
                               s.facet, s.sign, model.seed, m, model.k_planet, step.centre,
                               step.radius, step.sun, seen, blocked)
            if bands is not None:
                for band in (bands.solar, bands.ir):
                    a = band["row_offset"]
                    b = a + band["rows"].size
                    if b > a:
                        hk.planet_ray_cos(model.esc_origin, model.esc_dir, band["rows"],
                                          step.centre, step.radius, step.sun,
                                          row_hit[a:b], row_mu[a:b])
    # control variates (CONTROL_BLOCKED_SHARE): the unblocked value of the side, minus
    # the Monte Carlo estimate of what the vehicle hides from the same cached directions
    solar_rep = np.empty((s.count, m))
    ir_rep = np.empty((s.count, m))
    alb_rep = np.empty((s.count, m))
    hk.replicate_estimates(
        (s.area, cos_t, model.control), (lit, seen, blocked),
        (planet_view(model, step), albedo_view(model, step, dark)),
        (step.solar * step.fraction, step.olr, step.albedo * step.solar, model.k_sun,
         model.k_planet), (solar_rep, ir_rep, alb_rep))

    planet_rays = _PlanetRays(seen, row_hit, row_mu, use_cache)
    n_facets = model.facet_area.shape[0]
    for src, rep, absorb in (("solar", solar_rep, s.absorptivity),
                             ("albedo", alb_rep, s.absorptivity),
                             ("planet_ir", ir_rep, s.emissivity)):
        # per node: incident, absorbed; per facet: absorbed; and the independent replicate
        # estimates (m, n) of each node's absorbed power
        node_sums = np.empty((2, n_nodes))
        facet_power = np.empty(n_facets)
        node_rep = np.empty((m, n_nodes))
        hk.side_tallies(s.node, s.facet, absorb, rep, rep.mean(axis=1), node_sums,
                        facet_power, node_rep)
        out[f"incident_{src}"][k] = node_sums[0]
        absorbed_node = node_sums[1]
        if bands is not None and s.count:
            band = bands.ir if src == "planet_ir" else bands.solar
            extra_rep, escaped, lost = _reflect(model, bands, src, band, step, rep,
                                                lit_mask, lit, cos_t, planet_rays)
            node_rep = node_rep + extra_rep
            extra = extra_rep.mean(axis=0)
            absorbed_node = absorbed_node + extra
            share = np.where(model.node_positive, extra / model.node_area_safe, 0.0)
            spread = np.empty(n_facets)
            hk.facet_shares(s.facet, s.node, share, s.area, spread)
            facet_power = facet_power + spread
            out[f"escaped_{src}"][k] = escaped
            out[f"inert_{src}"][k] = lost
        out[f"node_{src}_stderr"][k] = node_rep.std(axis=0, ddof=1) / math.sqrt(m)
        out[f"node_{src}"][k] = absorbed_node
        out[f"facet_{src}"][k] = np.where(model.facet_positive,
                                          facet_power / model.facet_area_safe, 0.0)


class _PlanetRays(NamedTuple):
    """The step's planet results that the mirror chains need (internal)."""

    seen: np.ndarray        # (2, s m): escaping rays that meet the planet, sum of their mu
    row_hit: np.ndarray     # (u,) per row of Bands.row_slot: meets the planet
    row_mu: np.ndarray      # (u,) max(0, cos solar zenith) where it meets it
    cached: bool            # the rays came from the cache (chains may be replayed)


def _per_replicate(node, values, n_nodes):
    """(m, n) sums per node of the columns of ``values`` (s, m), in side order."""
    from vfactor.tracing import heat_kernels as hk

    out = np.empty((values.shape[1], n_nodes))
    hk.replicate_sums(node, np.ascontiguousarray(values), out)
    return out


def _rows_of_sides(side_list, segment_start, m):
    """Rows of the escaping-ray cache that belong to the given sides: (rows, owning side,
    replicate of each row)."""
    side_list = np.asarray(side_list, dtype=np.int64)
    segments = (side_list[:, None] * m + np.arange(m)[None, :]).ravel()
    first = segment_start[segments]
    length = segment_start[segments + 1] - first
    total = int(length.sum())
    if total == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty.copy(), empty.copy()
    # rows of segment g are first[g] .. first[g] + length[g] - 1, segments in order
    seg_of_row = np.repeat(np.arange(segments.size), length)
    offset = np.arange(total) - np.repeat(np.cumsum(length) - length, length)
    rows = first[seg_of_row] + offset
    return (rows.astype(np.int64), np.repeat(side_list, m)[seg_of_row],
            (segments % m)[seg_of_row].astype(np.int64))


def _chain_scene(model: Model, band):
    return (model.arrays, model.normals, model.facet_node, band["f_abs"], band["f_spec"],
            model.max_bounces)


def _chain_sums(absorbed, diffuse, esc, lost, chunks):
    """Sums over the chunk rows of the chain tallies: (absorbed (m, n), diffuse (m, n),
    escaped, inert) [W]."""
    return (absorbed[:chunks].sum(axis=0), diffuse[:chunks].sum(axis=0),
            float(esc[:chunks].sum()), float(lost[:chunks].sum()))


def _run_chains(model: Model, band, origin, direction, exclude, weight, replicate):
    """Specular chains of a batch of rays.

    Returns (absorbed (m, n), diffuse (m, n), escaped, inert) [W]: the sums over the rays
    of each replicate of the power absorbed by / left diffusely on each node, and the
    totals that escaped and that ended on inert sides.
    """
    from vfactor.tracing import heat_kernels as hk

    n = model.n_nodes
    count = origin.shape[0]
    chunks = -(-count // hk.CHAIN_CHUNK)
    absorbed = np.empty((chunks, model.m, n))
    diffuse = np.empty((chunks, model.m, n))
    esc = np.empty(chunks)
    lost = np.empty(chunks)
    if count:
        hk.specular_chains(model.arrays, model.normals, model.facet_node, band["f_abs"],
                           band["f_spec"], origin, direction, exclude, weight, replicate,
                           hk.CHAIN_CHUNK, model.max_bounces, absorbed, diffuse, esc, lost)
    return _chain_sums(absorbed, diffuse, esc, lost, chunks)


def _reflect(model: Model, bands: Bands, src, band, step: Step, rep, lit_mask, lit, cos_t,
             planet_rays: _PlanetRays):
    """Power absorbed after reflection inside the vehicle, per replicate and node.

    Parameters
    ----------
    rep : (s, m) — replicate estimates of the power incident on each side [W]

    Returns
    -------
    (absorbed (m, n) [W], escaped [W], inert [W]); ``absorbed[r]`` is replicate ``r``'s
    estimate, the estimate itself is the mean over the replicates.
    """
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    m = model.m
    pool = np.empty((m, model.n_nodes))
    hk.pool_sums(s.node, band["reflected_share"], band["diffuse_share"], rep, pool)
    absorbed = np.zeros((m, model.n_nodes))
    escaped = 0.0
    lost = 0.0
    spec_sides = band["spec_sides"]
    if spec_sides.size and (band["reflected_share"][spec_sides][:, None]
                            * rep[spec_sides]).sum() > 0.0:
        if src == "solar":
            a, d, e, q = _run_chains(model, band, *_sun_mirror(model, band, step, lit_mask,
                                                               lit, cos_t))
        else:
            (a, d, e, q), uncarried = _planet_mirror(model, bands, src, band, step, rep,
                                                     planet_rays)
            # specular power of (side, replicate) pairs with no ray toward the planet to
            # carry it (a control-variate estimate without a seen ray): reflected diffusely
            pool += _per_replicate(s.node, uncarried, model.n_nodes)
        # ray weights are shares of the mean over replicates: m times the sum over one
        # replicate's rays is that replicate's estimate
        absorbed += m * a
        pool += m * d
        escaped += e
        lost += q
    if band["gebhart"] is not None:
        _, b_space, b_inert = band["gebhart"]
        absorbed += (band["gebhart_t"] @ pool.T).T       # B^T once per band (bands_of)
        escaped += float((pool @ b_space).mean())
        lost += float((pool @ b_inert).mean())
    else:
        escaped += float(pool.sum(axis=1).mean())
    return absorbed, escaped, lost


def _sun_mirror(model: Model, band, step: Step, lit_mask, lit, cos_t):
    """Mirror rays of the unshadowed Sun samples of the specular sides, with their power,
    facet left and replicate."""
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    spec = band["spec_sides"]
    n = model.m * model.k_sun
    count = lit[spec].sum(axis=1).astype(np.int64)
    first = np.zeros(spec.size + 1, dtype=np.int64)
    np.cumsum(count, out=first[1:])
    total = int(first[-1])
    per_sample = (step.solar * step.fraction * cos_t[spec] * s.area[spec] / n
                  * band["reflected_share"][spec] * band["s_spec"][spec])
    origin = np.empty((total, 3))
    direction = np.empty((total, 3))
    exclude = np.empty(total, dtype=np.int64)
    weight = np.empty(total)
    replicate = np.empty(total, dtype=np.int64)
    if total:
        hk.sun_mirror_rays(model.vertices, model.triangles, model.normals,
                           np.ascontiguousarray(s.facet[spec]),
                           np.ascontiguousarray(s.sign[spec]), model.seed, model.m,
                           model.k_sun, step.sun, step.cos_half,
                           np.ascontiguousarray(lit_mask[spec]), first, per_sample, origin,
                           direction, exclude, weight, replicate)
    return origin, direction, exclude, weight, replicate


def _planet_mirror(model: Model, bands: Bands, src, band, step: Step, rep,
                   planet_rays: _PlanetRays):
    """Chain tallies of the mirror rays of the cached planet rays of the specular sides
    (their weights from the step), and the specular power (s, m) that no ray carries.

    For planet IR, and for the albedo of the control-variate sides, the weights of a
    (side, replicate) are scaled so that they carry its specular share of ``rep`` (the
    control-variate estimate, see :func:`planet_view` and :func:`albedo_view`; albedo in
    proportion to each ray's cos(solar zenith)), so that the energy bookkeeping closes.
    """
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    n = model.n_nodes
    rows = band["rows"].size
    a = band["row_offset"]
    chunks = -(-rows // hk.CHAIN_CHUNK)
    absorbed = np.empty((chunks, model.m, n))
    diffuse = np.empty((chunks, model.m, n))
    esc = np.empty(chunks)
    lost = np.empty(chunks)
    uncarried = np.zeros((s.count, model.m))
    kept = 0
    if rows:
        if planet_rays.cached and model.rigid:
            chains = _chains_of(model, bands, "ir" if src == "planet_ir" else "solar")
        else:
            chains = _NO_CHAINS
        if src == "planet_ir":
            carry = np.full(s.count, hk.CARRY_EVEN, dtype=np.int64)
        else:   # the control-variate sides carry their estimate, the others their rays
            carry = np.where(model.control, hk.CARRY_BY_MU, hk.CARRY_MU).astype(np.int64)
        kept = hk.planet_mirror_tallies(
            _chain_scene(model, band),
            (band["spec_sides"], band["side_first"], band["owner"], band["replicate"],
             band["mirror_origin"], band["mirror"], s.facet, band["spec_share"],
             band["albedo_coefficient"]),
            (planet_rays.row_hit[a:a + rows], planet_rays.row_mu[a:a + rows],
             planet_rays.seen, np.ascontiguousarray(rep), carry, step.albedo, step.solar),
            chains, (np.empty(rows), np.empty(rows, dtype=np.int64)), uncarried, absorbed,
            diffuse, esc, lost)
    return _chain_sums(absorbed, diffuse, esc, lost, -(-kept // hk.CHAIN_CHUNK)), uncarried


def _extent(vertices) -> float:
    """Largest distance of a vertex from the body origin [m] (a little more, for rounding)."""
    if vertices.shape[0] == 0:
        return 0.0
    return float(np.sqrt((vertices * vertices).sum(axis=1)).max()) * (1.0 + 1e-12)


def _dark_cap(model: Model, step: Step) -> bool:
    """True when no point of the planet that a point of the vehicle can see is sunlit.

    From a point within ``extent`` of the body origin, the planet points seen lie within
    ``acos(R / (d + extent)) + asin(extent / d)`` of the sub-vehicle direction (``d``:
    distance of the planet centre); when the Sun is more than 90 degrees plus that (and a
    margin) from it, every such point has cos(solar zenith) < 0 (spherical geometry)."""
    from vfactor.tracing.heat_kernels import CULL_MARGIN

    d = float(np.linalg.norm(step.centre))
    rho = model.extent
    if d - rho <= step.radius or rho >= d:
        return False
    cos_zenith = -float(step.centre @ step.sun) / d
    angle = math.acos(min(1.0, max(-1.0, cos_zenith)))
    cap = math.acos(step.radius / (d + rho)) + math.asin(rho / d)
    return angle > 0.5 * math.pi + cap + CULL_MARGIN


def albedo_view(model: Model, step: Step, dark: bool = False) -> np.ndarray:
    """Unblocked albedo factor of every control-variate side at this step (0 for the
    others): the irradiance from the sunlit planet per unit ``albedo * solar`` [1]
    (:func:`vfactor.planetview.plate_sphere_albedo_factor`, once per group of sides with
    one node and one normal, at the group's centre). ``dark``: no point the vehicle sees
    is sunlit (:func:`_dark_cap`), every value is 0."""
    from vfactor.planetview import plate_sphere_albedo_factor

    out = np.zeros(model.sides.count)
    if dark or model.albedo_normal is None or model.albedo_normal.shape[0] == 0:
        return out
    to_vehicle = model.albedo_position - step.centre[None, :]
    dist = np.linalg.norm(to_vehicle, axis=1)
    factor = plate_sphere_albedo_factor(dist / step.radius, model.albedo_normal, step.sun,
                                        to_vehicle / dist[:, None])
    chosen = model.albedo_group >= 0
    out[chosen] = factor[model.albedo_group[chosen]]
    return out


def planet_view(model: Model, step: Step) -> np.ndarray:
    """Unblocked view factor to the planet at this step of every control-variate side (0
    for the others): closed form, :func:`vfactor.planetview.plate_sphere_view_factor`, at
    the facet's centroid."""
    from vfactor.planetview import plate_sphere_view_factor

    out = np.zeros(model.sides.count)
    chosen = np.flatnonzero(model.control)
    if chosen.size == 0:
        return out
    to_centre = step.centre[None, :] - model.position[chosen]
    dist = np.linalg.norm(to_centre, axis=1)
    cos_lam = np.einsum("ij,ij->i", model.sides.normal[chosen], to_centre) / dist
    out[chosen] = plate_sphere_view_factor(dist / step.radius, cos_lam)
    return out
