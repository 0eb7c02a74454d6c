"""``check`` of hinges: a turning part must not sweep through another part.

The parts of every hinge are placed at the angles they take along the orbit (each step,
and in between so that no hinge turns more than :data:`SWEEP_STEP_DEG` from one sample to
the next); without an ``[orbit]``, over their limits or a whole turn. At each sample the
facet pairs that cross (:func:`vfactor.tracing.contacts.find_contacts`) between a moving
part and any other part within reach of its sweep (:func:`vfactor.kinematics.swept_spheres`)
are looked for; the first crossing is located by bisection between
the last clear sample and the first crossing one and reported, with the hinge angle, in
one line. Pairs that cross already as built are the geometric checks'
business and are not repeated here.
"""

from __future__ import annotations

import math

import numpy as np

from vfactor.errors import ModelError, Problem

__all__ = ["check_hinges", "SWEEP_STEP_DEG"]

#: Largest turn of a hinge between two placements looked at [deg] (a facet crossing
#: narrower than the sweep of this angle can slip through: a reporting choice of ours).
SWEEP_STEP_DEG = 5.0
#: Halvings of the last sample interval that locate the first crossing angle (5 deg / 2^8:
#: about 0.02 deg).
_BISECTIONS = 8


def _samples(model, hinges):
    """(angles (q, h) [rad], step index or -1 per sample) of the placements to look at."""
    from vfactor.kinematics import hinge_angles
    from vfactor.trajectory import trajectory_from_model

    try:
        trajectory = trajectory_from_model(model)
    except ModelError:
        trajectory = None                  # the orbit's own errors are reported elsewhere
    if trajectory is not None:
        steps = hinge_angles(hinges, trajectory.time, trajectory.sun_body)
        rows, at = [steps[:1]], [0]
        for k in range(1, steps.shape[0]):
            turn = float(np.max(np.abs(steps[k] - steps[k - 1])))
            n = max(1, math.ceil(math.degrees(turn) / SWEEP_STEP_DEG))
            w = (np.arange(1, n + 1) / n)[:, None]
            rows.append(steps[k - 1] + w * (steps[k] - steps[k - 1]))
            at += [-1] * (n - 1) + [k]
        return np.concatenate(rows), np.asarray(at)
    lo = np.array([h.lower if math.isfinite(h.lower) else -math.pi for h in hinges])
    hi = np.array([h.upper if math.isfinite(h.upper) else math.pi for h in hinges])
    n = max(1, math.ceil(math.degrees(float(np.max(hi - lo))) / SWEEP_STEP_DEG))
    w = (np.arange(n + 1) / n)[:, None]
    return lo + w * (hi - lo), np.full(n + 1, -1)


def _when(at, q, exact) -> str:
    """Where sample ``q`` lies along the orbit, for the message."""
    later = np.flatnonzero(at[q:] >= 0)
    if not later.size:
        return "over the hinge's range"
    step = int(at[q + later[0]])
    return f"at step {step}" if exact and at[q] >= 0 else f"before step {step}"


def check_hinges(model, geometry, report, tol: float) -> None:
    """Append to ``report`` an error for the first placement at which a part turned by a
    hinge crosses another part (one per hinge)."""
    from vfactor.kinematics import (
        facet_hinge,
        moved_normals,
        moved_vertices,
        placements,
        swept_spheres,
    )
    from vfactor.tracing.contacts import CROSSING, find_contacts

    hinges = model.hinges
    if not hinges or geometry.n_facets == 0:
        return
    g = geometry
    owner = facet_hinge(g, hinges)
    # only the turning facets and the rigid ones within reach of their sweep can cross
    centres, radii = swept_spheres(hinges, g, owner)
    corners = np.asarray(g.vertices)[np.asarray(g.triangles)]              # (f, 3, 3)
    mid = corners.mean(axis=1)
    size = np.linalg.norm(corners - mid[:, None, :], axis=2).max(axis=1)
    reach = np.zeros(g.n_facets, bool)
    for c, r in zip(centres, radii):
        reach |= np.linalg.norm(mid - c, axis=1) <= r + size + tol
    usable = (reach | (owner >= 0)) & (np.asarray(g.areas) > 0.0)   # degenerate: reported
    built = find_contacts(g.vertices, g.triangles, g.normals, usable, tol)
    known = set(zip(built.a.tolist(), built.b.tolist()))
    angles, at = _samples(model, hinges)

    def clashes(config):
        """Hinge -> first crossing pair (moving facet, other facet) at these angles."""
        R, T = placements(hinges, config)
        found = find_contacts(moved_vertices(g, owner, R, T), g.triangles,
                              moved_normals(g, owner, R), usable, tol)
        out = {}
        for a, b, kind in zip(found.a.tolist(), found.b.tolist(), found.kind.tolist()):
            if (kind != CROSSING or g.part[a] == g.part[b] or (a, b) in known
                    or owner[a] == owner[b]):
                continue
            h = int(owner[a] if owner[a] >= 0 else owner[b])
            out.setdefault(h, (a, b) if owner[a] == h else (b, a))
        return out

    reported = set()
    for q in range(angles.shape[0]):
        found = {h: pair for h, pair in clashes(angles[q]).items() if h not in reported}
        for h, (mover, other) in sorted(found.items()):
            reported.add(h)
            angle = angles[q]
            if q:      # bisect to the first crossing placement between the two samples
                lo, hi = angles[q - 1], angles[q]
                for _ in range(_BISECTIONS):
                    mid = 0.5 * (lo + hi)
                    if h in clashes(mid):
                        hi = mid
                    else:
                        lo = mid
                angle = hi
            when = _when(at, q, exact=angle is angles[q])
            report.problems.append(Problem(
                "error", model.path, hinges[h].where,
                f"part {g.part_names[g.part[mover]]!r} crosses part "
                f"{g.part_names[g.part[other]]!r} at a hinge angle of "
                f"{math.degrees(angle[h]):.1f} deg ({when}); limit the hinge "
                f"(min_deg, max_deg), move its point or the part", (mover, other)))
