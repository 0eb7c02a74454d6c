"""The results file: one self-describing HDF5 file per run (ARCHITECTURE section 6).

:func:`write_results` writes the geometry, couplings, trajectory and heating of a run; every
dataset carries a ``units`` attribute (UDUNITS-2 strings, ``"1"`` for dimensionless numbers
and indices, ``""`` for text) and a short ``description``. The root carries the provenance
(version, model hash, seed, rays, elapsed times). The file is assembled in memory and written
by :mod:`vfactor.atomic` under a temporary name in the destination folder, renamed with
:func:`os.replace` only when complete, so a crash never leaves a truncated file under the
requested name and an older file of that name survives a failed write.

:func:`read_results` (:mod:`vfactor.h5read`, also importable from here) reads such a file
back into a :class:`Results` record, the input of ``vfactor summary``, ``plot`` and
``export``; the schema and its check on read are in :mod:`vfactor.h5schema`. The layout itself is documented in the README
("HDF5 layout"), which is the one place the format is described.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import json
from pathlib import Path

import numpy as np

from .atomic import OutputError, refuse_inputs, write_bytes
from .h5read import Results, read_results
from .h5schema import FILE_KIND, SCHEMA_VERSION, SOURCES, h5py_quiet
from .constants import STEFAN_BOLTZMANN
from .geometry import Geometry
from .heating import Heating
from .radiation import Exchange, ViewFactors
from .trajectory import Trajectory

__all__ = ["SCHEMA_VERSION", "FILE_KIND", "Results", "write_results", "read_results",
           "node_averages"]

def _version() -> str:
    try:
        from importlib.metadata import PackageNotFoundError, version

        return version("vfactor")
    except PackageNotFoundError:  # pragma: no cover - running from an uninstalled tree
        return "0+unknown"


# ---------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------
def _str_dtype():
    """h5py's variable-length UTF-8 string type."""
    import h5py

    return h5py.string_dtype("utf-8")


def _put(group, name, data, units, description, *, compress=False):
    """Create one dataset with its ``units`` and ``description`` attributes."""
    if isinstance(data, str):
        ds = group.create_dataset(name, data=data, dtype=_str_dtype())
    elif isinstance(data, (list, tuple)) and (len(data) == 0 or isinstance(data[0], str)):
        ds = group.create_dataset(name, data=np.array(list(data), dtype=object),
                                  dtype=_str_dtype(), shape=(len(data),))
    else:
        arr = np.ascontiguousarray(data)
        if compress and arr.ndim == 2 and arr.size > 0:
            chunks = (max(1, min(arr.shape[0], 16)), max(1, min(arr.shape[1], 8192)))
            ds = group.create_dataset(name, data=arr, chunks=chunks, compression="gzip",
                                      compression_opts=4, shuffle=True)
        else:
            ds = group.create_dataset(name, data=arr)
    ds.attrs["units"] = units
    ds.attrs["description"] = description
    return ds


def _put_csr(group, name, matrix, units, description):
    """One (n, n) coupling matrix as a CSR group: ``data``, ``indices``, ``indptr`` and
    the attributes ``shape``, ``layout``, ``units``, ``description`` (gzip, chunked)."""
    import scipy.sparse as sp

    m = sp.csr_array(matrix)
    m.sum_duplicates()
    m.sort_indices()
    g = group.create_group(name)
    g.attrs["shape"] = np.asarray(m.shape, dtype=np.int64)
    g.attrs["layout"] = ("CSR: row i holds columns indices[indptr[i]:indptr[i+1]] with values "
                         "data[...] (scipy.sparse.csr_array((data, indices, indptr), shape)); "
                         "entries not stored are zero")
    g.attrs["units"] = units
    g.attrs["description"] = description
    index_type = np.int32 if max(m.shape) < 2 ** 31 else np.int64
    for key, arr in (("data", m.data.astype(np.float64)),
                     ("indices", m.indices.astype(index_type)),
                     ("indptr", m.indptr.astype(np.int64))):
        if arr.size > 4096:
            ds = g.create_dataset(key, data=arr, chunks=(min(arr.size, 1 << 18),),
                                  compression="gzip", compression_opts=4, shuffle=True)
        else:
            ds = g.create_dataset(key, data=arr)
        ds.attrs["units"] = units if key == "data" else "1"
    return g


