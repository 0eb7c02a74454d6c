"""Design cases side by side: the comparison that ``vfactor summary`` and ``vfactor plot``
show for a results file with ``[[cases]]``.

Per case: its description, environment constants, beta-angle range and shadow share; per
node (or per part, above :data:`vfactor.summary.NODE_LIST_LIMIT` nodes) the orbit
average, minimum and maximum of the total absorbed power in every case, and which case is
the hottest and which the coldest for that node (largest and smallest orbit average).
"""

from __future__ import annotations

import numpy as np

from .h5io import node_averages
from .h5read import read_results

__all__ = ["compare_cases", "format_comparison", "read_cases", "comparison_text",
           "case_summaries", "summary_of_file"]


def read_cases(path) -> list:
    """Every case of a results file, as :class:`vfactor.h5read.Results` (one per case, in
    the model file's order; a file without cases gives its one Results)."""
    first = read_results(path)
    if not first.case_names:
        return [first]
    return [first] + [read_results(path, case=name) for name in first.case_names[1:]]


def _totals(results) -> np.ndarray | None:
    heat = results.heating
    if heat is None:
        return None
    return heat.node_solar + heat.node_albedo + heat.node_planet_ir


def compare_cases(cases: list, by_part: bool = False) -> dict:
    """The comparison of the cases ``cases`` (Results of one file, :func:`read_cases`).

    Returns a dict: ``cases`` (per case: name, description, environment, solar constant
    range, beta range [deg], shadow share), ``rows`` (per node, or per part with
    ``by_part``: name and per case ``avg``, ``min``, ``max`` of the total absorbed power
    [W], ``hottest`` and ``coldest`` case), ``vehicle`` (the same for the whole vehicle).
    """
    geometry = cases[0].geometry
    if by_part:
        part = np.asarray(geometry.node_parts(), dtype=np.int64)
        labels = list(geometry.part_names) + (["(several parts)"] if (part < 0).any() else [])
        index = np.where(part < 0, len(geometry.part_names), part)
    else:
        index, labels = np.arange(geometry.n_nodes), list(geometry.nodes.names)
    head, per_case = [], []
    for r in cases:
        total = _totals(r)
        entry = {"name": r.case or "(model)", "description": "", "has_loads": total is not None,
                 "temperatures": None}
        if r.temperatures is not None:
            t = r.temperatures
            entry["temperatures"] = {
                "steady_K": [float(x) for x in t["steady"]],
                "steady_stderr_K": [float(x) for x in t["steady_stderr"]],
                "orbit_min_K": [float(x) for x in np.min(t["transient"], axis=0)],
                "orbit_max_K": [float(x) for x in np.max(t["transient"], axis=0)]}
        if r.case:
            import h5py

            with h5py.File(r.path, "r") as h:
                entry["description"] = str(h["cases"][r.case].attrs.get("description", ""))
        if total is not None:
            tr, heat = r.trajectory, r.heating
            entry.update(environment=heat.case, albedo=float(heat.albedo),
                         planet_ir=float(heat.planet_ir),
                         solar_constant=(float(np.min(heat.solar_constant)),
                                         float(np.max(heat.solar_constant))),
                         beta_deg=(float(np.degrees(np.min(tr.beta))),
                                   float(np.degrees(np.max(tr.beta)))),
                         shadow_share=float(np.mean(np.asarray(tr.sun_fraction) < 1.0)))
            grouped = np.zeros((total.shape[0], len(labels)))
            np.add.at(grouped, (slice(None), index), total)
            per_case.append((node_averages(grouped, tr.time), grouped.min(axis=0),
                             grouped.max(axis=0), node_averages(total.sum(axis=1,
                                                                          keepdims=True),
                                                               tr.time)[0],
                             float(total.sum(axis=1).min()), float(total.sum(axis=1).max())))
        else:
            per_case.append(None)
        head.append(entry)
    loaded = [c for c, p in zip(head, per_case) if p is not None]
    rows = []
    for j, label in enumerate(labels):
        row = {"name": label, "cases": {}}
        for c, p in zip(head, per_case):
            if p is not None:
                row["cases"][c["name"]] = {"avg": float(p[0][j]), "min": float(p[1][j]),
                                           "max": float(p[2][j])}
        if loaded:
            avgs = [row["cases"][c["name"]]["avg"] for c in loaded]
            row["hottest"] = loaded[int(np.argmax(avgs))]["name"]
            row["coldest"] = loaded[int(np.argmin(avgs))]["name"]
        rows.append(row)
    vehicle = {"name": "whole vehicle", "cases": {
        c["name"]: {"avg": float(p[3]), "min": p[4], "max": p[5]}
        for c, p in zip(head, per_case) if p is not None}}
    return {"cases": head, "rows": rows, "vehicle": vehicle, "by_part": by_part}


