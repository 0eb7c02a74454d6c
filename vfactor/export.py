"""``vfactor export``: results as CSV tables for a network solver, and coloured meshes.

Formats (every file, column and unit is listed in the README, "CSV layout"):

``csv``
    A folder of tables (:mod:`vfactor.tables`): ``nodes.csv``, ``couplings.csv`` (ordered
    node pairs at or above ``threshold``), ``conductances.csv`` (symmetric conductors, one
    per unordered pair, and to space) and, when the run has an orbit, ``heat_loads.csv``
    (one row per step and node) and the wide tables ``loads_*``, ``flux_*``,
    ``incident_*`` and ``planet_view_unblocked.csv`` (one row per step, one column per
    node); when parts turn, ``hinges.csv``.
``vtk``
    An unstructured grid (``.vtu``, via meshio) with per-facet cell data for ParaView:
    orbit averages, and the node index of each facet; beside it ``<stem>_nodes.csv``, the
    node name of each index. With an orbit also one ``.vtu`` per step (absorbed flux at
    that step) in ``<stem>_steps/`` and the collection ``<stem>.pvd`` that lists them with
    their times (the ParaView data-collection format).
``gltf``
    A binary glTF (``.glb``, via trimesh) whose facets are coloured by the orbit-average
    absorbed flux (by node where the run has no orbit); the values ride along as the custom
    vertex attribute ``_VALUE`` and the colour range in the mesh ``extras``.
"""

from __future__ import annotations

from pathlib import Path
from typing import NamedTuple

import numpy as np

from . import atomic
from .errors import ArgumentError
from .h5io import Results
from .heating import SOURCES
from .kinematics import placed_geometry
from .tables import DEFAULT_THRESHOLD, REFUSE_HINT, export_csv, inputs_of, write_table

__all__ = ["FORMATS", "DEFAULT_THRESHOLD", "export", "export_csv", "export_vtk",
           "export_gltf", "facet_fields", "facet_node", "vtk_targets", "VtkTargets"]

FORMATS = ("csv", "vtk", "gltf")


def export_cases(path, fmt: str, target, *, case=None, threshold: float = DEFAULT_THRESHOLD,
                 self_terms: bool = False) -> list:
    """Export the results file ``path``: every design case (csv in ``target/CASE/``, vtk
    and gltf as ``TARGET_CASE.vtu`` / ``.glb``), or only ``case``, or the one set of
    results of a file without cases (to ``target`` itself); see :func:`export`."""
    from .h5read import read_results

    first = read_results(path, case=case)
    every = [first]
    if first.case_names and case is None:
        every += [read_results(path, case=c) for c in first.case_names[1:]]
    files = []
    for results in every:
        out = Path(target)
        if len(every) > 1:
            out = out / results.case if fmt == "csv" else \
                out.with_name(f"{out.stem}_{results.case}{out.suffix}")
        files += export(results, fmt, out, threshold=threshold, self_terms=self_terms)
    return files


def export(results: Results, fmt: str, path, *, threshold: float = DEFAULT_THRESHOLD,
           self_terms: bool = False) -> list:
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
    self_terms : bool
        Only for ``csv``: also list a node's exchange with itself in ``conductances.csv``.

    Returns
    -------
    list of pathlib.Path
        For ``vtk`` the ``.vtu`` first, then the node table, then (with an orbit) the
        ``.pvd`` and the step files.

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
        return export_csv(results, path, threshold=threshold, self_terms=self_terms)
    if fmt == "vtk":
        return export_vtk(results, path)
    return [export_gltf(results, path)]


# ---------------------------------------------------------------------------------------
# Meshes
# ---------------------------------------------------------------------------------------
def facet_node(geometry) -> np.ndarray:
    """(f,) int32 — the node of each facet: its front node, or its back node where the
    front is inert; -1 where both sides are inert [1]."""
    front = np.asarray(geometry.front_node, np.int32)
    return np.where(front >= 0, front, np.asarray(geometry.back_node, np.int32))


def facet_fields(results: Results, step: int | None = None) -> dict:
    """Per-facet values exported to meshes: name -> ((f,) array, units).

    Parameters
    ----------
    results : vfactor.h5io.Results
    step : int, optional — with heating, the absorbed flux of this step instead of the
        time average

    Returns
    -------
    dict
        Always ``node`` (:func:`facet_node`), ``front_node``, ``back_node``, ``part`` and
        ``area``; with heating also the absorbed flux ``absorbed_<source>`` and
        ``absorbed_total`` [W m-2], time averages or those of ``step``. Node indices count
        from 0 in the order of ``results.geometry.nodes.names``.
    """
    g = results.geometry
    out = {"node": (facet_node(g), "1"),
           "front_node": (g.front_node.astype(np.int32), "1"),
           "back_node": (g.back_node.astype(np.int32), "1"),
           "part": (g.part.astype(np.int32), "1"),
           "area": (g.areas.astype(float), "m2")}
    if step is not None:
        heat = results.heating
        flux = {src: np.asarray(getattr(heat, f"facet_{src}")[step], float) for src in SOURCES}
        flux["total"] = flux["solar"] + flux["albedo"] + flux["planet_ir"]
        for src, values in flux.items():
            out[f"absorbed_{src}"] = (values, "W m-2")
    elif results.facet_average is not None:
        for src in SOURCES + ("total",):
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


