"""More planet rays on chosen nodes (``[radiation] planet_ray_factor``).

The statistical error of the planet loads (albedo, planet IR) is very uneven over the
nodes: faces that nothing blocks are exact (control variates, :mod:`vfactor.heatplanet`),
while a face that sees the planet only through a narrow gap, or past the small silhouette
of an appendage, carries most of the vehicle's error. The nodes that limit an analysis
are named by ``summary`` (its largest load errors); ``planet_ray_factor = { "NODE" = K
}`` gives each facet side of those nodes ``K`` times the planet rays (an integer, 1 to
:data:`MAX_FACTOR`), for ``K - 1`` times their sides' share of the cost.

How
---
A side with ``K`` blocks is ``K`` entries of the heating stage's sides, each of area
``A / K`` (:func:`vfactor.heatstep.prepare`, ``blocks``). Block ``j`` draws the side's
planet rays from the node's sequence moved ``j`` stream strides on
(:data:`vfactor.tracing.side_rays.COPY_STRIDE`): an independent randomisation of the same
design, so every block is unbiased and the node's estimate is the mean of ``K``
independent ones, with ``1 / K`` of the variance. The blocks of a replicate share its
index, so the spread of the replicates is still the node's error (Owen 2013, "Monte
Carlo theory, methods and examples", ch. 17). Consecutive points of one longer sequence
were tried first and not kept: their node error fell erratically with ``K`` (a shifted
lattice of some sizes spreads its replicates much more than of others; measured on the
demo's radiator back over 4 seeds, 8 blocks reported 1.65 times the error of 4).

Measured on the demo (:mod:`scripts.bench_heating`): see DEVELOPERS.md.

Choose the nodes from the summary of an earlier run with another seed: a factor chosen
because this very run's rays gave a node a large error depends on those rays, and the
mean of the blocks is then no longer exactly unbiased. An automatic share-out by a pilot
trace (independent rays, 1/16 to 1/4 of the planet rays) was built and measured, and not
kept: with the lattice's erratic error at small sizes the pilot chose the wrong nodes,
and at equal rays the demo's largest error grew (DEVELOPERS.md).
"""

from __future__ import annotations

import numpy as np

from vfactor.tomlread import hint

__all__ = ["MAX_FACTOR", "CAVITY_VIEW", "SUGGESTED_SHARE", "node_blocks", "checked_blocks",
           "unknown_nodes", "suggested_factors", "sides_per_node"]

MAX_FACTOR = 16
"""Largest ``planet_ray_factor`` of a node (16 times the rays: a quarter of the error)."""


CAVITY_VIEW = 0.5
"""A node that sees another with at least this view factor lies in a cavity with it: much
of what it absorbs comes from that node after reflections, so its error is also that
node's (:func:`suggested_factors`)."""

SUGGESTED_SHARE = 1.0
"""Extra planet rays of :func:`suggested_factors`, as a share of the run's (twice the
rays in all)."""


