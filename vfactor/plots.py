"""``vfactor plot``: PNG figures of a run, for reports.

Figures (each function returns the file it wrote):

- :func:`plot_heat_loads` — absorbed power per node along the orbit, stacked by source
  (solar, albedo, planet IR), shadow shaded; one small panel per node (the nodes with the
  largest time-averaged load first).
- :func:`plot_absorbed_flux` — time-averaged absorbed flux painted on the geometry from
  three viewpoints, with a colour bar in W m-2 (by node where the run has no orbit).
- :func:`plot_flux_along_orbit` — absorbed flux on the geometry at a few steps along the
  orbit, turning parts placed as at each step (moving shadows show).
- :func:`plot_couplings` — the exchange-area matrix (with space) as a heat map, log scale.
- :func:`plot_orbit` — the orbit seen along its normal with the Sun direction and the
  shadowed arc, and the beta angle and sun fraction along the orbit.

Every figure is written atomically through :mod:`vfactor.atomic`; the ``batch`` argument
of the figure functions (a :class:`vfactor.atomic.Batch`) lets :func:`plot_all` replace all
figures together or none. Matplotlib is used through :class:`matplotlib.figure.Figure` and the Agg canvas only, so
no display and no global pyplot state is involved.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from . import atomic
from .errors import ArgumentError
from .sparsetools import as_csr, dense
from .h5io import Results, node_averages

__all__ = ["SOURCE_COLOURS", "plot_all", "figure_names", "plot_heat_loads", "plot_absorbed_flux",
           "plot_flux_along_orbit",
           "plot_couplings", "plot_orbit"]

SOURCE_COLOURS = {"solar": "#e3a23b", "albedo": "#7fb0d8", "planet_ir": "#b5524a"}
_SOURCE_LABEL = {"solar": "direct solar", "albedo": "albedo", "planet_ir": "planet IR"}
_SHADOW = "#38385a"
_MAX_PANELS = 12
_DPI = 110


def _figure(width, height):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), dpi=_DPI, layout="constrained")
    return fig


def _save(fig, path: Path, batch=None) -> Path:
    """Write ``fig`` as PNG to ``path`` atomically (:mod:`vfactor.atomic`), within
    ``batch`` when given (renamed into place with the other figures at its end)."""
    if batch is None:
        with atomic.open_atomic(path, f"the figure {path.name}") as fh:
            fig.savefig(fh, dpi=_DPI, format="png")
    else:
        with batch.open(path, f"the figure {path.name}") as fh:
            fig.savefig(fh, dpi=_DPI, format="png")
    return path


def figure_names(results: Results) -> list:
    """File names :func:`plot_all` writes for ``results``, in order."""
    names = ["heat_loads.png", "absorbed_flux.png", "flux_along_orbit.png"] \
        if results.heating is not None else ["nodes.png"]
    if results.exchange is not None or results.view_factors is not None:
        names.append("couplings.png")
    if results.trajectory is not None:
        names.append("orbit.png")
    return names


def plot_all(results: Results, folder, *, top=None) -> list:
    """Write every figure that the results support into ``folder`` (created if missing);
    ``top`` ((n,) W, optional): the upper end of each node's axis in ``heat_loads.png``.

    Returns
    -------
    list of pathlib.Path
        ``absorbed_flux.png`` (or ``nodes.png`` without heating), ``couplings.png`` when
        the run has exchange factors, and ``heat_loads.png`` and ``orbit.png`` when it has an
        orbit (:func:`figure_names`).

    Raises
    ------
    ArgumentError
        ``folder`` is a file.
    vfactor.atomic.OutputError
        A figure would replace the results file read, or cannot be written (read-only
        folder, full disk). The figures are one :class:`vfactor.atomic.Batch`: either all
        are replaced or none is.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ArgumentError(f"{folder}: plots need a folder, and this is a file")
    inputs = [results.path] if getattr(results, "path", None) else []
    hint = "give the figures another folder"
    atomic.refuse_inputs([folder / name for name in figure_names(results)], inputs, hint=hint)
    makers = {"heat_loads.png": plot_heat_loads, "absorbed_flux.png": plot_absorbed_flux,
              "flux_along_orbit.png": plot_flux_along_orbit,
              "nodes.png": plot_absorbed_flux, "couplings.png": plot_couplings,
              "orbit.png": plot_orbit}
    with atomic.Batch(inputs, hint=hint) as batch:
        batch.folder(folder, "the figure folder")
        return [makers[name](results, folder / name, batch=batch,
                             **({"top": top} if name == "heat_loads.png" else {}))
                for name in figure_names(results)]


