"""The text of ``vfactor summary``: the numbers of :func:`vfactor.summary.summarize` laid
out as tables (provenance, nodes, strongest couplings with their statistical error,
couplings to space, orbit facts, hinges, per-node heat loads, warnings and cautions).

Numbers are written with four significant figures, trailing zeros kept and exact zeros
as 0 (:func:`_g`); ranges as ``low to high`` so that brackets only ever hold units.
"""

from __future__ import annotations

import textwrap

import numpy as np

from .h5io import Results
from . import summary
from .summary import _SOURCE_LABEL, _SOURCES, CAUTIONS, summarize

__all__ = ["summary_text"]


def _range(lo, hi, unit="") -> str:
    """``lo to hi unit``, or one value when both are equal."""
    unit = f" {unit}" if unit else ""
    return f"{_g(lo)}{unit}" if _g(lo) == _g(hi) else f"{_g(lo)} to {_g(hi)}{unit}"



def _table(header, rows, align=None) -> list:
    cells = [[str(h) for h in header]] + [[str(c) for c in r] for r in rows]
    widths = [max(len(r[k]) for r in cells) for k in range(len(header))]
    align = align or ["<"] + [">"] * (len(header) - 1)
    out = []
    for idx, r in enumerate(cells):
        out.append("  " + "  ".join(f"{c:{al}{w}}" for c, w, al in zip(r, widths, align)))
        if idx == 0:
            out.append("  " + "  ".join("-" * w for w in widths))
    return out


def _g(x, digits=4) -> str:
    """``digits`` significant figures, trailing zeros kept (0.1000, 28.09, 1343), exact
    zero as 0, integers beyond the digits written out, tiny and huge values in e-form."""
    if x is None:
        return "-"
    x = float(x)
    if x == 0:
        return "0"
    if not np.isfinite(x):
        return str(x)
    a = abs(x)
    if 1e-3 <= a < 10.0 ** digits:
        text = f"{x:#.{digits}g}"
        return text[:-1] if text.endswith(".") else text
    if 10.0 ** digits <= a < 1e9:
        return f"{x:.0f}"
    return f"{x:.{digits - 1}e}"


def _hms(seconds) -> str:
    if seconds is None:
        return "-"
    s = float(seconds)
    if s < 60:
        return f"{s:.1f} s"
    m, s = divmod(s, 60)
    if m < 60:
        return f"{int(m)} min {s:04.1f} s"
    h, m = divmod(m, 60)
    return f"{int(h)} h {int(m):02d} min"


def _load_cells(r) -> list:
    return [f"{_g(r[src]['average_W'])} ({_g(r[src]['min_W'])} to {_g(r[src]['max_W'])})"
            for src in _SOURCES + ("total",)]


