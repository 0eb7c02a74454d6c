"""Design cases: named variants of one model that differ in environment, orbit, attitude or
coating values, computed in one run.

A model file may carry ``[[cases]]`` tables::

    [[cases]]
    name = "hot"
    description = "end of life, high Sun"          # free text, optional
    [cases.environment]                            # over [environment]
    case = "hot"
    [cases.orbit]                                  # over [orbit]
    ltan = "12:00"
    [cases.attitude]                               # over [attitude]
    mode = "sun"
    [cases.coatings.white]                         # over [coatings.white]
    solar_absorptivity = 0.35

Each table's keys replace the same keys of the model's table (a shallow merge), with two
rules that keep a case from silently mixing with the base: in ``environment``, a case
that names ``case`` drops the base table's other values (the named case's constants
apply, then the case table's own values); in ``orbit``, a case that gives one of
``raan_deg``, ``ltan``, ``beta_deg`` drops the others of the base, and a case that gives
``type`` replaces the whole base table. Parts, hinges and radiation settings are shared by
every case (the geometry is one), so the view factors are computed once for all cases;
the infrared Gebhart factors once per distinct set of infrared properties; the heating
stage's escaping directions once.

:func:`case_model` gives the :class:`vfactor.model.Model` of one case, read by the same
reader as the model file (a bad value names the case and the key).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Case", "read_cases", "case_model", "CASE_KEYS"]

CASE_KEYS = ("name", "description", "environment", "orbit", "attitude", "coatings")
_ORIENTATION = ("raan_deg", "ltan", "beta_deg")


@dataclass(frozen=True)
class Case:
    """One ``[[cases]]`` table, raw.

    Attributes
    ----------
    name : str
    description : str
    environment, orbit, attitude : dict or None — keys over the model's tables
    coatings : dict — coating name -> keys over that coating
    """

    name: str
    description: str = ""
    environment: dict | None = None
    orbit: dict | None = None
    attitude: dict | None = None
    coatings: dict | None = None


def read_cases(value, reader, coating_names) -> tuple:
    """The ``[[cases]]`` array of tables (``value``; None: no cases) read with ``reader``
    (a :class:`vfactor.tomlread.Reader`)."""
    from vfactor.tomlread import Invalid, hint, show

    if value is None:
        return ()
    if not isinstance(value, list) or not all(isinstance(c, dict) for c in value):
        reader.soft_error("[[cases]]", f"must be an array of tables ([[cases]]), got "
                                       f"{show(value)}")
        return ()
    out, seen = [], set()
    for i, table in enumerate(value):
        where = f"[[cases]] #{i + 1}"
        try:
            if "name" not in table:
                reader.error(where, "needs a name")
            name = reader.name(table["name"], f"{where} name", "case name")
            where = f"[[cases]] {name}"
            if name in seen:
                reader.error(where, f"two cases are called {name!r}")
            seen.add(name)
            reader.unknown_keys(table, CASE_KEYS, where, "case")
            tables = {}
            for key in ("environment", "orbit", "attitude", "coatings"):
                if key in table and not isinstance(table[key], dict):
                    reader.error(f"{where} {key}", f"must be a table, got {show(table[key])}")
                tables[key] = dict(table[key]) if key in table else None
            for coat, keys in (tables["coatings"] or {}).items():
                if coat not in coating_names:
                    reader.error(f"{where} coatings.{coat}",
                                 f"no coating called {coat!r}{hint(coat, coating_names)}")
                if not isinstance(keys, dict):
                    reader.error(f"{where} coatings.{coat}", f"must be a table, got "
                                                             f"{show(keys)}")
            description = ""
            if "description" in table:
                description = reader.string(table["description"], f"{where} description",
                                            nonempty=False)
            out.append(Case(name=name, description=description, **tables))
        except Invalid:
            continue
    return tuple(out)


def _merged_orbit(base, over):
    if over is None:
        return base
    if base is None or "type" in over:
        return dict(over)
    merged = dict(base)
    if any(k in over for k in _ORIENTATION):
        for k in _ORIENTATION:
            merged.pop(k, None)
    merged.update(over)
    return merged


def _merged_environment(base, over):
    if over is None:
        return base
    if base is None or "case" in over:
        return dict(over)
    return {**base, **over}


def case_doc(doc: dict, case: Case) -> dict:
    """The TOML document of the model ``doc`` (as parsed) with ``case`` applied, without
    ``[[cases]]``."""
    out = {k: v for k, v in doc.items() if k != "cases"}
    for key, merge in (("orbit", _merged_orbit), ("environment", _merged_environment),
                       ("attitude", lambda b, o: b if o is None else {**(b or {}), **o})):
        table = merge(doc.get(key), getattr(case, key))
        if table is not None:
            out[key] = table
    if case.coatings:
        coatings = {name: dict(keys) for name, keys in doc.get("coatings", {}).items()}
        for name, keys in case.coatings.items():
            coatings[name] = {**coatings.get(name, {}), **keys}
        out["coatings"] = coatings
    return out


def case_model(model, case: Case):
    """The :class:`vfactor.model.Model` of ``model`` with ``case`` applied (strict: a bad
    value raises :class:`vfactor.errors.ModelError` naming ``case NAME``). Its ``name`` is
    the model's, its ``cases`` empty, ``case_name`` the case's."""
    import tomllib
    from dataclasses import replace
    from pathlib import Path

    from vfactor.model import read_document
    from vfactor.tomlread import Reader

    doc = tomllib.loads(model.source_text)
    reader = Reader(f"{model.path} (case {case.name})", None)
    built = read_document(case_doc(doc, case), model.source_text, reader, Path(model.base_dir))
    return replace(built, path=model.path, case_name=case.name)


def coatings_changed(case: Case) -> bool:
    """Whether the case changes coating values (then its geometry's optical properties
    differ from the model's)."""
    return bool(case.coatings)


def recoated(geometry, model):
    """``geometry`` with the coating values of ``model`` (same coating names, e.g. a case's
    end-of-life values): the facets and nodes are those of ``geometry``, untouched."""
    from dataclasses import replace

    import numpy as np

    coatings = tuple(model.coatings[c.name] for c in geometry.coatings)
    by_name = {c.name: c for c in coatings}
    node_coats = [by_name[name] for name in geometry.nodes.coating]
    nodes = replace(geometry.nodes, **{
        key: np.array([getattr(c, key) for c in node_coats], dtype=float)
        for key in ("solar_absorptivity", "ir_emissivity", "solar_specular", "ir_specular")})
    return replace(geometry, coatings=coatings, nodes=nodes)


def infrared_key(geometry) -> bytes:
    """What the infrared Gebhart factors depend on besides the facets: the infrared
    emissivity and specular share of every coating and node (equal keys: equal factors)."""
    import numpy as np

    parts = [np.array([(c.ir_emissivity, c.ir_specular) for c in geometry.coatings]),
             geometry.nodes.ir_emissivity, geometry.nodes.ir_specular]
    return b"".join(np.ascontiguousarray(p, dtype=np.float64).tobytes() for p in parts)