def _time_weights(time: np.ndarray) -> np.ndarray:
    """Duration each step stands for [s]: from the midpoint to the previous step to the
    midpoint to the next (the first and last steps take their one neighbouring interval),
    as :func:`vfactor.heating.step_weights`. Evenly spaced steps weigh the same, so the
    average over a whole orbit sampled at even steps is the plain mean of the steps."""
    t = np.asarray(time, dtype=float)
    if t.size == 0:
        return t
    if t.size == 1:
        return np.ones(1)
    dt = np.diff(t)
    w = np.empty_like(t)
    w[0], w[-1] = dt[0], dt[-1]
    w[1:-1] = 0.5 * (dt[:-1] + dt[1:])
    return w


def node_averages(values: np.ndarray, time: np.ndarray) -> np.ndarray:
    """Time-weighted average over the steps of ``values`` (t, k) -> (k,).

    Uses :func:`_time_weights` (midpoint weights; the plain mean for even steps).
    """
    w = _time_weights(time)
    return (np.asarray(values, dtype=float) * w[:, None]).sum(axis=0) / w.sum()


def _write_model(root, model):
    g = root.create_group("model")
    _put(g, "source", str(model.source_text), "", "text of the model file (TOML), as read")
    g.attrs["name"] = str(getattr(model, "name", ""))
    g.attrs["file"] = str(getattr(model, "path", ""))
    g.attrs["sha256"] = str(model.sha256)
    g.attrs["length_unit"] = str(getattr(model, "length_unit", "m"))


def _write_geometry(root, geometry: Geometry):
    nodes = geometry.nodes
    g = root.create_group("nodes")
    _put(g, "name", tuple(nodes.names), "", "node names, in the order of every (n,) axis")
    _put(g, "area", nodes.area, "m2", "area of the facet sides assigned to the node")
    _put(g, "solar_absorptivity", nodes.solar_absorptivity, "1", "solar-band absorptivity alpha")
    _put(g, "ir_emissivity", nodes.ir_emissivity, "1", "infrared-band emissivity epsilon")
    _put(g, "solar_specular", nodes.solar_specular, "1",
         "share of reflected solar energy reflected specularly")
    _put(g, "ir_specular", nodes.ir_specular, "1",
         "share of reflected infrared energy reflected specularly")
    _put(g, "coating", tuple(nodes.coating), "", "coating name of the node")
    _put(g, "facet_count", np.asarray(nodes.facet_count, dtype=np.int64), "1",
         "number of facet sides assigned to the node")

    f = root.create_group("facets")
    _put(f, "vertices", geometry.vertices, "m", "vertex coordinates in the body frame")
    _put(f, "triangles", np.asarray(geometry.triangles, dtype=np.int64), "1",
         "vertex indices of each facet, counter-clockwise seen from the front")
    _put(f, "normals", geometry.normals, "1", "unit normal of the front side")
    _put(f, "areas", geometry.areas, "m2", "facet area")
    _put(f, "centroids", geometry.centroids, "m", "facet centroid")
    _put(f, "front_node", np.asarray(geometry.front_node, dtype=np.int32), "1",
         "node index of the front side, -1 where inert")
    _put(f, "back_node", np.asarray(geometry.back_node, dtype=np.int32), "1",
         "node index of the back side, -1 where inert")
    _put(f, "front_coating", np.asarray(geometry.front_coating, dtype=np.int32), "1",
         "coating index of the front side (into /coatings), -1 where inert")
    _put(f, "back_coating", np.asarray(geometry.back_coating, dtype=np.int32), "1",
         "coating index of the back side (into /coatings), -1 where inert")
    _put(f, "part", np.asarray(geometry.part, dtype=np.int32), "1",
         "part index of each facet (into /facets/part_names)")
    _put(f, "part_names", tuple(geometry.part_names), "", "part names")

    c = root.create_group("coatings")
    co = geometry.coatings
    _put(c, "name", tuple(x.name for x in co), "", "coating names")
    _put(c, "solar_absorptivity", np.array([x.solar_absorptivity for x in co], float), "1",
         "solar-band absorptivity alpha")
    _put(c, "ir_emissivity", np.array([x.ir_emissivity for x in co], float), "1",
         "infrared-band emissivity epsilon")
    _put(c, "solar_specular", np.array([x.solar_specular for x in co], float), "1",
         "specular share of reflected solar energy")
    _put(c, "ir_specular", np.array([x.ir_specular for x in co], float), "1",
         "specular share of reflected infrared energy")