def summary_text(results: Results, top: int = 15, all_nodes: bool = False,
                 extra: str = "") -> str:
    """The summary as text (what ``vfactor summary`` prints); above
    :data:`vfactor.summary.NODE_LIST_LIMIT` nodes the per-node tables are summed by part unless
    ``all_nodes``."""
    s = summarize(results, top=top)
    by_part = len(s["nodes"]) > summary.NODE_LIST_LIMIT and not all_nodes
    p = s["provenance"]
    lines = [f"vfactor results: {p['file']}", ""]
    lines.append("Run")
    el = p["elapsed_s"] or {}
    run_rows = [
        ("model", p["model_name"]),
        ("model sha256", p["model_sha256"]),
        ("vfactor version", p["vfactor_version"]),
        ("created (UTC)", p["created_utc"]),
        ("seed", p["seed"]),
        ("rays per node", f"{p['rays_per_node']:,}"),
        ("nodes / facets", f"{p['nodes']} / {p['facets']}"),
    ]
    if p.get("workers"):
        run_rows.append(("workers", p["workers"]))
    for stage, sec in el.items():
        run_rows.append((f"time: {stage.replace('_', ' ')}", _hms(sec)))
    width = max(22, max(len(k) for k, _ in run_rows) + 2)
    lines += [f"  {k:<{width}}{v}" for k, v in run_rows]

    if by_part:
        limit = summary.NODE_LIST_LIMIT
        lines += ["", f"Nodes by part ({len(s['nodes'])} nodes, more than {limit}: "
                      "summed by part; --all-nodes lists every node, --json gives them all)"]
        lines += _table(["part", "nodes", "facets", "area [m2]", "coatings"],
                        [(r["part"], r["nodes"], r["facets"], _g(r["area_m2"]),
                          ", ".join(r["coatings"])) for r in s["parts"]],
                        ["<", ">", ">", ">", "<"])
    else:
        lines += ["", "Nodes"]
        lines += _table(["node", "coating", "area [m2]", "alpha", "eps", "facets"],
                        [(r["name"], r["coating"], _g(r["area_m2"]),
                          f"{r['solar_absorptivity']:.3f}", f"{r['ir_emissivity']:.3f}",
                          r["facets"]) for r in s["nodes"]],
                        ["<", "<", ">", ">", ">", ">"])

    if s["couplings"] is not None:
        c = s["couplings"]
        lines += ["", f"Strongest couplings ({c['shown']} of {c['pairs_total']} node pairs, "
                      "infrared band; +- is one sigma)"]
        rows = []
        for r in c["strongest"]:
            rows.append((f"{r['from']} -> {r['to']}",
                         f"{r['view_factor']:.4f} +- {r['view_factor_stderr']:.1e}",
                         _g(r.get("gebhart")),
                         _g(r.get("exchange_area_m2")) + (
                             f" +- {r['exchange_area_stderr_m2']:.1e}"
                             if r.get("exchange_area_stderr_m2") is not None else ""),
                         _g(r.get("conductance_W_K4"))))
        lines += _table(["pair", "view factor", "Gebhart", "exch. area [m2]",
                         "conductance [W K-4]"], rows)
        if by_part:
            lines += ["", "Couplings to deep space by part (view factor: area-weighted "
                          "mean (min to max) over the part's nodes)"]
            lines += _table(["part", "view factor to space", "conductance [W K-4]"],
                            [(r["part"], f"{r['space_view_factor']['area_weighted']:.4f} "
                                         f"({r['space_view_factor']['min']:.4f} to "
                                         f"{r['space_view_factor']['max']:.4f})",
                              _g(r.get("conductance_space_W_K4")))
                             for r in s["parts"] if "space_view_factor" in r])
        else:
            lines += ["", "Couplings to deep space (and of each node to itself)"]
            lines += _table(["node", "view factor", "to itself", "to inert", "Gebhart",
                             "exch. area [m2]", "conductance [W K-4]", "rays"],
                            [(r["node"],
                              f"{r['view_factor']:.4f} +- {r['view_factor_stderr']:.1e}",
                              f"{r['self_view_factor']:.4f}", f"{r['inert']:.4f}",
                              _g(r.get("gebhart")),
                              _g(r.get("exchange_area_m2")), _g(r.get("conductance_W_K4")),
                              f"{r['rays']:,}") for r in s["space"]])
        acc = s["accuracy"]
        lines += ["", "Accuracy"]
        lines.append(f"  largest one-sigma error of any view factor: {acc['largest_stderr']:.2e}")
        smoothed = not acc["smoothing_method"].startswith("none")
        rows = [("raw view factors" if smoothed else "view factors",
                 acc["largest_relative_stderr_significant"])]
        if smoothed and acc.get("largest_delivered_relative_stderr_significant") is not None:
            rows.append(("delivered (smoothed) view factors",
                         acc["largest_delivered_relative_stderr_significant"]))
        for label, rel in rows:
            lines.append(f"  largest relative one-sigma error of {label} >= "
                         f"{acc['significant_threshold']}: " +
                         (f"{100 * rel:.2f} %" if np.isfinite(rel) else
                          "none reaches that level (small nodes: judge the absolute error "
                          "above)"))
        lines += textwrap.wrap(f"reciprocity/closure smoothing: {acc['smoothing_method']}; "
                               f"largest adjustment {acc['largest_adjustment_sigma']:.2f} sigma",
                               width=92, initial_indent="  ", subsequent_indent="    ")
        if acc["target_error"] is not None:
            lines.append(f"  target error {acc['target_error']:g}: "
                         f"{'reached' if acc['converged'] else 'NOT reached (ray budget spent)'}")
        if acc["exchange_method"]:
            lines.append(f"  Gebhart factors by: {acc['exchange_method']}")
        if acc["exchange_method"] == "matrix":
            lines.append(f"  Gebhart entries below {acc['gebhart_drop_tolerance']:g} of a node's "
                         f"emission left out: largest share dropped "
                         f"{100 * acc['largest_gebhart_dropped']:.2g} % of a node's emission")

    o = s["orbit"]
    if o is not None:
        lines += ["", "Orbit"]
        rows = [("epoch (UTC)", o["epoch_utc"]),
                ("period", f"{o['period_s'] / 60:.2f} min"),
                ("steps", f"{o['steps']} of {o['step_s']:.1f} s, "
                          f"{o['span_s'] / o['period_s']:.2f} orbits"),
                ("beta angle", f"{o['beta_min_deg']:.2f} to {o['beta_max_deg']:.2f} deg")]
        rows.append(("altitude", f"{o['altitude_min_km']:.1f} to {o['altitude_max_km']:.1f} km"))
        rows += [("in shadow (any)", f"{100 * o['eclipse_share']:.1f} % of the time "
                                     f"({o['eclipses']} passage(s), {o['shadow_model']} shadow)"),
                 ("in umbra", f"{100 * o['umbra_share']:.1f} % of the time"),
                 ("longest shadow", f"{o['longest_eclipse_s'] / 60:.1f} min, penumbra "
                                    f"{o['penumbra_s']:.1f} s per passage")]
        lines += [f"  {k:<22}{v}" for k, v in rows]

    if s["hinges"]:
        lines += ["", "Hinges (angle along the orbit; couplings above are of the model as built,"
                      " every hinge at 0)"]
        lines += _table(["hinge", "law", "rides on", "angle [deg]"],
                        [(r["name"], r["law"], r["parent"] or "-",
                          f"{r['min_deg']:.1f} to {r['max_deg']:.1f}") for r in s["hinges"]])
        if s["positions"]:
            lines.append(f"  couplings also at {s['positions']} hinge positions: /positions, "
                         "export couplings_position_K.csv")

    h = s["heat_loads"]
    if h is not None:
        design = f"design case {results.case}; " if results.case else ""
        lines += ["", f"Absorbed heat loads per node [W] ({design}environment {h['case']}: "
                      f"solar {_range(*h['solar_constant_W_m2'], 'W m-2')}, albedo "
                      f"{h['albedo']:g}, planet IR {h['planet_ir_W_m2']:g} W m-2)"]
        labels = [f"{_SOURCE_LABEL[src]}: avg (min to max)" for src in _SOURCES + ("total",)]
        if by_part:
            lines += ["  summed over the nodes of each part (min and max of the part's sum)"]
            lines += _table(["part"] + labels, [[r["part"]] + _load_cells(r["heat_loads"])
                                                for r in s["parts"]])
            lines += ["", f"  the {len(h['largest'])} nodes of largest orbit-average load"]
            lines += _table(["node"] + labels, [[r["node"]] + _load_cells(r)
                                                for r in h["largest"]])
        else:
            lines += _table(["node"] + labels, [[r["node"]] + _load_cells(r)
                                                for r in h["nodes"]])
        lines.append("  avg = time average over the steps; reflections inside the vehicle included")
        w = h.get("largest_stderr")
        if w is not None:
            lines.append(f"  largest one-sigma Monte Carlo error of a load (its rays, and the "
                         f"couplings' error in reflected power to first order): "
                         f"{_g(w['stderr_W'])} W ({w['node']}, {_SOURCE_LABEL[w['source']]}, "
                         f"step {w['step']})")
        rays = h.get("planet_rays") or {}
        suggested = rays.get("suggested_factor") or {}
        if suggested:
            table = ", ".join(f"\"{name}\" = {k}" for name, k in suggested.items())
            lines.append(f"  to lower the largest planet-load errors for twice the planet rays "
                         f"in all: [radiation] planet_ray_factor = {{ {table} }} (error about "
                         f"1/sqrt(factor); rerun with another --seed)")
        more = rays.get("more") or []
        if more:
            shown = ", ".join(f"{r['node']} {r['rays_per_side']}" for r in more[:6])
            lines.append(f"  more planet rays: {len(more)} node(s) had more than the "
                         f"{h['planet_rays']['per_side']} per facet side ({shown}"
                         f"{', ...' if len(more) > 6 else ''})")

    temps = results.temperatures
    if temps is not None and not by_part:
        lines += [""] + textwrap.wrap(
            "Quick-look temperatures [K] (vfactor solve: steady under the orbit-average "
            "loads +- one sigma; orbit min to max of the cyclic transient; a check of the "
            "inputs, not a verified thermal model)", width=92, subsequent_indent="  ")
        T, err, tr = temps["steady"], temps["steady_stderr"], temps["transient"]
        lines += _table(["node", "steady", "orbit"],
                        [(name, f"{T[i]:.2f} +- {err[i]:.2f}",
                          f"{tr[:, i].min():.2f} to {tr[:, i].max():.2f}")
                         for i, name in enumerate(results.geometry.nodes.names)])
    if extra:
        lines += [""] + extra.rstrip("\n").split("\n")
    if s["warnings"]:
        lines += ["", "Warnings"]
        for w in s["warnings"]:
            lines += textwrap.wrap(w, width=92, initial_indent="  - ",
                                   subsequent_indent="    ")
    lines += ["", "Cautions"]
    for c in CAUTIONS:
        lines += textwrap.wrap(c, width=92, initial_indent="  - ", subsequent_indent="    ")
    return "\n".join(lines) + "\n"
