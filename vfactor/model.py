"""The model file: a TOML document naming coatings, parts and optional run settings.

:func:`load_model` reads the contract of ARCHITECTURE section 4 into a frozen
:class:`Model`. Lengths are converted to metres here, once, with the factor of
``[model] length_unit``; everything downstream is SI.

Two ways to read a file:

* strict (the default): the first problem raises :class:`vfactor.errors.ModelError`
  whose one-line message names the file, the location and the offending value;
* collecting (``problems=[]``): every problem found is appended to that list as a
  :class:`vfactor.errors.Problem` and the loader carries on with what is usable
  (a part or coating with a bad value is left out). ``vfactor check`` uses this so that
  the user sees all problems at once.

The ``[orbit]``, ``[attitude]`` and ``[environment]`` tables are kept raw (plain dicts);
the modules that use them validate their keys.

Layout of the model file
------------------------
``[model]``: ``name`` (default: file stem), ``length_unit`` (``m``, ``cm``, ``mm``, ``in``,
``ft``; default ``m``), ``description``.

``[coatings.NAME]``: ``solar_absorptivity``, ``ir_emissivity`` (required, 0..1),
``solar_specular``, ``ir_specular`` (0..1, default 0), ``source`` and ``description``
(free text: where the values come from).

``[[parts]]``: ``name`` (unique), ``shape``, ``center``, ``z_axis``, ``x_axis``, ``max_edge``,
``front``, ``back`` and the parameters of the shape:

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
           ``closed`` (default: whether the mesh is watertight)
=========  ====================================================================

Default axes: ``z_axis = [0, 0, 1]``; ``x_axis`` defaults to the model x axis made
orthogonal to ``z_axis`` (the model y axis when ``z_axis`` is along x).

A side is ``{ coating = "NAME", node = "NODE" }`` or
``{ coating = "NAME", nodes = "single" | "per-face" | "per-facet" | "per-group" }``
(``nodes = "single"`` when neither is given); see :mod:`vfactor.geometry` for the
generated node names. A part without ``front`` and ``back`` only casts shadows.
"""

from __future__ import annotations

import difflib
import hashlib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from vfactor.errors import ModelError, Problem
from vfactor.geometry import Coating

__all__ = [
    "LENGTH_UNITS",
    "SHAPES",
    "NODE_MODES",
    "Side",
    "Part",
    "RadiationSettings",
    "Model",
    "load_model",
    "load_model_text",
]

LENGTH_UNITS = {"m": 1.0, "cm": 0.01, "mm": 0.001, "in": 0.0254, "ft": 0.3048}
"""Metres per model length unit (inch and foot exact by the 1959 international yard and
pound agreement)."""

SHAPES = ("rectangle", "disk", "box", "cylinder", "cone", "sphere", "dish", "mesh")
NODE_MODES = ("single", "per-face", "per-facet", "per-group")

TOP_LEVEL_SECTIONS = ("model", "coatings", "parts", "radiation", "orbit", "attitude",
                      "environment")
"""Top-level tables a model file may hold; anything else is an error."""

_MODEL_KEYS = ("name", "length_unit", "description")
_COATING_KEYS = ("solar_absorptivity", "ir_emissivity", "solar_specular", "ir_specular",
                 "source", "description")
_SIDE_KEYS = ("coating", "node", "nodes")
_COMMON_PART_KEYS = ("name", "shape", "center", "z_axis", "x_axis", "max_edge", "front",
                     "back", "description")