def _write_view_factors(root, vf: ViewFactors):
    g = root.create_group("view_factors")
    _put_csr(g, "matrix", vf.matrix, "1",
         "view factor F_ij, row i = from node i, after reciprocity/closure smoothing")
    _put(g, "space", vf.space, "1", "view factor to deep space, after smoothing")
    _put(g, "inert", vf.inert, "1", "share of emitted rays lost on inert sides")
    _put_csr(g, "stderr", vf.stderr, "1", "one-sigma statistical error of each raw entry")
    _put(g, "stderr_space", vf.stderr_space, "1", "one-sigma statistical error of raw_space")
    _put_csr(g, "raw_matrix", vf.raw_matrix, "1", "view factors straight from the ray tallies")
    _put(g, "raw_space", vf.raw_space, "1", "view factor to space straight from the tallies")
    _put(g, "raw_inert", vf.raw_inert, "1", "share lost on inert sides, from the tallies")
    if vf.smoothed_stderr is not None:
        _put_csr(g, "smoothed_stderr", vf.smoothed_stderr, "1",
                 "one-sigma statistical error of each entry of matrix (the delivered values)")
        _put(g, "smoothed_stderr_space", vf.smoothed_stderr_space, "1",
             "one-sigma statistical error of space (the delivered values)")
    _put(g, "rays", np.asarray(vf.rays, dtype=np.int64), "1", "rays emitted per node")
    g.attrs["adjustment_sigma"] = float(vf.adjustment_sigma)
    g.attrs["method"] = str(vf.method)
    g.attrs["converged"] = bool(vf.converged)
    g.attrs["target_error"] = float("nan") if vf.target_error is None else float(vf.target_error)
    if vf.facet_matrix is not None:
        import scipy.sparse as sp

        m = sp.csr_matrix(vf.facet_matrix)
        h = g.create_group("facet")
        h.attrs["shape"] = np.asarray(m.shape, dtype=np.int64)
        h.attrs["layout"] = "CSR (scipy.sparse.csr_matrix(data, indices, indptr), shape)"
        f = m.shape[0] // 2
        h.attrs["rows"] = (f"facet side: row k = front side of facet k, row {f} + k = its "
                           "back side (empty rows: inert sides)")
        h.attrs["columns"] = (f"node index 0..{m.shape[1] - 3}, then space "
                              f"({m.shape[1] - 2}), then inert ({m.shape[1] - 1})"
                              if m.shape[1] >= 2 else "node index")
        _put(h, "data", m.data, "1", "facet-side-to-node view factors (non-zero entries)")
        _put(h, "indices", m.indices.astype(np.int64), "1", "column index of each entry")
        _put(h, "indptr", m.indptr.astype(np.int64), "1", "row start offsets into data")


def _write_exchange(root, ex: Exchange):
    g = root.create_group("exchange")
    _put_csr(g, "gebhart", ex.gebhart, "1",
         f"Gebhart factor B_ij ({ex.band} band): share of i's emission absorbed by j")
    _put(g, "gebhart_space", ex.gebhart_space, "1", "share of i's emission escaping to space")
    _put_csr(g, "area", ex.area, "m2", "exchange area eps_i A_i B_ij")
    _put(g, "area_space", ex.area_space, "m2", "exchange area to space eps_i A_i B_i,space")
    _put_csr(g, "conductance", STEFAN_BOLTZMANN * ex.area, "W K-4",
         "radiative conductance sigma eps_i A_i B_ij (heat flow = G (T_i^4 - T_j^4))")
    _put(g, "conductance_space", STEFAN_BOLTZMANN * np.asarray(ex.area_space), "W K-4",
         "radiative conductance to deep space sigma eps_i A_i B_i,space")
    if ex.stderr is not None:
        _put_csr(g, "stderr", ex.stderr, "1", "one-sigma statistical error of gebhart")
    if ex.dropped is not None:
        _put(g, "dropped", np.asarray(ex.dropped, dtype=np.float64), "1",
             "share of i's emission in Gebhart entries below the drop tolerance, left out")
        g.attrs["drop_tolerance"] = float(ex.drop_tolerance)
    g.attrs["method"] = str(ex.method)
    g.attrs["band"] = str(ex.band)


