"""A step of the heating stage when parts turn: the vehicle placed as it is at that step.

With hinges (:mod:`vfactor.hinges`) the escaping directions of the facets change along the
orbit, so a step cannot use the one-off trace of a rigid vehicle. Here a step is computed
on the vehicle placed at that step's hinge angles (:class:`vfactor.kinematics.Motion`): the
facets are moved, the ray-tracing scene is built for them, the planet rays of every facet
side are traced against it, and the step is then evaluated exactly as for a rigid vehicle
of that shape (:func:`vfactor.heatstep.one_step`): direct solar shadows, planet IR and
albedo with their control variates, mirror chains and the diffuse redistribution of
reflected power. The diffuse redistribution uses the node view factors of the step's own
rays (the couplings of the vehicle in that position), not the couplings of the model as
built.

A step is thus a pure function of (geometry, motion, seed, step): the same bits in any
process and order, and the same bits as a rigid model built at that position.
"""

from __future__ import annotations

import numpy as np

from vfactor import heatstep

__all__ = ["placed_step"]


class _Quiet:
    def advance(self, n: int = 1) -> None:
        pass


def placed_step(task, geometry, k: int, step, p: int, out: dict) -> None:
    """Fill row ``p`` of ``out`` with step ``k`` of ``task`` (a
    :class:`vfactor.heating.HeatingSteps` with a ``motion``) on the vehicle as placed then."""
    from vfactor.tracing.scene import Scene

    vertices = task.motion.vertices(geometry, k)
    scene = Scene.build(vertices, np.asarray(geometry.triangles))
    model = heatstep.prepare(geometry, scene, task.replicates, task.rays_per_facet,
                             task.sun_samples, task.seed, task.max_bounces)
    heatstep.trace_once(model, _Quiet(), need_rays=True)
    bands = heatstep.bands_of(model, geometry, None) if task.reflections else None
    heatstep.one_step(model, bands, step, True, p, out)
