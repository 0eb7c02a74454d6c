"""Hinges: parts that turn about an axis along the orbit (``[[hinges]]`` tables).

A hinge turns a group of parts about an axis through a point, both given in the body frame
of the model as built (every hinge at angle 0). A hinge may ride on another (``parent``):
it then turns with its parent's parts, so that two chained hinges make a two-axis gimbal
(a wing on a yoke). Per design case each hinge follows one law:

==========  ==========================================================================
``law``     angle at each step
==========  ==========================================================================
``sun``     turns so that ``normal`` (a direction fixed to the turning parts, body frame
            as built) comes as close to the Sun as the axis allows; a ``sun`` hinge
            whose child hinge is ``sun`` too turns so that the child's axis is square
            to the Sun, which lets the child point ``normal`` at the Sun exactly
``edge-on`` keeps ``normal`` square to the Sun (a radiator seen edge-on); of the two
            solutions the one nearer the previous angle; where the axis cannot reach
            edge-on, the angle of the smallest ``normal . sun``
``rate``    ``start_deg + rate_deg_s * t``
``table``   linear in time through ``times_s`` / ``angles_deg``, held beyond the ends
``fixed``   ``angle_deg``
==========  ==========================================================================

Optional ``min_deg`` / ``max_deg`` clip the angle, ``max_rate_deg_s`` limits its change
between steps (the first step takes the law's angle). Angles are right-handed about
``axis``. The laws are solved in :mod:`vfactor.kinematics`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .tomlread import Invalid, Reader, hint, show

__all__ = ["Hinge", "LAWS", "read_hinges"]

LAWS = ("sun", "edge-on", "rate", "table", "fixed")

_KEYS = {
    "sun": ("normal",),
    "edge-on": ("normal",),
    "rate": ("rate_deg_s", "start_deg"),
    "table": ("times_s", "angles_deg"),
    "fixed": ("angle_deg",),
}
_COMMON = ("name", "parts", "point", "axis", "parent", "law", "min_deg", "max_deg",
           "max_rate_deg_s", "description")
#: Largest angular rate a hinge law may ask for [deg s-1] (one turn per second is far
#: beyond any deployed appendage: a typing slip, common practice).
MAX_RATE_DEG_S = 360.0


@dataclass(frozen=True)
class Hinge:
    """One ``[[hinges]]`` table (lengths in metres, angles in radians).

    Attributes
    ----------
    name : str
    parts : tuple of str — the parts it turns (with those of its child hinges)
    point : (3,) float — a point of the axis, body frame as built [m]
    axis : (3,) float — unit axis, body frame as built [1]
    parent : str or None — the hinge it rides on
    law : str — one of :data:`LAWS`
    normal : (3,) float or None — for ``sun`` and ``edge-on``: unit direction fixed to the
        turning parts [1]
    rate, start : float — for ``rate`` [rad s-1], [rad]
    angle : float — for ``fixed`` [rad]
    times, angles : tuple of float — for ``table`` [s], [rad]
    lower, upper : float — angle limits [rad] (-inf / inf: none)
    max_rate : float — rate limit [rad s-1] (inf: none)
    where : str — ``hinge 'NAME'``, for messages
    """

    name: str
    parts: tuple
    point: np.ndarray
    axis: np.ndarray
    parent: str | None
    law: str
    normal: np.ndarray | None = None
    rate: float = 0.0
    start: float = 0.0
    angle: float = 0.0
    times: tuple = ()
    angles: tuple = ()
    lower: float = -math.inf
    upper: float = math.inf
    max_rate: float = math.inf
    where: str = ""


def _unit(reader: Reader, value, where) -> np.ndarray:
    v = np.asarray(reader.vector(value, where, 3), dtype=np.float64)
    big = float(np.max(np.abs(v)))
    if big == 0.0:
        reader.error(where, f"must not be the zero vector, got {show(value)}")
    v = v / big
    return v / np.linalg.norm(v)


def _angle(reader: Reader, tab, key, where, default=None) -> float:
    if key not in tab:
        if default is None:
            reader.error(where, f"law needs {key}")
        return default
    return math.radians(reader.quantity(tab[key], f"{where} {key}", "deg", -1e5, 1e5))


def _read_one(tab, index, reader: Reader, part_names, scale) -> Hinge:
    where = f"hinge #{index + 1}"
    tab = reader.table(tab, where)
    if "name" not in tab:
        reader.error(where, "missing key 'name'")
    name = reader.name(tab["name"], f"{where} name", "hinge name")
    where = f"hinge {name!r}"
    law = tab.get("law")
    if law not in LAWS:
        reader.error(f"{where} law", f"unknown law {show(law)}{hint(law, LAWS)}; use one of "
                     f"{', '.join(LAWS)}" if law is not None else
                     f"missing key 'law'; use one of {', '.join(LAWS)}")
    reader.unknown_keys(tab, _COMMON + _KEYS[law], where, f"hinge of law {law!r}")
    parts = tab.get("parts")
    if (not isinstance(parts, list) or not parts
            or not all(isinstance(p, str) for p in parts)):
        reader.error(f"{where} parts", f"must be a non-empty list of part names, got "
                     f"{show(parts)}")
    for p in parts:
        if p not in part_names:
            reader.error(f"{where} parts", f"unknown part {p!r}{hint(p, part_names)}")
    if len(set(parts)) != len(parts):
        reader.error(f"{where} parts", f"names a part twice: {show(parts)}")
    if "axis" not in tab:
        reader.error(where, "missing key 'axis' (the turning axis, body frame)")
    axis = _unit(reader, tab["axis"], f"{where} axis")
    point = np.asarray(reader.vector(tab.get("point", [0.0, 0.0, 0.0]), f"{where} point", 3),
                       dtype=np.float64) * scale
    if not np.all(np.abs(point) < 1e5):
        reader.error(f"{where} point", f"must lie within 100 km of the origin, got "
                     f"{show(tab.get('point'))}")
    parent = None
    if "parent" in tab:
        parent = reader.name(tab["parent"], f"{where} parent", "hinge name")
    out = dict(name=name, parts=tuple(parts), point=point, axis=axis, parent=parent, law=law,
               where=where)
    if law in ("sun", "edge-on"):
        if "normal" not in tab:
            reader.error(where, f"law {law!r} needs normal (a direction fixed to the turning "
                         "parts, body frame as built)")
        normal = _unit(reader, tab["normal"], f"{where} normal")
        if np.linalg.norm(np.cross(normal, axis)) < 1e-6:
            reader.error(f"{where} normal", f"is along the axis {show(tab['axis'])}: turning "
                         "about the axis does not move it")
        out["normal"] = normal
    elif law == "rate":
        if "rate_deg_s" not in tab:
            reader.error(where, "law 'rate' needs rate_deg_s")
        rate = reader.quantity(tab["rate_deg_s"], f"{where} rate_deg_s", "deg s-1",
                               -MAX_RATE_DEG_S, MAX_RATE_DEG_S)
        out["rate"] = math.radians(rate)
        out["start"] = _angle(reader, tab, "start_deg", where, 0.0)
    elif law == "table":
        times, angles = tab.get("times_s"), tab.get("angles_deg")
        for key, value in (("times_s", times), ("angles_deg", angles)):
            if (not isinstance(value, list) or len(value) < 2
                    or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in value)
                    or not all(math.isfinite(float(v)) for v in value)):
                reader.error(f"{where} {key}", f"must be a list of at least 2 finite numbers, "
                             f"got {show(value)}")
        if len(times) != len(angles):
            reader.error(f"{where} angles_deg", f"has {len(angles)} values for "
                         f"{len(times)} times_s")
        if any(b <= a for a, b in zip(times, times[1:])):
            reader.error(f"{where} times_s", f"must increase strictly, got {show(times)}")
        out["times"] = tuple(float(t) for t in times)
        out["angles"] = tuple(math.radians(float(a)) for a in angles)
    else:
        out["angle"] = _angle(reader, tab, "angle_deg", where, 0.0)
    lower = _angle(reader, tab, "min_deg", where, -math.inf)
    upper = _angle(reader, tab, "max_deg", where, math.inf)
    if not lower < upper:
        reader.error(f"{where} max_deg", f"must exceed min_deg ({show(tab.get('min_deg'))}), "
                     f"got {show(tab.get('max_deg'))}")
    out["lower"], out["upper"] = lower, upper
    if "max_rate_deg_s" in tab:
        out["max_rate"] = math.radians(reader.quantity(
            tab["max_rate_deg_s"], f"{where} max_rate_deg_s", "deg s-1", 0.0, MAX_RATE_DEG_S,
            low_open=True))
    return Hinge(**out)


def read_hinges(value, reader: Reader, part_names, scale: float) -> tuple:
    """The ``[[hinges]]`` array as a tuple of :class:`Hinge`, parents before children.

    Parameters
    ----------
    value : the raw ``hinges`` value of the TOML document (None when absent)
    reader : Reader — collects or raises the problems
    part_names : sequence of str — the model's parts
    scale : float — metres per model length unit

    A part turns with at most one hinge (and with that hinge's parents); parents must
    exist and form no loop.
    """
    if value is None:
        return ()
    if not isinstance(value, list):
        reader.soft_error("[[hinges]]", f"must be an array of tables, got {show(value)}")
        return ()
    hinges, owner = [], {}
    for index, tab in enumerate(value):
        try:
            h = _read_one(tab, index, reader, set(part_names), scale)
        except Invalid:
            continue
        if any(h.name == other.name for other in hinges):
            reader.soft_error(h.where, f"duplicate hinge name {h.name!r}")
            continue
        taken = [p for p in h.parts if p in owner]
        if taken:
            reader.soft_error(f"{h.where} parts", f"part {taken[0]!r} already turns with hinge "
                              f"{owner[taken[0]]!r}; a part follows one hinge (a child hinge "
                              "turns with its parent's parts by itself)")
            continue
        owner.update({p: h.name for p in h.parts})
        hinges.append(h)
    return _parents_first(hinges, reader)


def _parents_first(hinges, reader: Reader) -> tuple:
    by_name = {h.name: h for h in hinges}
    for h in hinges:
        if h.parent is not None and h.parent not in by_name:
            reader.soft_error(f"{h.where} parent", f"unknown hinge {h.parent!r}"
                              f"{hint(h.parent, list(by_name))}")
            return ()
    order, placed = [], set()
    while len(order) < len(hinges):
        ready = [h for h in hinges if h.name not in placed
                 and (h.parent is None or h.parent in placed)]
        if not ready:
            loop = next(h for h in hinges if h.name not in placed)
            reader.soft_error(f"{loop.where} parent", "hinges ride on each other in a loop")
            return ()
        for h in ready:
            order.append(h)
            placed.add(h.name)
    return tuple(order)
