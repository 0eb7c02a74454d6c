"""The results file's schema: its markers, and the check of every dataset on read.

One table (:data:`_DATASETS`) lists every dataset the reader uses with its kind and its
shape in terms of the node, facet, vertex, part, coating and step counts; :func:`validate`
checks a file against it once, before anything is read, and names the first dataset that
does not fit in one line (:class:`vfactor.errors.ResultsFileError`). The layout itself is
documented in the README ("HDF5 layout").
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .errors import ResultsFileError

__all__ = ["SCHEMA_VERSION", "FILE_KIND", "SOURCES", "h5py_quiet", "attr_value", "validate"]

SCHEMA_VERSION = 2
"""Version of the file layout; raised when a dataset is renamed or changes meaning."""

FILE_KIND = "vfactor-results"
"""Value of the root attribute ``file_kind`` that marks a file as ours."""

SOURCES = ("solar", "albedo", "planet_ir")


def h5py_quiet():
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


def attr_value(v):
    if isinstance(v, bytes):
        return v.decode("utf-8")
    if isinstance(v, np.generic):
        return v.item()
    return v


# ---------------------------------------------------------------------------------------
# Validation on read: one table of every dataset the reader uses
# ---------------------------------------------------------------------------------------
# Axis symbols: n nodes (length of /nodes/name), f facets (/facets/triangles), v vertices
# (/facets/vertices), p parts (/facets/part_names), c coatings (/coatings/name), t steps
# (/orbit/time). Kinds: "real" (any number), "int" (whole numbers), "text".
_AXIS_SOURCE = {"n": "nodes/name", "f": "facets/triangles", "v": "facets/vertices",
                "p": "facets/part_names", "c": "coatings/name", "t": "orbit/time",
                "h": "hinges/name", "q": "positions/angle"}
_AXIS_WORD = {"n": "node names", "f": "facets", "v": "vertices", "p": "part names",
              "c": "coatings", "t": "time steps", "h": "hinges", "q": "hinge positions"}

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
    "view_factors": {"rays": ("int", ("n",)),
                     **{k: ("real", ("n",)) for k in ("space", "inert", "stderr_space",
                                                       "raw_space", "raw_inert")}},
    "view_factors/facet": {"data": ("real", ("k",)), "indices": ("int", ("k",)),
                           "indptr": ("int", ("r",))},
    "exchange": {"gebhart_space": ("real", ("n",)), "area_space": ("real", ("n",))},
    "orbit": {"time": ("real", ("t",)), "sun_fraction": ("real", ("t",)),
              "sun_distance": ("real", ("t",)), "planet_distance": ("real", ("t",)),
              "beta": ("real", ("t",)), "body_to_inertial": ("real", ("t", 3, 3)),
              **{k: ("real", ("t", 3)) for k in ("position", "velocity", "sun_body",
                                                  "nadir_body", "sun_inertial")}},
    "heating": {"solar_constant": ("real", ("t",)),
                **{k: ("real", ("t", "n")) for k in SOURCES},
                **{f"incident_{k}": ("real", ("t", "n")) for k in SOURCES}},
    "heating/facet": {k: ("real", ("t", "f")) for k in SOURCES},
    "hinges": {"name": ("text", ("h",)), "law": ("text", ("h",)), "parent": ("text", ("h",)),
               "axis": ("real", ("h", 3)), "point": ("real", ("h", 3)),
               "angle": ("real", ("t", "h")), "facet_hinge": ("int", ("f",))},
    "positions": {"angle": ("real", ("q", "h")), "step_position": ("int", ("t",))},
    "heating/average": {k: ("real", ("n",)) for k in SOURCES + ("total",)},
    "heating/facet_average": {k: ("real", ("f",)) for k in SOURCES + ("total",)},
}
_OPTIONAL = {  # datasets read when present
    "exchange": {"dropped": ("real", ("n",))},
    "view_factors": {"smoothed_stderr_space": ("real", ("n",))},
    "heating": {**{f"{k}_stderr": ("real", ("t", "n")) for k in SOURCES},
                **{f"escaped_{k}": ("real", ("t",)) for k in SOURCES},
                **{f"inert_{k}": ("real", ("t",)) for k in SOURCES},
                **{f"{k}_ray_stderr": ("real", ("t", "n")) for k in ("albedo", "planet_ir")},
                "planet_rays": ("int", ("n",))},
}
#: (n, n) coupling matrices: CSR groups (data, indices, indptr; attribute shape) from
#: schema 2 on, dense datasets in schema 1 (still read).
MATRICES = {"view_factors": ("matrix", "stderr", "raw_matrix"),
            "exchange": ("gebhart", "area", "conductance")}
OPTIONAL_MATRICES = {"exchange": ("stderr",), "view_factors": ("smoothed_stderr",)}
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
    value = attr_value(obj.attrs[name])
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


def validate(h, path: Path) -> None:
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
    if "positions" in h and "hinges" not in h:
        raise bad("hinges", "missing, but /positions is present and needs its hinges")
    if "hinges" in h and "orbit" not in h:
        raise bad("orbit", "missing, but /hinges is present and needs its time steps")
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
        _validate_csr(h["view_factors/facet"], f"{path}: /view_factors/facet",
                      (2 * size("f"), size("n") + 2), "facet sides, nodes + space + inert")
    for table, required in ((MATRICES, True), (OPTIONAL_MATRICES, False)):
        for group, names in table.items():
            if group not in h:
                continue
            for name in names:
                obj = h[group].get(name)
                if obj is None and not required:
                    continue
                if isinstance(obj, h5py.Dataset):         # schema 1: dense
                    check(f"{group}/{name}", "real", ("n", "n"))
                elif isinstance(obj, h5py.Group):
                    _validate_csr(obj, f"{path}: /{group}/{name}", (size("n"), size("n")),
                                  "node names in /nodes/name")
                else:
                    raise bad(f"{group}/{name}", "missing (damaged or incomplete results file)")


def _validate_csr(g, where: str, expected: tuple, axes: str) -> None:
    """One sparse matrix group: its shape attribute and consistent CSR arrays."""
    import h5py

    shape = tuple(int(x) for x in np.ravel(g.attrs.get("shape", ())))
    if shape != expected:
        raise ResultsFileError(f"{where}: attribute shape {shape}, expected {expected} "
                               f"({axes})")
    for name, kinds in (("data", "fiub"), ("indices", "iu"), ("indptr", "iu")):
        ds = g.get(name)
        if not isinstance(ds, h5py.Dataset) or ds.ndim != 1 or ds.dtype.kind not in kinds:
            raise ResultsFileError(f"{where}/{name}: missing or not a 1-D numeric array")
    data, indices, indptr = g["data"][()], g["indices"][()], g["indptr"][()]
    if indptr.shape != (shape[0] + 1,) or data.shape != indices.shape:
        raise ResultsFileError(f"{where}: CSR arrays of {data.size} values, {indices.size} "
                               f"column indices and {indptr.size} row offsets do not fit a "
                               f"{shape[0]}-row matrix")
    if (indptr[0] != 0 or indptr[-1] != data.size or np.any(np.diff(indptr) < 0)
            or (indices.size and (indices.min() < 0 or indices.max() >= shape[1]))):
        raise ResultsFileError(f"{where}: row offsets or column indices out of range")
