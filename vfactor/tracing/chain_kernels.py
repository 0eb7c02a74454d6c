"""Numba kernels of specular reflection chains inside the vehicle (heating stage).

A chain follows one mirror-reflected ray: at each side met, the absorptivity share is
absorbed there, ``(1 - a)(1 - s)`` joins that node's diffuse pool (redistributed by the
Gebhart factors, :mod:`vfactor.heatreflect`), ``(1 - a) s`` goes on as a mirror ray; after
``max_bounces`` the rest joins the last node's diffuse pool, so no energy is lost.

Kernels
-------
- :func:`specular_chains` : the chains of given rays, traced, tallied per fixed chunk.
- :func:`record_chains` : the sides met by the chains of given rays, once (rigid
  geometry), so that a step replays them instead of tracing; :func:`pack_chains` packs
  the records end to end.
- :func:`planet_mirror_tallies` : per step, the specular shares of the cached planet rays
  of a band: weights, then the chains replayed or traced, tallied per chunk.

Replaying a record (:func:`_replay`) makes the very operations of tracing the chain
(:func:`_chain`) on the weights, in the same order (:func:`_deposit`), so the sums are
those of tracing (``tests/test_heating.py`` checks it bit for bit).

References
----------
Mirror reflection ``r = d - 2 (d.n) n``: law of specular reflection (common practice).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .config import JIT, JIT_PARALLEL
from .traverse import closest_hit

__all__ = [
    "specular_chains",
    "record_chains",
    "pack_chains",
    "planet_mirror_tallies",
    "CHAIN_ESCAPE",
    "CHAIN_UNUSED",
    "CHAIN_CHUNK",
    "CARRY_MU",
    "CARRY_EVEN",
    "CARRY_BY_MU",
]

#: Entry of a recorded chain (:func:`record_chains`) for a ray that leaves the vehicle;
#: the other entries are ``2 * facet + (0 front | 1 back)`` of the side met.
CHAIN_ESCAPE = -1

#: Entry of :func:`record_chains` after the end of a chain.
CHAIN_UNUSED = -2

#: Rays per tally row of the chain kernels (fixed, so that sums do not depend on the
#: thread count).
CHAIN_CHUNK = 4096

#: How the specular share of a (side, replicate) is carried by its rays that meet the
#: planet (:func:`planet_mirror_tallies`).
CARRY_MU = 0        # weight = coefficient * scale * mu of the ray (plain albedo estimate)
CARRY_EVEN = 1      # the share split evenly over the rays (planet IR)
CARRY_BY_MU = 2     # the share split in proportion to mu (albedo by control variate)


@njit(**JIT, inline="always")
def _bounce(normals, hit, t, ox, oy, oz, dx, dy, dz):
    """The point where a ray meets facet ``hit`` at distance ``t``, and its mirror
    direction there."""
    ox = ox + t * dx
    oy = oy + t * dy
    oz = oz + t * dz
    nx = normals[hit, 0]
    ny = normals[hit, 1]
    nz = normals[hit, 2]
    dn = dx * nx + dy * ny + dz * nz
    return ox, oy, oz, dx - 2.0 * dn * nx, dy - 2.0 * dn * ny, dz - 2.0 * dn * nz


@njit(**JIT, inline="always")
def _deposit(node, a, sp, w, absorbed, diffuse):
    """Weight ``w`` meets a side of ``node`` with absorptivity ``a`` and specular share
    ``sp``: absorbed and diffuse parts added; returns the weight reflected on."""
    absorbed[node] += w * a
    diffuse[node] += w * (1.0 - a) * (1.0 - sp)
    return w * (1.0 - a) * sp


@njit(**JIT)
def _chain(arrays, normals, facet_node, facet_absorptivity, facet_specular, ox, oy, oz,
           dx, dy, dz, exclude, weight, max_bounces, absorbed, diffuse):
    """Follow one specularly reflected ray; returns (escaped, inert) power [W]."""
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
        w = _deposit(node, facet_absorptivity[hit, col], facet_specular[hit, col], w,
                     absorbed, diffuse)
        if w <= 0.0:
            return escaped, inert
        ox, oy, oz, dx, dy, dz = _bounce(normals, hit, t, ox, oy, oz, dx, dy, dz)
        exclude = hit
    diffuse[node] += w
    return escaped, inert


@njit(**JIT_PARALLEL)
def specular_chains(arrays, normals, facet_node, facet_absorptivity, facet_specular,
                    origin, direction, exclude, weight, replicate, clear, chunk, max_bounces,
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
    clear : (m,) bool — rays known to meet no facet (:mod:`vfactor.tracing.beam`): they
        escape without tracing, with the same sums as tracing them
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
            if clear[i]:
                e, q = weight[i], 0.0       # what _chain returns for a first miss
            else:
                e, q = _chain(arrays, normals, facet_node, facet_absorptivity,
                              facet_specular, origin[i, 0], origin[i, 1], origin[i, 2],
                              direction[i, 0], direction[i, 1], direction[i, 2], exclude[i],
                              weight[i], max_bounces, out_absorbed[c, r], out_diffuse[c, r])
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
            ox, oy, oz, dx, dy, dz = _bounce(normals, hit, t, ox, oy, oz, dx, dy, dz)
            leave = hit


@njit(**JIT)
def pack_chains(entry, out_length, out_entry):
    """The records of :func:`record_chains` end to end: ``out_length[i]`` (int64, written)
    the entries of row ``i`` before the first :data:`CHAIN_UNUSED`, and those entries in
    row order in ``out_entry`` (int32, length ``out_length.sum()``; an empty array: the
    lengths only). Returns the number of entries."""
    q = 0
    for i in range(entry.shape[0]):
        length = 0
        while length < entry.shape[1] and entry[i, length] != CHAIN_UNUSED:
            length += 1
        out_length[i] = length
        if out_entry.shape[0]:
            for b in range(length):
                out_entry[q + b] = entry[i, b]
        q += length
    return q


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
        w = _deposit(node, facet_absorptivity[hit, col], facet_specular[hit, col], w,
                     absorbed, diffuse)
        if w <= 0.0:
            return escaped, inert
    # the record holds max_bounces sides met and the weight is still positive
    diffuse[node] += w
    return escaped, inert


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
    band : tuple (spec_sides (q,) int64, segment_first (q m + 1,) int64, owner (u,) int64,
        replicate (u,) int64, mirror_origin (u, 3), mirror_direction (u, 3),
        side_facet (s,) int64, spec_share (s,) float64, coefficient (s,) float64) — the
        band's rows (cached escaping rays of its specular sides, side by side, segment by
        segment: rows of replicate ``r`` of ``spec_sides[j]`` are ``segment_first[j m +
        r]:[j m + r + 1]``), the mirror ray of each row, each side's facet, specular share
        ``(1 - a) s`` and the coefficient of ``CARRY_MU``
    step : tuple (row_hit (u,) bool, row_mu (u,) float64, seen (2, s * m) float64,
        rep (s, m) float64, carry (s,) int64, albedo float, solar float) — per row: meets
        the planet, max(0, cos solar zenith) there; per segment: rays that meet the planet
        and the sum of their mu (:func:`vfactor.tracing.planet_kernels.planet_step`);
        the replicate estimates of the incident power [W]; how each side's share is
        carried; the planet albedo [1] and solar constant [W m-2] of ``CARRY_MU``
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
    :func:`specular_chains` on the kept rows. The rows of a (side, replicate) with no
    ray that meets the planet (``seen`` 0), or none with a positive mu (albedo), are not
    visited: none of them would carry power.
    """
    arrays, normals, facet_node, f_abs, f_spec, max_bounces = scene
    spec_sides, segment_first, owner, replicate, m_origin, m_direction, side_facet, \
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
            if not carried:     # no row hits (or, by mu, none with mu > 0): w = 0 for all
                continue
            for i in range(segment_first[j * m + r], segment_first[j * m + r + 1]):
                if not row_hit[i]:
                    continue
                if mode == CARRY_MU:
                    w = coefficient[s] * albedo * solar * row_mu[i]
                elif mode == CARRY_EVEN:
                    w = wanted / seen[0, g]
                else:
                    w = wanted * row_mu[i] / seen[1, g]
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
