"""Figures of a results file with design cases: every case's figures in a folder of its
own, with the heat-load panels of a node on the same scale in every case, and
``cases.png``, the orbit-average total load of each node (or part) in each case with its
range along the orbit."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import atomic
from .casecompare import compare_cases, read_cases
from .errors import ArgumentError

__all__ = ["plot_file", "plot_cases", "plot_case_comparison"]


def plot_file(path, folder, *, case=None) -> list:
    """What ``vfactor plot`` writes for the results file ``path``: :func:`plot_cases` for a
    file with cases (unless one ``case`` is asked for), else its figures in ``folder``."""
    from .h5read import read_results
    from .plots import plot_all

    results = read_results(path, case=case)
    if results.case_names and case is None:
        return plot_cases(path, folder)
    return plot_all(results, folder)


def plot_cases(path, folder) -> list:
    """``folder/CASE/*.png`` for every case of the results file ``path`` and
    ``folder/cases.png``; returns the files written."""
    from . import summary
    from .plots import plot_all

    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ArgumentError(f"{folder}: plots need a folder, and this is a file")
    cases = read_cases(path)
    loaded = [r for r in cases if r.heating is not None]
    top = None
    if loaded:
        top = np.max([(r.heating.node_solar + r.heating.node_albedo
                       + r.heating.node_planet_ir).max(axis=0) for r in loaded], axis=0)
    written = []
    for r in cases:
        written += plot_all(r, folder / r.case, top=top)
    if loaded:
        by_part = cases[0].geometry.n_nodes > summary.NODE_LIST_LIMIT
        written.append(plot_case_comparison(compare_cases(cases, by_part=by_part),
                                            folder / "cases.png", inputs=[Path(path)],
                                            model_name=cases[0].model_name))
    return written


def plot_case_comparison(cmp: dict, path, *, inputs=(), model_name="") -> Path:
    """Grouped bars: orbit-average total absorbed power per row (node or part) and case,
    with the range along the orbit as a line from minimum to maximum [W]."""
    from .plots import _figure, _save

    path = Path(path)
    names = [c["name"] for c in cmp["cases"] if c["has_loads"]]
    rows = cmp["rows"][:24]
    fig = _figure(max(6.0, 0.55 * len(rows) * max(1, len(names)) / 2 + 2.5), 4.4)
    ax = fig.add_subplot(1, 1, 1)
    width = 0.8 / max(1, len(names))
    colours = ["#c0392b", "#2e6fb7", "#7a7a7a", "#e3a21a", "#4a9a4a", "#8e44ad"]
    x = np.arange(len(rows))
    for j, name in enumerate(names):
        avg = np.array([r["cases"][name]["avg"] for r in rows])
        lo = np.array([r["cases"][name]["min"] for r in rows])
        hi = np.array([r["cases"][name]["max"] for r in rows])
        pos = x - 0.4 + width * (j + 0.5)
        ax.bar(pos, avg, width=width * 0.9, color=colours[j % len(colours)], label=name)
        ax.vlines(pos, lo, hi, color="#222222", lw=0.8)
    ax.set_xticks(x, [r["name"] for r in rows], rotation=45, ha="right", fontsize=8)
    ax.set_ylabel("absorbed [W]", fontsize=9)
    ax.set_ylim(bottom=0)
    ax.grid(axis="y", alpha=0.25, lw=0.5)
    ax.legend(fontsize=8, frameon=False, title="bar: orbit average, line: min to max",
              title_fontsize=8)
    more = "" if len(cmp["rows"]) <= len(rows) else f" (first {len(rows)} of {len(cmp['rows'])})"
    what = "part" if cmp["by_part"] else "node"
    fig.suptitle(f"{model_name}: total absorbed power per {what} in each design case{more}",
                 fontsize=10)
    hint = "give the figures another folder"
    atomic.refuse_inputs([path], inputs, hint=hint)
    with atomic.Batch(inputs, hint=hint) as batch:
        batch.folder(path.parent, "the figure folder")
        return _save(fig, path, batch)
