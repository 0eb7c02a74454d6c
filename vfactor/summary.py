"""``vfactor summary``: the results of a run as tables a thermal engineer reads.

:func:`summarize` turns a :class:`vfactor.h5io.Results` into a plain dictionary (the
``--json`` output); :func:`format_summary` lays the same numbers out as text: provenance,
node table, strongest couplings with their statistical error, couplings to space, orbit
facts, per-node heat loads, and the cautions that go with any such analysis. Above
:data:`NODE_LIST_LIMIT` nodes the text gives the per-node tables summed by part, with the
nodes of largest load listed (``all_nodes=True`` lists every node; the JSON always does).
"""

from __future__ import annotations

import json
from types import SimpleNamespace

import numpy as np
import scipy.sparse as sp

from .constants import STEFAN_BOLTZMANN
from .sparsetools import as_csr, values_at
from .h5io import Results

__all__ = ["CAUTIONS", "SIGNIFICANT_VIEW_FACTOR", "NODE_LIST_LIMIT", "summarize",
           "format_summary", "to_json"]

SIGNIFICANT_VIEW_FACTOR = 0.01
"""View factors at or above this value count as significant when the summary reports the
largest relative statistical error (a reporting threshold of our own)."""

CAUTIONS = (
    "Monte Carlo results carry statistical error; the one-sigma errors reported here are "
    "estimates from the ray counts at the given seed. Check that they are small enough for "
    "your use, or ask for more rays (--rays, [radiation] target_error).",
    "The orbital environment is simplified: uniform planet infrared, a Lambertian planet of "
    "uniform albedo, design-case constants. Real environments vary along the orbit.",
    "Geometry is the triangulated model as given; check it with `vfactor check` and by eye.",
    "Diffuse reflections treat each node as uniformly irradiated; split nodes that are partly "
    "shadowed or covered (see the README, Accuracy).",
    "These results feed design decisions for flight hardware: correlate the thermal model "
    "with test, and have the analysis reviewed under the applicable project standards and "
    "licensed engineering practice.",
)

INERT_WARNING_SHARE = 0.01
"""Share of a node's emission lost on inert sides above which the summary warns [1]: that
heat leaves the network unaccounted (a guard of our own; see ``vfactor check``)."""
RELATIVE_ERROR_WARNING = 0.05
"""Largest one-sigma relative error of a significant view factor above which the summary
warns that the ray count is too low [1] (a reporting threshold of our own)."""


#: Share of a node's emission in left-out Gebhart entries above which summary warns.
DROPPED_WARNING_SHARE = 1e-3

#: Above this many nodes the text summary sums its per-node tables by part.
NODE_LIST_LIMIT = 200


def _warnings(names, inert, relative_error, dropped=None) -> list:
    """Findings in the numbers of a results file that are probably a modelling slip."""
    out = []
    if dropped is not None and len(dropped) and float(np.max(dropped)) > DROPPED_WARNING_SHARE:
        i = int(np.argmax(dropped))
        out.append(f"node {names[i]!r}: {100 * float(dropped[i]):.2f} % of its emission is in "
                   f"Gebhart factors below the drop tolerance and left out of the "
                   f"couplings; lower [radiation] gebhart_drop_tolerance")
    for name, share in zip(names, inert):
        if share > INERT_WARNING_SHARE:
            out.append(f"node {name!r} sends {100 * share:.1f} % of its emission to inert "
                       f"sides, where it leaves the network unaccounted; give those sides "
                       f"a coating and a node (a back = {{ ... }} table)")
    if relative_error > RELATIVE_ERROR_WARNING:
        out.append(f"the largest relative error of a significant view factor is "
                   f"{100 * relative_error:.1f} % (one sigma); run with more rays "
                   f"(--rays, or [radiation] target_error)")
    return out


REFLECTED_WARNING_SHARE = 0.10
"""Share of a node's absorbed source that arrives after reflections inside the vehicle above
which the summary says that the loads' errors leave the couplings' error out, when the couplings
are uncertain (:data:`RELATIVE_ERROR_WARNING`) [1] (a threshold of our own)."""


