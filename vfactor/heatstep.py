"""One step of the heating stage, and what it keeps from step to step (internal).

:func:`vfactor.heating.compute_heating` prepares a :class:`Model` (the vehicle: active
facet sides, their properties, the cached escaping directions of the planet rays, the
band tables for reflections) once, then fills one row of every output per trajectory
step with :func:`one_step`. Physics, estimators and sources are in the docstring of
:mod:`vfactor.heating`; the numba kernels in :mod:`vfactor.tracing.heat_kernels`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from vfactor.sparsetools import as_csr

__all__ = ["Model", "Step", "prepare", "trace_once", "cache_targets", "reuse_trace", "band_gebhart",
           "bands_of", "one_step", "unit"]


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
    n_nodes: int
    m: int
    k_planet: int
    k_sun: int
    seed: np.uint64
    max_bounces: int
    targets: np.ndarray = None           # (s, m k_planet) int32
    segment_start: np.ndarray = None     # (s m + 1,) int64
    esc_origin: np.ndarray = None        # (e, 3)
    esc_dir: np.ndarray = None           # (e, 3)
    position: np.ndarray = None          # (s, 3) centroid of each side's facet [m]
    control: np.ndarray = None           # (s,) bool: planet IR by control variate
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
    return Model(arrays=scene.arrays, vertices=vertices, triangles=triangles, normals=normals,
                  facet_node=facet_node, props=tuple(props), sides=sides,
                  node_area=np.asarray(geometry.nodes.area, dtype=np.float64),
                  facet_area=np.asarray(geometry.areas, dtype=np.float64),
                  n_nodes=geometry.n_nodes, m=m, k_planet=-(-rays_per_facet // m),
                  k_sun=-(-sun_samples // m), seed=np.uint64(seed), max_bounces=max_bounces)


_TRACE_BATCH = 512
CONTROL_BLOCKED_SHARE = 0.5
"""A side whose rays the vehicle blocks less often than this gets the planet-IR control
variate: its estimate is the closed-form view factor minus the Monte Carlo estimate of the
blocked part (Owen 2013, "Monte Carlo theory, methods and examples", ch. 8, control
variates with coefficient 1), whose variance is that of the blocked part only. A side
blocked more often keeps the plain estimate of the seen part, which is then the smaller
variance; the choice depends only on the vehicle, not on the planet samples, so both
estimators stay unbiased."""


def trace_once(model: Model, bar, need_rays: bool) -> None:
    """First hits of every planet ray (batches of sides, for progress), and the cache."""
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
    cache_targets(model, targets, need_rays)


_TRACED = ("targets", "segment_start", "esc_origin", "esc_dir", "position", "control",
           "blk_start", "blk_origin", "blk_dir")


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
            and np.array_equal(model.sides.sign, traced.sides.sign))
    if same:
        for name in _TRACED:
            setattr(model, name, getattr(traced, name))
    return same


def cache_targets(model: Model, targets, need_rays: bool, fill=None) -> None:
    """The cache of :func:`trace_once` from the first hits ``targets`` (s, m k_planet) of
    every planet ray: escaping rays by (side, replicate), control-variate sides and their
    blocked rays. ``fill(segment_start, origin, direction)``, if given, writes the escaping
    rays instead of :func:`vfactor.tracing.heat_kernels.fill_escaping` (same layout)."""
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    m, k = model.m, model.k_planet
    n_rays = m * k
    escapes = np.empty(s.count * m, dtype=np.int64)
    if s.count:
        hk.segment_escapes(targets, m, k, escapes)
    segment_start = np.zeros(s.count * m + 1, dtype=np.int64)
    np.cumsum(escapes, out=segment_start[1:])
    n_esc = int(segment_start[-1]) if need_rays else 0
    model.targets = targets
    model.segment_start = segment_start
    model.esc_origin = np.empty((n_esc, 3))
    model.esc_dir = np.empty((n_esc, 3))
    every = np.ones(s.count, dtype=np.bool_)
    if need_rays and s.count:
        if fill is None:
            hk.fill_escaping(model.vertices, model.triangles, model.normals, s.facet, s.sign,
                             model.seed, m, k, targets, segment_start, True, every,
                             model.esc_origin, model.esc_dir)
        else:
            fill(segment_start, model.esc_origin, model.esc_dir)
    # control variate for planet IR where the vehicle blocks less than half of the rays
    blocked_per_segment = (k - escapes).reshape(s.count, m)
    model.control = blocked_per_segment.sum(axis=1) / n_rays < CONTROL_BLOCKED_SHARE \
        if s.count else np.zeros(0, bool)
    model.position = model.vertices[model.triangles[s.facet]].mean(axis=1)
    counted = np.where(model.control[:, None], blocked_per_segment, 0).ravel()
    model.blk_start = np.zeros(s.count * m + 1, dtype=np.int64)
    np.cumsum(counted, out=model.blk_start[1:])
    n_blk = int(model.blk_start[-1]) if need_rays else 0
    model.blk_origin = np.empty((n_blk, 3))
    model.blk_dir = np.empty((n_blk, 3))
    if need_rays and n_blk:
        # rays of sides without the control variate are not stored
        hk.fill_escaping(model.vertices, model.triangles, model.normals, s.facet, s.sign,
                         model.seed, m, k, targets, model.blk_start, False, model.control,
                         model.blk_origin, model.blk_dir)


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


def bands_of(model: Model, geometry, view_factors, gebhart=None) -> dict:
    """Per band: Gebhart factors (``gebhart`` from :func:`band_gebhart`, computed here when
    None), side and facet properties, specular sides and their cached rays."""
    from vfactor.tracing import heat_kernels as hk

    if gebhart is None:
        gebhart = band_gebhart(model, geometry, view_factors)
    f_alpha, f_eps, f_sspec, f_ispec = model.props
    s = model.sides
    bands = {}
    for band, f_abs, f_spec, s_abs, s_spec in (
            ("solar", f_alpha, f_sspec, s.absorptivity, s.solar_specular),
            ("ir", f_eps, f_ispec, s.emissivity, s.ir_specular)):
        spec_sides = np.flatnonzero((1.0 - s_abs) * s_spec > 0.0)
        rows, owner, replicate = _rows_of_sides(spec_sides, model.segment_start, model.m)
        mirror = np.empty((rows.size, 3))
        mirror_origin = np.empty((rows.size, 3))
        if rows.size:
            hk.mirror_rays(rows, owner, model.esc_origin, model.esc_dir,
                           np.ascontiguousarray(s.normal), mirror_origin, mirror)
        bands[band] = dict(
            gebhart=gebhart[band], f_abs=f_abs, f_spec=f_spec,
            s_abs=s_abs, s_spec=s_spec, spec_sides=spec_sides, rows=rows, owner=owner,
            replicate=replicate, mirror=mirror, mirror_origin=mirror_origin)
    return bands


def one_step(model: Model, bands, step: Step, use_cache: bool, k: int, out: dict) -> None:
    """Fill row ``k`` of every output for one step."""
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    m = model.m
    n_nodes = model.n_nodes

    # direct solar: unshadowed sample points per (side, sample)
    cos_t = np.maximum(s.normal @ step.sun, 0.0)
    lit_mask = np.zeros((s.count, m * model.k_sun), dtype=np.bool_)
    if s.count and step.fraction > 0.0 and step.solar > 0.0:
        hk.sun_lit_mask(model.arrays, model.vertices, model.triangles, model.normals, s.facet,
                        s.sign, model.seed, m, model.k_sun, step.sun, step.cos_half, lit_mask)
    lit = lit_mask.reshape(s.count, m, model.k_sun).sum(axis=2)
    solar_rep = (step.solar * step.fraction * cos_t * s.area)[:, None] * (lit / model.k_sun)

    # planet: hits and albedo cosines per (side, replicate)
    hits = np.zeros(s.count * m)
    cos_sum = np.zeros(s.count * m)
    blocked = np.zeros(s.count * m)
    if s.count:
        if use_cache:
            hk.planet_cached(model.segment_start, model.esc_origin, model.esc_dir, step.centre,
                             step.radius, step.sun, hits, cos_sum)
            hk.planet_cached(model.blk_start, model.blk_origin, model.blk_dir, step.centre,
                             step.radius, step.sun, blocked, np.zeros(s.count * m))
        else:
            hk.planet_uncached(model.arrays, model.vertices, model.triangles, model.normals,
                               s.facet, s.sign, model.seed, m, model.k_planet, step.centre,
                               step.radius, step.sun, hits, cos_sum, blocked)
    seen = hits.reshape(s.count, m) / model.k_planet
    ir_share = np.where(model.control[:, None],
                        planet_view(model, step)[:, None]
                        - blocked.reshape(s.count, m) / model.k_planet, seen)
    ir_rep = (step.olr * s.area)[:, None] * ir_share
    alb_rep = (step.albedo * step.solar * s.area)[:, None] * (
        cos_sum.reshape(s.count, m) / model.k_planet)

    area_safe = np.where(model.facet_area > 0.0, model.facet_area, 1.0)
    node_area_safe = np.where(model.node_area > 0.0, model.node_area, 1.0)
    for src, rep, absorb in (("solar", solar_rep, s.absorptivity),
                             ("albedo", alb_rep, s.absorptivity),
                             ("planet_ir", ir_rep, s.emissivity)):
        incident_side = rep.mean(axis=1)
        absorbed_side = absorb * incident_side
        out[f"incident_{src}"][k] = np.bincount(s.node, weights=incident_side,
                                                minlength=n_nodes)
        # independent replicate estimates (m, n) of each node's absorbed power
        node_rep = _per_replicate(s.node, absorb[:, None] * rep, n_nodes)
        absorbed_node = np.bincount(s.node, weights=absorbed_side, minlength=n_nodes)
        facet_power = np.bincount(s.facet, weights=absorbed_side,
                                  minlength=model.facet_area.shape[0])
        if bands is not None and s.count:
            band = bands["ir" if src == "planet_ir" else "solar"]
            extra_rep, escaped, lost = _reflect(model, src, band, step, rep, lit_mask, cos_t)
            node_rep = node_rep + extra_rep
            extra = extra_rep.mean(axis=0)
            absorbed_node = absorbed_node + extra
            share = np.where(model.node_area > 0.0, extra / node_area_safe, 0.0)
            facet_power = facet_power + np.bincount(
                s.facet, weights=share[s.node] * s.area, minlength=model.facet_area.shape[0])
            out[f"escaped_{src}"][k] = escaped
            out[f"inert_{src}"][k] = lost
        out[f"node_{src}_stderr"][k] = node_rep.std(axis=0, ddof=1) / math.sqrt(m)
        out[f"node_{src}"][k] = absorbed_node
        out[f"facet_{src}"][k] = np.where(model.facet_area > 0.0, facet_power / area_safe, 0.0)


def _per_replicate(node, values, n_nodes):
    """(m, n) sums per node of the columns of ``values`` (s, m)."""
    return np.stack([np.bincount(node, weights=values[:, r], minlength=n_nodes)
                     for r in range(values.shape[1])])


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


_CHUNK = 4096


def _run_chains(model: Model, band, origin, direction, exclude, weight, replicate):
    """Specular chains of a batch of rays.

    Returns (absorbed (m, n), diffuse (m, n), escaped, inert) [W]: the sums over the rays
    of each replicate of the power absorbed by / left diffusely on each node, and the
    totals that escaped and that ended on inert sides.
    """
    from vfactor.tracing import heat_kernels as hk

    n = model.n_nodes
    count = origin.shape[0]
    if count == 0:
        return np.zeros((model.m, n)), np.zeros((model.m, n)), 0.0, 0.0
    chunks = -(-count // _CHUNK)
    absorbed = np.empty((chunks, model.m, n))
    diffuse = np.empty((chunks, model.m, n))
    esc = np.empty(chunks)
    lost = np.empty(chunks)
    hk.specular_chains(model.arrays, model.normals, model.facet_node, band["f_abs"],
                       band["f_spec"], np.ascontiguousarray(origin),
                       np.ascontiguousarray(direction),
                       np.ascontiguousarray(exclude, dtype=np.int64),
                       np.ascontiguousarray(weight),
                       np.ascontiguousarray(replicate, dtype=np.int64), _CHUNK,
                       model.max_bounces, absorbed, diffuse, esc, lost)
    return absorbed.sum(axis=0), diffuse.sum(axis=0), float(esc.sum()), float(lost.sum())


def _reflect(model: Model, src, band, step: Step, rep, lit_mask, cos_t):
    """Power absorbed after reflection inside the vehicle, per replicate and node.

    Parameters
    ----------
    rep : (s, m) — replicate estimates of the power incident on each side [W]

    Returns
    -------
    (absorbed (m, n) [W], escaped [W], inert [W]); ``absorbed[r]`` is replicate ``r``'s
    estimate, the estimate itself is the mean over the replicates.
    """
    s = model.sides
    m = model.m
    s_abs = band["s_abs"]
    s_spec = band["s_spec"]
    reflected_rep = (1.0 - s_abs)[:, None] * rep
    pool = _per_replicate(s.node, (1.0 - s_spec)[:, None] * reflected_rep, model.n_nodes)
    absorbed = np.zeros((m, model.n_nodes))
    escaped = 0.0
    lost = 0.0
    spec_sides = band["spec_sides"]
    if spec_sides.size and reflected_rep[spec_sides].sum() > 0.0:
        if src == "solar":
            rays = _sun_mirror(model, band, step, lit_mask, cos_t)
        else:
            rays, uncarried = _planet_mirror(model, src, band, step, rep)
            # specular power of (side, replicate) pairs with no ray toward the planet to
            # carry it (a control-variate estimate without a seen ray): reflected diffusely
            pool += _per_replicate(s.node, uncarried, model.n_nodes)
        a, d, e, q = _run_chains(model, band, *rays)
        # ray weights are shares of the mean over replicates: m times the sum over one
        # replicate's rays is that replicate's estimate
        absorbed += m * a
        pool += m * d
        escaped += e
        lost += q
    if band["gebhart"] is not None:
        b, b_space, b_inert = band["gebhart"]
        absorbed += (b.T @ pool.T).T
        escaped += float((pool @ b_space).mean())
        lost += float((pool @ b_inert).mean())
    else:
        escaped += float(pool.sum(axis=1).mean())
    return absorbed, escaped, lost


def _sun_mirror(model: Model, band, step: Step, lit_mask, cos_t):
    """Mirror rays of the unshadowed Sun samples of the specular sides, with their power
    and replicate."""
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    spec = band["spec_sides"]
    n = model.m * model.k_sun
    sub_mask = np.ascontiguousarray(lit_mask[spec])
    sub_facet = np.ascontiguousarray(s.facet[spec])
    origin = np.zeros((spec.size, n, 3))
    direction = np.zeros((spec.size, n, 3))
    hk.sun_mirror_rays(model.vertices, model.triangles, model.normals, sub_facet,
                       np.ascontiguousarray(s.sign[spec]), model.seed, model.m, model.k_sun,
                       step.sun, step.cos_half, sub_mask, origin, direction)
    per_sample = (step.solar * step.fraction * cos_t[spec] * s.area[spec] / n
                  * (1.0 - band["s_abs"][spec]) * band["s_spec"][spec])
    weight = np.broadcast_to(per_sample[:, None], sub_mask.shape)[sub_mask]
    exclude = np.broadcast_to(sub_facet[:, None], sub_mask.shape)[sub_mask]
    replicate = np.broadcast_to((np.arange(n) // model.k_sun)[None, :], sub_mask.shape)[sub_mask]
    return origin[sub_mask], direction[sub_mask], exclude, weight, replicate


def _planet_mirror(model: Model, src, band, step: Step, rep):
    """Mirror rays of the cached planet rays of the specular sides, with their power and
    replicate, and the specular power (s, m) that no ray carries.

    For planet IR the weights of a (side, replicate) are scaled so that they carry its
    specular share of ``rep`` (the control-variate estimate, see :func:`planet_view`), so
    that the energy bookkeeping closes.
    """
    from vfactor.tracing import heat_kernels as hk

    s = model.sides
    rows = band["rows"]
    owner = band["owner"]
    replicate = band["replicate"]
    hit = np.zeros(rows.size, dtype=np.bool_)
    mu = np.zeros(rows.size)
    if rows.size:
        hk.planet_ray_cos(model.esc_origin, model.esc_dir, rows, step.centre, step.radius,
                          step.sun, hit, mu)
    spec_share = (1.0 - band["s_abs"]) * band["s_spec"]
    uncarried = np.zeros((s.count, model.m))
    if src == "albedo":
        weight = (s.area[owner] / (model.m * model.k_planet) * spec_share[owner]
                  * step.albedo * step.solar * mu)
    else:
        # seen rays per (side, replicate), and the power each must carry
        seen = np.bincount(owner[hit] * model.m + replicate[hit],
                           minlength=s.count * model.m).reshape(s.count, model.m)
        wanted = spec_share[:, None] * rep / model.m          # of the mean over replicates
        per_ray = np.divide(wanted, seen, out=np.zeros_like(wanted), where=seen > 0)
        weight = per_ray[owner, replicate]
        uncarried = np.where(seen > 0, 0.0, model.m * wanted)
    keep = hit & (weight != 0.0)
    return ((band["mirror_origin"][keep], band["mirror"][keep], s.facet[owner[keep]],
             weight[keep], replicate[keep]), uncarried)


def planet_view(model: Model, step: Step) -> np.ndarray:
    """Unblocked view factor of every side to the planet at this step (closed form,
    :func:`vfactor.planetview.plate_sphere_view_factor`, at the facet's centroid)."""
    from vfactor.planetview import plate_sphere_view_factor

    to_centre = step.centre[None, :] - model.position
    dist = np.linalg.norm(to_centre, axis=1)
    cos_lam = np.einsum("ij,ij->i", model.sides.normal, to_centre) / dist
    return plate_sphere_view_factor(dist / step.radius, cos_lam)
