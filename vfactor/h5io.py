"""The results file: one self-describing HDF5 file per run (ARCHITECTURE section 6).

:func:`write_results` writes the geometry, couplings, trajectory and heating of a run; every
dataset carries a ``units`` attribute (UDUNITS-2 strings, ``"1"`` for dimensionless numbers
and indices, ``""`` for text) and a short ``description``. The root carries the provenance
(version, model hash, seed, rays, elapsed times). The file is assembled in memory and written
by :mod:`vfactor.atomic` under a temporary name in the destination folder, renamed with
:func:`os.replace` only when complete, so a crash never leaves a truncated file under the
requested name and an older file of that name survives a failed write.

:func:`read_results` reads such a file back into a :class:`Results` record, the input of
``vfactor summary``, ``plot`` and ``export``. The layout itself is documented in the README
("HDF5 layout"), which is the one place the format is described.
"""

from __future__ import annotations

import datetime as _dt
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .atomic import OutputError, refuse_inputs, write_bytes
from .constants import STEFAN_BOLTZMANN
from .errors import ResultsFileError
from .geometry import Coating, Geometry, NodeTable
from .heating import Heating
from .radiation import Exchange, ViewFactors
from .trajectory import Trajectory

__all__ = ["SCHEMA_VERSION", "FILE_KIND", "Results", "write_results", "read_results",
           "node_averages"]

SCHEMA_VERSION = 1
"""Version of the file layout; raised when a dataset is renamed or changes meaning."""

FILE_KIND = "vfactor-results"
"""Value of the root attribute ``file_kind`` that marks a file as ours."""

_STR = None  # filled lazily with h5py.string_dtype("utf-8")
_SOURCES = ("solar", "albedo", "planet_ir")


def _h5py():
    """h5py, with HDF5's automatic printing of its error stack off in this thread.

    h5py turns it off at import, but HDF5 keeps one error stack per thread, so a reader or
    writer in another thread would print HDF5-DIAG traces to standard error beside the
    one-line message (HDF5 User Guide, "HDF5 Error Handling": automatic printing is set
    per stack with H5Eset_auto; h5py's ``_errors.silence_errors`` calls it for the calling
    thread).
    """
    import h5py

    try:
        h5py._errors.silence_errors()
    except AttributeError:  # pragma: no cover - a future h5py without the private helper
        pass
    return h5py


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
    import h5py

    global _STR
    if _STR is None:
        _STR = h5py.string_dtype("utf-8")
    return _STR


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
    _put(g, "matrix", vf.matrix, "1",
         "view factor F_ij, row i = from node i, after reciprocity/closure smoothing")
    _put(g, "space", vf.space, "1", "view factor to deep space, after smoothing")
    _put(g, "inert", vf.inert, "1", "share of emitted rays lost on inert sides")
    _put(g, "stderr", vf.stderr, "1", "one-sigma statistical error of each raw entry")
    _put(g, "stderr_space", vf.stderr_space, "1", "one-sigma statistical error of raw_space")
    _put(g, "raw_matrix", vf.raw_matrix, "1", "view factors straight from the ray tallies")
    _put(g, "raw_space", vf.raw_space, "1", "view factor to space straight from the tallies")
    _put(g, "raw_inert", vf.raw_inert, "1", "share lost on inert sides, from the tallies")
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
    _put(g, "gebhart", ex.gebhart, "1",
         f"Gebhart factor B_ij ({ex.band} band): share of i's emission absorbed by j")
    _put(g, "gebhart_space", ex.gebhart_space, "1", "share of i's emission escaping to space")
    _put(g, "area", ex.area, "m2", "exchange area eps_i A_i B_ij")
    _put(g, "area_space", ex.area_space, "m2", "exchange area to space eps_i A_i B_i,space")
    _put(g, "conductance", STEFAN_BOLTZMANN * np.asarray(ex.area), "W K-4",
         "radiative conductance sigma eps_i A_i B_ij (heat flow = G (T_i^4 - T_j^4))")
    _put(g, "conductance_space", STEFAN_BOLTZMANN * np.asarray(ex.area_space), "W K-4",
         "radiative conductance to deep space sigma eps_i A_i B_i,space")
    if ex.stderr is not None:
        _put(g, "stderr", ex.stderr, "1", "one-sigma statistical error of gebhart")
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


