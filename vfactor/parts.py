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
(``nodes = "single"`` when neither is given), or ``{ coating = "NAME", nodes =
"per-patch", patch_size = L }`` (each face cut into patches of about ``L`` on a side, in
the model's length unit); see :mod:`vfactor.geometry` for the generated node names. A part without ``front`` and ``back`` only casts shadows.

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
import os
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
NODE_MODES = ("single", "per-face", "per-facet", "per-group", "per-patch")

_SIDE_KEYS = ("coating", "node", "nodes", "patch_size")
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
MAX_LENGTH_M = 1e4
"""Largest size, radius, length, depth or centre coordinate of a part [m]: 10 km, far
beyond any spacecraft (the largest, a space station, is about 100 m across; common
practice); a larger value is a unit slip, and would overflow the geometry's arithmetic."""
MAX_MESH_SCALE = 1e6
"""Largest ``scale`` of a mesh part (a file in micrometres read as metres needs 1e-6; a
million the other way is already absurd)."""


@dataclass(frozen=True)
class Side:
    """One side of a part: its coating and how its facets are grouped into nodes.

    Attributes
    ----------
    coating : str — name of a ``[coatings.NAME]`` table
    node : str or None — explicit node name for the whole side
    nodes : str — ``single``, ``per-face``, ``per-facet``, ``per-group`` or ``per-patch``
        (ignored when ``node`` is given)
    patch_size : float or None — edge of the cubes that cut a face into patches, for
        ``per-patch`` [m]
    """

    coating: str
    node: str | None = None
    nodes: str = "single"
    patch_size: float | None = None


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


def read_parts(value, reader: Reader, coatings: dict, scale: float, base: Path,
               allow_outside_files: bool = False) -> list:
    """The ``[[parts]]`` array as a list of :class:`Part` (lengths in metres).

    Parameters
    ----------
    value : the raw ``parts`` value of the TOML document (None when absent)
    reader : Reader — collects or raises the problems
    coatings : dict of str -> Coating — the coatings read so far
    scale : float — metres per model length unit
    base : Path — folder that relative mesh paths are resolved against
    allow_outside_files : bool — mesh files may refer to files outside ``base`` (else
        such a reference is an error naming it)

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
                pname = reader.name(tab["name"], f"{where} name", "part name")
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
                                    scale, base, allow_outside_files))
        except Invalid:
            continue
    return parts


def _read_part(tab, pname, shape, index, where, reader, coatings, scale, base,
               allow_outside_files=False) -> Part:
    for key in _REQUIRED_SHAPE_KEYS[shape]:
        if key not in tab:
            reader.error(where, f"missing key {key!r} for a {shape}")
    params: dict = {}
    unit = _unit_name(scale)
    if "size" in tab:
        n = 2 if shape == "rectangle" else 3
        if not isinstance(tab["size"], list) or len(tab["size"]) != n:
            reader.error(f"{where} size", f"must be a list of {n} numbers, got "
                         f"{show(tab['size'])}")
        size = tuple(_length(reader, v, f"{where} size", scale, unit) for v in tab["size"])
        params["size"] = tuple(v * scale for v in size)
    for key in _LENGTH_KEYS:
        if key in tab:
            v = _length(reader, tab[key], f"{where} {key}", scale, unit,
                        zero_allowed=key in ("inner_radius", "top_radius"))
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
        if not allow_outside_files:
            _check_references(params["file"], fname, base, where, reader)
        s = reader.quantity(tab.get("scale", 1.0), f"{where} scale", "", 0.0,
                            MAX_MESH_SCALE, low_open=True)
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
    if max(abs(c) for c in center) > MAX_LENGTH_M:
        reader.error(f"{where} center", f"must lie within {MAX_LENGTH_M / scale:g} {unit} "
                     f"({MAX_LENGTH_M / 1e3:g} km) of the origin, got {show(tab['center'])}; "
                     f"is the length unit right?")
    z_axis, x_axis = _frame(tab, reader, where)
    max_edge = None
    if "max_edge" in tab:
        max_edge = _length(reader, tab["max_edge"], f"{where} max_edge", scale, unit) * scale
        size_scale = max([v for k, v in params.items() if k in _LENGTH_KEYS] +
                         list(params.get("size", ())) + [0.0])
        if size_scale > 0.0 and size_scale / max_edge > 2000.0:
            reader.error(f"{where} max_edge", f"max_edge {tab['max_edge']} is too fine for a "
                         f"part of size {size_scale / scale:g} (more than 2000 divisions "
                         f"per edge); use a larger max_edge")
    front = back = None
    if "front" in tab:
        front = _read_side(tab["front"], f"{where} front", reader, coatings, scale)
    if "back" in tab:
        back = _read_side(tab["back"], f"{where} back", reader, coatings, scale)
    selections = _read_selections(tab.get("select"), pname, where, reader, coatings, scale)
    if front is None and back is None and not any(
            (s.sets_front and s.front) or (s.sets_back and s.back) for s in selections):
        reader.warning(where, "no front and no back side: the part only casts shadows")
    return Part(name=pname, shape=shape, parameters=params, center=center, z_axis=z_axis,
                x_axis=x_axis, max_edge=max_edge, front=front, back=back, index=index,
                selections=selections)


def _read_selections(value, pname, where, reader, coatings, scale) -> tuple:
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
                name = reader.name(tab["name"], f"{at} name", "select name")
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
                    sides[key] = _read_side(tab[key], f"{at} {key}", reader, coatings, scale)
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


def _check_references(path: str, fname: str, base: Path, where: str, reader: Reader):
    """Refuse a mesh file that makes its loader read a file outside the model's folder
    ``base`` (an XDMF DataItem naming /home/.../other.h5, an HDF5 external link, a glTF
    buffer beside a mesh file kept elsewhere), unless ``[model] allow_outside_files``."""
    from vfactor.meshrefs import referenced_files

    if not Path(path).is_file():
        return   # the geometry reports the missing file
    root = Path(os.path.realpath(base))
    for ref in referenced_files(path):
        if ref.resolved != root and root not in ref.resolved.parents:
            via = "" if Path(os.path.realpath(ref.source)) == Path(os.path.realpath(path)) \
                else f" (through {ref.source.name!r})"
            reader.error(f"{where} file", f"mesh file {fname!r} refers to {ref.written!r}"
                         f"{via}, {ref.kind}, which is {ref.resolved}: outside the model's "
                         f"folder {root}; mesh files may read only files in that folder or "
                         f"below it; move the file there, or set [model] "
                         f"allow_outside_files = true if you trust the mesh file")


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


def _read_side(value, where: str, reader: Reader, coatings: dict, scale: float) -> Side:
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
    if "patch_size" in tab and tab.get("nodes") != "per-patch":
        reader.error(f"{where} patch_size", "patch_size belongs to nodes = \"per-patch\"; "
                     "add that mode or remove patch_size")
    if "node" in tab:
        node = reader.name(tab["node"], f"{where} node", "node name")
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
    patch = None
    if mode == "per-patch":
        if "patch_size" not in tab:
            reader.error(where, "nodes = \"per-patch\" needs patch_size (the edge of a patch, "
                         f"in {_unit_name(scale)})")
        patch = _length(reader, tab["patch_size"], f"{where} patch_size", scale,
                        _unit_name(scale)) * scale
    return Side(coating=coating, node=None, nodes=mode, patch_size=patch)


def _unit_name(scale: float) -> str:
    """The name of the model's length unit (``m`` when the factor is none of ours)."""
    return next((k for k, v in LENGTH_UNITS.items() if v == scale), "m")


def _length(reader: Reader, value, where: str, scale: float, unit: str,
            zero_allowed: bool = False) -> float:
    """A length in the model's unit: > 0 (>= 0 when ``zero_allowed``) and at most
    :data:`MAX_LENGTH_M` in metres."""
    return reader.quantity(value, where, unit, 0.0, MAX_LENGTH_M / scale,
                           low_open=not zero_allowed,
                           why=f"{MAX_LENGTH_M / 1e3:g} km, far beyond any spacecraft",
                           advice_high="is the length unit right?")


def _unit(v, reader, where) -> tuple:
    x = reader.vector(v, where, 3)
    big = max(abs(c) for c in x)
    if big == 0.0:
        reader.error(where, f"must not be the zero vector, got {show(v)}")
    x = tuple(c / big for c in x)   # no overflow in the squares of huge components
    norm = math.sqrt(sum(c * c for c in x))
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
