"""The ``[[parts]]`` tables of a model file: parts, their sides, and selections of groups.

Read by :func:`read_parts` for :mod:`vfactor.model` (lengths converted to metres there,
once). A part is a primitive shape or a mesh file placed in the model frame:

=========  ====================================================================
rectangle  ``size = [x, y]``
disk       ``radius``, ``inner_radius`` (default 0), ``segments``
box        ``size = [x, y, z]``
cylinder   ``radius``, ``length``, ``caps`` (default true), ``segments``
cone       ``radius`` (base, at -length/2), ``top_radius`` (default 0 = apex),
           ``length``, ``caps`` (default true), ``segments``
sphere     ``radius``, ``segments``
dish       ``radius``, ``depth``, ``segments``
mesh       ``file`` (relative to the model file), ``scale`` (default 1),
           ``file_unit``, ``closed`` (default: whether the mesh is watertight),
           ``repair`` (default false), ``simplify`` (target facet count),
           ``self_crossing`` (``error`` or ``warn``)
=========  ====================================================================

Common keys: ``name`` (unique), ``shape``, ``center``, ``z_axis``, ``x_axis``,
``max_edge``, ``front``, ``back``. Default axes: ``z_axis = [0, 0, 1]``; ``x_axis``
defaults to the model x axis made orthogonal to ``z_axis`` (the model y axis when
``z_axis`` is along x).

A side is ``{ coating = "NAME", node = "NODE" }`` or
``{ coating = "NAME", nodes = "single" | "per-face" | "per-facet" | "per-group" }``
(``nodes = "single"`` when neither is given); see :mod:`vfactor.geometry` for the
generated node names. A part without ``front`` and ``back`` only casts shadows.

Selections
----------
``[[parts.select]]`` tables under a part take some of its groups (the bodies and names of
a mesh file, the faces of a primitive: the ``GROUP`` of ``per-group`` node names) by
name pattern and give them their own sides, so that one CAD assembly needs no
splitting::

    [[parts.select]]
    match = ["wing_*", "panel?"]        # names or shell-style patterns, case-sensitive
    name = "wings"                      # optional; default select1, select2, ...
    front = { coating = "cells", node = "wing_cells" }
    back = false                        # inert; a side left out keeps the part's side

    [[parts.select]]
    match = "bolt*"
    omit = true                         # leave these groups out of the model

A group goes to the first selection that matches it; groups no selection matches keep
the part's sides. ``nodes = "single"`` in a selection makes one node ``PART.NAME``. A
pattern that matches no group is an error (a typo would otherwise leave the coating
unapplied without a word).
"""

from __future__ import annotations

import fnmatch
import math
from dataclasses import dataclass
from pathlib import Path

from vfactor.tomlread import Invalid, Reader, hint, show

__all__ = [
    "LENGTH_UNITS",
    "NODE_MODES",
    "SHAPES",
    "Part",
    "Selection",
    "Side",
    "read_parts",
    "select_groups",
]

LENGTH_UNITS = {"m": 1.0, "cm": 0.01, "mm": 0.001, "in": 0.0254, "ft": 0.3048}
"""Metres per model length unit (inch and foot exact by the 1959 international yard and
pound agreement)."""

SHAPES = ("rectangle", "disk", "box", "cylinder", "cone", "sphere", "dish", "mesh")
NODE_MODES = ("single", "per-face", "per-facet", "per-group")

_SIDE_KEYS = ("coating", "node", "nodes")
_COMMON_PART_KEYS = ("name", "shape", "center", "z_axis", "x_axis", "max_edge", "front",
                     "back", "description", "select")
