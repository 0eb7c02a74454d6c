"""Reflections of the heating stage: per band, what a step's reflected power needs, and the
power absorbed after reflection inside the vehicle (internal).

Per band (solar: the Sun and albedo; infrared: planet IR) a side reflects ``1 - a`` of
what it receives: ``s`` of that specularly (mirror rays, followed as chains through the
vehicle by :mod:`vfactor.tracing.chain_kernels`), the rest diffusely. Diffuse power is
pooled per node and redistributed by the band's Gebhart factors ``B`` (absorbed ``B^T
pool``, escaped ``pool B_space``, lost on inert sides ``pool B_inert``), from the node
view factors of the radiation stage or of the cached planet rays. :func:`bands_of`
prepares a band once per vehicle (Gebhart factors, specular sides and their mirror rays);
:func:`reflect` adds a step's reflected power to its direct loads, per replicate, so the
replicates' spread carries the error of both.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
import scipy.sparse as sp

from vfactor.reflecterror import band_errors, binomial_variance, coupling_variance
from vfactor.sparsetools import as_csr
from vfactor.tracing import chain_kernels, heat_kernels, heat_sums
from vfactor.tracing.side_rays import TARGET_ESCAPE, TARGET_INERT

__all__ = ["Bands", "BandCouplings", "PlanetRays", "band_gebhart", "bands_of", "record_chains",
           "reflect"]


class PlanetRays(NamedTuple):
    """The step's planet results that the mirror chains need (internal)."""

    seen: np.ndarray        # (2, s m): escaping rays that meet the planet, sum of their mu
    row_hit: np.ndarray     # (u,) per row of Bands.row_slot: meets the planet
    row_mu: np.ndarray      # (u,) max(0, cos solar zenith) where it meets it
    cached: bool            # the rays came from the cache (chains may be replayed)


def _node_view_factors(sides, targets, n_nodes, node_area):
    """Node-to-node, space and inert view factors from the cached first hits [1], and the
    variances of the node entries (:func:`vfactor.reflecterror.binomial_variance`).

    Each ray carries ``A_s / N`` of its side's area (``N`` rays per side); the rays of a
    side are first counted per target (:func:`vfactor.tracing.heat_sums.target_runs`).
    """
    start, target, count = heat_sums.target_runs(targets)
    side = np.repeat(np.arange(sides.count), np.diff(start))
    weight = count * (sides.area / targets.shape[1])[side]
    src = sides.node[side]
    area = np.where(node_area > 0.0, node_area, 1.0)
    hit = target >= 0
    matrix = as_csr(sp.coo_array((weight[hit] / area[src[hit]], (src[hit], target[hit])),
                                 shape=(n_nodes, n_nodes)))
    escape = target == TARGET_ESCAPE
    lost = target == TARGET_INERT
    space = np.bincount(src[escape], weights=weight[escape], minlength=n_nodes)
    inert = np.bincount(src[lost], weights=weight[lost], minlength=n_nodes)
    variance = binomial_variance(sides.node, sides.area, start, target, count,
                                 targets.shape[1], n_nodes, node_area)
    return matrix, space / area, inert / area, ((variance, 1.0),)


class BandCouplings(NamedTuple):
    """The diffuse redistribution of one band (internal): Gebhart factors ``B`` (n, n),
    to space, lost (inert and dropped), and what the error of the view factors behind
    them needs (:class:`vfactor.reflecterror.BandErrors` or None)."""

    gebhart: object
    space: np.ndarray
    inert: np.ndarray
    errors: object


def _gebhart(view, absorptivity) -> BandCouplings:
    """The :class:`BandCouplings` of one band from node view factors (matrix, space, inert,
    variances)."""
    from vfactor.radiation import gebhart_matrix

    matrix, space, inert, variances = view
    geb = gebhart_matrix(matrix, space, inert, absorptivity)
    # the dropped share is redistributed nowhere: count it with the inert (lost) power
    return BandCouplings(geb.gebhart, geb.space, geb.inert + geb.dropped,
                         band_errors(geb.gebhart, geb.operator, absorptivity, variances))


def band_gebhart(model, geometry, view_factors) -> dict:
    """Per band ("solar", "ir"): the :class:`BandCouplings` of the node view factors
    ``view_factors`` (an object with matrix, space, inert and optionally ``variances``,
    as :class:`vfactor.heating._View`), or of the cached rays when it is None; None for a
    band in which every node is black."""
    n = model.n_nodes
    if view_factors is not None:
        view = (as_csr(view_factors.matrix),
                np.asarray(view_factors.space, dtype=np.float64),
                np.asarray(view_factors.inert, dtype=np.float64),
                tuple(getattr(view_factors, "variances", ())))
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