def _g(x) -> str:
    from .summarytext import _g as fmt

    return fmt(x)


def format_comparison(cmp: dict) -> str:
    """The comparison as text (a section of ``vfactor summary``)."""
    from .summarytext import _table

    loaded = [c for c in cmp["cases"] if c["has_loads"]]
    import textwrap

    from .summarytext import _range

    lines = ["Design cases"]
    for c in cmp["cases"]:
        text = c["description"]
        if c["has_loads"]:
            text += (f"; environment {c['environment']}: solar "
                     f"{_range(*c['solar_constant'], 'W m-2')}, albedo {c['albedo']:g}, "
                     f"planet IR {c['planet_ir']:g} W m-2; beta "
                     f"{c['beta_deg'][0]:.1f} to {c['beta_deg'][1]:.1f} deg; in shadow "
                     f"{100 * c['shadow_share']:.1f} % of the steps")
        lines += textwrap.wrap(text.lstrip("; "), width=92,
                               initial_indent=f"  {c['name']:<12}",
                               subsequent_indent=" " * 14)
    if not loaded:
        return "\n".join(lines) + "\n"
    what = "part (sum of its nodes)" if cmp["by_part"] else "node"
    lines += ["", f"Total absorbed power per {what} and case [W]: orbit average (min to max)"]
    header = [what.split(" ")[0]] + [c["name"] for c in loaded] + ["hottest", "coldest"]
    rows = []
    for r in cmp["rows"] + [cmp["vehicle"]]:
        cells = [r["name"]]
        for c in loaded:
            v = r["cases"][c["name"]]
            cells.append(f"{_g(v['avg'])} ({_g(v['min'])} to {_g(v['max'])})")
        cells += [r.get("hottest", ""), r.get("coldest", "")]
        rows.append(cells)
    lines += _table(header, rows, ["<"] + [">"] * len(loaded) + ["<", "<"])
    lines.append("  hottest / coldest: the case of largest / smallest orbit average for that row")
    solved = [c for c in loaded if c.get("temperatures") is not None]
    if solved and not cmp["by_part"]:
        lines += ["", "Quick-look temperatures per node and case [K] (vfactor solve): steady "
                      "+- one sigma (orbit min to max)"]
        rows = []
        for i, r in enumerate(cmp["rows"]):
            cells = [r["name"]]
            for c in solved:
                t = c["temperatures"]
                cells.append(f"{t['steady_K'][i]:.1f} +- {t['steady_stderr_K'][i]:.2f} "
                             f"({t['orbit_min_K'][i]:.1f} to {t['orbit_max_K'][i]:.1f})")
            rows.append(cells)
        lines += _table(["node"] + [c["name"] for c in solved], rows)
    return "\n".join(lines) + "\n"


def comparison_text(path, first=None, all_nodes=False) -> str:
    """The comparison section of ``vfactor summary`` for the results file ``path``
    (``first``: its first case, already read)."""
    from . import summary

    cases = read_cases(path) if first is None else \
        [first] + [read_results(path, case=c) for c in first.case_names[1:]]
    by_part = cases[0].geometry.n_nodes > summary.NODE_LIST_LIMIT and not all_nodes
    others = ", ".join(cases[0].case_names[1:])
    text = format_comparison(compare_cases(cases, by_part=by_part))
    if not others:
        return text
    import textwrap

    note = textwrap.wrap(f"the tables above are those of case {cases[0].case}; "
                         f"`vfactor summary --case NAME` gives those of {others}", width=92,
                         initial_indent="  (", subsequent_indent="   ")
    note[-1] += ")"
    return text.replace("Design cases\n", "Design cases\n" + "\n".join(note) + "\n", 1)


def case_summaries(path, top=15) -> dict:
    """``--json`` of a file with cases: every case's summary and the comparison."""
    from .summary import summarize

    cases = read_cases(path)
    return {"cases": {r.case: summarize(r, top=top) for r in cases},
            "comparison": compare_cases(cases)}


def summary_of_file(path, *, case=None, top=15, all_nodes=False, as_json=False) -> str:
    """What ``vfactor summary`` prints for the results file ``path``: the summary of
    ``case`` (default: the first case, followed by the comparison of every case)."""
    from .summary import format_summary, summarize, to_json

    results = read_results(path, case=case)
    compare = bool(results.case_names) and case is None
    if as_json:
        return to_json(case_summaries(path, top=top) if compare
                       else summarize(results, top=top)) + "\n"
    extra = comparison_text(path, results, all_nodes=all_nodes) if compare else ""
    return format_summary(results, top=top, all_nodes=all_nodes, extra=extra)