def _shadow_spans(ax, time_min, sun_fraction):
    """Shade the steps in shadow: umbra dark, penumbra lighter (steps as intervals)."""
    t = np.asarray(time_min)
    if t.size < 2:
        return
    dt = np.append(np.diff(t), t[-1] - t[-2])
    for k in range(t.size):
        f = sun_fraction[k]
        if f < 1.0:
            ax.axvspan(t[k] - 0.5 * dt[k], t[k] + 0.5 * dt[k], color=_SHADOW,
                       alpha=0.22 if f <= 0 else 0.10, lw=0)


def plot_heat_loads(results: Results, path, *, batch=None, top=None) -> Path:
    """Absorbed power per node along the orbit, stacked by source, shadow shaded [W]; the
    first panel is the whole vehicle. ``top`` (optional): per node the upper end of its y
    axis [W] (e.g. the largest value over several design cases, so that the figures of the
    cases share their scales); by default each panel's own."""
    heat, tr = results.heating, results.trajectory
    names = results.geometry.nodes.names
    sources = ("solar", "albedo", "planet_ir")
    loads = [getattr(heat, f"node_{src}") for src in sources]
    total = loads[0] + loads[1] + loads[2]
    average = node_averages(total, tr.time)
    order = np.argsort(-average, kind="stable")[:_MAX_PANELS - 1]
    panels = [(f"whole vehicle   (average {average.sum():.4g} W)",
               [x.sum(axis=1) for x in loads], total.sum(axis=1),
               None if top is None else float(np.sum(top)))]
    panels += [(f"{names[i]}   (average {average[i]:.4g} W)", [x[:, i] for x in loads],
                total[:, i], None if top is None else float(top[i])) for i in order]
    k = len(panels)
    cols = 1 if k == 1 else (2 if k <= 4 else 3)
    rows = int(np.ceil(k / cols))
    fig = _figure(4.2 * cols + 0.6, 2.3 * rows + 1.0)
    t_min = tr.time / 60.0
    axes = fig.subplots(rows, cols, squeeze=False, sharex=True)
    present = [bool(np.any(x != 0)) for x in loads]
    for slot, ax in enumerate(axes.flat):
        if slot >= k:
            ax.set_visible(False)
            continue
        title, parts, line, upper = panels[slot]
        _shadow_spans(ax, t_min, tr.sun_fraction)
        ax.stackplot(t_min, *parts, colors=[SOURCE_COLOURS[s] for s in sources],
                     alpha=0.95, lw=0)
        ax.plot(t_min, line, color="#222222", lw=0.8)
        ax.set_title(title, fontsize=9, loc="left", fontweight="bold" if slot == 0 else None)
        ax.set_xlim(t_min[0], t_min[-1])
        if upper is not None and upper > 0:
            ax.set_ylim(0, 1.05 * upper)
        else:
            ax.set_ylim(bottom=0)
        ax.grid(alpha=0.25, lw=0.5)
        ax.tick_params(labelsize=8)
        if slot % cols == 0:
            ax.set_ylabel("absorbed [W]", fontsize=8)
        if slot >= k - cols:
            ax.set_xlabel("time since epoch [min]", fontsize=8)
    from matplotlib.patches import Patch

    # the legend lists only what the figure shows
    handles = [Patch(color=SOURCE_COLOURS[s], label=_SOURCE_LABEL[s])
               for s, shown in zip(sources, present) if shown]
    fraction = np.asarray(tr.sun_fraction)
    if np.any(fraction <= 0):
        handles.append(Patch(color=_SHADOW, alpha=0.22, label="umbra"))
    if np.any((fraction > 0) & (fraction < 1)):
        handles.append(Patch(color=_SHADOW, alpha=0.10, label="penumbra"))
    if handles:
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles),
                   fontsize=8, frameon=False)
    more = "" if len(names) < _MAX_PANELS else f" ({k - 1} largest of {len(names)} nodes)"
    case = f"design case {results.case}, " if results.case else ""
    shared = ", y scales shared by the cases" if top is not None else ""
    fig.suptitle(f"{results.model_name}: absorbed environmental heat per node{more}, "
                 f"{case}environment {heat.case}{shared}", fontsize=10)
    return _save(fig, Path(path), batch)