def _write_trajectory(root, tr: Trajectory):
    g = root.create_group("orbit")
    g.attrs["epoch"] = str(tr.epoch_utc)
    g.attrs["period_s"] = float(tr.period)
    planet = tr.planet
    g.attrs["planet"] = str(getattr(planet, "name", planet if isinstance(planet, str) else ""))
    radius = getattr(planet, "radius", None)
    if radius is not None:
        g.attrs["planet_radius_m"] = float(radius)
    g.attrs["shadow_model"] = str(getattr(tr, "shadow_model", ""))
    g.attrs["attitude_note"] = str(getattr(tr, "attitude_note", ""))
    _put(g, "time", tr.time, "s", f"time since the epoch {tr.epoch_utc}")
    _put(g, "position", np.asarray(tr.position) / 1e3, "km",
         "vehicle position, planet-centred inertial (ICRF axes)")
    _put(g, "velocity", np.asarray(tr.velocity) / 1e3, "km s-1", "vehicle velocity, inertial")
    _put(g, "sun_fraction", tr.sun_fraction, "1",
         "visible share of the solar disk, 0 umbra .. 1 full sun")
    _put(g, "sun_body", tr.sun_body, "1", "unit vector toward the Sun in the body frame")
    _put(g, "nadir_body", tr.nadir_body, "1", "unit vector toward the planet centre, body frame")
    _put(g, "sun_inertial", tr.sun_inertial, "1", "unit vector toward the Sun, inertial")
    _put(g, "sun_distance", np.asarray(tr.sun_distance) / 1e3, "km", "vehicle-to-Sun distance")
    _put(g, "planet_distance", np.asarray(tr.planet_distance) / 1e3, "km",
         "distance from the planet centre")
    _put(g, "beta", np.degrees(tr.beta), "degree",
         "beta angle: Sun direction above the orbit plane")
    _put(g, "body_to_inertial", tr.body_to_inertial, "1",
         "rotation matrix; columns are the body axes in the inertial frame")


def _write_motion(root, motion):
    g = root.create_group("hinges")
    hinges = motion.hinges
    _put(g, "name", [h.name for h in hinges], "", "hinge names, the order of the angle columns")
    _put(g, "law", [h.law for h in hinges], "", "law each hinge follows")
    _put(g, "parent", [h.parent or "" for h in hinges], "", "hinge it rides on ('' none)")
    _put(g, "axis", np.array([h.axis for h in hinges]), "1",
         "unit turning axis, body frame of the model as built")
    _put(g, "point", np.array([h.point for h in hinges]), "m",
         "a point of the axis, body frame of the model as built")
    _put(g, "angle", np.degrees(motion.angles), "degree",
         "hinge angle per step, right-handed about the axis (0: as built)")
    _put(g, "facet_hinge", motion.owner.astype(np.int32), "1",
         "index of the hinge that places each facet, -1 for rigid facets")


def _write_positions(root, pc):
    g = root.create_group("positions")
    _put(g, "angle", np.degrees(pc.angles), "degree",
         "hinge angles of each position, columns in the order of /hinges/name")
    _put(g, "step_position", pc.step_position.astype(np.int32), "1",
         "position nearest to each step's hinge angles")
    for p, (vf, ex) in enumerate(zip(pc.view_factors, pc.exchange)):
        sub = g.create_group(str(p))
        _write_view_factors(sub, vf)
        _write_exchange(sub, ex)