def _write_heating(root, heat: Heating, time):
    g = root.create_group("heating")
    g.attrs["case"] = str(heat.case)
    g.attrs["albedo"] = float(heat.albedo)
    g.attrs["planet_ir_W_m2"] = float(heat.planet_ir)
    names = {"solar": "direct solar", "albedo": "albedo (planet-reflected solar)",
             "planet_ir": "planet infrared"}
    for src in _SOURCES:
        _put(g, src, getattr(heat, f"node_{src}"), "W",
             f"absorbed {names[src]} power per step and node, internal reflections included")
    for src in _SOURCES:
        _put(g, f"incident_{src}", getattr(heat, f"incident_{src}"), "W",
             f"incident {names[src]} power per step and node, before absorption")
    _put(g, "solar_constant", heat.solar_constant, "W m-2", "solar irradiance used at each step")
    for src in _SOURCES:
        value = getattr(heat, f"node_{src}_stderr", None)
        if value is not None:
            _put(g, f"{src}_stderr", value, "W",
                 f"one-sigma Monte Carlo error of the directly absorbed {names[src]} per node")
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
    if hasattr(heat, "seed"):
        g.attrs["seed"] = np.uint64(heat.seed)  # seeds span [0, 2**64)
    f = g.create_group("facet")
    for src in _SOURCES:
        _put(f, src, getattr(heat, f"facet_{src}"), "W m-2",
             f"absorbed {names[src]} flux per step and facet (both sides summed, per facet area)",
             compress=True)
    if time is not None and np.asarray(time).size:
        a = g.create_group("average")
        fa = g.create_group("facet_average")
        total_n = 0.0
        total_f = 0.0
        for src in _SOURCES:
            node_avg = node_averages(getattr(heat, f"node_{src}"), time)
            fac_avg = node_averages(getattr(heat, f"facet_{src}"), time)
            total_n = total_n + node_avg
            total_f = total_f + fac_avg
            _put(a, src, node_avg, "W", f"time-averaged absorbed {names[src]} per node")
            _put(fa, src, fac_avg, "W m-2", f"time-averaged absorbed {names[src]} flux per facet")
        _put(a, "total", total_n, "W", "time-averaged absorbed power per node, all sources")
        _put(fa, "total", total_f, "W m-2", "time-averaged absorbed flux per facet, all sources")


def _write_all(target, *, model, geometry, view_factors, exchange, trajectory, heating,
               provenance):
    h5py = _h5py()

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
        if exchange is not None:
            _write_exchange(root, exchange)
        if trajectory is not None:
            _write_trajectory(root, trajectory)
        if heating is not None:
            _write_heating(root, heating, None if trajectory is None else trajectory.time)


def write_results(path, *, model, geometry, view_factors=None, exchange=None,
                  trajectory=None, heating=None, provenance, inputs=()) -> Path:
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
               provenance=provenance)
    return write_bytes(path, image.getbuffer(), "the results file", inputs=inputs)


# ---------------------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Results:
    """The contents of a results file, as the summary, plots and exports use them.

    Attributes
    ----------
    path : pathlib.Path
    attrs : dict — root attributes (provenance: versions, seed, rays, elapsed times)
    model_source : str — text of the model file
    model_name : str
    geometry : vfactor.geometry.Geometry
    view_factors : ViewFactors or None
    exchange : Exchange or None
    trajectory : Trajectory or None — SI units as in memory; ``planet`` is the planet name
    heating : Heating or None
    node_average : dict or None — source -> (n,) time-averaged absorbed power [W]
        (keys ``solar``, ``albedo``, ``planet_ir``, ``total``)
    facet_average : dict or None — source -> (f,) time-averaged absorbed flux [W m-2]
    orbit_attrs : dict — attributes of /orbit (epoch, period_s, planet, planet_radius_m)
    """

    path: Path
    attrs: dict
    model_source: str
    model_name: str
    geometry: Geometry
    view_factors: ViewFactors | None = None
    exchange: Exchange | None = None
    trajectory: Trajectory | None = None
    heating: Heating | None = None
    node_average: dict | None = None
    facet_average: dict | None = None
    orbit_attrs: dict = field(default_factory=dict)

    @property
    def seed(self) -> int:
        return int(self.attrs["seed"])

    @property
    def rays_per_node(self) -> int:
        return int(self.attrs["rays_per_node"])

    @property
    def elapsed_s(self) -> dict:
        """Stage name -> seconds, from the root attributes ``elapsed_<stage>_s``."""
        return {k[len("elapsed_"):-2]: float(v) for k, v in self.attrs.items()
                if k.startswith("elapsed_") and k.endswith("_s")}