_SHAPE_KEYS = {
    "rectangle": ("size",),
    "disk": ("radius", "inner_radius", "segments"),
    "box": ("size",),
    "cylinder": ("radius", "length", "caps", "segments"),
    "cone": ("radius", "top_radius", "length", "caps", "segments"),
    "sphere": ("radius", "segments"),
    "dish": ("radius", "depth", "segments"),
    "mesh": ("file", "scale", "closed", "file_unit"),
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
_LENGTH_KEYS = ("radius", "inner_radius", "top_radius", "length", "depth")
DEFAULT_SEGMENTS = 32
"""Divisions around the largest circle of a curved shape when neither ``segments`` nor a
finer ``max_edge`` is given."""

_RADIATION_DEFAULTS = {
    "rays_per_node": 200_000,
    "seed": 1,
    "target_error": None,
    "max_rays_per_node": None,   # 20 * rays_per_node
    "smoothing": True,
    "facet_factors": False,
    "sun_rays_per_facet": 16,
    "planet_rays_per_facet": 256,
}


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

    @property
    def where(self) -> str:
        """Location string used in messages: ``part 'NAME'``."""
        return f"part {self.name!r}"


@dataclass(frozen=True)
class RadiationSettings:
    """The ``[radiation]`` table.

    Attributes
    ----------
    rays_per_node : int — Monte Carlo rays emitted per node (default 200000)
    seed : int — seed of the counter-based random streams (default 1)
    target_error : float or None — one-sigma error to reach by adding rays [1]
    max_rays_per_node : int — ray budget per node when ``target_error`` is set
        (default 20 * rays_per_node)
    smoothing : bool — enforce reciprocity and closure (default true)
    facet_factors : bool — also keep facet-to-facet view factors (default false)
    sun_rays_per_facet : int — sample points per facet traced toward the Sun (default 16)
    planet_rays_per_facet : int — escaping directions per facet used for the planet (256)
    """

    rays_per_node: int = 200_000
    seed: int = 1
    target_error: float | None = None
    max_rays_per_node: int = 4_000_000
    smoothing: bool = True
    facet_factors: bool = False
    sun_rays_per_facet: int = 16
    planet_rays_per_facet: int = 256


@dataclass(frozen=True, eq=False)
class Model:
    """A loaded model file (all lengths in metres).

    Attributes
    ----------
    path : str — the model file as given (or the name used in messages)
    base_dir : str — directory that relative mesh paths are resolved against
    source_text : str — the file's text, stored in the results for provenance
    sha256 : str — hex digest of the file's UTF-8 bytes
    name : str
    length_unit : str — as written; ``unit_scale`` is metres per unit
    unit_scale : float [m]
    coatings : dict of str -> Coating
    parts : tuple of Part
    radiation : RadiationSettings
    orbit_table, attitude_table, environment_table : dict or None — raw tables
    description : str
    """

    path: str
    base_dir: str
    source_text: str
    sha256: str
    name: str
    length_unit: str
    unit_scale: float
    coatings: dict
    parts: tuple
    radiation: RadiationSettings
    orbit_table: dict | None = None
    attitude_table: dict | None = None
    environment_table: dict | None = None
    description: str = ""

    def part(self, name: str) -> Part:
        """The part called ``name`` (KeyError listing the known names)."""
        for p in self.parts:
            if p.name == name:
                return p
        raise KeyError(f"no part named {name!r}; parts are {', '.join(p.name for p in self.parts)}")


# --------------------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------------------

class _Invalid(Exception):
    """Internal: the current item (part, coating, side) cannot be used."""


@dataclass
class _Reader:
    file: str
    problems: list | None  # None: strict

    found: list = field(default_factory=list)
    broken_coatings: set = field(default_factory=set)   # defined, but with a bad value

    def error(self, where: str, message: str, fatal_for_item: bool = True):
        if self.problems is None:
            raise ModelError(message, file=self.file, where=where)
        self.problems.append(Problem("error", self.file, where, message))
        if fatal_for_item:
            raise _Invalid()

    def soft_error(self, where: str, message: str):
        """An error that does not prevent using the rest of the item."""
        if self.problems is None:
            raise ModelError(message, file=self.file, where=where)
        self.problems.append(Problem("error", self.file, where, message))

    def warning(self, where: str, message: str):
        if self.problems is not None:
            self.problems.append(Problem("warning", self.file, where, message))

    def note(self, where: str, message: str):
        """Information that ``check`` shows (not a problem)."""
        if self.problems is not None:
            self.problems.append(Problem("note", self.file, where, message))

    # ---- value helpers ---------------------------------------------------------------
    def table(self, value, where: str) -> dict:
        if not isinstance(value, dict):
            self.error(where, f"must be a table, got {_show(value)}")
        return value

    def string(self, value, where: str, nonempty: bool = True) -> str:
        if not isinstance(value, str) or (nonempty and not value.strip()):
            self.error(where, f"must be a non-empty string, got {_show(value)}")
        return value

    def number(self, value, where: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.error(where, f"must be a number, got {_show(value)}")
        x = float(value)
        if not math.isfinite(x):
            self.error(where, f"must be finite, got {_show(value)}")
        return x

    def positive(self, value, where: str) -> float:
        x = self.number(value, where)
        if x <= 0.0:
            self.error(where, f"must be > 0, got {_show(value)}")
        return x

    def fraction(self, value, where: str) -> float:
        x = self.number(value, where)
        if not 0.0 <= x <= 1.0:
            self.error(where, f"must lie in [0, 1], got {_show(value)}")
        return x

    def integer(self, value, where: str, minimum: int, maximum: int = 10**12) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            self.error(where, f"must be an integer, got {_show(value)}")
        if value < minimum:
            self.error(where, f"must be >= {minimum}, got {value}")
        if value > maximum:
            self.error(where, f"must be <= {maximum}, got {_show(value)}")
        return int(value)

    def boolean(self, value, where: str) -> bool:
        if not isinstance(value, bool):
            self.error(where, f"must be true or false, got {_show(value)}")
        return value

    def vector(self, value, where: str, n: int) -> tuple:
        if not isinstance(value, list) or len(value) != n:
            self.error(where, f"must be a list of {n} numbers, got {_show(value)}")
        return tuple(self.number(v, where) for v in value)

    def unknown_keys(self, table: dict, allowed, where: str, what: str):
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(str(key), allowed, n=1)
                hint = f"did you mean {close[0]!r}? " if close else ""
                self.soft_error(f"{where} {key}" if where else key,
                                f"unknown {what} key {key!r}; {hint}known keys are "
                                f"{', '.join(allowed)}")


def _hint(value, choices) -> str:
    """' (did you mean X?)' for a near miss among ``choices``, else ''."""
    close = difflib.get_close_matches(str(value), list(choices), n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _show(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def load_model(path, problems: list | None = None) -> Model:
    """Read a model file.

    Parameters
    ----------
    path : str or os.PathLike — the TOML model file
    problems : list, optional — collect problems here instead of raising (see module doc)

    Returns
    -------
    Model (or None in collecting mode when nothing usable could be read)

    Raises
    ------
    ModelError
        Missing or unreadable file, invalid TOML, or any invalid key or value (strict mode).
    """
    p = Path(path)
    file = str(path)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        err = ModelError(f"cannot read the model file: {exc.strerror or exc}", file=file)
        if problems is None:
            raise err from None
        problems.append(Problem("error", file, "", err.message))
        return None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        err = ModelError(f"not UTF-8 text ({exc.reason} at byte {exc.start})", file=file)
        if problems is None:
            raise err from None
        problems.append(Problem("error", file, "", err.message))
        return None
    return load_model_text(text, file, p.resolve().parent, problems=problems)


def load_model_text(text: str, path_for_messages: str = "<model>", base_dir=None,
                    problems: list | None = None) -> Model:
    """Read a model from TOML text (tests, embedded models).

    Parameters
    ----------
    text : str — TOML document
    path_for_messages : str — file name used in messages and ``Model.path``
    base_dir : str or os.PathLike, optional — directory for relative mesh paths
        (default: the current directory)
    problems : list, optional — collecting mode (see module doc)

    Returns
    -------
    Model, or None in collecting mode if the text is not valid TOML.

    Raises
    ------
    ModelError
    """
    reader = _Reader(str(path_for_messages), problems)
    base = Path(base_dir) if base_dir is not None else Path.cwd()
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = f"not valid TOML: {exc}"
        if problems is None:
            raise ModelError(msg, file=reader.file) from None
        problems.append(Problem("error", reader.file, "", msg))
        return None
    except (TypeError, ValueError) as exc:  # e.g. text with NUL characters
        msg = f"not valid TOML: {exc}"
        if problems is None:
            raise ModelError(msg, file=reader.file) from None
        problems.append(Problem("error", reader.file, "", msg))
        return None
    return _read_document(doc, text, reader, base)


def _read_document(doc: dict, text: str, reader: _Reader, base: Path) -> Model:
    for key in doc:
        if key not in TOP_LEVEL_SECTIONS:
            reader.soft_error(f"[{key}]", f"unknown section {key!r}"
                              f"{_hint(key, TOP_LEVEL_SECTIONS)}; known sections are "
                              f"{', '.join(TOP_LEVEL_SECTIONS)}")

    # [model]
    name = Path(reader.file).stem or "model"
    unit = "m"
    description = ""
    try:
        mtab = reader.table(doc.get("model", {}), "[model]")
        reader.unknown_keys(mtab, _MODEL_KEYS, "[model]", "[model]")
        if "name" in mtab:
            name = reader.string(mtab["name"], "[model] name")
        if "description" in mtab:
            description = reader.string(mtab["description"], "[model] description",
                                        nonempty=False)
        if "length_unit" in mtab:
            unit = mtab["length_unit"]
            if not isinstance(unit, str) or unit not in LENGTH_UNITS:
                unit = "m"
                reader.error("[model] length_unit",
                             f"unknown length unit {_show(mtab['length_unit'])}; use one of "
                             f"{', '.join(LENGTH_UNITS)}")
    except _Invalid:
        pass
    scale = LENGTH_UNITS[unit]

    coatings = _read_coatings(doc.get("coatings"), reader)
    parts = _read_parts(doc.get("parts"), reader, coatings, scale, base)
    radiation = _read_radiation(doc.get("radiation"), reader)

    raw_tables = {}
    for key in ("orbit", "attitude", "environment"):
        value = doc.get(key)
        if value is not None and not isinstance(value, dict):
            reader.soft_error(f"[{key}]", f"must be a table, got {_show(value)}")
            value = None
        raw_tables[key] = value

    return Model(
        path=reader.file,
        base_dir=str(base),
        source_text=text,
        sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
        name=name,
        length_unit=unit,
        unit_scale=scale,
        coatings=coatings,
        parts=tuple(parts),
        radiation=radiation,
        orbit_table=raw_tables["orbit"],
        attitude_table=raw_tables["attitude"],
        environment_table=raw_tables["environment"],
        description=description,
    )


def _read_coatings(value, reader: _Reader) -> dict:
    coatings: dict = {}
    if value is None:
        reader.soft_error("[coatings]", "no coatings defined; add a [coatings.NAME] table "
                          "with solar_absorptivity and ir_emissivity")
        return coatings
    try:
        value = reader.table(value, "[coatings]")
    except _Invalid:
        return coatings
    for cname, tab in value.items():
        where = f"[coatings.{cname}]"
        try:
            tab = reader.table(tab, where)
            reader.unknown_keys(tab, _COATING_KEYS, where, "coating")
            props = {}
            bad = False
            near_misses = {m for k in tab if k not in _COATING_KEYS
                           for m in difflib.get_close_matches(str(k), _COATING_KEYS, n=1)}
            for key in ("solar_absorptivity", "ir_emissivity", "solar_specular",
                        "ir_specular"):
                if key not in tab:
                    if key in ("solar_absorptivity", "ir_emissivity"):
                        if key not in near_misses:   # a misspelling is reported once
                            reader.soft_error(f"{where} {key}",
                                              f"missing required key {key!r}")
                        bad = True
                    continue
                try:
                    props[key] = reader.fraction(tab[key], f"{where} {key}")
                except _Invalid:
                    bad = True
            source = ""
            for key in ("source", "description"):
                if key in tab:
                    try:
                        text = reader.string(tab[key], f"{where} {key}", nonempty=False)
                        source = source or text
                    except _Invalid:
                        pass
            if bad:
                reader.broken_coatings.add(cname)
                continue
            coatings[cname] = Coating(name=cname, source=source, **props)
        except _Invalid:
            continue
    return coatings


def _read_side(value, where: str, reader: _Reader, coatings: dict) -> Side:
    tab = reader.table(value, where)
    reader.unknown_keys(tab, _SIDE_KEYS, where, "side")
    if "coating" not in tab:
        reader.error(where, "missing key 'coating'")
    coating = reader.string(tab["coating"], f"{where} coating")
    if coating in reader.broken_coatings:
        raise _Invalid()   # the coating's own error says what is wrong, once
    if coating not in coatings:
        known = ", ".join(coatings) or "none defined"
        reader.error(f"{where} coating", f"unknown coating {coating!r}"
                     f"{_hint(coating, coatings)}; coatings are {known}")
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
        hint = _hint(mode, NODE_MODES)
        if not hint and isinstance(mode, str) and mode.strip():
            hint = f" (to name one node {mode!r}, write node = {mode!r})"
        reader.error(f"{where} nodes", f"unknown node mode {_show(mode)}{hint}; use one "
                     f"of {', '.join(NODE_MODES)}")
    return Side(coating=coating, node=None, nodes=mode)


def _unit(v, reader, where) -> tuple:
    x = reader.vector(v, where, 3)
    norm = math.sqrt(sum(c * c for c in x))
    if norm == 0.0:
        reader.error(where, f"must not be the zero vector, got {_show(v)}")
    return tuple(c / norm for c in x)


def _frame(tab: dict, reader: _Reader, where: str):
    z = _unit(tab.get("z_axis", [0.0, 0.0, 1.0]), reader, f"{where} z_axis")
    if "x_axis" in tab:
        x = _unit(tab["x_axis"], reader, f"{where} x_axis")
    else:
        x = (1.0, 0.0, 0.0) if abs(z[0]) < 0.9 else (0.0, 1.0, 0.0)
    d = sum(a * b for a, b in zip(x, z))
    xo = tuple(a - d * b for a, b in zip(x, z))
    norm = math.sqrt(sum(c * c for c in xo))
    if norm < 1e-6:
        reader.error(f"{where} x_axis", f"x_axis {_show(tab.get('x_axis'))} is parallel to "
                     f"z_axis {_show(tab.get('z_axis'))}")
    return z, tuple(c / norm for c in xo)


def _read_parts(value, reader: _Reader, coatings: dict, scale: float, base: Path) -> list:
    parts: list = []
    if value is None:
        reader.soft_error("[[parts]]", "no parts defined; add at least one [[parts]] table")
        return parts
    if not isinstance(value, list):
        reader.soft_error("[[parts]]", f"must be an array of tables, got {_show(value)}")
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
                reader.error(f"{where} shape", f"unknown shape {_show(shape)}"
                             f"{_hint(shape, SHAPES)}; use one of {', '.join(SHAPES)}")
            allowed = _COMMON_PART_KEYS + _SHAPE_KEYS[shape]
            reader.unknown_keys(tab, allowed, where, f"{shape} part")
            parts.append(_read_part(tab, pname, shape, index, where, reader, coatings,
                                    scale, base))
        except _Invalid:
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
                reader.error(f"{where} size", f"every size must be > 0, got {_show(tab['size'])}")
        params["size"] = tuple(s * scale for s in size)
    for key in _LENGTH_KEYS:
        if key in tab:
            if key in ("inner_radius", "top_radius"):
                v = reader.number(tab[key], f"{where} {key}")
                if v < 0.0:
                    reader.error(f"{where} {key}", f"must be >= 0, got {_show(tab[key])}")
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
    if front is None and back is None:
        reader.warning(where, "no front and no back side: the part only casts shadows")
    return Part(name=pname, shape=shape, parameters=params, center=center, z_axis=z_axis,
                x_axis=x_axis, max_edge=max_edge, front=front, back=back, index=index)


def _mesh_unit(tab, fname, where, reader, scale, user_scale) -> float:
    """Metres per coordinate of a mesh file, before its ``scale``.

    ``file_unit`` (one of :data:`LENGTH_UNITS`) wins; otherwise the unit the format states
    (:func:`vfactor.shapes.stated_file_unit`: STEP and glTF come back in metres), and the
    model's ``length_unit`` only for formats that state none. A length is never scaled
    twice.
    """
    from vfactor.shapes import stated_file_unit

    if "file_unit" in tab:
        unit = tab["file_unit"]
        if not isinstance(unit, str) or unit not in LENGTH_UNITS:
            reader.error(f"{where} file_unit", f"unknown length unit {_show(unit)}; use one "
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


def _read_radiation(value, reader: _Reader) -> RadiationSettings:
    if value is None:
        return RadiationSettings(max_rays_per_node=20 * RadiationSettings.rays_per_node)
    try:
        tab = reader.table(value, "[radiation]")
    except _Invalid:
        return RadiationSettings(max_rays_per_node=20 * RadiationSettings.rays_per_node)
    reader.unknown_keys(tab, tuple(_RADIATION_DEFAULTS), "[radiation]", "[radiation]")
    out = {}
    checks = {
        "rays_per_node": lambda v, w: reader.integer(v, w, 1),
        "seed": lambda v, w: reader.integer(v, w, 0, 2**64 - 1),
        "max_rays_per_node": lambda v, w: reader.integer(v, w, 1, 10**13),
        "smoothing": reader.boolean,
        "facet_factors": reader.boolean,
        "sun_rays_per_facet": lambda v, w: reader.integer(v, w, 1),
        "planet_rays_per_facet": lambda v, w: reader.integer(v, w, 1),
    }
    for key, fn in checks.items():
        if key in tab:
            try:
                out[key] = fn(tab[key], f"[radiation] {key}")
            except _Invalid:
                pass
    if "target_error" in tab:
        try:
            te = reader.positive(tab["target_error"], "[radiation] target_error")
            if te >= 1.0:
                reader.error("[radiation] target_error",
                             f"must be a fraction below 1, got {tab['target_error']}")
            out["target_error"] = te
        except _Invalid:
            pass
    rays = out.get("rays_per_node", RadiationSettings.rays_per_node)
    out.setdefault("max_rays_per_node", 20 * rays)
    if out["max_rays_per_node"] < rays:
        reader.soft_error("[radiation] max_rays_per_node",
                          f"must be >= rays_per_node ({out['max_rays_per_node']} < {rays})")
        out["max_rays_per_node"] = 20 * rays
    return RadiationSettings(**out)