def _reflection_warnings(heat, nodes, relative_error) -> list:
    """The diffuse couplings that redistribute reflected power are the same in every heating
    replicate; their error enters the loads' one-sigma errors to first order only
    (:mod:`vfactor.reflecterror`), which is rough where they are uncertain (see ``vfactor
    check``). Warn where reflected power is a large share of what is absorbed and the
    couplings are uncertain."""
    if not relative_error > RELATIVE_ERROR_WARNING:
        return []
    out = []
    for src, prop in (("solar", nodes.solar_absorptivity), ("albedo", nodes.solar_absorptivity),
                      ("planet_ir", nodes.ir_emissivity)):
        absorbed = np.sum(getattr(heat, f"node_{src}"), axis=0)
        direct = np.sum(getattr(heat, f"incident_{src}") * np.asarray(prop)[None, :], axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            share = np.where(absorbed > 0.0, (absorbed - direct) / absorbed, 0.0)
        many = np.flatnonzero(share > REFLECTED_WARNING_SHARE)
        if many.size:
            i = int(many[np.argmax(share[many])])
            out.append(f"{many.size} node(s) take more than "
                       f"{100 * REFLECTED_WARNING_SHARE:.0f} % of their absorbed "
                       f"{src.replace('_', ' ')} after reflections inside the vehicle "
                       f"({nodes.names[i]!r}: {100 * share[i]:.0f} %), redistributed by "
                       f"couplings with up to {100 * relative_error:.1f} % error: their loads' "
                       f"+- carries that error to first order only; run with more rays "
                       f"(--rays, or [radiation] target_error) or compare two seeds (--seed)")
    return out


def _check_warnings(attrs) -> list:
    """The warnings the model's checks gave before the run (root attribute
    ``check_warnings``, a JSON list of ``WHERE: WHAT`` lines)."""
    raw = attrs.get("check_warnings")
    if raw is None:
        return []
    try:
        lines = json.loads(raw if isinstance(raw, str) else bytes(raw).decode())
    except (ValueError, TypeError, UnicodeDecodeError):
        return []
    if not isinstance(lines, list):
        return []
    return [f"check: {x}" for x in lines]


_SOURCES = ("solar", "albedo", "planet_ir")
_SOURCE_LABEL = {"solar": "solar", "albedo": "albedo", "planet_ir": "planet IR",
                 "total": "total"}


# ---------------------------------------------------------------------------------------
# Numbers
# ---------------------------------------------------------------------------------------
def _epoch_text(epoch) -> str:
    """ISO 8601 UTC without a fraction of a second when it is zero."""
    text = str(epoch)
    head, dot, tail = text.partition(".")
    if dot and tail.rstrip("Z").strip("0") == "":
        return head + ("Z" if text.endswith("Z") else "")
    return text


def _orbit_facts(results: Results) -> dict | None:
    """Orbit facts of :func:`vfactor.trajectory.orbit_facts` plus the sampling used."""
    tr = results.trajectory
    if tr is None:
        return None
    from .trajectory import orbit_facts

    f = orbit_facts(tr)
    t = np.asarray(tr.time, dtype=float)
    return {
        "epoch_utc": _epoch_text(tr.epoch_utc),
        "period_s": float(f.period_s),
        "steps": int(t.size),
        "step_s": float(t[1] - t[0]) if t.size > 1 else 0.0,
        "span_s": float(f.span_s),
        "beta_min_deg": float(f.beta_min_deg),
        "beta_max_deg": float(f.beta_max_deg),
        "altitude_min_km": float(f.altitude_min_km),
        "altitude_max_km": float(f.altitude_max_km),
        "eclipse_share": float(f.eclipse_share),
        "umbra_share": float(f.umbra_share),
        "longest_eclipse_s": float(f.longest_eclipse_s),
        "penumbra_s": float(f.penumbra_s),
        "eclipses": len(f.eclipses),
        "shadow_model": str(f.shadow_model),
    }


def summarize(results: Results, top: int = 15) -> dict:
    """All summary numbers as a JSON-ready dictionary.

    Parameters
    ----------
    results : vfactor.h5io.Results
    top : int
        Number of strongest node-pair couplings to list.

    Returns
    -------
    dict
        Keys ``provenance``, ``nodes``, ``couplings``, ``space``, ``accuracy``, ``orbit``,
        ``heat_loads`` (``None`` where the run has no such stage) and ``cautions``.
        Units are in the key names (``_m2``, ``_W``, ``_W_K4``, ``_s``, ``_deg``).
    """
    g = results.geometry
    nodes = g.nodes
    n = len(nodes)
    a = results.attrs
    prov = {
        "file": str(results.path),
        "vfactor_version": a.get("vfactor_version"),
        "created_utc": a.get("created_utc"),
        "model_name": results.model_name,
        "model_sha256": a.get("model_sha256"),
        "seed": results.seed,
        "rays_per_node": results.rays_per_node,
        "workers": a.get("workers"),
        "elapsed_s": results.elapsed_s,
        "facets": g.n_facets,
        "nodes": n,
    }
    node_rows = []
    for i in range(n):
        node_rows.append({
            "name": nodes.names[i], "coating": nodes.coating[i],
            "area_m2": float(nodes.area[i]),
            "solar_absorptivity": float(nodes.solar_absorptivity[i]),
            "ir_emissivity": float(nodes.ir_emissivity[i]),
            "facets": int(nodes.facet_count[i]),
        })

    vf, ex = results.view_factors, results.exchange
    couplings = space = accuracy = None
    if vf is not None:
        eps_area = nodes.ir_emissivity * nodes.area
        # pair keys over the stored upper-triangle entries: cost grows with the non-zeros
        F = as_csr(vf.matrix)
        # the errors of the values shown: the delivered (smoothed) ones where recorded
        delivered = vf.smoothed_stderr is not None
        E = as_csr(vf.smoothed_stderr if delivered else vf.stderr)
        E_space = np.asarray(vf.smoothed_stderr_space if delivered else vf.stderr_space)
        X = None if ex is None else as_csr(ex.area)
        both = F + F.T if X is None else F + F.T + X + X.T     # every stored pair
        upper = sp.triu(both, k=1).tocoo()
        iu = upper.row.astype(np.int64)
        ju = upper.col.astype(np.int64)
        f_ij = values_at(F, iu, ju)
        key = values_at(X, iu, ju) if X is not None else f_ij * eps_area[iu]
        keep = ~((key <= 0) & (f_ij <= 0))
        iu, ju, key = iu[keep], ju[keep], key[keep]
        shown = min(top, len(key))
        if shown < len(key):
            best = np.argpartition(-key, shown - 1)[:shown] if shown else np.zeros(0, int)
        else:
            best = np.arange(len(key))
        # strongest first, ties by (row, column) position
        best = best[np.lexsort((ju[best], iu[best], -key[best]))]
        bi, bj = iu[best], ju[best]
        got = {name: values_at(m, bi, bj) for name, m in
               (("f", F), ("e", E), ("a", X), ("b", None if ex is None else ex.gebhart),
                ("be", None if ex is None or ex.stderr is None else ex.stderr))
               if m is not None}
        f_back = values_at(F, bj, bi)
        pairs = []
        for k in range(best.size):
            i, j = int(bi[k]), int(bj[k])
            area_ij = float(got["a"][k]) if ex is not None else None
            row = {"from": nodes.names[i], "to": nodes.names[j],
                   "view_factor": float(got["f"][k]),
                   "view_factor_stderr": float(got["e"][k]),
                   "view_factor_back": float(f_back[k])}
            if ex is not None:
                row["gebhart"] = float(got["b"][k])
                row["exchange_area_m2"] = area_ij
                row["conductance_W_K4"] = STEFAN_BOLTZMANN * area_ij
                if ex.stderr is not None:
                    err = float(eps_area[i] * got["be"][k])
                    row["error_basis"] = "gebhart"
                elif got["f"][k] > 0:
                    err = area_ij * float(got["e"][k] / got["f"][k])
                    row["error_basis"] = "view factor (relative error carried over)"
                else:
                    err = None
                    row["error_basis"] = None
                row["exchange_area_stderr_m2"] = err
            pairs.append(row)
        couplings = {"pairs_total": int(len(key)), "shown": shown, "strongest": pairs}
        space = []
        self_view = F.diagonal()
        dropped = (np.zeros(n) if ex is None or ex.dropped is None
                   else np.asarray(ex.dropped, dtype=np.float64))
        for i in range(n):
            row = {"node": nodes.names[i], "view_factor": float(vf.space[i]),
                   "view_factor_stderr": float(E_space[i]),
                   "self_view_factor": float(self_view[i]),
                   "inert": float(vf.inert[i]), "rays": int(vf.rays[i])}
            if ex is not None:
                row["gebhart"] = float(ex.gebhart_space[i])
                row["exchange_area_m2"] = float(ex.area_space[i])
                row["conductance_W_K4"] = float(STEFAN_BOLTZMANN * ex.area_space[i])
                row["gebhart_dropped"] = float(dropped[i])
            space.append(row)
        accuracy = {
            "largest_stderr": float(E.data.max()) if E.nnz else 0.0,
            "significant_threshold": SIGNIFICANT_VIEW_FACTOR,
            "largest_relative_stderr_significant":
                vf.largest_relative_error(SIGNIFICANT_VIEW_FACTOR),
            "largest_delivered_relative_stderr_significant":
                vf.largest_delivered_relative_error(SIGNIFICANT_VIEW_FACTOR),
            "gebhart_drop_tolerance": None if ex is None else ex.drop_tolerance,
            "largest_gebhart_dropped": float(dropped.max()) if n else 0.0,
            "smoothing_method": vf.method,
            "largest_adjustment_sigma": float(vf.adjustment_sigma),
            "target_error": vf.target_error,
            "converged": bool(vf.converged),
            "exchange_method": None if ex is None else ex.method,
        }

    warnings = _check_warnings(a)
    if vf is not None:
        warnings += _warnings(nodes.names, vf.inert,
                              accuracy["largest_relative_stderr_significant"],
                              None if ex is None else ex.dropped)

    heat = results.heating
    loads = None
    if heat is not None:
        from .heating import heating_extremes

        ext = heating_extremes(heat, results.trajectory.time)
        rows = []
        for i in range(n):
            row = {"node": nodes.names[i]}
            for src in _SOURCES + ("total",):
                k = ext.row(src)
                row[src] = {"average_W": float(ext.average[k, i]),
                            "min_W": float(ext.minimum[k, i]),
                            "max_W": float(ext.maximum[k, i])}
            rows.append(row)
        worst = None
        for src in _SOURCES:
            err = getattr(heat, f"node_{src}_stderr", None)
            if err is not None and np.size(err):
                k, i = np.unravel_index(int(np.argmax(err)), np.shape(err))
                if worst is None or err[k, i] > worst["stderr_W"]:
                    worst = {"stderr_W": float(err[k, i]), "node": nodes.names[i],
                             "source": src, "step": int(k)}
        loads = {"largest_stderr": worst, "case": heat.case, "albedo": float(heat.albedo),
                 "planet_ir_W_m2": float(heat.planet_ir),
                 "solar_constant_W_m2": [float(heat.solar_constant.min()),
                                         float(heat.solar_constant.max())],
                 "nodes": rows, "planet_rays": _planet_rays(heat, results.geometry, vf)}

        loads["largest"] = _largest_loads(heat, results.trajectory.time, nodes.names, top)
        if vf is not None:
            rel = accuracy["largest_delivered_relative_stderr_significant"]
            warnings += _reflection_warnings(heat, nodes, rel if np.isfinite(rel) else
                                             accuracy["largest_relative_stderr_significant"])
    hinges = None
    if results.hinges is not None:
        angle = np.asarray(results.hinges["angle_deg"], dtype=np.float64)
        hinges = [{"name": name, "law": law, "parent": parent or None,
                   "min_deg": float(angle[:, i].min()), "max_deg": float(angle[:, i].max())}
                  for i, (name, law, parent) in enumerate(zip(
                      results.hinges["name"], results.hinges["law"], results.hinges["parent"]))]
    return {"provenance": prov, "nodes": node_rows, "parts": _part_rows(results),
            "hinges": hinges,
            "positions": None if results.positions is None else
            len(results.positions["exchange"]),
            "couplings": couplings, "space": space,
            "accuracy": accuracy, "orbit": _orbit_facts(results), "heat_loads": loads,
            "warnings": warnings, "cautions": list(CAUTIONS)}


def _part_rows(results: Results) -> list:
    """Per part: its nodes, facets, area, coatings, coupling to space and summed loads."""
    from .heating import heating_extremes

    g = results.geometry
    n, k = g.n_nodes, len(g.part_names)
    part = g.node_parts()
    held = part >= 0
    P = sp.csr_array((np.ones(int(held.sum())), (np.flatnonzero(held), part[held])),
                     shape=(n, k))
    area = np.asarray(g.nodes.area, dtype=np.float64)
    vf, ex, heat = results.view_factors, results.exchange, results.heating
    ext = None
    if heat is not None:
        summed = SimpleNamespace(**{
            f"node_{src}": np.asarray(getattr(heat, f"node_{src}"), np.float64) @ P
            for src in _SOURCES})                          # (t, parts): the part's power
        ext = heating_extremes(summed, results.trajectory.time)
    rows = []
    for p in range(k):
        mine = np.flatnonzero(part == p)
        row = {"part": g.part_names[p], "nodes": int(mine.size),
               "facets": int(np.asarray(g.nodes.facet_count)[mine].sum()),
               "area_m2": float(area[mine].sum()),
               "coatings": sorted({g.nodes.coating[i] for i in mine.tolist()})}
        if vf is not None and mine.size:
            to_space = np.asarray(vf.space, dtype=np.float64)[mine]
            row["space_view_factor"] = {
                "area_weighted": float(np.dot(area[mine], to_space) / area[mine].sum()),
                "min": float(to_space.min()), "max": float(to_space.max())}
        if ex is not None and mine.size:
            row["conductance_space_W_K4"] = float(
                STEFAN_BOLTZMANN * np.asarray(ex.area_space, np.float64)[mine].sum())
        if ext is not None:
            row["heat_loads"] = {src: {"average_W": float(ext.average[ext.row(src), p]),
                                       "min_W": float(ext.minimum[ext.row(src), p]),
                                       "max_W": float(ext.maximum[ext.row(src), p])}
                                 for src in _SOURCES + ("total",)}
        rows.append(row)
    return rows


def _planet_rays(heat, geometry, vf) -> dict:
    """Planet rays per facet side, the nodes that had more (``planet_ray_factor``, most
    first), and the factors :func:`vfactor.planetrays.suggested_factors` would give from
    this run's errors (nodes with a factor above 1)."""
    from .planetrays import sides_per_node, suggested_factors

    names = geometry.nodes.names
    base = int(getattr(heat, "rays_per_facet", 0))
    per_node = getattr(heat, "node_planet_rays", None)
    more = []
    if per_node is not None and base > 0:
        rays = np.asarray(per_node, dtype=np.int64)
        order = np.lexsort((np.arange(rays.size), -rays))
        more = [{"node": names[i], "rays_per_side": int(rays[i])}
                for i in order.tolist() if rays[i] > base]
    suggested = {}
    # the part of the error the planet rays carry, where the file has it
    albedo, planet_ir = (getattr(heat, f"node_{src}_ray_stderr", None)
                         if getattr(heat, f"node_{src}_ray_stderr", None) is not None
                         else getattr(heat, f"node_{src}_stderr") for src in ("albedo", "planet_ir"))
    if albedo is not None and planet_ir is not None and np.size(albedo):
        error = np.maximum(albedo, planet_ir).max(axis=0)
        old = (np.asarray(per_node, dtype=np.int64) // max(base, 1) if per_node is not None
               else np.ones(len(names), dtype=np.int64))
        factors = suggested_factors(error, sides_per_node(geometry),
                                    None if vf is None else vf.matrix, current=old)
        suggested = {names[i]: int(factors[i]) for i in np.flatnonzero(factors > 1).tolist()}
    return {"per_side": base, "more": more, "suggested_factor": suggested}


def _largest_loads(heat, time, names, top) -> list:
    """The ``top`` nodes of largest orbit-average absorbed power (ties by node order)."""
    from .heating import heating_extremes

    ext = heating_extremes(heat, time)
    total = ext.average[ext.row("total")]
    order = np.lexsort((np.arange(total.size), -total))[:top]
    return [{"node": names[i], **{src: {"average_W": float(ext.average[ext.row(src), i]),
                                        "min_W": float(ext.minimum[ext.row(src), i]),
                                        "max_W": float(ext.maximum[ext.row(src), i])}
                                  for src in _SOURCES + ("total",)}}
            for i in order.tolist()]


def _finite(value):
    """``value`` with every non-finite float replaced by None (JSON has no NaN)."""
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite(v) for v in value]
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def to_json(summary: dict) -> str:
    """The summary as indented JSON text (non-finite numbers become ``null``)."""
    return json.dumps(_finite(summary), indent=2, allow_nan=False)


# ---------------------------------------------------------------------------------------
# Text
# ---------------------------------------------------------------------------------------
def format_summary(results: Results, top: int = 15, all_nodes: bool = False,
                   extra: str = "") -> str:
    """The summary as text (what ``vfactor summary`` prints; :mod:`vfactor.summarytext`);
    ``extra``: a section placed before the warnings and cautions."""
    from .summarytext import summary_text

    return summary_text(results, top=top, all_nodes=all_nodes, extra=extra)