def _attr(v):
    if isinstance(v, bytes):
        return v.decode("utf-8")
    if isinstance(v, np.generic):
        return v.item()
    return v


def _strs(ds) -> tuple:
    return tuple(s.decode("utf-8") if isinstance(s, bytes) else str(s)
                 for s in ds.asstr()[()])


def _read_geometry(h) -> Geometry:
    n, f, c = h["nodes"], h["facets"], h["coatings"]
    nodes = NodeTable(
        names=_strs(n["name"]), area=n["area"][()],
        solar_absorptivity=n["solar_absorptivity"][()], ir_emissivity=n["ir_emissivity"][()],
        solar_specular=n["solar_specular"][()], ir_specular=n["ir_specular"][()],
        coating=_strs(n["coating"]), facet_count=n["facet_count"][()])
    coatings = tuple(
        Coating(name, float(a), float(e), float(ss), float(es))
        for name, a, e, ss, es in zip(_strs(c["name"]), c["solar_absorptivity"][()],
                                      c["ir_emissivity"][()], c["solar_specular"][()],
                                      c["ir_specular"][()]))
    return Geometry(
        vertices=f["vertices"][()], triangles=f["triangles"][()], normals=f["normals"][()],
        areas=f["areas"][()], centroids=f["centroids"][()], front_node=f["front_node"][()],
        back_node=f["back_node"][()], front_coating=f["front_coating"][()],
        back_coating=f["back_coating"][()], part=f["part"][()],
        part_names=_strs(f["part_names"]), coatings=coatings, nodes=nodes)


def _read_view_factors(g) -> ViewFactors:
    facet = None
    if "facet" in g:
        import scipy.sparse as sp

        h = g["facet"]
        facet = sp.csr_matrix((h["data"][()], h["indices"][()], h["indptr"][()]),
                              shape=tuple(int(x) for x in h.attrs["shape"]))
    target = float(g.attrs["target_error"])
    return ViewFactors(
        matrix=g["matrix"][()], space=g["space"][()], inert=g["inert"][()],
        stderr=g["stderr"][()], stderr_space=g["stderr_space"][()],
        raw_matrix=g["raw_matrix"][()], raw_space=g["raw_space"][()],
        raw_inert=g["raw_inert"][()], rays=g["rays"][()],
        adjustment_sigma=float(g.attrs["adjustment_sigma"]), method=_attr(g.attrs["method"]),
        converged=bool(g.attrs["converged"]),
        target_error=None if np.isnan(target) else target, facet_matrix=facet)


def _read_exchange(g) -> Exchange:
    return Exchange(gebhart=g["gebhart"][()], gebhart_space=g["gebhart_space"][()],
                    area=g["area"][()], area_space=g["area_space"][()],
                    stderr=g["stderr"][()] if "stderr" in g else None,
                    method=_attr(g.attrs["method"]), band=_attr(g.attrs["band"]))


def _read_trajectory(g) -> Trajectory:
    import dataclasses

    known = {x.name for x in dataclasses.fields(Trajectory)}
    extra = {k: _attr(g.attrs[k]) for k in ("shadow_model", "attitude_note")
             if k in known and k in g.attrs}
    return Trajectory(**extra,
        epoch_utc=_attr(g.attrs["epoch"]), time=g["time"][()],
        position=g["position"][()] * 1e3, velocity=g["velocity"][()] * 1e3,
        sun_inertial=g["sun_inertial"][()], sun_distance=g["sun_distance"][()] * 1e3,
        sun_fraction=g["sun_fraction"][()], beta=np.radians(g["beta"][()]),
        body_to_inertial=g["body_to_inertial"][()], sun_body=g["sun_body"][()],
        nadir_body=g["nadir_body"][()], planet_distance=g["planet_distance"][()] * 1e3,
        period=float(g.attrs["period_s"]), planet=_attr(g.attrs["planet"]))


