"""Reading a results file back: :func:`read_results` -> :class:`Results`.

The input of ``vfactor summary``, ``plot`` and ``export``. Every dataset is checked against
the schema (:func:`vfactor.h5schema.validate`) before it is used.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ResultsFileError
from .geometry import Coating, Geometry, NodeTable
from .h5schema import FILE_KIND, SCHEMA_VERSION, SOURCES, attr_value, h5py_quiet, validate
from .heating import Heating
from .sparsetools import as_csr, dense
from .radiation import Exchange, ViewFactors
from .trajectory import Trajectory

__all__ = ["Results", "read_results", "read_coupling_matrix", "case_names"]


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
    hinges : dict or None — ``name``, ``law``, ``parent`` (tuples of str), ``angle_deg``
        ((t, h) hinge angle per step [deg]), ``axis`` and ``point`` ((h, 3), body frame as
        built [1], [m]) and ``facet_hinge`` ((f,) int, -1 rigid) when parts turn
    positions : dict or None — ``angle_deg`` ((q, h) [deg]), ``step_position`` ((t,) int)
        and ``view_factors`` / ``exchange`` (tuples of q records) when the run computed
        couplings at hinge positions
    temperatures : dict or None — of ``vfactor solve`` (``/temperatures``): ``steady``,
        ``steady_stderr``, ``time``, ``transient`` and the group's attributes
    case : str — the design case these results are of ("" for a file without cases);
        ``geometry`` then carries that case's coating values
    case_names : tuple of str — every case in the file (empty without cases)
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
    hinges: dict | None = None
    positions: dict | None = None
    temperatures: dict | None = None
    case: str = ""
    case_names: tuple = ()

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


def read_coupling_matrix(obj):
    """An (n, n) coupling matrix as a CSR array: a CSR group (schema 2) or a dense
    dataset (schema 1)."""
    import h5py
    import scipy.sparse as sp

    if isinstance(obj, h5py.Dataset):
        return as_csr(obj[()])
    shape = tuple(int(x) for x in obj.attrs["shape"])
    return sp.csr_array((obj["data"][()].astype(np.float64), obj["indices"][()],
                         obj["indptr"][()]), shape=shape)


def _read_view_factors(g) -> ViewFactors:
    facet = None
    if "facet" in g:
        import scipy.sparse as sp

        h = g["facet"]
        facet = sp.csr_matrix((h["data"][()], h["indices"][()], h["indptr"][()]),
                              shape=tuple(int(x) for x in h.attrs["shape"]))
    target = float(g.attrs["target_error"])
    return ViewFactors(
        matrix=read_coupling_matrix(g["matrix"]), space=g["space"][()], inert=g["inert"][()],
        stderr=read_coupling_matrix(g["stderr"]), stderr_space=g["stderr_space"][()],
        raw_matrix=read_coupling_matrix(g["raw_matrix"]), raw_space=g["raw_space"][()],
        raw_inert=g["raw_inert"][()], rays=g["rays"][()],
        adjustment_sigma=float(g.attrs["adjustment_sigma"]), method=attr_value(g.attrs["method"]),
        converged=bool(g.attrs["converged"]),
        target_error=None if np.isnan(target) else target, facet_matrix=facet,
        smoothed_stderr=(read_coupling_matrix(g["smoothed_stderr"])
                         if "smoothed_stderr" in g else None),
        smoothed_stderr_space=(g["smoothed_stderr_space"][()]
                               if "smoothed_stderr_space" in g else None))


def _read_exchange(g) -> Exchange:
    return Exchange(gebhart=read_coupling_matrix(g["gebhart"]), gebhart_space=g["gebhart_space"][()],
                    area=read_coupling_matrix(g["area"]), area_space=g["area_space"][()],
                    stderr=read_coupling_matrix(g["stderr"]) if "stderr" in g else None,
                    method=attr_value(g.attrs["method"]), band=attr_value(g.attrs["band"]),
                    dropped=g["dropped"][()] if "dropped" in g else None,
                    drop_tolerance=float(g.attrs.get("drop_tolerance", 0.0)))


def _read_trajectory(g) -> Trajectory:
    import dataclasses

    known = {x.name for x in dataclasses.fields(Trajectory)}
    extra = {k: attr_value(g.attrs[k]) for k in ("shadow_model", "attitude_note")
             if k in known and k in g.attrs}
    return Trajectory(**extra,
        epoch_utc=attr_value(g.attrs["epoch"]), time=g["time"][()],
        position=g["position"][()] * 1e3, velocity=g["velocity"][()] * 1e3,
        sun_inertial=g["sun_inertial"][()], sun_distance=g["sun_distance"][()] * 1e3,
        sun_fraction=g["sun_fraction"][()], beta=np.radians(g["beta"][()]),
        body_to_inertial=g["body_to_inertial"][()], sun_body=g["sun_body"][()],
        nadir_body=g["nadir_body"][()], planet_distance=g["planet_distance"][()] * 1e3,
        period=float(g.attrs["period_s"]), planet=attr_value(g.attrs["planet"]))


def _read_heating(g, time) -> Heating:
    import dataclasses

    f = g["facet"]
    known = {x.name for x in dataclasses.fields(Heating)}
    extra = {}
    for src in SOURCES:
        for ds, name in ((f"{src}_stderr", f"node_{src}_stderr"),
                         (f"escaped_{src}", f"escaped_{src}"), (f"inert_{src}", f"inert_{src}")):
            if ds in g and name in known:
                extra[name] = g[ds][()]
    for key in ("rays_per_facet", "sun_samples", "seed"):
        if key in g.attrs and key in known:
            extra[key] = int(g.attrs[key])
    for src in ("albedo", "planet_ir"):
        if f"{src}_ray_stderr" in g and f"node_{src}_ray_stderr" in known:
            extra[f"node_{src}_ray_stderr"] = g[f"{src}_ray_stderr"][()]
    if "planet_rays" in g and "node_planet_rays" in known:
        extra["node_planet_rays"] = g["planet_rays"][()]
    if "time" in known and time is not None:
        extra["time"] = time
    return Heating(**extra,
        node_solar=g["solar"][()], node_albedo=g["albedo"][()],
        node_planet_ir=g["planet_ir"][()], facet_solar=f["solar"][()],
        facet_albedo=f["albedo"][()], facet_planet_ir=f["planet_ir"][()],
        incident_solar=g["incident_solar"][()], incident_albedo=g["incident_albedo"][()],
        incident_planet_ir=g["incident_planet_ir"][()],
        solar_constant=g["solar_constant"][()], albedo=float(g.attrs["albedo"]),
        planet_ir=float(g.attrs["planet_ir_W_m2"]), case=attr_value(g.attrs["case"]))


class _CaseView:
    """A results file seen as one of its design cases: the groups that depend on the case
    come from ``/cases/NAME``, the shared ones (model, nodes, facets, view factors) from
    the root, so the reader and :func:`vfactor.h5schema.validate` read either alike."""

    _OWN = ("exchange", "orbit", "heating", "hinges", "positions", "temperatures")

    def __init__(self, h, case: str):
        self._h = h
        self._g = h["cases"][case]
        self.attrs = h.attrs

    def _where(self, name: str):
        return self._g if name.split("/")[0] in self._OWN else self._h

    def get(self, name, default=None):
        return self._where(name).get(name, default)

    def __contains__(self, name) -> bool:
        return name in self._where(name)

    def __getitem__(self, name):
        return self._where(name)[name]


def case_names(h) -> tuple:
    """The design cases of an open results file (empty for a file without cases)."""
    return tuple(h["cases/name"].asstr()[()]) if "cases" in h else ()


def _case_geometry(geometry, g):
    """``geometry`` with the coating values stored in case group ``g``."""
    import dataclasses
    import json

    from .geometry import Coating

    nodes = dataclasses.replace(geometry.nodes, **{
        key: g["nodes"][key][()] for key in ("solar_absorptivity", "ir_emissivity",
                                             "solar_specular", "ir_specular")})
    coatings = tuple(Coating(**c) for c in json.loads(g["nodes/coatings"].asstr()[()]))
    return dataclasses.replace(geometry, nodes=nodes, coatings=coatings)


def read_results(path, *, dense_couplings=False, case=None) -> Results:
    """Read a results file written by :func:`write_results`.

    Parameters
    ----------
    path : str or os.PathLike
    dense_couplings : bool — return the (n, n) couplings as dense numpy arrays instead of
        ``scipy.sparse.csr_array`` (small models only: n^2 memory)
    case : str, optional — for a file with design cases, the case to read (default: the
        first); an unknown name raises :class:`vfactor.errors.ArgumentError`

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
    h5py = h5py_quiet()

    path = Path(path)
    if not path.exists():
        raise ResultsFileError(f"{path}: no such results file")
    if not path.is_file():
        raise ResultsFileError(f"{path}: is not a file")
    if not h5py.is_hdf5(path):
        raise ResultsFileError(f"{path}: not an HDF5 file (expected the output of `vfactor run`)")
    try:
        with h5py.File(path, "r") as h:
            kind = attr_value(h.attrs.get("file_kind", ""))
            if kind != FILE_KIND:
                raise ResultsFileError(f"{path}: HDF5 file but not a vfactor results file "
                                       f"(root attribute file_kind = {kind!r})")
            try:
                schema = int(attr_value(h.attrs.get("schema_version", -1)))
            except (TypeError, ValueError):
                schema = -1
            if schema > SCHEMA_VERSION or schema < 1:
                raise ResultsFileError(f"{path}: results schema version {schema} is not "
                                       f"supported (this vfactor reads up to {SCHEMA_VERSION})")
            names = case_names(h)
            if case is not None and case not in names:
                from .errors import ArgumentError

                known = ", ".join(names) if names else "none (the file has no cases)"
                raise ArgumentError(f"{path}: no case {case!r}; cases are {known}")
            if names:
                case = case or names[0]
                h = _CaseView(h, case)
            validate(h, path)
            attrs = {k: attr_value(v) for k, v in h.attrs.items()}
            geometry = _read_geometry(h)
            if names:
                geometry = _case_geometry(geometry, h._g)
            model = h["model"]
            source = model["source"].asstr()[()]
            vf = _read_view_factors(h["view_factors"]) if "view_factors" in h else None
            ex = _read_exchange(h["exchange"]) if "exchange" in h else None
            tr = _read_trajectory(h["orbit"]) if "orbit" in h else None
            heat = (_read_heating(h["heating"], None if tr is None else tr.time)
                    if "heating" in h else None)
            orbit_attrs = {k: attr_value(v) for k, v in h["orbit"].attrs.items()} if "orbit" in h else {}
            hinges = None
            if "hinges" in h:
                g = h["hinges"]
                hinges = {key: tuple(g[key].asstr()[()]) for key in ("name", "law", "parent")}
                hinges["angle_deg"] = g["angle"][()]
                hinges.update(axis=g["axis"][()], point=g["point"][()],
                              facet_hinge=g["facet_hinge"][()].astype(np.int64))
            positions = None
            if "positions" in h:
                g = h["positions"]
                q = g["angle"].shape[0]
                positions = {"angle_deg": g["angle"][()],
                             "step_position": g["step_position"][()].astype(np.int64),
                             "view_factors": tuple(_read_view_factors(g[f"{p}/view_factors"])
                                                   for p in range(q)),
                             "exchange": tuple(_read_exchange(g[f"{p}/exchange"])
                                               for p in range(q))}
            temperatures = None
            if "temperatures" in h:
                g = h["temperatures"]
                temperatures = {key: g[key][()] for key in ("steady", "steady_stderr", "time",
                                                             "transient")}
                temperatures.update({k: attr_value(v) for k, v in g.attrs.items()})
            node_avg = facet_avg = None
            if "heating" in h and "average" in h["heating"]:
                node_avg = {k: v[()] for k, v in h["heating/average"].items()}
                facet_avg = {k: v[()] for k, v in h["heating/facet_average"].items()}
            name = attr_value(model.attrs.get("name", ""))
    except KeyError as exc:
        raise ResultsFileError(f"{path}: incomplete vfactor results file ({exc.args[0]})") from None
    except UnicodeDecodeError as exc:
        raise ResultsFileError(f"{path}: text that is not UTF-8 ({exc.reason} at byte "
                               f"{exc.start})") from None
    except OSError as exc:
        raise ResultsFileError(f"{path}: cannot read results file: {exc}") from None
    if dense_couplings:
        import dataclasses

        if vf is not None:
            vf = dataclasses.replace(vf, matrix=dense(vf.matrix), stderr=dense(vf.stderr),
                                     raw_matrix=dense(vf.raw_matrix),
                                     smoothed_stderr=None if vf.smoothed_stderr is None
                                     else dense(vf.smoothed_stderr))
        if ex is not None:
            ex = dataclasses.replace(ex, gebhart=dense(ex.gebhart), area=dense(ex.area),
                                     stderr=None if ex.stderr is None else dense(ex.stderr))
    return Results(path=path, attrs=attrs, model_source=source, model_name=name,
                   geometry=geometry, view_factors=vf, exchange=ex, trajectory=tr,
                   heating=heat, node_average=node_avg, facet_average=facet_avg,
                   orbit_attrs=orbit_attrs, hinges=hinges, positions=positions,
                   temperatures=temperatures, case=case or "", case_names=names)