def _paint(fig, axes_slots, geometry, values, cmap, norm, title, label, views):
    from mpl_toolkits.mplot3d.art3d import Poly3DCollection

    tri = geometry.vertices[geometry.triangles]
    lo, hi = geometry.vertices.min(axis=0), geometry.vertices.max(axis=0)
    # axes half-size = radius of the sphere about the box centre holding every vertex: the
    # model then stays inside the drawn area from any viewpoint at the zoom used below
    centre = 0.5 * (lo + hi)
    half = max(float(np.linalg.norm(geometry.vertices - centre, axis=1).max()), 1e-9)
    # light shading: darken facets that face away from a fixed light in the view
    mappable = None
    axes = []
    for slot, (elev, azim, name) in zip(axes_slots, views):
        ax = fig.add_subplot(slot, projection="3d")
        axes.append(ax)
        colours = cmap(norm(values))
        view = np.array([np.cos(np.radians(elev)) * np.cos(np.radians(azim)),
                         np.cos(np.radians(elev)) * np.sin(np.radians(azim)),
                         np.sin(np.radians(elev))])
        shade = 0.8 + 0.2 * np.abs(geometry.normals @ view)
        colours[:, :3] *= shade[:, None]
        poly = Poly3DCollection(tri, facecolors=colours, edgecolors=(0, 0, 0, 0.12),
                                linewidths=0.15)
        ax.add_collection3d(poly)
        for setter, c in zip((ax.set_xlim, ax.set_ylim, ax.set_zlim), centre):
            setter(c - half, c + half)
        ax.set_box_aspect((1, 1, 1), zoom=1.5)
        ax.view_init(elev=elev, azim=azim)
        ax.set_title(name, fontsize=9)
        ax.set_axis_off()
        # body-axis triad in the lower left of the picture: screen right and up vectors of
        # a matplotlib camera at (elev, azim)
        el, az = np.radians(elev), np.radians(azim)
        right = np.array([-np.sin(az), np.cos(az), 0.0])
        up = np.array([-np.sin(el) * np.cos(az), -np.sin(el) * np.sin(az), np.cos(el)])
        origin = centre - 0.8 * half * right - 0.7 * half * up
        length = 0.22 * half
        for k, (axis_name, colour) in enumerate((("x", "#c0392b"), ("y", "#27ae60"),
                                                 ("z", "#2e86c1"))):
            d = np.zeros(3)
            d[k] = length
            ax.quiver(*origin, *d, color=colour, linewidth=1.2, arrow_length_ratio=0.25)
            ax.text(*(origin + 1.25 * d), axis_name, color=colour, fontsize=8)
        from matplotlib.cm import ScalarMappable

        mappable = ScalarMappable(norm=norm, cmap=cmap)
    return mappable, axes


def _view_name(elev, azim) -> str:
    """'seen from +x -y +z (body axes)' for a matplotlib camera at (elev, azim) degrees."""
    cx, cy = np.cos(np.radians(azim)), np.sin(np.radians(azim))
    parts = []
    for c, axis in ((cx, "x"), (cy, "y")):
        if abs(c) > 0.3:
            parts.append(("+" if c > 0 else "-") + axis)
    parts.append("+z" if elev > 0 else "-z")
    return f"seen from {' '.join(parts)} (body axes)"