def _read_heating(g, time) -> Heating:
    import dataclasses

    f = g["facet"]
    known = {x.name for x in dataclasses.fields(Heating)}
    extra = {}
    for src in _SOURCES:
        for ds, name in ((f"{src}_stderr", f"node_{src}_stderr"),
                         (f"escaped_{src}", f"escaped_{src}"), (f"inert_{src}", f"inert_{src}")):
            if ds in g and name in known:
                extra[name] = g[ds][()]
    for key in ("rays_per_facet", "sun_samples", "seed"):
        if key in g.attrs and key in known:
            extra[key] = int(g.attrs[key])
    if "time" in known and time is not None:
        extra["time"] = time
    return Heating(**extra,
        node_solar=g["solar"][()], node_albedo=g["albedo"][()],
        node_planet_ir=g["planet_ir"][()], facet_solar=f["solar"][()],
        facet_albedo=f["albedo"][()], facet_planet_ir=f["planet_ir"][()],
        incident_solar=g["incident_solar"][()], incident_albedo=g["incident_albedo"][()],
        incident_planet_ir=g["incident_planet_ir"][()],
        solar_constant=g["solar_constant"][()], albedo=float(g.attrs["albedo"]),
        planet_ir=float(g.attrs["planet_ir_W_m2"]), case=_attr(g.attrs["case"]))


# ---------------------------------------------------------------------------------------
# Validation on read: one table of every dataset the reader uses
# ---------------------------------------------------------------------------------------
# Axis symbols: n nodes (length of /nodes/name), f facets (/facets/triangles), v vertices
# (/facets/vertices), p parts (/facets/part_names), c coatings (/coatings/name), t steps
# (/orbit/time). Kinds: "real" (any number), "int" (whole numbers), "text".
_AXIS_SOURCE = {"n": "nodes/name", "f": "facets/triangles", "v": "facets/vertices",
                "p": "facets/part_names", "c": "coatings/name", "t": "orbit/time"}
_AXIS_WORD = {"n": "node names", "f": "facets", "v": "vertices", "p": "part names",
              "c": "coatings", "t": "time steps"}

_NODE_REALS = ("area", "solar_absorptivity", "ir_emissivity", "solar_specular", "ir_specular")
_COATING_REALS = ("solar_absorptivity", "ir_emissivity", "solar_specular", "ir_specular")

