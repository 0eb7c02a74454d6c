"""``sweep.png``: orbit-average absorbed power against the beta angle, hot and cold marked.

One panel per node, or per part when the model has more than :data:`MAX_NODE_PANELS`
nodes (the nodes of a part summed, :meth:`vfactor.geometry.Geometry.node_parts`): the
orbit-average absorbed direct solar, albedo, planet IR and their total against the swept
beta angle, with the largest (hot) and smallest (cold) total of each curve marked and
labelled. A last panel gives the eclipse fraction and the whole vehicle's orbit-average
total. Matplotlib is used through :class:`matplotlib.figure.Figure` and the Agg canvas
only (no display, no global pyplot state), as :mod:`vfactor.plots` does.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import atomic
from .plots import SOURCE_COLOURS

__all__ = ["MAX_NODE_PANELS", "plot_sweep", "panel_groups"]

MAX_NODE_PANELS = 12
"""Nodes above which the panels show parts instead of nodes."""

_LABEL = {"solar": "direct solar", "albedo": "albedo", "planet_ir": "planet IR",
          "total": "total"}
_HOT, _COLD = "#c0392b", "#2e6fb5"
_DPI = 110


def panel_groups(sweep):
    """(titles, (b, 4, g) orbit averages [W]) of the panels: one per node, or one per part
    (its nodes summed) above :data:`MAX_NODE_PANELS` nodes; parts without nodes are left
    out."""
    if len(sweep.node_names) <= MAX_NODE_PANELS:
        return list(sweep.node_names), sweep.average
    parts = sorted(set(int(p) for p in sweep.node_part if p >= 0))
    sums = np.stack([sweep.average[:, :, sweep.node_part == p].sum(axis=2) for p in parts],
                    axis=2)
    return [f"part {sweep.part_names[p]}" for p in parts], sums


def _mark(ax, beta, total):
    hot, cold = int(np.argmax(total)), int(np.argmin(total))
    for k, colour, marker, word, offset in ((hot, _HOT, "^", "hot", 6),
                                            (cold, _COLD, "v", "cold", -12)):
        ax.plot([beta[k]], [total[k]], marker=marker, color=colour, ms=7, ls="none",
                zorder=5)
        ax.annotate(f"{word} {beta[k]:g}°", (beta[k], total[k]), textcoords="offset points",
                    xytext=(0, offset), ha="center", fontsize=7, color=colour)


def plot_sweep(sweep, path, *, batch=None) -> Path:
    """Write ``sweep.png`` of a :class:`vfactor.sweep.BetaSweep` to ``path`` (atomically;
    within ``batch`` when given, renamed into place with the other files of the batch)."""
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D

    titles, averages = panel_groups(sweep)
    beta = np.asarray(sweep.beta_deg, dtype=np.float64)
    k = len(titles) + 1
    cols = 1 if k == 1 else (2 if k <= 4 else 3)
    rows = int(np.ceil(k / cols))
    fig = Figure(figsize=(4.2 * cols + 0.6, 2.5 * rows + 1.0), dpi=_DPI, layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False, sharex=True)
    style = dict(marker="o", ms=2.5, lw=1.0)
    for slot, ax in enumerate(axes.flat):
        if slot >= k:
            ax.set_visible(False)
            continue
        ax.grid(alpha=0.25, lw=0.5)
        ax.tick_params(labelsize=8)
        ax.margins(x=0.08, y=0.15)   # room for the hot and cold labels at the ends
        if slot >= k - cols:
            ax.set_xlabel("beta angle [deg]", fontsize=8)
        if slot == k - 1:
            vehicle = sweep.vehicle_average[:, -1]
            ax.plot(beta, vehicle, color="#222222", **style)
            _mark(ax, beta, vehicle)
            ax.set_ylabel("vehicle total [W]", fontsize=8)
            twin = ax.twinx()
            twin.plot(beta, sweep.eclipse_fraction, color="#6b6b8f", ls="--", lw=1.0)
            twin.set_ylabel("eclipse fraction [1]", fontsize=8, color="#6b6b8f")
            twin.set_ylim(0.0, max(0.5, float(np.max(sweep.eclipse_fraction)) * 1.1))
            twin.tick_params(labelsize=8)
            ax.set_title("whole vehicle; eclipse fraction (dashed)", fontsize=9, loc="left")
            continue
        values = averages[:, :, slot]
        for r, src in enumerate(sweep.sources[:3]):
            ax.plot(beta, values[:, r], color=SOURCE_COLOURS[src], **style)
        ax.plot(beta, values[:, 3], color="#222222", **style)
        _mark(ax, beta, values[:, 3])
        ax.set_title(titles[slot], fontsize=9, loc="left")
        ax.set_ylim(bottom=0.0, top=max(1e-9, float(values.max())) * 1.18)
        if slot % cols == 0:
            ax.set_ylabel("orbit average [W]", fontsize=8)
    handles = [Line2D([], [], color=SOURCE_COLOURS[s], lw=1.2, label=_LABEL[s])
               for s in sweep.sources[:3]]
    handles += [Line2D([], [], color="#222222", lw=1.2, label="total"),
                Line2D([], [], color=_HOT, marker="^", ls="none", label="hot (largest total)"),
                Line2D([], [], color=_COLD, marker="v", ls="none",
                       label="cold (smallest total)")]
    fig.legend(handles=handles, loc="outside lower center", ncols=6, fontsize=8, frameon=False)
    what = "node" if len(sweep.node_names) <= MAX_NODE_PANELS else "part"
    fig.suptitle(f"{sweep.model_name}: orbit-average absorbed heat per {what} against the "
                 f"beta angle, case {sweep.case}", fontsize=10)
    path = Path(path)
    if batch is None:
        with atomic.open_atomic(path, "the figure sweep.png") as fh:
            fig.savefig(fh, dpi=_DPI, format="png")
    else:
        with batch.open(path, "the figure sweep.png") as fh:
            fig.savefig(fh, dpi=_DPI, format="png")
    return path