def _write_heating(root, heat: Heating, time):
    g = root.create_group("heating")
    g.attrs["case"] = str(heat.case)
    g.attrs["albedo"] = float(heat.albedo)
    g.attrs["planet_ir_W_m2"] = float(heat.planet_ir)
    names = {"solar": "direct solar", "albedo": "albedo (planet-reflected solar)",
             "planet_ir": "planet infrared"}
    for src in SOURCES:
        _put(g, src, getattr(heat, f"node_{src}"), "W",
             f"absorbed {names[src]} power per step and node, internal reflections included")
    for src in SOURCES:
        _put(g, f"incident_{src}", getattr(heat, f"incident_{src}"), "W",
             f"incident {names[src]} power per step and node, before absorption")
    _put(g, "solar_constant", heat.solar_constant, "W m-2", "solar irradiance used at each step")
    for src in SOURCES:
        value = getattr(heat, f"node_{src}_stderr", None)
        if value is not None:
            _put(g, f"{src}_stderr", value, "W",
                 f"one-sigma Monte Carlo error of the absorbed {names[src]} per node (heating "
                 f"rays; couplings' error in reflected power to first order)")
        value = getattr(heat, f"escaped_{src}", None)
        if value is not None:
            _put(g, f"escaped_{src}", value, "W",
                 f"{names[src]} power reflected by the vehicle that left it, per step")
        value = getattr(heat, f"inert_{src}", None)
        if value is not None:
            _put(g, f"inert_{src}", value, "W",
                 f"reflected {names[src]} power that ended on inert sides, per step")
    for key in ("rays_per_facet", "sun_samples"):
        if hasattr(heat, key):
            g.attrs[key] = int(getattr(heat, key))
    for src in ("albedo", "planet_ir"):
        value = getattr(heat, f"node_{src}_ray_stderr", None)
        if value is not None:
            _put(g, f"{src}_ray_stderr", value, "W",
                 f"the part of {src}_stderr that the planet rays carry (without the couplings' "
                 f"error in reflected power): what more planet rays lower")
    if getattr(heat, "node_planet_rays", None) is not None:
        _put(g, "planet_rays", np.asarray(heat.node_planet_rays, dtype=np.int64), "1",
             "planet rays per facet side of each node (more where the planet loads are the "
             "least certain: planet rays by need)")
    if hasattr(heat, "seed"):
        g.attrs["seed"] = np.uint64(heat.seed)  # seeds span [0, 2**64)
    f = g.create_group("facet")
    for src in SOURCES:
        _put(f, src, getattr(heat, f"facet_{src}"), "W m-2",
             f"absorbed {names[src]} flux per step and facet (both sides summed, per facet area)",
             compress=True)
    if time is not None and np.asarray(time).size:
        a = g.create_group("average")
        fa = g.create_group("facet_average")
        total_n = 0.0
        total_f = 0.0
        for src in SOURCES:
            node_avg = node_averages(getattr(heat, f"node_{src}"), time)
            fac_avg = node_averages(getattr(heat, f"facet_{src}"), time)
            total_n = total_n + node_avg
            total_f = total_f + fac_avg
            _put(a, src, node_avg, "W", f"time-averaged absorbed {names[src]} per node")
            _put(fa, src, fac_avg, "W m-2", f"time-averaged absorbed {names[src]} flux per facet")
        _put(a, "total", total_n, "W", "time-averaged absorbed power per node, all sources")
        _put(fa, "total", total_f, "W m-2", "time-averaged absorbed flux per facet, all sources")


def _write_case_results(root, *, exchange, trajectory, motion, positions, heating):
    """The groups that depend on a case, under ``root`` (the file's root or a case group)."""
    if exchange is not None:
        _write_exchange(root, exchange)
    if trajectory is not None:
        _write_trajectory(root, trajectory)
    if motion is not None:
        _write_motion(root, motion)
    if positions is not None:
        _write_positions(root, positions)
    if heating is not None:
        _write_heating(root, heating, None if trajectory is None else trajectory.time)


def _write_cases(root, cases):
    """``/cases/NAME/...``: per design case its coating values, couplings and loads."""
    top = root.create_group("cases")
    _put(top, "name", [c.name for c in cases], "", "design cases, in the model file's order")
    for c in cases:
        g = top.create_group(c.name)
        g.attrs["description"] = str(c.description)
        nodes = g.create_group("nodes")
        for key in ("solar_absorptivity", "ir_emissivity", "solar_specular", "ir_specular"):
            _put(nodes, key, getattr(c.geometry.nodes, key), "1",
                 f"{key.replace('_', ' ')} of each node in this case")
        _put(nodes, "coatings", json.dumps([dataclasses.asdict(x) for x in c.geometry.coatings]),
             "", "coating values of this case (JSON list, the order of /facets coating indices)")
        _write_case_results(g, exchange=c.exchange, trajectory=c.trajectory, motion=c.motion,
                            positions=c.positions, heating=c.heating)


