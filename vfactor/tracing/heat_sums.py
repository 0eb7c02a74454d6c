"""Numba kernels of the heating stage's sums: per (side, replicate) estimates of each source
and their sums per node, replicate and facet (:mod:`vfactor.heatstep`).

Every sum adds its terms in side order, as ``np.bincount`` does, so the results depend on
nothing but the side order (bit-identical for any thread count; ``tests/test_heating.py``
compares them with the numpy expressions they replace).
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .config import JIT, JIT_PARALLEL

__all__ = ["replicate_estimates", "side_tallies", "pool_sums", "facet_shares",
           "replicate_sums", "target_runs"]


@njit(**JIT)
def replicate_estimates(sides, counts, unblocked, factors, out):
    """Per (side, replicate) estimates of the incident power of the three sources [W].

    Parameters
    ----------
    sides : tuple (area (s,) [m2], cos_sun (s,) [1], control (s,) bool)
    counts : tuple (lit (s, m), seen (2, s * m), blocked (2, s * m)) float64 — unshadowed
        Sun samples; rays that meet the planet and the sum of their mu, of the escaping and
        of the blocked rays (:func:`vfactor.tracing.planet_kernels.planet_step`)
    unblocked : tuple (view (s,), albedo (s,)) — unblocked view factor and albedo factor of
        the control-variate sides [1]
    factors : tuple (solar_fraction, olr, albedo_solar, per_sun, per_planet) — ``S f``
        [W m-2], planet IR [W m-2], ``a S`` [W m-2], Sun samples and planet rays per
        replicate
    out : tuple (solar, planet_ir, albedo) of (s, m) float64, written

    Notes
    -----
    ``solar = S f cos A lit / n``; planet IR and albedo: ``E A (view - blocked / n)`` and
    ``a S A (albedo - blocked mu / n)`` on the control-variate sides, ``E A seen / n`` and
    ``a S A seen mu / n`` elsewhere (module notes of :mod:`vfactor.heatstep`); the
    operations in the order of the numpy expressions they replace.
    """
    area, cos_sun, control = sides
    lit, seen, blocked = counts
    view, albedo_view = unblocked
    solar_fraction, olr, albedo_solar, per_sun, per_planet = factors
    out_solar, out_ir, out_albedo = out
    m = lit.shape[1]
    for i in range(area.shape[0]):
        solar_i = solar_fraction * cos_sun[i] * area[i]
        ir_i = olr * area[i]
        albedo_i = albedo_solar * area[i]
        for r in range(m):
            g = i * m + r
            out_solar[i, r] = solar_i * (lit[i, r] / per_sun)
            if control[i]:
                out_ir[i, r] = ir_i * (view[i] - blocked[0, g] / per_planet)
                out_albedo[i, r] = albedo_i * (albedo_view[i] - blocked[1, g] / per_planet)
            else:
                out_ir[i, r] = ir_i * (seen[0, g] / per_planet)
                out_albedo[i, r] = albedo_i * (seen[1, g] / per_planet)


@njit(**JIT)
def side_tallies(node, facet, absorb, rep, out_node, out_facet, out_replicates):
    """Per node and facet sums of one source's per-side values, each added in side order
    (what ``np.bincount`` gives: the sums do not depend on anything but the side order).

    Parameters
    ----------
    node, facet : (s,) int64 — node and facet of each side
    absorb : (s,) float64 — absorptivity of the side in the source's band [1]
    rep : (s, m) float64 — replicate estimates of the power incident on the side [W]; the
        side's estimate is their mean (summed in replicate order, divided by ``m``)
    out_node : (2, n) float64, written — incident and absorbed power per node [W]
    out_facet : (f,) float64, written — absorbed power per facet [W]
    out_replicates : (m, n) float64, written — absorbed power per replicate and node [W]
    """
    out_node[:] = 0.0
    out_facet[:] = 0.0
    out_replicates[:] = 0.0
    m = rep.shape[1]
    for i in range(node.shape[0]):
        j = node[i]
        a = absorb[i]
        total = 0.0
        for r in range(m):
            total += rep[i, r]
        incident = total / m
        absorbed = a * incident
        out_node[0, j] += incident
        out_node[1, j] += absorbed
        out_facet[facet[i]] += absorbed
        for r in range(out_replicates.shape[0]):
            out_replicates[r, j] += a * rep[i, r]


@njit(**JIT)
def pool_sums(node, reflected, diffuse, rep, out):
    """``out[r, j]``: sum over the sides of node ``j`` of ``diffuse * (reflected *
    rep[:, r])`` (the diffusely reflected power per replicate), added in side order."""
    out[:] = 0.0
    for i in range(node.shape[0]):
        j = node[i]
        for r in range(out.shape[0]):
            out[r, j] += diffuse[i] * (reflected[i] * rep[i, r])


@njit(**JIT)
def facet_shares(facet, node, share, area, out):
    """``out[f]``: sum over the sides of facet ``f`` of ``share[node] * area`` [W], in
    side order."""
    out[:] = 0.0
    for i in range(facet.shape[0]):
        out[facet[i]] += share[node[i]] * area[i]


@njit(**JIT)
def replicate_sums(node, values, out):
    """``out[r, j] = sum of values[i, r] over the sides i of node j``, added in side order
    (``np.bincount(node, weights=values[:, r])`` for each replicate ``r``).

    node : (s,) int64; values : (s, m) float64; out : (m, n) float64, written
    """
    for r in range(out.shape[0]):
        for j in range(out.shape[1]):
            out[r, j] = 0.0
    # side by side: each (replicate, node) sum still adds its sides in side order
    for i in range(node.shape[0]):
        j = node[i]
        for r in range(out.shape[0]):
            out[r, j] += values[i, r]


#: Sides per work item of :func:`target_runs` (each item has its own counting table).
_RUN_BLOCK = 256


@njit(**JIT_PARALLEL)
def _runs(targets, offset, start, out_target, out_count):
    """Count (``start`` None-like: empty) or write the runs of every side: the distinct
    targets of a row in order of first appearance, with their ray counts."""
    n_sides = targets.shape[0]
    width = targets.shape[1]
    blocks = (n_sides + _RUN_BLOCK - 1) // _RUN_BLOCK
    for b in prange(blocks):
        table = np.zeros(offset + 1 + _max_target(targets, b), np.int64)
        order = np.empty(width, np.int64)
        for s in range(b * _RUN_BLOCK, min(n_sides, (b + 1) * _RUN_BLOCK)):
            distinct = 0
            for k in range(width):
                t = targets[s, k] + offset
                if table[t] == 0:
                    order[distinct] = t
                    distinct += 1
                table[t] += 1
            if start.shape[0] == 0:
                out_count[s] = distinct
            else:
                q = start[s]
                for d in range(distinct):
                    out_target[q + d] = order[d] - offset
                    out_count[q + d] = table[order[d]]
            for d in range(distinct):
                table[order[d]] = 0


@njit(**JIT, inline="always")
def _max_target(targets, b):
    top = 0
    for s in range(b * _RUN_BLOCK, min(targets.shape[0], (b + 1) * _RUN_BLOCK)):
        for k in range(targets.shape[1]):
            if targets[s, k] > top:
                top = targets[s, k]
    return top


def target_runs(targets):
    """Distinct first-hit targets of each side's rays and how many rays hit each.

    Parameters
    ----------
    targets : (s, k) int32 — per side and ray, node hit, ``TARGET_ESCAPE`` or
        ``TARGET_INERT`` (:func:`vfactor.tracing.heat_kernels.trace_targets`), >= -2

    Returns
    -------
    start : (s + 1,) int64 — the runs of side ``i`` are ``start[i]:start[i + 1]``
    target : (u,) int64 — distinct targets of each side, in order of first appearance
    count : (u,) int64 — rays of the side with that target
    """
    targets = np.ascontiguousarray(targets)
    if targets.ndim != 2:
        raise ValueError(f"target_runs: targets must be 2-D, got shape {targets.shape}")
    if targets.size and int(targets.min()) < -2:
        raise ValueError("target_runs: targets below TARGET_INERT (-2)")
    offset = 2
    distinct = np.zeros(targets.shape[0], np.int64)
    none = np.zeros(0, np.int64)
    _runs(targets, offset, none, none, distinct)
    start = np.zeros(targets.shape[0] + 1, np.int64)
    np.cumsum(distinct, out=start[1:])
    target = np.empty(int(start[-1]), np.int64)
    count = np.empty(int(start[-1]), np.int64)
    _runs(targets, offset, start[:-1].copy(), target, count)
    return start, target, count