_SHAPE_KEYS = {
    "rectangle": ("size",),
    "disk": ("radius", "inner_radius", "segments"),
    "box": ("size",),
    "cylinder": ("radius", "length", "caps", "segments"),
    "cone": ("radius", "top_radius", "length", "caps", "segments"),
    "sphere": ("radius", "segments"),
    "dish": ("radius", "depth", "segments"),
    "mesh": ("file", "scale", "closed", "file_unit", "repair", "simplify", "self_crossing"),
}
_REQUIRED_SHAPE_KEYS = {
    "rectangle": ("size",),
    "disk": ("radius",),
    "box": ("size",),
    "cylinder": ("radius", "length"),
    "cone": ("radius", "length"),
    "sphere": ("radius",),
    "dish": ("radius", "depth"),
    "mesh": ("file",),
}
_SELECT_KEYS = ("match", "name", "front", "back", "omit", "description")
_LENGTH_KEYS = ("radius", "inner_radius", "top_radius", "length", "depth")
SELF_CROSSING = ("error", "warn")
"""Values of a mesh part's ``self_crossing``: what facets of the part that cross each
other are (an error stops the run; a warning lets it go on and is stored with the
results)."""
MIN_SIMPLIFY_FACETS = 4
"""Smallest ``simplify`` target a mesh part may ask for (a tetrahedron)."""
DEFAULT_SEGMENTS = 32
"""Divisions around the largest circle of a curved shape when neither ``segments`` nor a
finer ``max_edge`` is given."""


@dataclass(frozen=True)
class Side:
    """One side of a part: its coating and how its facets are grouped into nodes.

    Attributes
    ----------
    coating : str — name of a ``[coatings.NAME]`` table
    node : str or None — explicit node name for the whole side
    nodes : str — ``single``, ``per-face``, ``per-facet`` or ``per-group`` (ignored when
        ``node`` is given)
    """

    coating: str
    node: str | None = None
    nodes: str = "single"


@dataclass(frozen=True)
class Selection:
    """One ``[[parts.select]]`` table: groups of a part taken by name pattern.

    Attributes
    ----------
    patterns : tuple of str — shell-style patterns (:func:`fnmatch.fnmatchcase`)
    name : str — names the node of ``nodes = "single"`` (``PART.NAME``)
    front, back : Side or None — the sides of the matched groups (None: inert)
    sets_front, sets_back : bool — whether the table gives the side (else the part's)
    omit : bool — the matched groups are left out of the model
    where : str — location for messages (``part 'NAME' select 'wings'``)
    """

    patterns: tuple
    name: str
    front: Side | None = None
    back: Side | None = None
    sets_front: bool = False
    sets_back: bool = False
    omit: bool = False
    where: str = ""

    def matches(self, group: str) -> bool:
        """Whether a group name equals or matches one of the patterns (equality first, so
        that names holding ``[`` or ``*``, as CAD label paths do, can be written as
        they are)."""
        return any(group == p or fnmatch.fnmatchcase(group, p) for p in self.patterns)


def select_groups(selections, labels) -> list:
    """Index of the selection that takes each group (first match), -1 for none.

    Parameters
    ----------
    selections : sequence of Selection
    labels : sequence of str — group names of a part

    Returns
    -------
    list of int, one per label
    """
    out = []
    for label in labels:
        out.append(next((k for k, s in enumerate(selections) if s.matches(label)), -1))
    return out


@dataclass(frozen=True, eq=False)
class Part:
    """One ``[[parts]]`` table, lengths in metres.

    Attributes
    ----------
    name : str
    shape : str — one of :data:`SHAPES`
    parameters : dict — shape parameters; lengths in metres (``size`` a tuple, ``radius``,
        ``inner_radius``, ``top_radius``, ``length``, ``depth``), ``caps`` bool,
        ``segments`` int; for meshes ``file`` (absolute path), ``file_as_written``,
        ``scale`` (metres per mesh coordinate: ``length_unit`` times ``scale``) and
        ``closed`` (bool or None = decide from the mesh)
    center : (3,) tuple of float — position of the local origin [m]
    z_axis, x_axis : (3,) tuple of float — local axes in model coordinates, unit length,
        ``x_axis`` orthogonal to ``z_axis`` [1]
    max_edge : float or None — longest facet edge allowed [m]
    front, back : Side or None — None: the side is inert
    index : int — position of the part in the file (0-based)
    selections : tuple of Selection — ``[[parts.select]]`` tables, in file order
    """

    name: str
    shape: str
    parameters: dict
    center: tuple
    z_axis: tuple
    x_axis: tuple
    max_edge: float | None
    front: Side | None
    back: Side | None
    index: int = 0
    selections: tuple = ()

    @property
    def where(self) -> str:
        """Location string used in messages: ``part 'NAME'``."""
        return f"part {self.name!r}"


