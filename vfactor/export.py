"""``vfactor export``: results as CSV tables for a network solver, and coloured meshes.

Formats (the CSV layout is documented in the README, "CSV layout"):

``csv``
    A folder with ``nodes.csv`` (one row per node), ``couplings.csv`` (one row per ordered
    node pair whose view factor or Gebhart factor reaches ``threshold``) and, when the run
    has an orbit, ``heat_loads.csv`` (one row per step and node) and, when parts turn,
    ``hinges.csv`` (one row per step, the angle of each hinge). The header of every column
    carries its unit in square brackets (``area [m2]``); one header line, comma-separated,
    no comment lines.
``vtk``
    An unstructured grid (``.vtu``, via meshio) with per-facet cell data for ParaView.
``gltf``
    A binary glTF (``.glb``, via trimesh) whose facets are coloured by the orbit-average
    absorbed flux (by node where the run has no orbit); the values ride along as the custom
    vertex attribute ``_VALUE`` and the colour range in the mesh ``extras``.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np

from . import atomic
from .constants import STEFAN_BOLTZMANN
from .errors import ArgumentError
from .h5io import Results
from .sparsetools import as_csr, values_at

__all__ = ["FORMATS", "DEFAULT_THRESHOLD", "export", "export_csv", "export_vtk",
           "export_gltf", "facet_fields"]

FORMATS = ("csv", "vtk", "gltf")
DEFAULT_THRESHOLD = 1e-4
"""Smallest view factor or Gebhart factor [1] for a node pair to be listed in couplings.csv."""

_SOURCES = ("solar", "albedo", "planet_ir")


def export(results: Results, fmt: str, path, *, threshold: float = DEFAULT_THRESHOLD) -> list:
    """Export ``results`` in format ``fmt`` to ``path``; return the files written.

    Parameters
    ----------
    results : vfactor.h5io.Results
    fmt : {"csv", "vtk", "gltf"}
    path : str or os.PathLike
        A folder for ``csv`` (created if missing), a file for ``vtk`` (``.vtu``) and
        ``gltf`` (``.glb``).
    threshold : float
        Only for ``csv``: smallest view factor or Gebhart factor listed [1].

    Returns
    -------
    list of pathlib.Path

    Raises
    ------
    ArgumentError
        Unknown format or negative threshold.
    vfactor.atomic.OutputError
        A file would replace the results file read (``results.path``), or cannot be
        written (full disk, read-only folder). Every file is written atomically
        (:mod:`vfactor.atomic`): on failure no file of the export is changed.
    """
    if fmt not in FORMATS:
        raise ArgumentError(f"unknown export format {fmt!r}; choose one of {', '.join(FORMATS)}")
    if fmt == "csv":
        return export_csv(results, path, threshold=threshold)
    if fmt == "vtk":
        return [export_vtk(results, path)]
    return [export_gltf(results, path)]


# ---------------------------------------------------------------------------------------
# CSV
# ---------------------------------------------------------------------------------------
def _fmt(x) -> str:
    if isinstance(x, str):
        return x
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    return repr(float(x))  # shortest text that reads back to the same float64


def _write_csv(batch: atomic.Batch, path: Path, header, rows, what: str) -> Path:
    """One table into ``batch`` (renamed into place with the others when all are done)."""
    with batch.open(path, what, text=True, newline="") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            w.writerow([_fmt(c) for c in r])
    return path


def _inputs(results: Results) -> list:
    """Files an export must not replace: the results file it reads."""
    return [results.path] if getattr(results, "path", None) else []


_HINT = "give the export another name or folder"


def export_csv(results: Results, folder, *, threshold: float = DEFAULT_THRESHOLD) -> list:
    """Write ``nodes.csv``, ``couplings.csv``, ``heat_loads.csv`` and (when parts turn)
    ``hinges.csv`` (hinge angle per step) into ``folder``.

    Values are written with full float64 precision, so they read back bit for bit.
    """
    if not threshold >= 0:
        raise ArgumentError(f"--threshold must be >= 0, got {threshold!r}")
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ArgumentError(f"{folder}: CSV export needs a folder, and this is a file")
    names = ["nodes.csv"] + (["couplings.csv"] if results.view_factors is not None else []) \
        + (["heat_loads.csv"] if results.heating is not None else []) \
        + (["hinges.csv"] if results.hinges is not None else []) \
        + ([f"couplings_position_{p}.csv" for p in range(len(results.positions["exchange"]))]
           if results.positions is not None else [])
    atomic.refuse_inputs([folder / x for x in names], _inputs(results), hint=_HINT)
    with atomic.Batch(_inputs(results), hint=_HINT) as batch:
        batch.folder(folder, "the CSV folder")
        return _csv_tables(results, folder, threshold, batch)


def _csv_tables(results: Results, folder: Path, threshold: float, batch) -> list:
    g = results.geometry
    nodes = g.nodes
    n = len(nodes)
    vf, ex, heat = results.view_factors, results.exchange, results.heating
    written = []

    header = ["node", "coating", "area [m2]", "solar_absorptivity [1]", "ir_emissivity [1]",
              "facets [1]"]
    cols = []
    if vf is not None:
        header += ["view_factor_space [1]", "view_factor_space_stderr [1]", "view_factor_inert [1]"]
        cols += [vf.space, vf.stderr_space, vf.inert]
    if ex is not None:
        header += ["gebhart_space [1]", "exchange_area_space [m2]", "conductance_space [W K-4]"]
        cols += [ex.gebhart_space, ex.area_space, STEFAN_BOLTZMANN * ex.area_space]
    if heat is not None and results.node_average is not None:
        for src in _SOURCES + ("total",):
            header.append(f"average_absorbed_{src} [W]")
            cols.append(results.node_average[src])
    rows = []
    for i in range(n):
        rows.append([nodes.names[i], nodes.coating[i], nodes.area[i],
                     nodes.solar_absorptivity[i], nodes.ir_emissivity[i],
                     int(nodes.facet_count[i])] + [c[i] for c in cols])
    written.append(_write_csv(batch, folder / "nodes.csv", header, rows, "the node table"))

    if vf is not None:
        written.append(_coupling_table(batch, folder / "couplings.csv", nodes.names, vf, ex,
                                       threshold, "the coupling table"))
    if results.positions is not None:
        for p, (vf_p, ex_p) in enumerate(zip(results.positions["view_factors"],
                                             results.positions["exchange"])):
            written.append(_coupling_table(batch, folder / f"couplings_position_{p}.csv",
                                           nodes.names, vf_p, ex_p, threshold,
                                           f"the coupling table of hinge position {p}"))
    return written + _step_tables(results, folder, batch)


def _coupling_table(batch, path, names, vf, ex, threshold, what) -> Path:
    """One row per ordered node pair whose view factor or Gebhart factor reaches
    ``threshold``."""
    header = ["from", "to", "view_factor [1]", "view_factor_stderr [1]"]
    if ex is not None:
        header += ["gebhart [1]", "exchange_area [m2]", "conductance [W K-4]"]
    # the stored entries of F and B (row-major): cost grows with the non-zeros
    F = as_csr(vf.matrix)
    pattern = (F + as_csr(ex.gebhart)) if ex is not None else F
    coo = as_csr(pattern).tocoo()
    order = np.lexsort((coo.col, coo.row))
    ii, jj = coo.row[order].astype(np.int64), coo.col[order].astype(np.int64)
    f_all = values_at(F, ii, jj)
    e_all = values_at(vf.stderr, ii, jj)
    b_all = values_at(ex.gebhart, ii, jj) if ex is not None else np.zeros(ii.size)
    a_all = values_at(ex.area, ii, jj) if ex is not None else np.zeros(ii.size)
    keep = (np.maximum(f_all, b_all) >= threshold) & ~((f_all == 0) & (b_all == 0))
    rows = []
    for k in np.flatnonzero(keep):
        i, j = int(ii[k]), int(jj[k])
        row = [names[i], names[j], f_all[k], e_all[k]]
        if ex is not None:
            row += [b_all[k], a_all[k], STEFAN_BOLTZMANN * a_all[k]]
        rows.append(row)
    return _write_csv(batch, path, header, rows, what)


def _step_tables(results: Results, folder: Path, batch) -> list:
    """``heat_loads.csv`` and ``hinges.csv`` (per step)."""
    nodes = results.geometry.nodes
    n = len(nodes)
    heat = results.heating
    written = []
    if heat is not None:
        tr = results.trajectory
        header = ["step [1]", "time [s]", "sun_fraction [1]", "node", "solar [W]", "albedo [W]",
                  "planet_ir [W]", "total [W]"]
        rows = []
        for k in range(tr.n_steps):
            for i in range(n):
                s, a, p = heat.node_solar[k, i], heat.node_albedo[k, i], heat.node_planet_ir[k, i]
                rows.append([k, tr.time[k], tr.sun_fraction[k], nodes.names[i], s, a, p,
                             s + a + p])
        written.append(_write_csv(batch, folder / "heat_loads.csv", header, rows,
                                  "the heat-load table"))

    if results.hinges is not None:
        tr = results.trajectory
        names = results.hinges["name"]
        angle = results.hinges["angle_deg"]
        rows = [[k, tr.time[k]] + [angle[k, h] for h in range(len(names))]
                for k in range(tr.n_steps)]
        written.append(_write_csv(batch, folder / "hinges.csv",
                                  ["step [1]", "time [s]"] + [f"{n} [deg]" for n in names],
                                  rows, "the hinge-angle table"))
    return written


# ---------------------------------------------------------------------------------------
# Meshes
# ---------------------------------------------------------------------------------------
def facet_fields(results: Results) -> dict:
    """Per-facet values exported to meshes: name -> ((f,) array, units).

    Always ``front_node``, ``back_node``, ``part`` and ``area``; with heating also the
    time-averaged absorbed flux ``absorbed_<source>`` and ``absorbed_total`` [W m-2].
    """
    g = results.geometry
    out = {"front_node": (g.front_node.astype(np.int32), "1"),
           "back_node": (g.back_node.astype(np.int32), "1"),
           "part": (g.part.astype(np.int32), "1"),
           "area": (g.areas.astype(float), "m2")}
    if results.facet_average is not None:
        for src in _SOURCES + ("total",):
            out[f"absorbed_{src}"] = (np.asarray(results.facet_average[src], float), "W m-2")
    return out


def _mesh_target(path, suffix, allowed=None) -> Path:
    """Output file of a mesh export: ``suffix`` added to a bare name; a folder, a missing
    parent folder or a suffix outside ``allowed`` (default ``(suffix,)``) is an
    :class:`ArgumentError` (one line, exit 2) before anything is written."""
    path = Path(path)
    allowed = tuple(allowed or (suffix,))
    if path.is_dir():
        raise ArgumentError(f"{path}: is a folder; give a file name ending in {suffix}")
    if not path.parent.is_dir():
        raise ArgumentError(f"{path}: folder {path.parent} does not exist")
    if path.suffix == "":
        return path.with_suffix(suffix)
    if path.suffix.lower() not in allowed:
        raise ArgumentError(f"{path}: give a file name ending in {' or '.join(allowed)} "
                            f"(got suffix {path.suffix!r})")
    return path


def export_vtk(results: Results, path) -> Path:
    """Write the facets with their :func:`facet_fields` as VTK cell data (meshio).

    A path without a suffix gets ``.vtu``; ``.vtk`` writes the legacy VTK format; any
    other suffix is refused. VTK arrays carry no unit attribute; the units
    are those of :func:`facet_fields` (``absorbed_*`` in W m-2, ``area`` in m2, indices 1),
    as the README's CSV layout section lists them.
    """
    import meshio

    path = _mesh_target(path, ".vtu", (".vtu", ".vtk"))
    atomic.refuse_inputs(path, _inputs(results), hint=_HINT)
    g = results.geometry
    fields = facet_fields(results)
    mesh = meshio.Mesh(points=np.asarray(g.vertices, float),
                       cells=[("triangle", np.asarray(g.triangles, np.int64))],
                       cell_data={name: [values] for name, (values, _u) in fields.items()})
    file_format = "vtu" if path.suffix.lower() == ".vtu" else "vtk"
    # meshio's VTU writer opens the file by name: it gets the temporary's name, and the
    # format explicitly (the temporary ends in .tmp)
    with atomic.Batch(_inputs(results), hint=_HINT) as batch:
        with batch.path(path, "the VTK file") as tmp:
            mesh.write(tmp, file_format=file_format)
    return path


def _colours(values: np.ndarray, vmin: float, vmax: float, cmap: str) -> np.ndarray:
    from matplotlib import colormaps

    span = vmax - vmin if vmax > vmin else 1.0
    rgba = colormaps[cmap]((np.asarray(values, float) - vmin) / span)
    return (np.clip(rgba, 0, 1) * 255).round().astype(np.uint8)


def export_gltf(results: Results, path) -> Path:
    """Write a binary glTF (``.glb``) with facet colours baked in (trimesh).

    Colour: time-averaged total absorbed flux [W m-2] (colour map ``inferno``, range in the
    mesh ``extras``) when the run has heating; otherwise the front node index (``tab20``).
    Each facet gets its own three vertices so that colours stay per facet.
    """
    import trimesh

    path = _mesh_target(path, ".glb")
    atomic.refuse_inputs(path, _inputs(results), hint=_HINT)
    g = results.geometry
    f = g.n_facets
    if results.facet_average is not None:
        values = np.asarray(results.facet_average["total"], float)
        quantity, units, cmap = "time-averaged absorbed flux, all sources", "W m-2", "inferno"
        vmin, vmax = float(values.min()), float(values.max())
        rgba = _colours(values, vmin, vmax, cmap)
    else:
        values = g.front_node.astype(float)
        quantity, units, cmap = "front node index", "1", "tab20"
        vmin, vmax = 0.0, float(max(g.n_nodes - 1, 1))
        from matplotlib import colormaps

        rgba = (np.asarray(colormaps[cmap]((g.front_node % 20) / 19.0)) * 255).round().astype(
            np.uint8)
    vertices = np.asarray(g.vertices, float)[g.triangles.reshape(-1)]
    faces = np.arange(3 * f, dtype=np.int64).reshape(f, 3)
    mesh = trimesh.Trimesh(vertices=vertices, faces=faces, process=False,
                           vertex_colors=np.repeat(rgba, 3, axis=0))
    mesh.vertex_attributes["_VALUE"] = np.repeat(values.astype(np.float32), 3)
    mesh.metadata.update({"quantity": quantity, "units": units, "colormap": cmap,
                          "vmin": vmin, "vmax": vmax, "model": results.model_name})
    with atomic.open_atomic(path, "the glTF file", inputs=_inputs(results), hint=_HINT) as fh:
        fh.write(mesh.export(file_type="glb"))
    return path