class VtkTargets(NamedTuple):
    """Files of a VTK export (see :func:`vtk_targets`)."""

    mesh: Path
    nodes: Path
    collection: Path | None
    steps: tuple


def vtk_targets(results: Results, path) -> VtkTargets:
    """The files :func:`export_vtk` writes for ``path``.

    ``mesh`` is ``path`` (``.vtu`` added to a bare name); beside it ``<stem>_nodes.csv``;
    with heating the collection ``<stem>.pvd`` and one ``<stem>_steps/step_NNNN.vtu`` per
    step (``collection`` None and ``steps`` empty without heating).
    """
    mesh = _mesh_target(path, ".vtu", (".vtu", ".vtk"))
    nodes = mesh.with_name(f"{mesh.stem}_nodes.csv")
    if results.heating is None:
        return VtkTargets(mesh, nodes, None, ())
    count = results.heating.node_solar.shape[0]
    width = max(4, len(str(count - 1)))
    folder = mesh.with_name(f"{mesh.stem}_steps")
    steps = tuple(folder / f"step_{k:0{width}d}.vtu" for k in range(count))
    return VtkTargets(mesh, nodes, mesh.with_suffix(".pvd"), steps)


def _write_mesh(batch, target, vertices, triangles, fields, what, file_format):
    import meshio

    mesh = meshio.Mesh(points=np.asarray(vertices, float),
                       cells=[("triangle", np.asarray(triangles, np.int64))],
                       cell_data={name: [values] for name, (values, _u) in fields.items()})
    # meshio's writers open the file by name: they get the temporary's name, and the
    # format explicitly (the temporary ends in .tmp)
    with batch.path(target, what) as tmp:
        mesh.write(tmp, file_format=file_format)
    return target


def _collection(batch, target: Path, times, files) -> Path:
    """A ParaView data collection (``.pvd``): one ``DataSet`` per step file with its time
    [s], file names relative to the collection's folder."""
    import xml.etree.ElementTree as ET

    root = ET.Element("VTKFile", type="Collection", version="0.1", byte_order="LittleEndian")
    coll = ET.SubElement(root, "Collection")
    for t, f in zip(times, files):
        ET.SubElement(coll, "DataSet", timestep=repr(float(t)), group="", part="0",
                      file=f.relative_to(target.parent).as_posix())
    ET.indent(root)
    with batch.open(target, "the VTK collection") as fh:
        ET.ElementTree(root).write(fh, encoding="utf-8", xml_declaration=True)
        fh.write(b"\n")
    return target


def export_vtk(results: Results, path) -> list:
    """Write the facets with their :func:`facet_fields` as VTK cell data (meshio), the
    node names of the indices and, with heating, one file per step and their collection.

    A path without a suffix gets ``.vtu``; ``.vtk`` writes the legacy VTK format (the
    step files are ``.vtu`` either way); any other suffix is refused. VTK arrays carry no
    unit attribute; the units are those of :func:`facet_fields` (``absorbed_*`` in W m-2,
    ``area`` in m2, indices 1), as the README's CSV layout section lists them.

    Files (:func:`vtk_targets`): ``path`` with the orbit averages; ``<stem>_nodes.csv``,
    columns ``node_index [1], node`` (the name of each index of the cell fields ``node``,
    ``front_node`` and ``back_node``); with heating ``<stem>_steps/step_NNNN.vtu`` (the
    absorbed flux of step NNNN, the vertices where the turning parts are at that step) and
    ``<stem>.pvd`` listing them with the step times [s] (meshio's VTU writer drops field
    data, so the times live in the collection only). Node names ride in a table beside
    the mesh, not as a VTK string array in the field data: meshio 5.3 refuses to read a
    ``.vtu`` holding one ("Illegal data type 'String'").

    Returns
    -------
    list of pathlib.Path — the mesh, the node table, then the collection and the step files
    """
    targets = vtk_targets(results, path)
    every = [targets.mesh, targets.nodes] + ([targets.collection] if targets.collection else [])
    atomic.refuse_inputs(every + list(targets.steps), inputs_of(results), hint=REFUSE_HINT)
    g = results.geometry
    file_format = "vtu" if targets.mesh.suffix.lower() == ".vtu" else "vtk"
    with atomic.Batch(inputs_of(results), hint=REFUSE_HINT) as batch:
        _write_mesh(batch, targets.mesh, g.vertices, g.triangles, facet_fields(results),
                    "the VTK file", file_format)
        write_table(batch, targets.nodes, ["node_index [1]", "node"],
                    list(enumerate(g.nodes.names)), "the node-name table of the VTK file")
        if targets.steps:
            batch.folder(targets.steps[0].parent, "the folder of the VTK step files")
            tr = results.trajectory
            for k, target in enumerate(targets.steps):
                placed = g if results.hinges is None else placed_geometry(g, results.hinges, k)
                _write_mesh(batch, target, placed.vertices, g.triangles,
                            facet_fields(results, step=k), f"the VTK file of step {k}", "vtu")
            _collection(batch, targets.collection, tr.time, targets.steps)
    return every + list(targets.steps)


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
    atomic.refuse_inputs(path, inputs_of(results), hint=REFUSE_HINT)
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
    with atomic.open_atomic(path, "the glTF file", inputs=inputs_of(results),
                            hint=REFUSE_HINT) as fh:
        fh.write(mesh.export(file_type="glb"))
    return path
