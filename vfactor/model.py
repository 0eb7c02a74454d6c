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
``ft``; default ``m``), ``description``, ``allow_outside_files`` (default false: mesh
files may make their loader read only files inside the model's folder or below it).

``[coatings.NAME]``: ``solar_absorptivity``, ``ir_emissivity`` (required, 0..1),
``solar_specular``, ``ir_specular`` (0..1, default 0), ``source`` and ``description``
(free text: where the values come from).

``[[parts]]`` (and ``[[parts.select]]`` under a part): see :mod:`vfactor.parts`.

``[radiation]``: ``rays_per_node``, ``seed``, ``target_error``, ``max_rays_per_node``,
``smoothing``, ``facet_factors``, ``sun_rays_per_facet``, ``planet_rays_per_facet``,
``planet_ray_factor``, ``gebhart_drop_tolerance``.
"""

from __future__ import annotations

import difflib
import hashlib
from dataclasses import dataclass
from pathlib import Path

import tomllib

from vfactor.errors import ModelError, Problem
from vfactor.geometry import Coating
from vfactor.hinges import read_hinges
from vfactor.parts import (
    LENGTH_UNITS,
    NODE_MODES,
    SHAPES,
    Part,
    Selection,
    Side,
    read_parts,
)
from vfactor.tomlread import Invalid, Reader, hint, label, show

__all__ = [
    "LENGTH_UNITS",
    "NODE_MODES",
    "SHAPES",
    "Model",
    "Part",
    "RadiationSettings",
    "Selection",
    "Side",
    "load_model",
    "load_model_text",
]

TOP_LEVEL_SECTIONS = ("model", "coatings", "parts", "hinges", "radiation", "orbit",
                      "attitude", "environment", "cases", "network", "sweep")
"""Top-level tables a model file may hold; anything else is an error."""

_MODEL_KEYS = ("name", "length_unit", "description", "allow_outside_files")
_COATING_KEYS = ("solar_absorptivity", "ir_emissivity", "solar_specular", "ir_specular",
                 "source", "description")

_RADIATION_DEFAULTS = {
    "rays_per_node": 200_000,
    "seed": 1,
    "target_error": None,
    "max_rays_per_node": None,   # RAY_BUDGET_FACTOR * rays_per_node
    "smoothing": True,
    "facet_factors": False,
    "sun_rays_per_facet": 16,
    "planet_rays_per_facet": 256,
    "planet_ray_factor": (),          # node name -> factor (vfactor.planetrays)
    "gebhart_drop_tolerance": 1e-6,   # vfactor.gebhart.DROP_TOLERANCE
    "hinge_positions": 0,
}


RAY_BUDGET_FACTOR = 20
"""Default ray budget per node when ``target_error`` adds rounds, in multiples of
``rays_per_node`` (the one place of this default; :mod:`vfactor.radiation` uses it too)."""

MAX_HINGE_POSITIONS = 360
"""Most hinge positions at which couplings may be computed (one a degree of a whole turn:
finer is a slip; each position costs a full coupling run)."""

MIN_ROUNDS = 8
"""Rounds every node's rays are split into (:data:`vfactor.radiation.MIN_ROUNDS`; kept
here so that reading a model needs no numba; a test checks that the two agree)."""
MAX_RAYS_PER_ROUND = (1 << 32) - 1
"""Most rays of one node in one round: the ray index of the random counter has 32 bits
(:data:`vfactor.tracing.vf_kernels.MAX_RAYS_PER_ROUND` - 1; a test checks they agree)."""
MAX_ROUNDS = 1 << 16
"""Most rounds a node may get (:data:`vfactor.tracing.vf_kernels.MAX_ROUNDS`)."""
GROWTH_STEP, GROWTH_CAP, GROWTH_LIMIT = 8, 32, 1 << 24
"""Round sizes (:func:`vfactor.tracing.vf_kernels.round_rays`: rounds after the first grow
by ``m`` every ``GROWTH_STEP`` rounds up to ``min(GROWTH_CAP, GROWTH_LIMIT // m)`` times
``m``, never below ``m``; a test checks they agree)."""
MAX_TALLY_SQUARES = (1 << 63) - 1
"""Largest sum over the rounds of a squared round tally the int64 sums can hold
(:class:`vfactor.tallystats.TallySums.squares`)."""


def ray_limit_problem(rays_per_node: int, max_rays_per_node: int) -> str:
    """Why a ray count cannot be traced ('' when it can).

    A node's rays are split into at least :data:`MIN_ROUNDS` rounds of
    ``m = ceil(rays / 8)`` rays; ``m`` must fit the 32-bit ray index, and the sum over the
    rounds of their squared sizes (the worst case of one column taking every ray) must fit
    int64: at most the largest round (see :data:`GROWTH_CAP`) times the rays, up to
    ``max_rays_per_node`` when ``target_error`` adds rounds.
    """
    m = -(-int(rays_per_node) // MIN_ROUNDS)
    if m > MAX_RAYS_PER_ROUND:
        return (f"{rays_per_node} rays per node make rounds of {m} rays, more than the "
                f"{MAX_RAYS_PER_ROUND} the 32-bit ray index holds; use at most "
                f"{MIN_ROUNDS * MAX_RAYS_PER_ROUND}")
    rounds = min(MAX_ROUNDS, max(MIN_ROUNDS, int(max_rays_per_node) // m))
    largest = m * max(1, min(GROWTH_CAP, GROWTH_LIMIT // m))
    if largest * max(int(max_rays_per_node), MIN_ROUNDS * m) > MAX_TALLY_SQUARES:
        return (f"{rays_per_node} rays per node (rounds of {m} rays, up to {rounds} rounds "
                f"within max_rays_per_node = {max_rays_per_node}) overflow the 64-bit sums "
                f"of squared tallies that give the error estimate; use fewer rays (10^9 per "
                f"node is already beyond any need)")
    return ""


@dataclass(frozen=True)
class RadiationSettings:
    """The ``[radiation]`` table.

    Attributes
    ----------
    rays_per_node : int — Monte Carlo rays emitted per node (default 200000)
    seed : int — seed of the counter-based random streams (default 1)
    target_error : float or None — one-sigma error to reach by adding rays [1]
    max_rays_per_node : int — ray budget per node when ``target_error`` is set
        (default RAY_BUDGET_FACTOR * rays_per_node)
    smoothing : bool — enforce reciprocity and closure (default true)
    gebhart_drop_tolerance : float — diffuse Gebhart entries below this share of a node's
        emission are left out, their energy reported (:data:`vfactor.gebhart.DROP_TOLERANCE`)
    facet_factors : bool — also keep facet-to-facet view factors (default false)
    sun_rays_per_facet : int — sample points per facet traced toward the Sun (default 16)
    planet_rays_per_facet : int — escaping directions per facet used for the planet (256)
    planet_ray_factor : tuple of (node name, int) — nodes whose facet sides draw that many
        times the planet rays (:mod:`vfactor.planetrays`; default none)
    hinge_positions : int — hinge positions at which the couplings are also computed
        (0: none; see :mod:`vfactor.positions`)
    """

    rays_per_node: int = 200_000
    seed: int = 1
    target_error: float | None = None
    max_rays_per_node: int = RAY_BUDGET_FACTOR * 200_000
    smoothing: bool = True
    gebhart_drop_tolerance: float = 1e-6
    facet_factors: bool = False
    sun_rays_per_facet: int = 16
    planet_rays_per_facet: int = 256
    planet_ray_factor: tuple = ()
    hinge_positions: int = 0


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
    hinges : tuple of vfactor.hinges.Hinge — parts that turn along the orbit (parents first)
    orbit_table, attitude_table, environment_table : dict or None — raw tables
    description : str
    allow_outside_files : bool — ``[model] allow_outside_files``: mesh files may refer to
        files outside ``base_dir``
    cases : tuple of vfactor.cases.Case — the ``[[cases]]`` tables (raw)
    case_name : str — the case this model is (:func:`vfactor.cases.case_model`), "" for
        the model file as written
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
    hinges: tuple = ()
    orbit_table: dict | None = None
    attitude_table: dict | None = None
    environment_table: dict | None = None
    description: str = ""
    allow_outside_files: bool = False
    cases: tuple = ()
    case_name: str = ""

    def part(self, name: str) -> Part:
        """The part called ``name`` (KeyError listing the known names)."""
        for p in self.parts:
            if p.name == name:
                return p
        raise KeyError(f"no part named {name!r}; parts are {', '.join(p.name for p in self.parts)}")


# --------------------------------------------------------------------------------------


# --------------------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------------------

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
    reader = Reader(str(path_for_messages), problems)
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
    return read_document(doc, text, reader, base)


def read_document(doc: dict, text: str, reader: Reader, base: Path) -> Model:
    """The :class:`Model` of a parsed TOML document ``doc`` (``text``: its source)."""
    for key in doc:
        if key not in TOP_LEVEL_SECTIONS:
            reader.soft_error(f"[{label(key)}]", f"unknown section {key!r}"
                              f"{hint(key, TOP_LEVEL_SECTIONS)}; known sections are "
                              f"{', '.join(TOP_LEVEL_SECTIONS)}")

    # [model]
    name = Path(reader.file).stem or "model"
    unit = "m"
    description = ""
    allow_outside = False
    try:
        mtab = reader.table(doc.get("model", {}), "[model]")
        reader.unknown_keys(mtab, _MODEL_KEYS, "[model]", "[model]")
        if "name" in mtab:
            name = reader.name(mtab["name"], "[model] name", "model name")
        if "description" in mtab:
            description = reader.string(mtab["description"], "[model] description",
                                        nonempty=False)
        if "allow_outside_files" in mtab:
            allow_outside = reader.boolean(mtab["allow_outside_files"],
                                           "[model] allow_outside_files")
        if "length_unit" in mtab:
            unit = mtab["length_unit"]
            if not isinstance(unit, str) or unit not in LENGTH_UNITS:
                unit = "m"
                reader.error("[model] length_unit",
                             f"unknown length unit {show(mtab['length_unit'])}; use one of "
                             f"{', '.join(LENGTH_UNITS)}")
    except Invalid:
        pass
    scale = LENGTH_UNITS[unit]

    coatings = _read_coatings(doc.get("coatings"), reader)
    parts = read_parts(doc.get("parts"), reader, coatings, scale, base,
                       allow_outside_files=allow_outside)
    hinges = read_hinges(doc.get("hinges"), reader, [p.name for p in parts], scale)
    radiation = _read_radiation(doc.get("radiation"), reader)

    raw_tables = {}
    for key in ("orbit", "attitude", "environment"):
        value = doc.get(key)
        if value is not None and not isinstance(value, dict):
            reader.soft_error(f"[{key}]", f"must be a table, got {show(value)}")
            value = None
        raw_tables[key] = value
    from vfactor.cases import read_cases

    cases = read_cases(doc.get("cases"), reader, tuple(coatings))

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
        hinges=hinges,
        orbit_table=raw_tables["orbit"],
        attitude_table=raw_tables["attitude"],
        environment_table=raw_tables["environment"],
        description=description,
        allow_outside_files=allow_outside,
        cases=cases,
    )


def _read_coatings(value, reader: Reader) -> dict:
    coatings: dict = {}
    if value is None:
        reader.soft_error("[coatings]", "no coatings defined; add a [coatings.NAME] table "
                          "with solar_absorptivity and ir_emissivity")
        return coatings
    try:
        value = reader.table(value, "[coatings]")
    except Invalid:
        return coatings
    for cname, tab in value.items():
        where = f"[coatings.{label(cname)}]"
        try:
            reader.name(cname, where, "coating name")
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
                except Invalid:
                    bad = True
            source = ""
            for key in ("source", "description"):
                if key in tab:
                    try:
                        text = reader.string(tab[key], f"{where} {key}", nonempty=False)
                        source = source or text
                    except Invalid:
                        pass
            if bad:
                reader.broken_coatings.add(cname)
                continue
            coatings[cname] = Coating(name=cname, source=source, **props)
        except Invalid:
            continue
    return coatings


def _planet_ray_factor(reader: Reader, value) -> tuple:
    """``[radiation] planet_ray_factor``: a table of node name -> integer factor, as sorted
    (name, factor) pairs (the names are checked against the built nodes later)."""
    from vfactor.planetrays import MAX_FACTOR

    where = "[radiation] planet_ray_factor"
    tab = reader.table(value, where)
    out = []
    for name in sorted(tab):
        out.append((str(name), reader.integer(tab[name], f"{where} {label(name)}", 1,
                                              MAX_FACTOR)))
    return tuple(out)


def _read_radiation(value, reader: Reader) -> RadiationSettings:
    if value is None:
        return RadiationSettings()
    try:
        tab = reader.table(value, "[radiation]")
    except Invalid:
        return RadiationSettings()
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
        "hinge_positions": lambda v, w: reader.integer(v, w, 0, MAX_HINGE_POSITIONS),
    }
    for key, fn in checks.items():
        if key in tab:
            try:
                out[key] = fn(tab[key], f"[radiation] {key}")
            except Invalid:
                pass
    if "gebhart_drop_tolerance" in tab:
        try:
            tol = reader.quantity(tab["gebhart_drop_tolerance"],
                                  "[radiation] gebhart_drop_tolerance", low=0.0)
            if tol >= 1e-2:
                reader.error("[radiation] gebhart_drop_tolerance",
                             f"must be below 0.01 of a node's emission, got {tol!r}")
            out["gebhart_drop_tolerance"] = tol
        except Invalid:
            pass
    if "planet_ray_factor" in tab:
        try:
            out["planet_ray_factor"] = _planet_ray_factor(reader, tab["planet_ray_factor"])
        except Invalid:
            pass
    if "target_error" in tab:
        try:
            te = reader.positive(tab["target_error"], "[radiation] target_error")
            if te >= 1.0:
                reader.error("[radiation] target_error",
                             f"must be a fraction below 1, got {tab['target_error']}")
            out["target_error"] = te
        except Invalid:
            pass
    rays = out.get("rays_per_node", RadiationSettings.rays_per_node)
    out.setdefault("max_rays_per_node", RAY_BUDGET_FACTOR * rays)
    if out["max_rays_per_node"] < rays:
        reader.soft_error("[radiation] max_rays_per_node",
                          f"must be >= rays_per_node ({out['max_rays_per_node']} < {rays})")
        out["max_rays_per_node"] = RAY_BUDGET_FACTOR * rays
    problem = ray_limit_problem(rays, out["max_rays_per_node"])
    if problem:
        key = "rays_per_node" if "rays_per_node" in tab else "max_rays_per_node"
        reader.soft_error(f"[radiation] {key}", problem)
        out.pop("rays_per_node", None)
        out["max_rays_per_node"] = RAY_BUDGET_FACTOR * RadiationSettings.rays_per_node
    return RadiationSettings(**out)