def read_parts(value, reader: Reader, coatings: dict, scale: float, base: Path) -> list:
    """The ``[[parts]]`` array as a list of :class:`Part` (lengths in metres).

    Parameters
    ----------
    value : the raw ``parts`` value of the TOML document (None when absent)
    reader : Reader — collects or raises the problems
    coatings : dict of str -> Coating — the coatings read so far
    scale : float — metres per model length unit
    base : Path — folder that relative mesh paths are resolved against

    Returns
    -------
    list of Part (a part with a bad value is left out in collecting mode)
    """
    parts: list = []
    if value is None:
        reader.soft_error("[[parts]]", "no parts defined; add at least one [[parts]] table")
        return parts
    if not isinstance(value, list):
        reader.soft_error("[[parts]]", f"must be an array of tables, got {show(value)}")
        return parts
    names = set()
    for index, tab in enumerate(value):
        where = f"part #{index + 1}"
        try:
            tab = reader.table(tab, where)
            if "name" in tab:
                pname = reader.string(tab["name"], f"{where} name").strip()
                where = f"part {pname!r}"
            else:
                reader.soft_error(where, "missing key 'name'")
                pname = f"part{index + 1}"
            if pname in names:
                reader.error(where, f"duplicate part name {pname!r}")
            names.add(pname)
            if "shape" not in tab:
                reader.error(where, f"missing key 'shape'; use one of {', '.join(SHAPES)}")
            shape = tab["shape"]
            if shape not in SHAPES:
                reader.error(f"{where} shape", f"unknown shape {show(shape)}"
                             f"{hint(shape, SHAPES)}; use one of {', '.join(SHAPES)}")
            allowed = _COMMON_PART_KEYS + _SHAPE_KEYS[shape]
            reader.unknown_keys(tab, allowed, where, f"{shape} part")
            parts.append(_read_part(tab, pname, shape, index, where, reader, coatings,
                                    scale, base))
        except Invalid:
            continue
    return parts


def _read_part(tab, pname, shape, index, where, reader, coatings, scale, base) -> Part:
    for key in _REQUIRED_SHAPE_KEYS[shape]:
        if key not in tab:
            reader.error(where, f"missing key {key!r} for a {shape}")
    params: dict = {}
    if "size" in tab:
        n = 2 if shape == "rectangle" else 3
        size = reader.vector(tab["size"], f"{where} size", n)
        for s in size:
            if s <= 0.0:
                reader.error(f"{where} size", f"every size must be > 0, got {show(tab['size'])}")
        params["size"] = tuple(s * scale for s in size)
    for key in _LENGTH_KEYS:
        if key in tab:
            if key in ("inner_radius", "top_radius"):
                v = reader.number(tab[key], f"{where} {key}")
                if v < 0.0:
                    reader.error(f"{where} {key}", f"must be >= 0, got {show(tab[key])}")
            else:
                v = reader.positive(tab[key], f"{where} {key}")
            params[key] = v * scale
    if shape == "disk":
        params.setdefault("inner_radius", 0.0)
        if params["inner_radius"] >= params["radius"]:
            reader.error(f"{where} inner_radius", f"must be smaller than radius "
                         f"({tab.get('inner_radius')} >= {tab.get('radius')})")
    if shape == "cone":
        params.setdefault("top_radius", 0.0)
    if shape in ("cylinder", "cone"):
        params["caps"] = reader.boolean(tab.get("caps", True), f"{where} caps")
    if shape in ("disk", "cylinder", "cone", "sphere", "dish"):
        params["segments"] = reader.integer(tab.get("segments", DEFAULT_SEGMENTS),
                                            f"{where} segments", 3)
        if params["segments"] > 4096:
            reader.error(f"{where} segments", f"must be <= 4096, got {params['segments']}")
    if shape == "mesh":
        fname = reader.string(tab["file"], f"{where} file")
        params["file_as_written"] = fname
        params["file"] = str((base / fname).resolve()) if not Path(fname).is_absolute() \
            else fname
        s = reader.positive(tab.get("scale", 1.0), f"{where} scale")
        params["scale"] = s * _mesh_unit(tab, fname, where, reader, scale, s)
        params["closed"] = (reader.boolean(tab["closed"], f"{where} closed")
                            if "closed" in tab else None)
        params["repair"] = reader.boolean(tab.get("repair", False), f"{where} repair")
        params["self_crossing"] = tab.get("self_crossing", "error")
        if params["self_crossing"] not in SELF_CROSSING:
            reader.error(f"{where} self_crossing", f"must be one of "
                         f"{', '.join(repr(x) for x in SELF_CROSSING)}, got "
                         f"{show(params['self_crossing'])}")
        params["simplify"] = (reader.integer(tab["simplify"], f"{where} simplify",
                                             MIN_SIMPLIFY_FACETS)
                              if "simplify" in tab else None)
    center = tuple(c * scale for c in reader.vector(tab.get("center", [0.0, 0.0, 0.0]),
                                                    f"{where} center", 3))
    z_axis, x_axis = _frame(tab, reader, where)
    max_edge = None
    if "max_edge" in tab:
        max_edge = reader.positive(tab["max_edge"], f"{where} max_edge") * scale
        size_scale = max([v for k, v in params.items() if k in _LENGTH_KEYS] +
                         list(params.get("size", ())) + [0.0])
        if size_scale > 0.0 and size_scale / max_edge > 2000.0:
            reader.error(f"{where} max_edge", f"max_edge {tab['max_edge']} is too fine for a "
                         f"part of size {size_scale / scale:g} (more than 2000 divisions "
                         f"per edge); use a larger max_edge")
    front = back = None
    if "front" in tab:
        front = _read_side(tab["front"], f"{where} front", reader, coatings)
    if "back" in tab:
        back = _read_side(tab["back"], f"{where} back", reader, coatings)
    selections = _read_selections(tab.get("select"), pname, where, reader, coatings)
    if front is None and back is None and not any(
            (s.sets_front and s.front) or (s.sets_back and s.back) for s in selections):
        reader.warning(where, "no front and no back side: the part only casts shadows")
    return Part(name=pname, shape=shape, parameters=params, center=center, z_axis=z_axis,
                x_axis=x_axis, max_edge=max_edge, front=front, back=back, index=index,
                selections=selections)