def plot_absorbed_flux(results: Results, path, *, batch=None) -> Path:
    """Time-averaged absorbed flux on the geometry from three viewpoints [W m-2].

    Without heating the facets are coloured by their front node instead.
    """
    from matplotlib import colormaps
    from matplotlib.colors import BoundaryNorm, Normalize, PowerNorm

    g = results.geometry
    views = tuple((elev, azim, _view_name(elev, azim))
                  for elev, azim in ((25, -60), (25, 120), (-35, 30)))
    fig = _figure(13.0, 4.6)
    if results.facet_average is not None:
        values = np.asarray(results.facet_average["total"], float)
        cmap = colormaps["inferno"]
        # square-root scale: hot appendages (solar wings) would otherwise flatten the
        # differences between the faces of the body into one colour
        norm = PowerNorm(gamma=0.5, vmin=min(0.0, float(values.min())),
                         vmax=max(float(values.max()), 1e-9))
        label = "time-averaged absorbed flux, all sources [W m-2]\n(square-root colour scale)"
        title = f"{results.model_name}: time-averaged absorbed flux (case {results.heating.case})"
    else:
        values = np.where(g.front_node >= 0, g.front_node, g.back_node).astype(float)
        n = max(g.n_nodes, 1)
        cmap = colormaps["tab20"].resampled(min(n, 20))
        norm = BoundaryNorm(np.arange(-0.5, n + 0.5), cmap.N) if n <= 20 else Normalize(0, n - 1)
        label = "node index (front side)"
        title = f"{results.model_name}: nodes"
    slots = (131, 132, 133)
    mappable, axes = _paint(fig, slots, g, values, cmap, norm, title, label, views)
    cb = fig.colorbar(mappable, ax=axes, shrink=0.75, pad=0.02)
    cb.set_label(label, fontsize=9)
    cb.ax.tick_params(labelsize=8)
    if results.facet_average is None and g.n_nodes <= 20:
        cb.set_ticks(np.arange(g.n_nodes))
        cb.set_ticklabels(list(g.nodes.names), fontsize=7)
    fig.suptitle(title, fontsize=10)
    return _save(fig, Path(path), batch)


#: Frames of the absorbed-flux strip along the orbit.
ORBIT_FRAMES = 4


def plot_flux_along_orbit(results: Results, path, *, batch=None) -> Path:
    """Absorbed flux (all sources) on the geometry at :data:`ORBIT_FRAMES` steps evenly
    spread over the sunlit part of the run, turning parts placed as at each step, one
    colour scale [W m-2]."""
    from matplotlib import colormaps
    from matplotlib.colors import PowerNorm

    from .kinematics import placed_geometry

    g, heat, tr = results.geometry, results.heating, results.trajectory
    flux = sum(np.asarray(getattr(heat, f"facet_{src}"), float)
               for src in ("solar", "albedo", "planet_ir"))
    # frames spread over the sunlit steps (where shadows move), else over all steps
    lit = np.flatnonzero(np.asarray(tr.sun_fraction) > 0)
    pool = lit if lit.size >= ORBIT_FRAMES else np.arange(flux.shape[0])
    steps = np.unique(pool[np.linspace(0, pool.size - 1, ORBIT_FRAMES).round().astype(int)])
    norm = PowerNorm(gamma=0.5, vmin=min(0.0, float(flux[steps].min())),
                     vmax=max(float(flux[steps].max()), 1e-9))
    cmap = colormaps["inferno"]
    fig = _figure(3.6 * len(steps) + 1.4, 4.4)
    grid = fig.add_gridspec(1, len(steps))
    axes = []
    mappable = None
    for n, k in enumerate(steps):
        placed = g if results.hinges is None else placed_geometry(g, results.hinges, k)
        angles = "" if results.hinges is None else "\n" + ", ".join(
            f"{name} {float(a):.0f} deg" for name, a in zip(results.hinges["name"],
                                                          results.hinges["angle_deg"][k]))
        light = "eclipse" if tr.sun_fraction[k] == 0 else (
            "sunlit" if tr.sun_fraction[k] == 1 else "penumbra")
        view = ((25, -60, f"t = {tr.time[k] / 60:.1f} min ({light}){angles}"),)
        mappable, ax = _paint(fig, (grid[0, n],), placed, flux[k], cmap, norm, "", "", view)
        axes += ax
    cb = fig.colorbar(mappable, ax=axes, shrink=0.75, pad=0.02)
    cb.set_label("absorbed flux, all sources [W m-2]\n(square-root colour scale)", fontsize=9)
    cb.ax.tick_params(labelsize=8)
    fig.suptitle(f"{results.model_name}: absorbed flux along the orbit, seen from "
                 f"{_view_name(25, -60)[len('seen from '):]} (case {heat.case})", fontsize=10)
    return _save(fig, Path(path), batch)


