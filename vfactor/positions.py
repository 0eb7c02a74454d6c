"""Couplings of a vehicle with turning parts at a set of hinge positions.

The view factors and Gebhart factors between a turning part and the rest depend on its
angle. With ``[radiation] hinge_positions = N`` a run also computes the couplings of the
vehicle placed at ``N`` positions: position ``p`` puts every hinge at
``lo + (hi - lo) p / (N - 1)`` of the range ``[lo, hi]`` of angles it takes along the orbit
(one position: the middle), or, for a hinge that turns all the way round (a Sun-tracking
wing), at ``lo + 360 deg p / N``. Every step is given the position nearest to its angles
(the largest angle difference over the hinges, modulo a turn for those that turn round,
is smallest; ties to the lower position).

Each position is computed exactly as a rigid model built there, with the run's seed and
rays (:func:`vfactor.radiation.compute_view_factors`, :func:`vfactor.exchange.compute_exchange`),
so its raw tallies are those of that rigid model, bit for bit. The couplings of the model
as built stay in ``/view_factors`` and ``/exchange``; these go to ``/positions``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["PositionCouplings", "hinge_positions", "couplings_at_positions"]


@dataclass(frozen=True, eq=False)
class PositionCouplings:
    """Couplings at hinge positions.

    Attributes
    ----------
    angles : (N, h) float — hinge angles of each position [rad]
    step_position : (t,) int — position nearest to each step's angles
    view_factors : tuple of ViewFactors — per position
    exchange : tuple of Exchange — per position
    """

    angles: np.ndarray
    step_position: np.ndarray
    view_factors: tuple
    exchange: tuple


def hinge_positions(step_angles, count: int) -> tuple:
    """(angles (count, h), nearest position of each step (t,)) for the hinge angles of the
    steps ``step_angles`` (t, h) [rad]."""
    step_angles = np.asarray(step_angles, dtype=np.float64)
    lo, hi = step_angles.min(axis=0), step_angles.max(axis=0)
    w = np.full(1, 0.5) if count == 1 else np.linspace(0.0, 1.0, count)
    angles = lo[None, :] + w[:, None] * (hi - lo)[None, :]
    # a hinge that turns all the way round: positions a whole turn apart would be the same
    turn = 2.0 * np.pi
    full = (hi - lo) > turn * (1.0 - 1.0 / count)
    angles[:, full] = lo[full][None, :] + (np.arange(count) / count * turn)[:, None]
    diff = step_angles[:, None, :] - angles[None, :, :]                       # (t, q, h)
    diff = np.where(full[None, None, :], (diff + np.pi) % turn - np.pi, diff)
    return angles, np.argmin(np.abs(diff).max(axis=2), axis=1).astype(np.int64)


def couplings_at_positions(geometry, motion, count, *, rays_per_node, seed, smooth=True,
                           target_error=None, max_rays_per_node=None, drop_tolerance=None,
                           reporter=None) -> PositionCouplings:
    """The couplings of the vehicle placed at ``count`` hinge positions (see the module)."""
    from vfactor.exchange import compute_exchange
    from vfactor.kinematics import placed_at, placements
    from vfactor.radiation import compute_view_factors
    from vfactor.tracing.scene import Scene

    angles, nearest = hinge_positions(motion.angles, count)
    vfs, exs = [], []
    for p in range(count):
        placed = placed_at(geometry, motion.owner, *placements(motion.hinges, angles[p]))
        scene = Scene.build(placed.vertices, placed.triangles)
        if reporter is not None:
            reporter.message(f"couplings at hinge position {p + 1} of {count}")
        vf = compute_view_factors(placed, scene, rays_per_node=rays_per_node, seed=seed,
                                  smooth=smooth, target_error=target_error,
                                  max_rays_per_node=max_rays_per_node, reporter=reporter)
        exs.append(compute_exchange(placed, scene, vf, rays_per_node=rays_per_node,
                                    seed=seed, band="ir", reporter=reporter,
                                    drop_tolerance=drop_tolerance))
        vfs.append(vf)
    return PositionCouplings(angles=angles, step_position=nearest, view_factors=tuple(vfs),
                             exchange=tuple(exs))
