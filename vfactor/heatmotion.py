"""A step of the heating stage when parts turn: the vehicle placed as it is at that step.

With hinges (:mod:`vfactor.hinges`) the escaping directions of the facets change along the
orbit, so a step cannot use the one-off trace of a rigid vehicle as it is. What stays
valid is kept (:class:`RigidPart`, once per worker): the first hits of the planet rays of
the rigid facet sides among the rigid facets alone, with their distances, the escaping
ones among them and those that pass near the moving parts (origins and directions
stored). At a step
(:func:`placed_step`) the vehicle is placed at that step's hinge angles
(:class:`vfactor.kinematics.Motion`) and

* the stored rays of the rigid sides that pass through the space the moving parts sweep
  (:func:`vfactor.kinematics.swept_spheres`, found once) are traced against the moving
  parts only (a small scene built for them at this step), and count a moving facet where
  it is nearer than the cached hit; the other rays cannot meet a moving part;
* the rays of the moving sides are traced against the whole placed vehicle;
* the escaping-ray cache of the step copies the stored escaping rays of the rigid sides
  that no moving part blocks and draws those of the moving sides;
* the step is then evaluated exactly as for a rigid vehicle of that shape
  (:func:`vfactor.heatstep.one_step`): direct solar shadows on the placed geometry,
  planet IR and albedo with their control variates, mirror chains, and the diffuse
  redistribution of reflected power: with couplings at hinge positions
  (:mod:`vfactor.positions`) by the Gebhart factors of the position nearest to the step
  (solved once per position), otherwise by the node view factors of the step's own rays
  (the couplings of the vehicle in that position, not of the model as built).

The nearest of two hits is the nearest hit of the union, so a step has the bits of a rigid
model built at that position (same rays, same streams), and is a pure function of
(geometry, motion, seed, step): the same bits in any process and order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from vfactor import heatreflect, heatstep
from vfactor.kinematics import swept_spheres

__all__ = ["RigidPart", "rigid_part", "placed_step"]


@dataclass(frozen=True, eq=False)
class RigidPart:
    """What the rigid facets give every step (internal).

    Attributes
    ----------
    rigid_side : (s,) bool — the side's facet does not move (sides of heatstep.prepare)
    rigid_index : (s,) int64 — row of a rigid side in ``targets``, -1 for a turning side
    targets : (r, n) int32 — first hit among the rigid facets of each ray of the rigid
        sides (node, TARGET_ESCAPE or TARGET_INERT)
    distance : (r, n) float64 — its distance (inf for an escape) [m]
    escape_start : (r + 1,) int64 — rows of each rigid side in ``escape_origin``
    escape_origin, escape_direction : (e, 3) float64 — its rays that escape the rigid
        facets [m], [1]
    near_rows : (q,) int64 — flat indices into ``targets`` of the rays that pass through
        the space the moving parts sweep
    near_origin, near_direction : (q, 3) float64 — those rays [m], [1]
    moving_facets : (g,) int64 — the facets that turn
    """

    rigid_side: np.ndarray
    rigid_index: np.ndarray
    targets: np.ndarray
    distance: np.ndarray
    escape_start: np.ndarray
    escape_origin: np.ndarray
    escape_direction: np.ndarray
    near_rows: np.ndarray
    near_origin: np.ndarray
    near_direction: np.ndarray
    moving_facets: np.ndarray


def _local(facets, n_facets):
    out = np.full(n_facets, -1, np.int64)
    out[facets] = np.arange(facets.size)
    return out


def _stored(model, facet, sign, key, select):
    """(row_start, origin, direction) of the rays ``select`` of the given sides."""
    from vfactor.tracing import motion_kernels as mk

    start = np.zeros(facet.size + 1, dtype=np.int64)
    np.cumsum(select.sum(axis=1), out=start[1:])
    origin = np.empty((int(start[-1]), 3))
    direction = np.empty((int(start[-1]), 3))
    if facet.size:
        mk.store_rays(model.vertices, model.triangles, model.normals, facet, sign, key,
                      model.seed, model.m, model.k_planet, select, start, origin, direction)
    return start, origin, direction


def rigid_part(task, geometry, model, bar) -> RigidPart:
    """Trace the rays of the rigid sides once among the rigid facets (``model``: the
    :func:`vfactor.heatstep.prepare` of the vehicle as built; ``bar`` advanced per side)."""
    from vfactor.tracing import side_rays
    from vfactor.tracing import motion_kernels as mk
    from vfactor.tracing.scene import Scene

    owner = task.motion.owner
    vertices = model.vertices
    triangles = model.triangles
    s = model.sides
    rigid_side = owner[s.facet] < 0
    rigid_index = np.full(s.count, -1, dtype=np.int64)
    rigid_index[rigid_side] = np.arange(int(rigid_side.sum()))
    rigid = np.flatnonzero(owner < 0)
    n_rays = model.m * model.k_planet
    targets = np.full((int(rigid_side.sum()), n_rays), side_rays.TARGET_ESCAPE, np.int32)
    distance = np.full(targets.shape, np.inf)
    near = np.zeros(targets.shape, np.bool_)
    facet, sign, key = s.facet[rigid_side], s.sign[rigid_side], s.key(rigid_side)
    scene = Scene.build(vertices, triangles[rigid]) if rigid.size else None
    if scene is not None and targets.size:
        mk.trace_targets_in(scene.arrays, model.facet_node[rigid],
                            _local(rigid, geometry.n_facets), vertices, triangles,
                            model.normals, facet, sign, key, model.seed, model.m,
                            model.k_planet, np.full(targets.shape, np.inf), False,
                            np.ones(targets.shape, np.bool_), targets, distance)
        centres, radii = swept_spheres(task.motion.hinges, geometry, owner)
        mk.near_spheres(vertices, triangles, model.normals, facet, sign, key, model.seed,
                        model.m, model.k_planet, distance, centres, radii, near)
    escape_start, escape_origin, escape_direction = _stored(
        model, facet, sign, key, targets == side_rays.TARGET_ESCAPE)
    near_rows = np.flatnonzero(near.ravel())
    _, near_origin, near_direction = _stored(model, facet, sign, key, near)
    bar.advance(s.count)
    return RigidPart(rigid_side=rigid_side, rigid_index=rigid_index, targets=targets,
                     distance=distance, escape_start=escape_start,
                     escape_origin=escape_origin, escape_direction=escape_direction,
                     near_rows=near_rows, near_origin=near_origin,
                     near_direction=near_direction,
                     moving_facets=np.flatnonzero(owner >= 0))


def placed_step(task, geometry, rigid: RigidPart, gebhart: dict, k: int, step, p: int,
                out: dict) -> None:
    """Fill row ``p`` of ``out`` with step ``k`` of ``task`` (a
    :class:`vfactor.heating.HeatingSteps` with a ``motion``) on the vehicle as placed then.
    ``gebhart`` holds the Gebhart factors of the hinge positions already used (filled
    here)."""
    from vfactor.tracing import heat_kernels
    from vfactor.tracing import motion_kernels as mk
    from vfactor.tracing.scene import Scene

    vertices = task.motion.vertices(geometry, k)
    triangles = np.ascontiguousarray(geometry.triangles, dtype=np.int64)
    whole = Scene.build(vertices, triangles)
    model = heatstep.prepare(geometry, whole, task.replicates, task.rays_per_facet,
                             task.sun_samples, task.seed, task.max_bounces, task.blocks)
    s = model.sides
    n_rays = model.m * model.k_planet
    targets = np.empty((s.count, n_rays), np.int32)
    moving = rigid.moving_facets
    turning = Scene.build(vertices, triangles[moving]) if moving.size else None
    moving_node = model.facet_node[moving]
    if rigid.targets.size:
        # rigid sides: the cached first hits, unless a turning facet is nearer
        near = rigid.targets.copy()
        if turning is not None and rigid.near_rows.size:
            flat = near.reshape(-1)
            hit = flat[rigid.near_rows]
            dist = rigid.distance.reshape(-1)[rigid.near_rows].copy()
            mk.nearest_stored(turning.arrays, moving_node, rigid.near_origin,
                              rigid.near_direction, dist.copy(), hit, dist)
            flat[rigid.near_rows] = hit
        targets[rigid.rigid_side] = near
    own = ~rigid.rigid_side
    if own.any():
        # turning sides: their rays in the whole placed vehicle (one traversal is faster
        # than one in the rigid facets and one in the turning ones)
        part = np.empty((int(own.sum()), n_rays), np.int32)
        heat_kernels.trace_targets(model.arrays, model.vertices, model.triangles, model.normals,
                                   s.facet[own], s.sign[own], s.key(own), model.facet_node,
                                   model.seed, model.m, model.k_planet, part)
        targets[own] = part

    def fill(segment_start, origin, direction):
        mk.compose_escaping(model.vertices, model.triangles, model.normals, s.facet, s.sign,
                            s.key(), model.seed, model.m, model.k_planet, targets,
                            segment_start, rigid.rigid_index, rigid.targets, rigid.escape_start,
                            rigid.escape_origin, rigid.escape_direction, origin, direction)

    heatstep.cache_targets(model, targets, need_rays=True, fill=fill)
    bands = None
    if task.reflections:
        geb = None
        if task.position_views is not None:
            q = int(task.step_position[k])
            if q not in gebhart:
                gebhart[q] = heatreflect.band_gebhart(model, geometry, task.position_views[q])
            geb = gebhart[q]
        bands = heatreflect.bands_of(model, geometry, None, geb)
    heatstep.one_step(model, bands, step, True, p, out)
