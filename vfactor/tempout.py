"""The files of ``vfactor solve -o DIR``: per case ``temperatures.csv`` (rows = sample
times of the orbit, columns = nodes [K]), ``temperature_nodes.csv`` (per node the steady
temperature with its one-sigma error, the orbit minimum, average and maximum, the heat
capacity used) and ``temperatures.png`` (temperature along the orbit per node, the band of
one sigma around it, shadow shaded)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import atomic

__all__ = ["write_outputs", "plot_temperatures"]

_MAX_PANELS = 12


def write_outputs(solved, folder, inputs=()) -> list:
    """Write the tables and figure of every (Results, Temperatures) of ``solved`` into
    ``folder`` (``folder/CASE/`` when there are several cases); all files or none."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        from .errors import ArgumentError

        raise ArgumentError(f"{folder}: the temperature outputs need a folder, and this is "
                            "a file")
    several = len(solved) > 1
    hint = "give the outputs another folder"
    written = []
    with atomic.Batch(list(inputs), hint=hint) as batch:
        for results, temps in solved:
            where = folder / results.case if several else folder
            batch.folder(where, "the temperature folder")
            rows = [[t, f] + list(temps.transient[k])
                    for k, (t, f) in enumerate(zip(temps.time, temps.sun_fraction))]
            written.append(_csv(batch, where / "temperatures.csv",
                                ["time [s]", "sun_fraction [1]"]
                                + [f"{n} [K]" for n in temps.names], rows))
            from .h5io import node_averages

            avg = node_averages(temps.transient[:-1], temps.time[:-1]) \
                if temps.time.size > 2 else temps.transient[0]
            rows = [[n, temps.steady[i], temps.steady_stderr[i], temps.transient[:, i].min(),
                     avg[i], temps.transient[:, i].max(), temps.capacity[i],
                     int(temps.defaulted[i])] for i, n in enumerate(temps.names)]
            written.append(_csv(batch, where / "temperature_nodes.csv",
                                ["node", "steady [K]", "steady_stderr [K]", "orbit_min [K]",
                                 "orbit_average [K]", "orbit_max [K]", "capacity [J/K]",
                                 "capacity_defaulted [1]"], rows))
            written.append(plot_temperatures(results, temps, where / "temperatures.png",
                                             batch=batch))
    return written


def _csv(batch, path, header, rows) -> Path:
    from .tables import write_table

    return write_table(batch, path, header, rows, "the temperature table")


def plot_temperatures(results, temps, path, *, batch=None) -> Path:
    """Temperature along the orbit per node (the hottest and coldest first), its one-sigma
    band, the steady temperature dashed, shadow shaded [K]."""
    from .plots import _SHADOW, _figure, _save, _shadow_spans

    t_min = temps.time / 60.0
    order = np.argsort(-(temps.transient.max(axis=0)), kind="stable")[:_MAX_PANELS]
    k = len(order)
    cols = 1 if k == 1 else (2 if k <= 4 else 3)
    rows = int(np.ceil(k / cols))
    fig = _figure(4.2 * cols + 0.6, 2.2 * rows + 1.0)
    axes = fig.subplots(rows, cols, squeeze=False, sharex=True)
    for slot, ax in enumerate(axes.flat):
        if slot >= k:
            ax.set_visible(False)
            continue
        i = order[slot]
        _shadow_spans(ax, t_min, temps.sun_fraction)
        T = temps.transient[:, i] - 273.15
        s = temps.steady_stderr[i] if np.isfinite(temps.steady_stderr[i]) else 0.0
        ax.fill_between(t_min, T - s, T + s, color="#c0392b", alpha=0.25, lw=0)
        ax.plot(t_min, T, color="#c0392b", lw=1.2)
        ax.axhline(temps.steady[i] - 273.15, color="#555555", lw=0.8, ls="--")
        ax.set_title(f"{temps.names[i]}   ({T.min():.1f} to {T.max():.1f} degC, "
                     f"+- {s:.2f} K)", fontsize=9, loc="left")
        ax.set_xlim(t_min[0], t_min[-1])
        ax.grid(alpha=0.25, lw=0.5)
        ax.tick_params(labelsize=8)
        if slot % cols == 0:
            ax.set_ylabel("temperature [degC]", fontsize=8)
        if slot >= k - cols:
            ax.set_xlabel("time in the orbit [min]", fontsize=8)
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    handles = [Line2D([], [], color="#c0392b", lw=1.2, label="orbit (cyclic)"),
               Patch(color="#c0392b", alpha=0.25, label="+- 1 sigma (statistical)"),
               Line2D([], [], color="#555555", lw=0.8, ls="--", label="steady, orbit average")]
    if np.any(np.asarray(temps.sun_fraction) < 1):
        handles.append(Patch(color=_SHADOW, alpha=0.22, label="shadow"))
    fig.legend(handles=handles, loc="outside lower center", ncols=len(handles), fontsize=8,
               frameon=False)
    case = f", case {results.case}" if results.case else ""
    more = "" if len(temps.names) <= _MAX_PANELS else f" ({k} hottest of {len(temps.names)})"
    fig.suptitle(f"{results.model_name}: quick-look temperatures{more}{case} "
                 "(a check of the inputs, not a verified thermal model)", fontsize=10)
    return _save(fig, Path(path), batch)