def _read_selections(value, pname, where, reader, coatings) -> tuple:
    """The ``[[parts.select]]`` tables of one part (see the module docstring)."""
    if value is None:
        return ()
    if not isinstance(value, list):
        reader.error(f"{where} select", f"must be an array of tables ([[parts.select]]), "
                     f"got {show(value)}")
    out = []
    names = set()
    for k, tab in enumerate(value):
        at = f"{where} select #{k + 1}"
        try:
            tab = reader.table(tab, at)
            reader.unknown_keys(tab, _SELECT_KEYS, at, "select")
            name = f"select{k + 1}"
            if "name" in tab:
                name = reader.string(tab["name"], f"{at} name").strip()
                at = f"{where} select {name!r}"
            if name in names:
                reader.error(at, f"duplicate select name {name!r} in part {pname!r}")
            names.add(name)
            if "match" not in tab:
                reader.error(at, "missing key 'match' (a group name or pattern, or a list "
                             "of them)")
            raw = tab["match"]
            patterns = [raw] if isinstance(raw, str) else raw
            if not isinstance(patterns, list) or not patterns or not all(
                    isinstance(p, str) and p.strip() for p in patterns):
                reader.error(f"{at} match", f"must be a non-empty string or list of "
                             f"strings, got {show(raw)}")
            omit = reader.boolean(tab.get("omit", False), f"{at} omit")
            sides = {}
            for key in ("front", "back"):
                if key not in tab:
                    continue
                if omit:
                    reader.error(f"{at} {key}", "an omitted selection has no sides; remove "
                                 f"{key} or omit")
                if tab[key] is False:
                    sides[key] = None
                else:
                    sides[key] = _read_side(tab[key], f"{at} {key}", reader, coatings)
            if not omit and not sides:
                reader.error(at, "selects groups but gives them neither front nor back nor "
                             "omit = true; add a side (front = { coating = ... }) or omit")
            out.append(Selection(patterns=tuple(patterns), name=name,
                                 front=sides.get("front"), back=sides.get("back"),
                                 sets_front="front" in sides, sets_back="back" in sides,
                                 omit=omit, where=at))
        except Invalid:
            continue
    return tuple(out)