_DATASETS = {  # group -> {dataset: (kind, shape)}; every entry is required in its group
    "model": {"source": ("text", ())},
    "nodes": {"name": ("text", ("n",)), "coating": ("text", ("n",)),
              "facet_count": ("int", ("n",)), **{k: ("real", ("n",)) for k in _NODE_REALS}},
    "facets": {"vertices": ("real", ("v", 3)), "triangles": ("int", ("f", 3)),
               "normals": ("real", ("f", 3)), "areas": ("real", ("f",)),
               "centroids": ("real", ("f", 3)), "part_names": ("text", ("p",)),
               **{k: ("int", ("f",)) for k in ("front_node", "back_node", "front_coating",
                                                "back_coating", "part")}},
    "coatings": {"name": ("text", ("c",)), **{k: ("real", ("c",)) for k in _COATING_REALS}},
    "view_factors": {"matrix": ("real", ("n", "n")), "stderr": ("real", ("n", "n")),
                     "raw_matrix": ("real", ("n", "n")), "rays": ("int", ("n",)),
                     **{k: ("real", ("n",)) for k in ("space", "inert", "stderr_space",
                                                       "raw_space", "raw_inert")}},
    "view_factors/facet": {"data": ("real", ("k",)), "indices": ("int", ("k",)),
                           "indptr": ("int", ("r",))},
    "exchange": {"gebhart": ("real", ("n", "n")), "gebhart_space": ("real", ("n",)),
                 "area": ("real", ("n", "n")), "area_space": ("real", ("n",))},
    "orbit": {"time": ("real", ("t",)), "sun_fraction": ("real", ("t",)),
              "sun_distance": ("real", ("t",)), "planet_distance": ("real", ("t",)),
              "beta": ("real", ("t",)), "body_to_inertial": ("real", ("t", 3, 3)),
              **{k: ("real", ("t", 3)) for k in ("position", "velocity", "sun_body",
                                                  "nadir_body", "sun_inertial")}},
    "heating": {"solar_constant": ("real", ("t",)),
                **{k: ("real", ("t", "n")) for k in _SOURCES},
                **{f"incident_{k}": ("real", ("t", "n")) for k in _SOURCES}},
    "heating/facet": {k: ("real", ("t", "f")) for k in _SOURCES},
    "heating/average": {k: ("real", ("n",)) for k in _SOURCES + ("total",)},
    "heating/facet_average": {k: ("real", ("f",)) for k in _SOURCES + ("total",)},
}
_OPTIONAL = {  # datasets read when present
    "exchange": {"stderr": ("real", ("n", "n"))},
    "heating": {**{f"{k}_stderr": ("real", ("t", "n")) for k in _SOURCES},
                **{f"escaped_{k}": ("real", ("t",)) for k in _SOURCES},
                **{f"inert_{k}": ("real", ("t",)) for k in _SOURCES}},
}
_REQUIRED_GROUPS = ("model", "nodes", "facets", "coatings")
_ATTRS = {  # group ("" = root) -> {attribute: kind}
    "": {"seed": "int", "rays_per_node": "int"},
    "view_factors": {"adjustment_sigma": "real", "method": "text", "converged": "real",
                     "target_error": "real"},
    "exchange": {"method": "text", "band": "text"},
    "orbit": {"epoch": "text", "period_s": "real", "planet": "text"},
    "heating": {"albedo": "real", "planet_ir_W_m2": "real", "case": "text"},
}
_OPTIONAL_ATTRS = {"heating": {"rays_per_facet": "int", "sun_samples": "int", "seed": "int"},
                   "orbit": {"shadow_model": "text", "attitude_note": "text"}}
_INDEX_RANGES = (  # dataset, axis of the referenced table, lowest allowed value
    ("facets/triangles", "v", 0), ("facets/front_node", "n", -1),
    ("facets/back_node", "n", -1), ("facets/front_coating", "c", -1),
    ("facets/back_coating", "c", -1), ("facets/part", "p", 0),
)


def _kind_of(dtype) -> str | None:
    import h5py

    if h5py.check_string_dtype(dtype) is not None:
        return "text"
    if dtype.kind in "iu":
        return "int"
    if dtype.kind in "fb":
        return "real"
    return None


def _kind_ok(found: str | None, wanted: str) -> bool:
    return found == wanted or (wanted == "real" and found == "int")


_KIND_WORD = {"text": "text", "int": "whole numbers", "real": "numbers", None: "other data"}


def _check_attr(obj, group: str, name: str, kind: str, path: Path, *, required: bool):
    """One attribute: present (when required) and of its kind; ResultsFileError if not."""
    where = f"/{group} attribute {name}" if group else f"root attribute {name}"
    if name not in obj.attrs:
        if required:
            raise ResultsFileError(f"{path}: {where}: missing (damaged or incomplete results "
                                   "file)")
        return
    value = _attr(obj.attrs[name])
    if kind == "text":
        ok, wanted = isinstance(value, str), "a text"
    else:
        ok = (isinstance(value, (int, float, bool, np.number, np.bool_))
              and not isinstance(value, str))
        wanted = "a number"
        if kind == "int":
            ok = ok and bool(np.isfinite(value)) and float(value) == int(value) \
                and 0 <= int(value) < 2 ** 64
            wanted = "a whole number in [0, 2**64)"
    if not ok:
        raise ResultsFileError(f"{path}: {where}: {value!r} is not {wanted}")