def suggested_factors(error, sides, view=None, share=SUGGESTED_SHARE,
                      current=None) -> np.ndarray:
    """Per node, the ``planet_ray_factor`` that brings the largest planet-load error down
    the most for ``share`` more planet rays than the run had (water-filling): ``K_j =
    ceil(v_j / t)`` (from the run's factor to :data:`MAX_FACTOR`), ``v_j`` the node's
    variance with one block and ``t`` the smallest level whose rays, ``sum(sides K)``, stay
    within ``(1 + share) sum(sides current)``; a node's variance with ``K`` blocks is
    ``v / K``. A node that sees another with a view factor of at least
    :data:`CAVITY_VIEW` passes its error on to it (the two share a cavity).

    error : (n,) float >= 0 — each node's largest planet-load error of the run [W]
    sides : (n,) int — facet sides of each node
    view : (n, n) node view factors (scipy sparse or dense), optional
    share : float >= 0
    current : (n,) int, optional — the run's factors (default 1)

    Returns (n,) int64 >= ``current`` (``current`` when ``share`` pays for no whole block).
    """
    current = (np.ones(np.shape(error), dtype=np.int64) if current is None
               else np.asarray(current, dtype=np.int64))
    need = np.asarray(error, dtype=np.float64) ** 2 * current
    sides = np.asarray(sides, dtype=np.int64)
    if need.shape != sides.shape or not np.all(np.isfinite(need)):
        raise ValueError("suggested_factors: error and sides must be (n,) and finite")
    if view is not None and need.size:
        import scipy.sparse as sp

        coo = sp.coo_array(view)
        cavity = (coo.data >= CAVITY_VIEW) & (coo.row != coo.col)
        passed = np.zeros_like(need)
        np.maximum.at(passed, coo.col[cavity], need[coo.row[cavity]])
        need = np.maximum(need, passed)
    base = float((sides * current).sum())
    budget = (1.0 + float(share)) * base - float(sides.sum())   # blocks beyond one each
    active = (need > 0.0) & (sides > 0)
    if budget - (base - float(sides.sum())) < 1.0 or not active.any():
        return current.copy()

    def factors(level):
        k = np.clip(np.ceil(np.where(active, need, 0.0) / level), 1, MAX_FACTOR)
        return np.maximum(k.astype(np.int64), current)

    def cost(level):
        return int(((factors(level) - 1) * sides).sum())

    high = float(need[active].max())       # every node keeps its factor: within the budget
    low = high / MAX_FACTOR
    if cost(low) <= budget:                # every node can have all it asks for
        return factors(low)
    for _ in range(200):                   # bisection of the level
        mid = 0.5 * (low + high)
        if not low < mid < high:
            break
        low, high = (low, mid) if cost(mid) <= budget else (mid, high)
    return factors(high)


def sides_per_node(geometry) -> np.ndarray:
    """(n,) int64: the facet sides of each node (of facets of positive area)."""
    area = np.asarray(geometry.areas) > 0.0
    sides = np.zeros(geometry.n_nodes, dtype=np.int64)
    for node in (np.asarray(geometry.front_node), np.asarray(geometry.back_node)):
        sides += np.bincount(node[(node >= 0) & area], minlength=geometry.n_nodes)
    return sides


def unknown_nodes(factors: dict, node_names) -> list:
    """The messages for the names of ``factors`` that are not nodes (with a near miss)."""
    names = list(node_names)
    known = set(names)
    return [f"no node {name!r}{hint(name, names)}" for name in factors if name not in known]


def node_blocks(factors: dict, node_names) -> np.ndarray | None:
    """(n,) int64 blocks of planet rays per side of each node from ``factors`` (node name
    -> factor, checked by the model reader), or None when no node has more than one.

    Raises
    ------
    ValueError
        A name that is not a node (:func:`unknown_nodes`).
    """
    names = list(node_names)
    problems = unknown_nodes(factors, names)
    if problems:
        raise ValueError(f"[radiation] planet_ray_factor: {problems[0]}")
    blocks = np.ones(len(names), dtype=np.int64)
    index = {name: i for i, name in enumerate(names)}
    for name, factor in factors.items():
        blocks[index[name]] = int(factor)
    return blocks if (blocks > 1).any() else None


def checked_blocks(blocks, n_nodes: int) -> np.ndarray | None:
    """``blocks`` (the ``planet_blocks`` argument of the heating stage) as a contiguous
    (n,) int64 array, or None for None or all ones."""
    if blocks is None:
        return None
    arr = np.asarray(blocks)
    if arr.shape != (n_nodes,) or arr.dtype.kind not in "iu" or (arr < 1).any() \
            or (arr > MAX_FACTOR).any():
        raise ValueError(f"compute_heating: planet_blocks must be ({n_nodes},) integers in "
                         f"[1, {MAX_FACTOR}]")
    arr = np.ascontiguousarray(arr, dtype=np.int64)
    return arr if (arr > 1).any() else None