def bands_of(model, geometry, view_factors, gebhart=None) -> "Bands":
    """Per band: Gebhart factors (``gebhart`` from :func:`band_gebhart`, computed here when
    None), side and facet properties, specular sides and their cached rays, and where
    :func:`vfactor.heatstep.one_step` puts the per-ray planet results of those rays."""
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
            heat_kernels.mirror_rays(rows, owner, model.esc_origin, model.esc_dir,
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
        segment_first = np.append(seg_first, side_first[-1]).astype(np.int64)
        spec_share = (1.0 - s_abs) * s_spec
        geb = gebhart[band]
        per_band[band] = dict(
            gebhart=geb, gebhart_t=None if geb is None else geb.gebhart.T,
            f_abs=f_abs, f_spec=f_spec, s_abs=s_abs, s_spec=s_spec,
            reflected_share=1.0 - s_abs, diffuse_share=1.0 - s_spec, spec_share=spec_share,
            albedo_coefficient=s.area / (m * model.k_planet) * spec_share,
            spec_sides=spec_sides, rows=rows, owner=owner, replicate=replicate,
            side_first=side_first, segment_first=segment_first, mirror=mirror,
            mirror_origin=mirror_origin,
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


def _chains_of(model, bands: Bands, name: str):
    """Recorded mirror chains of band ``name`` (:func:`vfactor.tracing.chain_kernels.
    record_chains`): ``(True, chain_start (u + 1,), chain_entry)``.

    For a rigid vehicle with the escaping-ray cache the chains of the mirror rays are the
    same at every step; they are traced once, at the first step that needs them, and then
    replayed (the same operations on the weights, the same bits as tracing them).
    """
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
                chain_kernels.record_chains(scene, band["mirror_origin"][a:b], band["mirror"][a:b],
                                            exclude[a:b], entry)
                count = chain_kernels.pack_chains(entry, lengths[a:b], np.zeros(0, np.int32))
                packed = np.empty(count, dtype=np.int32)
                chain_kernels.pack_chains(entry, lengths[a:b], packed)
                parts.append(packed)
            start = np.zeros(rows + 1, dtype=np.int64)
            np.cumsum(lengths, out=start[1:])
            entries = np.concatenate(parts) if parts else np.zeros(0, dtype=np.int32)
            bands.chains[name] = (True, start, np.ascontiguousarray(entries))
        return bands.chains[name]


def record_chains(model, bands: Bands, names) -> None:
    """Record now the mirror chains of the bands ``names`` ("solar", "ir") that have rows,
    as the first step that needs them would (:func:`_chains_of`: the same records, so the
    same bits), e.g. before steps run on threads (:mod:`vfactor.heatthreads`)."""
    for name in names:
        if bands.band(name)["rows"].size:
            _chains_of(model, bands, name)


_RECORD_BATCH = 1 << 16
_NO_CHAINS = (False, np.zeros(1, dtype=np.int64), np.zeros(0, dtype=np.int32))


def _per_replicate(node, values, n_nodes):
    """(m, n) sums per node of the columns of ``values`` (s, m), in side order."""
    out = np.empty((values.shape[1], n_nodes))
    heat_sums.replicate_sums(node, np.ascontiguousarray(values), out)
    return out


def _rows_of_sides(side_list, segment_start, m):
    """Rows of the escaping-ray cache that belong to the given sides: (rows, owning side,
    replicate of each row), side by side, segment by segment
    (:func:`vfactor.tracing.heat_kernels.segment_rows`)."""
    side_list = np.ascontiguousarray(side_list, dtype=np.int64)
    total = int((segment_start[(side_list + 1) * m] - segment_start[side_list * m]).sum())
    rows = np.empty(total, dtype=np.int64)
    owner = np.empty(total, dtype=np.int64)
    replicate = np.empty(total, dtype=np.int64)
    if total:
        heat_kernels.segment_rows(side_list, segment_start, m, rows, owner, replicate)
    return rows, owner, replicate


def _chain_scene(model, band):
    return (model.arrays, model.normals, model.facet_node, band["f_abs"], band["f_spec"],
            model.max_bounces)


def _chain_sums(absorbed, diffuse, esc, lost, chunks):
    """Sums over the chunk rows of the chain tallies: (absorbed (m, n), diffuse (m, n),
    escaped, inert) [W]."""
    return (absorbed[:chunks].sum(axis=0), diffuse[:chunks].sum(axis=0),
            float(esc[:chunks].sum()), float(lost[:chunks].sum()))


def _run_chains(model, band, origin, direction, exclude, weight, replicate, clear):
    """Specular chains of a batch of rays.

    Returns (absorbed (m, n), diffuse (m, n), escaped, inert) [W]: the sums over the rays
    of each replicate of the power absorbed by / left diffusely on each node, and the
    totals that escaped and that ended on inert sides.
    """
    n = model.n_nodes
    count = origin.shape[0]
    chunks = -(-count // chain_kernels.CHAIN_CHUNK)
    absorbed = np.empty((chunks, model.m, n))
    diffuse = np.empty((chunks, model.m, n))
    esc = np.empty(chunks)
    lost = np.empty(chunks)
    if count:
        chain_kernels.specular_chains(model.arrays, model.normals, model.facet_node, band["f_abs"],
                                      band["f_spec"], origin, direction, exclude, weight,
                                      replicate, clear, chain_kernels.CHAIN_CHUNK,
                                      model.max_bounces,
                                      absorbed, diffuse, esc, lost)
    return _chain_sums(absorbed, diffuse, esc, lost, chunks)


def reflect(model, bands: Bands, src, band, step, rep, lit_mask, lit, cos_t,
             planet_rays: PlanetRays):
    """Power absorbed after reflection inside the vehicle, per replicate and node.

    Parameters
    ----------
    rep : (s, m) — replicate estimates of the power incident on each side [W]

    Returns
    -------
    (absorbed (m, n) [W], escaped [W], inert [W], variance (n,) [W^2]); ``absorbed[r]``
    is replicate ``r``'s estimate, the estimate itself is the mean over the replicates;
    ``variance`` is that of the absorbed power from the error of the view factors behind
    the Gebhart factors (:func:`vfactor.reflecterror.coupling_variance`; zero without
    diffuse reflection), which the replicates do not see.
    """
    s = model.sides
    m = model.m
    pool = np.empty((m, model.n_nodes))
    heat_sums.pool_sums(s.node, band["reflected_share"], band["diffuse_share"], rep, pool)
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
    variance = np.zeros(model.n_nodes)
    geb = band["gebhart"]
    if geb is not None:
        absorbed += (band["gebhart_t"] @ pool.T).T       # B^T once per band (bands_of)
        escaped += float((pool @ geb.space).mean())
        lost += float((pool @ geb.inert).mean())
        variance = coupling_variance(geb.errors, pool.mean(axis=0))
    else:
        escaped += float(pool.sum(axis=1).mean())
    return absorbed, escaped, lost, variance


def _sun_mirror(model, band, step, lit_mask, lit, cos_t):
    """Mirror rays of the unshadowed Sun samples of the specular sides, with their power,
    facet left, replicate and whether nothing can meet them (no tracing needed)."""
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
    clear = np.empty(total, dtype=np.bool_)
    if total:
        heat_kernels.sun_mirror_rays(model.arrays, model.vertices, model.triangles,
                                     model.normals, np.ascontiguousarray(s.facet[spec]),
                                     np.ascontiguousarray(s.sign[spec]), model.seed, model.m,
                                     model.k_sun, step.sun, step.cos_half, model.diagonal,
                                     np.ascontiguousarray(lit_mask[spec]), first, per_sample,
                                     origin, direction, exclude, weight, replicate, clear)
    return origin, direction, exclude, weight, replicate, clear


def _planet_mirror(model, bands: Bands, src, band, step, rep,
                   planet_rays: PlanetRays):
    """Chain tallies of the mirror rays of the cached planet rays of the specular sides
    (their weights from the step), and the specular power (s, m) that no ray carries.

    For planet IR, and for the albedo of the control-variate sides, the weights of a
    (side, replicate) are scaled so that they carry its specular share of ``rep`` (the
    control-variate estimate, see :func:`vfactor.heatplanet.planet_view` and
    :func:`vfactor.heatplanet.albedo_view`; albedo in
    proportion to each ray's cos(solar zenith)), so that the energy bookkeeping closes.
    """
    s = model.sides
    n = model.n_nodes
    rows = band["rows"].size
    a = band["row_offset"]
    chunks = -(-rows // chain_kernels.CHAIN_CHUNK)
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
            carry = np.full(s.count, chain_kernels.CARRY_EVEN, dtype=np.int64)
        else:   # the control-variate sides carry their estimate, the others their rays
            carry = np.where(model.control, chain_kernels.CARRY_BY_MU,
                             chain_kernels.CARRY_MU).astype(np.int64)
        kept = chain_kernels.planet_mirror_tallies(
            _chain_scene(model, band),
            (band["spec_sides"], band["segment_first"], band["owner"], band["replicate"],
             band["mirror_origin"], band["mirror"], s.facet, band["spec_share"],
             band["albedo_coefficient"]),
            (planet_rays.row_hit[a:a + rows], planet_rays.row_mu[a:a + rows],
             planet_rays.seen, np.ascontiguousarray(rep), carry, step.albedo, step.solar),
            chains, (np.empty(rows), np.empty(rows, dtype=np.int64)), uncarried, absorbed,
            diffuse, esc, lost)
    chunks = -(-kept // chain_kernels.CHAIN_CHUNK)
    return _chain_sums(absorbed, diffuse, esc, lost, chunks), uncarried
