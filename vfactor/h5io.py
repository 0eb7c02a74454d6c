"""The results file: one self-describing HDF5 file per run (ARCHITECTURE section 6).

:func:`write_results` writes the geometry, couplings, trajectory and heating of a run; every
dataset carries a ``units`` attribute (UDUNITS-2 strings, ``"1"`` for dimensionless numbers
and indices, ``""`` for text) and a short ``description``. The root carries the provenance
(version, model hash, seed, rays, elapsed times). The file is written under a temporary name
in the destination folder and renamed with :func:`os.replace` only when complete, so a crash
never leaves a truncated file under the requested name and an older file of that name
survives a failed write.

:func:`read_results` reads such a file back into a :class:`Results` record, the input of
``vfactor summary``, ``plot`` and ``export``. The layout itself is documented in the README
("HDF5 layout"), which is the one place the format is described.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

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


def _write_all(path, *, model, geometry, view_factors, exchange, trajectory, heating,
               provenance):
    import h5py

    prov = dict(provenance or {})
    with h5py.File(path, "w", track_order=True) as root:
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
                  trajectory=None, heating=None, provenance) -> Path:
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

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    ResultsFileError
        The destination folder does not exist or cannot be written.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise ResultsFileError(f"{path}: cannot write results: folder {folder} does not exist")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise ResultsFileError(f"{path}: cannot write results: {exc.strerror}") from None
    os.close(fd)
    try:
        _write_all(tmp, model=model, geometry=geometry, view_factors=view_factors,
                   exchange=exchange, trajectory=trajectory, heating=heating,
                   provenance=provenance)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; results are ordinary files
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


def _umask() -> int:
    """The process umask (read by setting and restoring it)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


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
        schema, or lacks a required group (one line naming the file).
    """
    import h5py

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
            schema = int(_attr(h.attrs.get("schema_version", -1)))
            if schema > SCHEMA_VERSION or schema < 1:
                raise ResultsFileError(f"{path}: results schema version {schema} is not "
                                       f"supported (this vfactor reads up to {SCHEMA_VERSION})")
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
    except OSError as exc:
        raise ResultsFileError(f"{path}: cannot read results file: {exc}") from None
    return Results(path=path, attrs=attrs, model_source=source, model_name=name,
                   geometry=geometry, view_factors=vf, exchange=ex, trajectory=tr,
                   heating=heat, node_average=node_avg, facet_average=facet_avg,
                   orbit_attrs=orbit_attrs)