def _validate(h, path: Path) -> None:
    """Check every dataset the reader uses: present, of the right kind, of the shape the
    node, facet, vertex, part, coating and step counts give, indices in range.

    Raises ResultsFileError naming the file, the dataset and what is wrong.
    """
    import h5py

    def bad(where, what):
        return ResultsFileError(f"{path}: /{where}: {what}")

    for group in _REQUIRED_GROUPS:
        if not isinstance(h.get(group), h5py.Group):
            raise bad(group, "missing (not a complete vfactor results file)")
    if "heating" in h and "orbit" not in h:
        raise bad("orbit", "missing, but /heating is present and needs its time steps")
    if "heating" in h:
        heating = h["heating"]
        if not isinstance(heating, h5py.Group):
            raise bad("heating", "is not a group")
        if "facet" not in heating:
            raise bad("heating/facet", "missing (per-facet heat loads)")
        if ("average" in heating) != ("facet_average" in heating):
            missing = "facet_average" if "average" in heating else "average"
            raise bad(f"heating/{missing}", "missing (time averages come in pairs)")

    sizes = {}

    def size(axis):
        if axis not in sizes:
            ds = h.get(_AXIS_SOURCE[axis])
            if not isinstance(ds, h5py.Dataset) or ds.ndim < 1:
                raise bad(_AXIS_SOURCE[axis], "missing or not an array")
            sizes[axis] = int(ds.shape[0])
        return sizes[axis]

    def expected_shape(shape):
        return tuple(size(a) if isinstance(a, str) else a for a in shape)

    def describe(shape):
        axes = [a for a in shape if isinstance(a, str)]
        return ", ".join(f"{size(a)} {_AXIS_WORD[a]} in /{_AXIS_SOURCE[a]}"
                         for a in dict.fromkeys(axes))

    def check(name, kind, shape):
        obj = h.get(name)
        if not isinstance(obj, h5py.Dataset):
            raise bad(name, "missing (damaged or incomplete results file)")
        found = _kind_of(obj.dtype)
        if not _kind_ok(found, kind):
            raise bad(name, f"holds {_KIND_WORD[found]} ({obj.dtype}), expected "
                            f"{_KIND_WORD[kind]}")
        if obj.ndim != len(shape):
            raise bad(name, f"has {obj.ndim} dimensions {tuple(obj.shape)}, expected "
                            f"{len(shape)}")
        if not any(a in ("k", "r") for a in shape if isinstance(a, str)):
            want = expected_shape(shape)
            if tuple(obj.shape) != want:
                where = describe(shape)
                raise bad(name, f"has shape {tuple(obj.shape)}, expected {want}"
                                + (f" (from the {where})" if where else ""))
        return obj

    for group, table in _DATASETS.items():
        if group in _REQUIRED_GROUPS or group in h:
            if not isinstance(h.get(group), h5py.Group):
                raise bad(group, "is not a group")
            for name, (kind, shape) in table.items():
                check(f"{group}/{name}", kind, shape)
            for name, (kind, shape) in _OPTIONAL.get(group, {}).items():
                if name in h[group]:
                    check(f"{group}/{name}", kind, shape)
    for group, table in _ATTRS.items():
        obj = h if group == "" else h.get(group)
        if obj is not None:
            for name, kind in table.items():
                _check_attr(obj, group, name, kind, path, required=True)
    for group, table in _OPTIONAL_ATTRS.items():
        if group in h:
            for name, kind in table.items():
                _check_attr(h[group], group, name, kind, path, required=False)
    for name, axis, lowest in _INDEX_RANGES:
        values = h[name][()]
        if values.size:
            lo, hi = int(values.min()), int(values.max())
            count = size(axis)
            if lo < lowest or hi >= count:
                value = lo if lo < lowest else hi
                raise bad(name, f"index {value} out of range {lowest}..{count - 1} "
                                f"({count} {_AXIS_WORD[axis]} in /{_AXIS_SOURCE[axis]})")
    if "view_factors/facet" in h:
        _validate_facet_csr(h["view_factors/facet"], path, size("f"), size("n"))


