"""A step of the heating stage when parts turn: the vehicle placed as it is at that step.

With hinges (:mod:`vfactor.hinges`) the escaping directions of the facets change along the
orbit, so a step cannot use the one-off trace of a rigid vehicle as it is. What stays
valid is kept (:class:`RigidPart`, once per worker): the first hits of the planet rays of
the rigid facet sides among the rigid facets alone, with their distances. At a step
(:func:`placed_step`) the vehicle is placed at that step's hinge angles
(:class:`vfactor.kinematics.Motion`) and

* the cached rays of the rigid sides that pass through the space the moving parts sweep
  (:func:`vfactor.kinematics.swept_spheres`, found once) are traced against the moving
  parts only (a small scene built for them at this step), and count a moving facet where
  it is nearer than the cached hit; the other rays cannot meet a moving part;
* the rays of the moving sides are traced against the whole placed vehicle;
* the step is then evaluated exactly as for a rigid vehicle of that shape
  (:func:`vfactor.heatstep.one_step`): direct solar shadows on the placed geometry,
  planet IR and albedo with their control variates, mirror chains, and the diffuse
  redistribution of reflected power by the node view factors of the step's own rays
  (the couplings of the vehicle in that position, not of the model as built).

The nearest of two hits is the nearest hit of the union, so a step has the bits of a rigid
model built at that position (same rays, same streams), and is a pure function of
(geometry, motion, seed, step): the same bits in any process and order.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from vfactor import heatstep
from vfactor.kinematics import swept_spheres

__all__ = ["RigidPart", "rigid_part", "placed_step"]


class _Quiet:
    def advance(self, n: int = 1) -> None:
        pass


@dataclass(frozen=True, eq=False)
class RigidPart:
    """What the rigid facets give every step (internal).

    Attributes
    ----------
    rigid_side : (s,) bool — the side's facet does not move (sides of heatstep.prepare)
    targets : (r, n) int32 — first hit among the rigid facets of each ray of the rigid
        sides (node, TARGET_ESCAPE or TARGET_INERT)
    distance : (r, n) float64 — its distance (inf for an escape) [m]
    near : (r, n) bool — the ray passes through the space the moving parts sweep
    moving_facets : (g,) int64 — the facets that turn
    """

    rigid_side: np.ndarray
    targets: np.ndarray
    distance: np.ndarray
    near: np.ndarray
    moving_facets: np.ndarray


def _local(facets, n_facets):
    out = np.full(n_facets, -1, np.int64)
    out[facets] = np.arange(facets.size)
    return out


def rigid_part(task, geometry, model, bar) -> RigidPart:
    """Trace the rays of the rigid sides once among the rigid facets (``model``: the
    :func:`vfactor.heatstep.prepare` of the vehicle as built; ``bar`` advanced per side)."""
    from vfactor.tracing import heat_kernels as hk
    from vfactor.tracing.scene import Scene

    owner = task.motion.owner
    vertices = np.asarray(geometry.vertices, dtype=np.float64)
    triangles = np.ascontiguousarray(geometry.triangles, dtype=np.int64)
    s = model.sides
    rigid_side = owner[s.facet] < 0
    rigid = np.flatnonzero(owner < 0)
    n_rays = model.m * model.k_planet
    targets = np.empty((int(rigid_side.sum()), n_rays), np.int32)
    distance = np.full(targets.shape, np.inf)
    near = np.zeros(targets.shape, np.bool_)
    if rigid.size and targets.size:
        scene = Scene.build(vertices, triangles[rigid])
        facet, sign = s.facet[rigid_side], s.sign[rigid_side]
        hk.trace_targets_in(scene.arrays, model.facet_node[rigid],
                            _local(rigid, geometry.n_facets), vertices, triangles,
                            model.normals, facet, sign, model.seed, model.m, model.k_planet,
                            np.full(targets.shape, np.inf), False,
                            np.ones(targets.shape, np.bool_), targets, distance)
        centres, radii = swept_spheres(task.motion.hinges, geometry, owner)
        hk.near_spheres(vertices, triangles, model.normals, facet, sign, model.seed,
                        model.m, model.k_planet, distance, centres, radii, near)
    bar.advance(s.count)
    return RigidPart(rigid_side=rigid_side, targets=targets, distance=distance, near=near,
                     moving_facets=np.flatnonzero(owner >= 0))


def placed_step(task, geometry, rigid: RigidPart, k: int, step, p: int, out: dict) -> None:
    """Fill row ``p`` of ``out`` with step ``k`` of ``task`` (a
    :class:`vfactor.heating.HeatingSteps` with a ``motion``) on the vehicle as placed then."""
    from vfactor.tracing import heat_kernels as hk
    from vfactor.tracing.scene import Scene

    vertices = task.motion.vertices(geometry, k)
    triangles = np.ascontiguousarray(geometry.triangles, dtype=np.int64)
    whole = Scene.build(vertices, triangles)
    model = heatstep.prepare(geometry, whole, task.replicates, task.rays_per_facet,
                             task.sun_samples, task.seed, task.max_bounces)
    s = model.sides
    targets = np.empty((s.count, model.m * model.k_planet), np.int32)
    moving = rigid.moving_facets
    if rigid.targets.size:
        near, dist = rigid.targets.copy(), rigid.distance.copy()
        if moving.size:
            turning = Scene.build(vertices, triangles[moving])
            hk.trace_targets_in(turning.arrays, model.facet_node[moving],
                                _local(moving, geometry.n_facets), vertices, triangles,
                                model.normals, s.facet[rigid.rigid_side],
                                s.sign[rigid.rigid_side], model.seed, model.m, model.k_planet,
                                rigid.distance, True, rigid.near, near, dist)
        targets[rigid.rigid_side] = near
    own = ~rigid.rigid_side
    if own.any():
        part = np.empty((int(own.sum()), targets.shape[1]), np.int32)
        hk.trace_targets(model.arrays, model.vertices, model.triangles, model.normals,
                         s.facet[own], s.sign[own], model.facet_node, model.seed, model.m,
                         model.k_planet, part)
        targets[own] = part
    heatstep.cache_targets(model, targets, need_rays=True)
    bands = heatstep.bands_of(model, geometry, None) if task.reflections else None
    heatstep.one_step(model, bands, step, True, p, out)