#: Above this many nodes the coupling plot shows parts instead of nodes.
MAX_PLOTTED_NODES = 300


def _by_part(geometry, matrix, to_space, *, weighted):
    """Coupling matrix and space column summed over the nodes of each part."""
    import scipy.sparse as sp

    n = geometry.n_nodes
    part = np.maximum(geometry.node_parts(), 0)
    k = len(geometry.part_names)
    P = sp.csr_array((np.ones(n), (np.arange(n), part)), shape=(n, k))
    w = np.asarray(geometry.nodes.area, dtype=np.float64) if weighted else np.ones(n)
    M = P.T @ (sp.diags_array(w) @ as_csr(matrix)) @ P
    sp_col = P.T @ (w * np.asarray(to_space))
    if weighted:
        part_area = P.T @ w
        scale = np.where(part_area > 0, 1.0 / np.where(part_area > 0, part_area, 1.0), 0.0)
        M = sp.diags_array(scale) @ M
        sp_col = scale * sp_col
    return as_csr(M), np.asarray(sp_col), list(geometry.part_names) + ["space"]


def plot_couplings(results: Results, path, *, batch=None) -> Path:
    """The exchange-area matrix eps_i A_i B_ij with a space column, log colour scale [m2].

    Falls back to the view-factor matrix when the file has no exchange factors.
    """
    from matplotlib import colormaps
    from matplotlib.colors import LogNorm

    g = results.geometry
    names = list(g.nodes.names) + ["space"]
    if results.exchange is not None:
        matrix, to_space = results.exchange.area, results.exchange.area_space
        label = "exchange area eps_i A_i B_ij [m2]"
        title = "infrared exchange areas (row = emitting node)"
    else:
        vf = results.view_factors
        matrix, to_space = vf.matrix, vf.space
        label = "view factor F_ij [1]"
        title = "view factors (row = emitting node)"
    unit = "node"
    if g.n_nodes > MAX_PLOTTED_NODES:
        unit = "part"
        # many nodes: sums over the nodes of each part (exchange areas add; view factors
        # are area-weighted into part-to-part factors)
        matrix, to_space, names = _by_part(g, matrix, to_space,
                                           weighted=results.exchange is None)
        title = title.replace("node", "part") + f" ({g.n_nodes} nodes summed by part)"
    m = np.column_stack([dense(matrix), to_space])
    n = m.shape[0]
    positive = m[m > 0]
    vmax = float(positive.max()) if positive.size else 1.0
    vmin = max(float(positive.min()) if positive.size else vmax * 1e-6, vmax * 1e-6)
    side = min(4.0 + 0.32 * n, 16.0)
    fig = _figure(side + 2.0, side)
    ax = fig.add_subplot(111)
    cmap = colormaps["viridis"].with_extremes(under="#f2f2f2", bad="#f2f2f2")
    img = ax.imshow(np.where(m > 0, m, np.nan), cmap=cmap, norm=LogNorm(vmin=vmin, vmax=vmax),
                    interpolation="nearest", aspect="auto")
    ax.axvline(n - 0.5, color="white", lw=2)
    fs = 8 if n <= 25 else 6
    if n <= 60:
        ax.set_xticks(range(n + 1), names, rotation=70, ha="right", fontsize=fs)
        ax.set_yticks(range(n), names[:-1], fontsize=fs)
    ax.set_xlabel(f"receiving {unit}", fontsize=9)
    ax.set_ylabel(f"emitting {unit}", fontsize=9)
    cb = fig.colorbar(img, ax=ax, shrink=0.85)
    cb.set_label(label, fontsize=9)
    ax.set_title(f"{results.model_name}\n{title}; grey = zero", fontsize=10)
    return _save(fig, Path(path), batch)