def _validate_facet_csr(g, path: Path, n_facets: int, n_nodes: int) -> None:
    """The sparse facet-side factors: shape (2f, n + 2), CSR arrays consistent."""
    where = f"{path}: /view_factors/facet"
    shape = tuple(int(x) for x in np.ravel(g.attrs.get("shape", ())))
    if shape != (2 * n_facets, n_nodes + 2):
        raise ResultsFileError(f"{where}: attribute shape {shape}, expected "
                               f"{(2 * n_facets, n_nodes + 2)} (facet sides, nodes + space + inert)")
    data, indices, indptr = g["data"][()], g["indices"][()], g["indptr"][()]
    if indptr.shape != (shape[0] + 1,) or data.shape != indices.shape:
        raise ResultsFileError(f"{where}: CSR arrays of {data.size} values, {indices.size} "
                               f"column indices and {indptr.size} row offsets do not fit a "
                               f"{shape[0]}-row matrix")
    if (indptr[0] != 0 or indptr[-1] != data.size or np.any(np.diff(indptr) < 0)
            or (indices.size and (indices.min() < 0 or indices.max() >= shape[1]))):
        raise ResultsFileError(f"{where}: row offsets or column indices out of range")


def read_results(path) -> Results:
    """Read a results file written by :func:`write_results`.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    Results

    Raises
    ------
    ResultsFileError
        The file is missing, is not HDF5, is not a vfactor results file, has a newer
        schema, or lacks or damages a dataset it needs: every dataset is checked for its
        kind (numbers, whole numbers, text) and for the shape the node, facet, vertex,
        part, coating and step counts give, and facet indices for their range, before
        anything is used (one line naming the file and the dataset).
    """
    h5py = _h5py()

    path = Path(path)
    if not path.exists():
        raise ResultsFileError(f"{path}: no such results file")
    if not path.is_file():
        raise ResultsFileError(f"{path}: is not a file")
    if not h5py.is_hdf5(path):
        raise ResultsFileError(f"{path}: not an HDF5 file (expected the output of `vfactor run`)")
    try:
        with h5py.File(path, "r") as h:
            kind = _attr(h.attrs.get("file_kind", ""))
            if kind != FILE_KIND:
                raise ResultsFileError(f"{path}: HDF5 file but not a vfactor results file "
                                       f"(root attribute file_kind = {kind!r})")
            try:
                schema = int(_attr(h.attrs.get("schema_version", -1)))
            except (TypeError, ValueError):
                schema = -1
            if schema > SCHEMA_VERSION or schema < 1:
                raise ResultsFileError(f"{path}: results schema version {schema} is not "
                                       f"supported (this vfactor reads up to {SCHEMA_VERSION})")
            _validate(h, path)
            attrs = {k: _attr(v) for k, v in h.attrs.items()}
            geometry = _read_geometry(h)
            model = h["model"]
            source = model["source"].asstr()[()]
            vf = _read_view_factors(h["view_factors"]) if "view_factors" in h else None
            ex = _read_exchange(h["exchange"]) if "exchange" in h else None
            tr = _read_trajectory(h["orbit"]) if "orbit" in h else None
            heat = (_read_heating(h["heating"], None if tr is None else tr.time)
                    if "heating" in h else None)
            orbit_attrs = {k: _attr(v) for k, v in h["orbit"].attrs.items()} if "orbit" in h else {}
            node_avg = facet_avg = None
            if "heating" in h and "average" in h["heating"]:
                node_avg = {k: v[()] for k, v in h["heating/average"].items()}
                facet_avg = {k: v[()] for k, v in h["heating/facet_average"].items()}
            name = _attr(model.attrs.get("name", ""))
    except KeyError as exc:
        raise ResultsFileError(f"{path}: incomplete vfactor results file ({exc.args[0]})") from None
    except UnicodeDecodeError as exc:
        raise ResultsFileError(f"{path}: text that is not UTF-8 ({exc.reason} at byte "
                               f"{exc.start})") from None
    except OSError as exc:
        raise ResultsFileError(f"{path}: cannot read results file: {exc}") from None
    return Results(path=path, attrs=attrs, model_source=source, model_name=name,
                   geometry=geometry, view_factors=vf, exchange=ex, trajectory=tr,
                   heating=heat, node_average=node_avg, facet_average=facet_avg,
                   orbit_attrs=orbit_attrs)
