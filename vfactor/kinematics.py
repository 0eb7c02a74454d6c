"""Where the turning parts are at each step: hinge angles from their laws, and placements.

:func:`hinge_angles` solves the law of every hinge (:mod:`vfactor.hinges`) at every step
of a trajectory, parents before children: the Sun direction a hinge sees is the body-frame
Sun turned back by its parents' placement. :func:`placements` turns angles into one rigid
placement ``x -> R x + t`` per hinge (its parents' placement after its own turn), and
:func:`moved_vertices` applies them to a geometry's vertices.

Geometry of the laws (rotation about a unit axis ``a``, Rodrigues' formula; elementary
vector algebra): with ``v_perp`` the part of ``v`` square to ``a``, the angle that brings
``n`` closest to ``s`` is the signed angle from ``n_perp`` to ``s_perp`` about ``a``; the
angles at which ``R(theta) n . s = 0`` solve ``C + A cos(theta) + B sin(theta) = 0`` with
``C = (n . a)(s . a)``, ``A = n_perp . s``, ``B = (a x n_perp) . s``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Motion", "motion_of", "placed_at", "placed_geometry", "swept_spheres", "hinge_angles", "placements", "moved_vertices",
           "moved_normals", "facet_hinge", "rotation"]

_TWO_PI = 2.0 * math.pi


def rotation(axis, angle) -> np.ndarray:
    """(3, 3) right-handed rotation by ``angle`` [rad] about the unit ``axis`` (Rodrigues)."""
    a = np.asarray(axis, dtype=np.float64)
    k = np.array([[0.0, -a[2], a[1]], [a[2], 0.0, -a[0]], [-a[1], a[0], 0.0]])
    return np.eye(3) + math.sin(angle) * k + (1.0 - math.cos(angle)) * (k @ k)


def _perp(v, a):
    return v - np.dot(v, a) * a


def _toward(normal, axis, sun, previous) -> float:
    """Angle about ``axis`` that brings ``normal`` closest to ``sun`` (``previous`` when the
    Sun lies along the axis and every angle is as good)."""
    n, s = _perp(normal, axis), _perp(sun, axis)
    if np.linalg.norm(s) < 1e-12:
        return previous
    return math.atan2(float(np.dot(np.cross(n, s), axis)), float(np.dot(n, s)))


def _square_to(vector, axis, sun, previous):
    """Angles about ``axis`` at which ``vector`` is square to ``sun``: both solutions, or
    the one of smallest ``|vector . sun|`` when none exists."""
    par = float(np.dot(vector, axis)) * float(np.dot(sun, axis))
    vp = _perp(vector, axis)
    A = float(np.dot(vp, sun))
    B = float(np.dot(np.cross(axis, vp), sun))
    R = math.hypot(A, B)
    phi = math.atan2(B, A)
    if R < 1e-12:
        return [previous]
    if abs(par) >= R:
        return [phi + math.pi if par > 0 else phi]       # unreachable: the nearest
    d = math.acos(-par / R)
    return [phi + d, phi - d]


def _nearest(angle, previous) -> float:
    """``angle`` plus the whole turns that bring it nearest ``previous``."""
    return angle + _TWO_PI * round((previous - angle) / _TWO_PI)


def _law_angle(h, child, sun, t, previous) -> float:
    if h.law == "fixed":
        return h.angle
    if h.law == "rate":
        return h.start + h.rate * t
    if h.law == "table":
        return float(np.interp(t, h.times, h.angles))
    if h.law == "edge-on":
        options = [_nearest(a, previous) for a in _square_to(h.normal, h.axis, sun, previous)]
        return min(options, key=lambda a: (abs(a - previous), a))
    if child is not None:       # two-axis tracking: the child's axis square to the Sun
        options = [_nearest(a, previous) for a in _square_to(child.axis, h.axis, sun, previous)]

        def reach(a):       # how near the child can then bring the normal to the Sun
            r = rotation(h.axis, a)
            s_child = r.T @ sun
            b = _toward(child.normal, child.axis, s_child, 0.0)
            return float(np.dot(rotation(child.axis, b) @ child.normal, s_child))

        return max(options, key=lambda a: (round(reach(a), 12), -abs(a - previous)))
    return _nearest(_toward(h.normal, h.axis, sun, previous), previous)


def _limited(h, target, previous, dt) -> float:
    """The law's angle within the hinge's limits and moved at most ``max_rate * dt`` from
    ``previous``. A Sun-bound law (``sun``, ``edge-on``) gives a direction, any whole turn of
    which will do: the copy within the limits nearest the previous angle, else the nearer
    limit; the other laws give the angle itself, clipped."""
    if h.law in ("sun", "edge-on") and (math.isfinite(h.lower) or math.isfinite(h.upper)):
        ref = target if previous is None else previous
        near = _nearest(target, ref)
        inside = [c for c in (near - _TWO_PI, near, near + _TWO_PI) if h.lower <= c <= h.upper]
        target = (min(inside, key=lambda c: abs(c - ref)) if inside else
                  min((h.lower, h.upper), key=lambda e: abs(_nearest(target, e) - e)))
    if previous is not None and math.isfinite(h.max_rate):
        step = h.max_rate * dt
        target = previous + min(max(target - previous, -step), step)
    return min(max(target, h.lower), h.upper)


def hinge_angles(hinges, time, sun_body) -> np.ndarray:
    """(t, h) angle of every hinge at every step [rad].

    Parameters
    ----------
    hinges : tuple of vfactor.hinges.Hinge — parents before children
    time : (t,) float — step times [s]
    sun_body : (t, 3) float — unit Sun direction in the body frame [1]
    """
    time = np.asarray(time, dtype=np.float64)
    sun_body = np.asarray(sun_body, dtype=np.float64)
    index = {h.name: i for i, h in enumerate(hinges)}
    children = {}
    for h in hinges:
        if h.parent is not None and h.law == "sun" and hinges[index[h.parent]].law == "sun":
            children.setdefault(h.parent, h)
    out = np.zeros((time.size, len(hinges)))
    for k in range(time.size):
        rot = [None] * len(hinges)
        for i, h in enumerate(hinges):
            parent_rot = np.eye(3) if h.parent is None else rot[index[h.parent]]
            sun = parent_rot.T @ sun_body[k]           # the Sun in the hinge's own frame
            previous = out[k - 1, i] if k else 0.0
            target = _law_angle(h, children.get(h.name), sun, float(time[k]), previous)
            out[k, i] = _limited(h, target, out[k - 1, i] if k else None,
                                 float(time[k] - time[k - 1]) if k else 0.0)
            rot[i] = parent_rot @ rotation(h.axis, out[k, i])
    return out


def placements(hinges, angles) -> tuple:
    """Rigid placement of each hinge's parts at these angles: ((h, 3, 3) R, (h, 3) t), so
    that a point ``x`` of the model as built goes to ``R x + t``."""
    index = {h.name: i for i, h in enumerate(hinges)}
    R = np.zeros((len(hinges), 3, 3))
    T = np.zeros((len(hinges), 3))
    for i, h in enumerate(hinges):
        own = rotation(h.axis, float(angles[i]))
        own_t = h.point - own @ h.point
        if h.parent is None:
            R[i], T[i] = own, own_t
        else:
            p = index[h.parent]
            R[i], T[i] = R[p] @ own, R[p] @ own_t + T[p]
    return R, T


def facet_hinge(geometry, hinges) -> np.ndarray:
    """(f,) int — index of the hinge that places each facet, -1 for the rigid ones."""
    out = np.full(geometry.n_facets, -1, np.int64)
    names = list(geometry.part_names)
    for i, h in enumerate(hinges):
        for p in h.parts:
            out[np.asarray(geometry.part) == names.index(p)] = i
    return out


def moved_vertices(geometry, owner, R, T) -> np.ndarray:
    """(v, 3) vertices with every facet's part placed (``owner`` from :func:`facet_hinge`;
    a vertex takes the placement of the facets that use it — parts share no vertices)."""
    v = np.array(geometry.vertices, dtype=np.float64)
    corners = np.asarray(geometry.triangles).ravel()
    vertex_owner = np.full(v.shape[0], -1, np.int64)
    vertex_owner[corners] = np.repeat(owner, 3)
    if np.any(vertex_owner[corners] != np.repeat(owner, 3)):
        raise ValueError("moved_vertices: a vertex is shared by facets of different hinges")
    for i in range(R.shape[0]):
        on = vertex_owner == i
        v[on] = v[on] @ R[i].T + T[i]
    return v


def moved_normals(geometry, owner, R) -> np.ndarray:
    """(f, 3) facet normals turned with their parts."""
    nrm = np.array(geometry.normals, dtype=np.float64)
    for i in range(R.shape[0]):
        on = owner == i
        nrm[on] = nrm[on] @ R[i].T
    return nrm


@dataclass(frozen=True, eq=False)
class Motion:
    """The turning parts of a vehicle along a trajectory.

    Attributes
    ----------
    hinges : tuple of vfactor.hinges.Hinge — parents before children
    angles : (t, h) float — hinge angles per step [rad]
    owner : (f,) int — hinge that places each facet, -1 for rigid facets
    rotation : (t, h, 3, 3) float, shift : (t, h, 3) float [m] — placement of each hinge's
        parts per step (:func:`placements`)
    """

    hinges: tuple
    angles: np.ndarray
    owner: np.ndarray
    rotation: np.ndarray
    shift: np.ndarray

    @property
    def names(self) -> tuple:
        return tuple(h.name for h in self.hinges)

    def vertices(self, geometry, k: int) -> np.ndarray:
        """(v, 3) vertices of ``geometry`` at step ``k``."""
        return moved_vertices(geometry, self.owner, self.rotation[k], self.shift[k])

    def normals(self, geometry, k: int) -> np.ndarray:
        """(f, 3) facet normals of ``geometry`` at step ``k``."""
        return moved_normals(geometry, self.owner, self.rotation[k])


def placed_at(geometry, owner, R, T):
    """``geometry`` with its turning parts placed by (``R``, ``T``) of :func:`placements`:
    vertices, normals and centroids moved, everything else as built."""
    import dataclasses

    vertices = moved_vertices(geometry, owner, R, T)
    return dataclasses.replace(geometry, vertices=vertices,
                               normals=moved_normals(geometry, owner, R),
                               centroids=vertices[np.asarray(geometry.triangles)].mean(axis=1))


def placed_geometry(geometry, stored: dict, k: int):
    """``geometry`` with its parts placed as at step ``k`` of a results file's hinges
    (:attr:`vfactor.h5read.Results.hinges`)."""
    from vfactor.hinges import Hinge

    hinges = tuple(Hinge(name=n, parts=(), point=np.asarray(p, float),
                         axis=np.asarray(a, float), parent=parent or None, law=law)
                   for n, law, parent, a, p in zip(stored["name"], stored["law"],
                                                   stored["parent"], stored["axis"],
                                                   stored["point"]))
    R, T = placements(hinges, np.radians(np.asarray(stored["angle_deg"])[k]))
    return placed_at(geometry, np.asarray(stored["facet_hinge"], np.int64), R, T)


def motion_of(geometry, hinges, trajectory) -> Motion | None:
    """The :class:`Motion` of ``hinges`` along ``trajectory`` (None without hinges)."""
    if not hinges:
        return None
    angles = hinge_angles(hinges, trajectory.time, trajectory.sun_body)
    placed = [placements(hinges, a) for a in angles]
    return Motion(hinges=tuple(hinges), angles=angles, owner=facet_hinge(geometry, hinges),
                  rotation=np.array([p[0] for p in placed]),
                  shift=np.array([p[1] for p in placed]))


def swept_spheres(hinges, geometry, owner) -> tuple:
    """Spheres holding every place the turning parts can take: one per hinge that rides
    on no other (with the parts of the hinges that ride on it). ((q, 3) centres [m],
    (q,) radii [m]).

    A hinge without riders turns its vertices on circles about its axis: within the
    cylinder of their largest distance from the axis and their span along it, held by the
    sphere about the cylinder's middle. With riders, a vertex of the hinge ``n`` levels
    down stays within ``|v - p_n| + sum |p_i - p_(i-1)|`` of the top hinge's point
    (triangle inequality, each turn keeping distances to its own point).
    """
    index = {h.name: i for i, h in enumerate(hinges)}

    def chain(i):
        out = [i]
        while hinges[out[-1]].parent is not None:
            out.append(index[hinges[out[-1]].parent])
        return out[::-1]                     # top hinge first

    vertices = np.asarray(geometry.vertices, dtype=np.float64)
    triangles = np.asarray(geometry.triangles)
    centres, radii = [], []
    for top, h in enumerate(hinges):
        if h.parent is not None:
            continue
        riders = [i for i in range(len(hinges)) if chain(i)[0] == top]
        facets = np.flatnonzero(np.isin(owner, riders))
        if not facets.size:
            continue
        if riders == [top]:
            v = vertices[np.unique(triangles[facets])] - h.point
            along = v @ h.axis
            radial = np.linalg.norm(v - along[:, None] * h.axis, axis=1)
            mid = 0.5 * (along.min() + along.max())
            centres.append(h.point + mid * h.axis)
            radii.append(math.hypot(float(radial.max()), 0.5 * float(np.ptp(along))))
            continue
        bound = 0.0
        for i in riders:
            path = chain(i)
            reach = sum(float(np.linalg.norm(hinges[b].point - hinges[a].point))
                        for a, b in zip(path, path[1:]))
            mine = facets[owner[facets] == i]
            if mine.size:
                v = vertices[np.unique(triangles[mine])]
                bound = max(bound, reach + float(np.linalg.norm(v - hinges[i].point,
                                                                axis=1).max()))
        centres.append(h.point.copy())
        radii.append(bound)
    radii = np.asarray(radii, dtype=np.float64)
    return np.asarray(centres, dtype=np.float64).reshape(-1, 3), radii * (1.0 + 1e-9) + 1e-9