def plot_orbit(results: Results, path, *, batch=None) -> Path:
    """Orbit seen along its normal (Sun direction, shadowed arc) and beta / sun fraction."""
    tr = results.trajectory
    pos_km = tr.position / 1e3
    vel = tr.velocity
    h = np.cross(tr.position[0], vel[0])
    h = h / np.linalg.norm(h)
    e1 = tr.position[0] / np.linalg.norm(tr.position[0])
    e2 = np.cross(h, e1)
    x, y = pos_km @ e1, pos_km @ e2
    sun = tr.sun_inertial[0]
    sx, sy = float(sun @ e1), float(sun @ e2)
    radius_m = results.orbit_attrs.get("planet_radius_m")
    fig = _figure(11.5, 4.8)
    gs = fig.add_gridspec(2, 2, width_ratios=(1.0, 1.35))
    ax = fig.add_subplot(gs[:, 0])
    r_orbit = float(np.max(np.hypot(x, y)))
    if radius_m:
        from matplotlib.patches import Circle

        ax.add_patch(Circle((0, 0), float(radius_m) / 1e3, color="#9bb7d4", zorder=1))
    lit = tr.sun_fraction >= 1.0
    ax.plot(x, y, color="#bbbbbb", lw=1, zorder=2)
    ax.scatter(x[lit], y[lit], s=10, color=SOURCE_COLOURS["solar"], label="sunlit", zorder=3)
    ax.scatter(x[~lit], y[~lit], s=10, color=_SHADOW, label="shadow (umbra or penumbra)",
               zorder=3)
    ax.scatter([x[0]], [y[0]], s=40, marker="o", facecolors="none", edgecolors="k",
               label="epoch", zorder=4)
    norm_s = np.hypot(sx, sy)
    if norm_s > 1e-6:
        ux, uy = sx / norm_s, sy / norm_s
        ax.annotate("", xy=(1.42 * r_orbit * ux, 1.42 * r_orbit * uy),
                    xytext=(1.08 * r_orbit * ux, 1.08 * r_orbit * uy),
                    arrowprops=dict(arrowstyle="-|>", color="#c07a10", lw=1.8))
        ax.text(1.2 * r_orbit * ux - 0.12 * r_orbit * uy, 1.2 * r_orbit * uy + 0.12 * r_orbit * ux,
                "Sun", color="#c07a10", fontsize=8, ha="center", va="center")
    lim = 1.45 * r_orbit
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal")
    ax.set_xlabel("in-plane, toward the epoch position [km]", fontsize=8)
    ax.set_ylabel("in-plane, along the motion [km]", fontsize=8)
    ax.tick_params(labelsize=7)
    ax.legend(fontsize=7, loc="lower left", frameon=False)
    ax.set_title("orbit seen along its normal; Sun direction projected (first step)",
                 fontsize=9)

    t_min = tr.time / 60.0
    ax1 = fig.add_subplot(gs[0, 1])
    beta_deg = np.degrees(tr.beta)
    ax1.plot(t_min, beta_deg, color="#4a6fa5", lw=1.5)
    mid, span = 0.5 * (beta_deg.max() + beta_deg.min()), np.ptp(beta_deg)
    if span < 2.0:  # a nearly constant beta angle: show it as such, not as a steep line
        ax1.set_ylim(mid - 1.0, mid + 1.0)
    ax1.set_ylabel("beta angle [deg]", fontsize=8)
    ax1.grid(alpha=0.25, lw=0.5)
    ax1.tick_params(labelsize=7)
    ax1.set_title("beta angle and sun fraction along the orbit", fontsize=9)
    ax2 = fig.add_subplot(gs[1, 1], sharex=ax1)
    _shadow_spans(ax2, t_min, tr.sun_fraction)
    ax2.step(t_min, tr.sun_fraction, where="mid", color="#222222", lw=1.2)
    ax2.set_ylim(-0.05, 1.05)
    ax2.set_ylabel("sun fraction [1]", fontsize=8)
    ax2.set_xlabel("time since epoch [min]", fontsize=8)
    ax2.grid(alpha=0.25, lw=0.5)
    ax2.tick_params(labelsize=7)
    ax1.set_xlim(t_min[0], t_min[-1])
    fig.suptitle(f"{results.model_name}: orbit (period {tr.period / 60:.1f} min, "
                 f"epoch {tr.epoch_utc})", fontsize=10)
    return _save(fig, Path(path), batch)