def _write_all(target, *, model, geometry, view_factors, exchange, trajectory, heating,
               provenance, motion=None, positions=None, cases=None):
    h5py = h5py_quiet()

    prov = dict(provenance or {})
    with h5py.File(target, "w", track_order=True) as root:
        root.attrs["file_kind"] = FILE_KIND
        root.attrs["schema_version"] = SCHEMA_VERSION
        root.attrs["vfactor_version"] = str(prov.pop("vfactor_version", _version()))
        root.attrs["created_utc"] = str(prov.pop("created_utc", _dt.datetime.now(
            _dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")))
        root.attrs["model_sha256"] = str(model.sha256)
        root.attrs["model_name"] = str(getattr(model, "name", ""))
        root.attrs["seed"] = np.uint64(prov.pop("seed"))  # seeds span [0, 2**64)
        root.attrs["rays_per_node"] = int(prov.pop("rays_per_node"))
        elapsed = prov.pop("elapsed_s", {}) or {}
        for stage, seconds in elapsed.items():
            root.attrs[f"elapsed_{stage}_s"] = float(seconds)
        for key, value in prov.items():
            if isinstance(value, (bool, int, float, str, np.integer, np.floating)):
                root.attrs[key] = value
            else:
                root.attrs[key] = json.dumps(value)
        _write_model(root, model)
        _write_geometry(root, geometry)
        if view_factors is not None:
            _write_view_factors(root, view_factors)
        if cases:
            _write_cases(root, cases)
        else:
            _write_case_results(root, exchange=exchange, trajectory=trajectory, motion=motion,
                                positions=positions, heating=heating)


def write_results(path, *, model, geometry, view_factors=None, exchange=None,
                  trajectory=None, heating=None, provenance, inputs=(), motion=None,
                  positions=None, cases=None) -> Path:
    """Write the results of one run to an HDF5 file, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination file. Its folder must exist. An existing file is replaced only when
        the new one is complete.
    model : vfactor.model.Model
        Uses ``source_text``, ``sha256``, ``name``, ``path``, ``length_unit``.
    geometry : vfactor.geometry.Geometry
    view_factors : vfactor.radiation.ViewFactors, optional
    exchange : vfactor.radiation.Exchange, optional
    trajectory : vfactor.trajectory.Trajectory, optional
    heating : vfactor.heating.Heating, optional
        Its (t, ...) arrays must have the steps of ``trajectory``.
    motion : vfactor.kinematics.Motion, optional
        Hinges and their angle per step of ``trajectory`` (group ``/hinges``).
    positions : vfactor.positions.PositionCouplings, optional
        Couplings at hinge positions (group ``/positions``).
    cases : sequence, optional
        Design cases (objects with ``name``, ``description``, ``geometry`` (its coating
        values), ``exchange``, ``trajectory``, ``motion``, ``positions``, ``heating``):
        written under ``/cases/NAME`` instead of ``exchange`` .. ``positions`` above.
    provenance : dict
        Must hold ``seed`` and ``rays_per_node``; ``elapsed_s`` may map stage names to
        seconds (written as root attributes ``elapsed_<stage>_s``); other scalar entries
        become root attributes as they are, others JSON text.
    inputs : iterable of paths
        Files the run read (model, meshes): ``path`` must not be one of them.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    vfactor.atomic.OutputError
        The folder does not exist or cannot be written, the disk is full, or ``path`` is
        one of ``inputs`` (one line; nothing is left under ``path`` or beside it).

    Notes
    -----
    The HDF5 library is given an in-memory file (h5py file-like object driver) and the
    finished image is written by :func:`vfactor.atomic.write_bytes` (temporary, fsync,
    rename). When HDF5 itself writes to a full disk it cannot close the file cleanly
    (h5py reports errors from object deallocation, and the process may crash at exit);
    in memory its writes cannot fail, so a full disk is one clean :class:`OSError` of our
    own write. The cost is one copy of the file in memory while it is written.
    """
    import io

    path = Path(path)
    refuse_inputs(path, inputs, hint="give the results another file name (e.g. run.h5)")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise OutputError(f"{path}: cannot write the results file: folder {folder} does not "
                          "exist", file=path)
    image = io.BytesIO()
    _write_all(image, model=model, geometry=geometry, view_factors=view_factors,
               exchange=exchange, trajectory=trajectory, heating=heating,
               provenance=provenance, motion=motion, positions=positions, cases=cases)
    return write_bytes(path, image.getbuffer(), "the results file", inputs=inputs)