def _mesh_unit(tab, fname, where, reader, scale, user_scale) -> float:
    """Metres per coordinate of a mesh file, before its ``scale``.

    ``file_unit`` (one of :data:`LENGTH_UNITS`) wins; otherwise the unit the format states
    (:func:`vfactor.meshfile.stated_file_unit`: STEP and glTF come back in metres), and the
    model's ``length_unit`` only for formats that state none. A length is never scaled
    twice.
    """
    from vfactor.meshfile import stated_file_unit

    if "file_unit" in tab:
        unit = tab["file_unit"]
        if not isinstance(unit, str) or unit not in LENGTH_UNITS:
            reader.error(f"{where} file_unit", f"unknown length unit {show(unit)}; use one "
                         f"of {', '.join(LENGTH_UNITS)}")
        return LENGTH_UNITS[unit]
    stated = stated_file_unit(fname)
    if stated is None:
        return scale
    unit, why = stated
    reader.note(where, f"mesh file {fname!r} states its unit ({why}); its coordinates "
                f"are read in {unit}, not in the model's length unit (set file_unit to "
                f"override)")
    if user_scale != 1.0:
        reader.warning(f"{where} scale", f"scale = {user_scale:g} multiplies a file that "
                       f"already states its unit ({unit}): the part becomes {user_scale:g} "
                       f"times its size in the file; remove scale unless that is meant")
    return LENGTH_UNITS[unit]


def _read_side(value, where: str, reader: Reader, coatings: dict) -> Side:
    tab = reader.table(value, where)
    reader.unknown_keys(tab, _SIDE_KEYS, where, "side")
    if "coating" not in tab:
        reader.error(where, "missing key 'coating'")
    coating = reader.string(tab["coating"], f"{where} coating")
    if coating in reader.broken_coatings:
        raise Invalid()   # the coating's own error says what is wrong, once
    if coating not in coatings:
        known = ", ".join(coatings) or "none defined"
        reader.error(f"{where} coating", f"unknown coating {coating!r}"
                     f"{hint(coating, coatings)}; coatings are {known}")
    if "node" in tab and "nodes" in tab:
        reader.error(where, "give either 'node' (one named node) or 'nodes' (a mode), not both")
    if "node" in tab:
        node = reader.string(tab["node"], f"{where} node").strip()
        if node in NODE_MODES:
            reader.warning(f"{where} node", f"node = {node!r} makes one node literally "
                           f"named {node!r}; for the node mode write nodes = {node!r}")
        return Side(coating=coating, node=node, nodes="single")
    mode = tab.get("nodes", "single")
    if mode not in NODE_MODES:
        suggestion = hint(mode, NODE_MODES)
        if not suggestion and isinstance(mode, str) and mode.strip():
            suggestion = f" (to name one node {mode!r}, write node = {mode!r})"
        reader.error(f"{where} nodes", f"unknown node mode {show(mode)}{suggestion}; use one "
                     f"of {', '.join(NODE_MODES)}")
    return Side(coating=coating, node=None, nodes=mode)


def _unit(v, reader, where) -> tuple:
    x = reader.vector(v, where, 3)
    norm = math.sqrt(sum(c * c for c in x))
    if norm == 0.0:
        reader.error(where, f"must not be the zero vector, got {show(v)}")
    return tuple(c / norm for c in x)


def _frame(tab: dict, reader: Reader, where: str):
    z = _unit(tab.get("z_axis", [0.0, 0.0, 1.0]), reader, f"{where} z_axis")
    if "x_axis" in tab:
        x = _unit(tab["x_axis"], reader, f"{where} x_axis")
    else:
        x = (1.0, 0.0, 0.0) if abs(z[0]) < 0.9 else (0.0, 1.0, 0.0)
    d = sum(a * b for a, b in zip(x, z))
    xo = tuple(a - d * b for a, b in zip(x, z))
    norm = math.sqrt(sum(c * c for c in xo))
    if norm < 1e-6:
        reader.error(f"{where} x_axis", f"x_axis {show(tab.get('x_axis'))} is parallel to "
                     f"z_axis {show(tab.get('z_axis'))}")
    return z, tuple(c / norm for c in xo)
