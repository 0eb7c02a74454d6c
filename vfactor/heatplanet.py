"""The planet's deterministic terms of a heating step: control variates of planet IR and
albedo (internal).

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
:func:`vfactor.heatstep.plain_estimates` switches both control variates off (for comparisons).
"""

from __future__ import annotations

import math

import numpy as np

from vfactor.planetview import plate_sphere_albedo_factor, plate_sphere_view_factor
from vfactor.tracing.planet_kernels import CULL_MARGIN

__all__ = ["CONTROL_BLOCKED_SHARE", "albedo_groups", "vertex_extent", "dark_cap", "albedo_view",
           "planet_view"]


CONTROL_BLOCKED_SHARE = 0.5
"""A side whose rays the vehicle blocks less often than this gets the planet-IR and albedo
control variates: its estimate is the unblocked value (closed-form view factor, albedo
factor) minus the Monte Carlo estimate of the blocked part (Owen 2013, "Monte Carlo
theory, methods and examples", ch. 8, control variates with coefficient 1), whose variance
is that of the blocked part only. A side blocked more often keeps the plain estimate of
the seen part, which is then usually the smaller variance; the choice depends only on the
vehicle, not on the planet samples, so both estimators stay unbiased (see the module
notes)."""


def albedo_groups(model) -> None:
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


def vertex_extent(vertices) -> float:
    """Largest distance of a vertex from the body origin [m] (a little more, for rounding)."""
    if vertices.shape[0] == 0:
        return 0.0
    return float(np.sqrt((vertices * vertices).sum(axis=1)).max()) * (1.0 + 1e-12)


def dark_cap(model, step) -> bool:
    """True when no point of the planet that a point of the vehicle can see is sunlit.

    From a point within ``extent`` of the body origin, the planet points seen lie within
    ``acos(R / (d + extent)) + asin(extent / d)`` of the sub-vehicle direction (``d``:
    distance of the planet centre); when the Sun is more than 90 degrees plus that (and a
    margin) from it, every such point has cos(solar zenith) < 0 (spherical geometry)."""
    d = float(np.linalg.norm(step.centre))
    rho = model.extent
    if d - rho <= step.radius or rho >= d:
        return False
    cos_zenith = -float(step.centre @ step.sun) / d
    angle = math.acos(min(1.0, max(-1.0, cos_zenith)))
    cap = math.acos(step.radius / (d + rho)) + math.asin(rho / d)
    return angle > 0.5 * math.pi + cap + CULL_MARGIN


def albedo_view(model, step, dark: bool = False) -> np.ndarray:
    """Unblocked albedo factor of every control-variate side at this step (0 for the
    others): the irradiance from the sunlit planet per unit ``albedo * solar`` [1]
    (:func:`vfactor.planetview.plate_sphere_albedo_factor`, once per group of sides with
    one node and one normal, at the group's centre). ``dark``: no point the vehicle sees
    is sunlit (:func:`dark_cap`), every value is 0."""
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


def planet_view(model, step) -> np.ndarray:
    """Unblocked view factor to the planet at this step of every control-variate side (0
    for the others): closed form, :func:`vfactor.planetview.plate_sphere_view_factor`, at
    the facet's centroid."""
    out = np.zeros(model.sides.count)
    chosen = np.flatnonzero(model.control)
    if chosen.size == 0:
        return out
    to_centre = step.centre[None, :] - model.position[chosen]
    dist = np.linalg.norm(to_centre, axis=1)
    cos_lam = np.einsum("ij,ij->i", model.sides.normal[chosen], to_centre) / dist
    out[chosen] = plate_sphere_view_factor(dist / step.radius, cos_lam)
    return out
