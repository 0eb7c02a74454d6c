"""Mesh files (STL, OBJ, PLY, OFF, glTF/GLB, STEP) read into a :class:`Tessellation`.

:func:`read_mesh` reads a file through trimesh's loaders and returns its triangles in
metres with one group label per triangle.

Groups
------
A file holding several named geometries (OBJ objects/groups, glTF nodes, the bodies of a
STEP assembly) gives one group per placed geometry, labelled with its name (one named
body of a glTF, OBJ or STEP file is one group); a single geometry of a format without
names (STL, PLY, OFF) is split into connected flat regions (adjacent coplanar facets, as
``trimesh.Trimesh.facets`` finds them; every other facet is its own region) labelled
``0, 1, 2, ...`` in order of their first facet (``label_source = "flat regions"``).
``per-face`` on a mesh is the same as ``per-group``.

Group names are the file's own names and do not depend on the loader's run: where
trimesh invents a frame name with a random suffix (a glTF mesh of several primitives) the
name of the glTF node holding the mesh is used. Geometries are ordered by name, ties by a hash of their placed
coordinates; repeated names get ``.1``, ``.2``, ... in that order (skipping a suffix that
is itself a name in the file).

Units
-----
STEP files (read through ``cascadio``, which converts them to glTF) and glTF files come
back in metres (the glTF 2.0 specification, section 3.4: "the units for all linear
distances are meters"); :func:`stated_file_unit` says so and :mod:`vfactor.parts` then
does not apply ``length_unit`` to their coordinates. STL, OBJ, PLY and OFF state no unit.

Loaders
-------
A format whose loader needs a package that is missing (``cascadio`` for STEP,
``DracoPy`` for Draco-compressed glTF) is refused with the package's name, before
trimesh would read the file into empty or garbage triangles. Messages trimesh logs while
reading are kept and shown with the error they explain.

Repair and simplification (``repair = true``, ``simplify = N``) are done per geometry by
:mod:`vfactor.meshrepair`, before the groups are assembled; what they changed is in
``Tessellation.notes``.

Files a mesh file refers to (XDMF data items, HDF5 links, glTF buffers, OBJ material
libraries) are listed by :mod:`vfactor.meshrefs`. XDMF files are read with meshio
directly (:func:`_xdmf_scene`), so that their relative HDF5 paths are resolved against
the XDMF file's folder (meshio's rule; trimesh's route copies the file to a temporary
folder first, against which the paths would be resolved instead).
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import re
import struct

import numpy as np

from vfactor.errors import MeshError, ModelError
from vfactor.meshrefs import XDMF_SUFFIXES
from vfactor.shapes import (
    MAX_FACETS_PER_PART,
    Tessellation,
    max_edge_length,
    merge_exact,
    triangle_areas,
)

__all__ = [
    "STATED_UNITS",
    "mesh_is_watertight",
    "read_mesh",
    "stated_file_unit",
]

STATED_UNITS = {".step": ("m", "STEP, converted to metres on import by cascadio"),
                ".stp": ("m", "STEP, converted to metres on import by cascadio"),
                ".glb": ("m", "glTF 2.0 specification section 3.4: metres"),
                ".gltf": ("m", "glTF 2.0 specification section 3.4: metres")}
"""Mesh formats whose coordinates come back from the loader in a stated unit:
suffix -> (unit, why)."""

DRACO_EXTENSION = "KHR_draco_mesh_compression"
"""glTF extension of Draco-compressed geometry (Khronos extension registry)."""


def stated_file_unit(path) -> tuple | None:
    """The unit a mesh file's coordinates come back in, when its format states one.

    Parameters
    ----------
    path : str — the mesh file (only its suffix is looked at)

    Returns
    -------
    (unit, reason) with unit a key of :data:`vfactor.parts.LENGTH_UNITS`, or None when the
    format states no unit (STL, OBJ, PLY, OFF: then the model's ``length_unit`` applies).
    """
    return STATED_UNITS.get(os.path.splitext(str(path))[1].lower())


def read_mesh(path, scale: float = 1.0, max_edge: float | None = None,
              closed: bool | None = None, where: str = "", shown_name: str | None = None,
              repair: bool = False, simplify: int | None = None) -> Tessellation:
    """Read a triangle mesh with trimesh (any format it reads) into a Tessellation.

    Parameters
    ----------
    path : str — the mesh file
    scale : float — metres per file coordinate (model length unit times ``scale``)
    max_edge : float, optional — subdivide until no edge is longer [m]
    closed : bool, optional — declared closed; default: the mesh is watertight
    where : str — location for messages (``part 'NAME'``)
    shown_name : str — file name as written in the model
    repair : bool — merge duplicate vertices, drop degenerate and duplicate facets, make
        the winding agree per body (:func:`vfactor.meshrepair.repair_piece`)
    simplify : int, optional — decimate to about this many facets in all
        (:func:`vfactor.meshrepair.simplify_piece`)

    Returns
    -------
    Tessellation (labels = geometry names, or connected flat regions; see module doc)

    Raises
    ------
    MeshError — missing, unreadable, empty, not triangles, or non-finite coordinates, or
    a loader package is missing.
    """
    name = shown_name or str(path)
    if not os.path.isfile(path):
        raise MeshError(f"mesh file {name!r} not found (looked for {path})", where=where)
    _require_loader_packages(path, name, where)
    loaded, logged = _load_scene(path, name, where)
    pieces = _placed_pieces(loaded, name, where, logged)
    notes = []
    if repair:
        from vfactor.meshrepair import describe_repairs, repair_piece

        fixed, counts = [], []
        for label, v, f in pieces:
            v, f, c = repair_piece(v, f)
            fixed.append((label, v, f))
            counts.append(c)
        pieces = [p for p in fixed if len(p[2])]
        notes.append(describe_repairs(name, counts))
        if not pieces:
            raise MeshError(f"mesh file {name!r} has no facets left after repair (all were "
                            f"degenerate)", where=where)
    if simplify is not None:
        from vfactor.meshrepair import simplify_piece

        before = sum(len(p[2]) for p in pieces)
        if simplify < before:
            shares = [len(p[2]) / before for p in pieces]
            pieces = [(label, *simplify_piece(v, f, max(4, round(simplify * s))))
                      for (label, v, f), s in zip(pieces, shares)]
            after = sum(len(p[2]) for p in pieces)
            notes.append(f"mesh file {name!r} simplified from {before} to {after} facets "
                         f"(quadric decimation per body, target {simplify})")
        else:
            notes.append(f"mesh file {name!r} has {before} facets, not more than simplify = "
                         f"{simplify}: left as it is")
    _check_reach(pieces, float(scale), name, where)
    offs = np.cumsum([0] + [len(p[1]) for p in pieces])
    verts = np.concatenate([p[1] for p in pieces]) * float(scale)
    tris = np.concatenate([p[2] + o for p, o in zip(pieces, offs)])
    if tris.min() < 0 or tris.max() >= len(verts):
        raise MeshError(f"mesh file {name!r} has faces referring to missing vertices",
                        where=where)
    if len(pieces) > 1 or (_names_bodies(path)
                           and pieces[0][0] not in ("", os.path.basename(str(path)))):
        labels = _unique_labels([p[0] for p in pieces])
        face = np.concatenate([np.full(len(p[2]), k, np.int64)
                               for k, p in enumerate(pieces)])
        source = "file"
    else:
        labels, face = _flat_regions(verts, tris)
        source = "flat regions"
    # share bit-identical vertices (an STL file repeats them per facet)
    verts, tris = merge_exact(verts, tris)
    watertight = mesh_is_watertight(verts, tris)
    is_closed = watertight if closed is None else bool(closed)
    if max_edge is not None:
        estimate = 8.0 * float(triangle_areas(verts, tris).sum()) / max_edge ** 2
        if estimate > MAX_FACETS_PER_PART:
            raise ModelError(f"max_edge {max_edge} m would make about {estimate:.3g} facets "
                             f"(limit {MAX_FACETS_PER_PART}); use a larger max_edge",
                             where=where)
        verts, tris, face = _subdivide(verts, tris, face, max_edge)
        verts, tris = merge_exact(verts, tris)
    return Tessellation(np.ascontiguousarray(verts, np.float64), tris.astype(np.int64),
                        tuple(labels), face.astype(np.int64), closed=is_closed,
                        one_face=False, label_source=source, notes=tuple(notes))


def _check_reach(pieces, scale: float, name: str, where: str) -> None:
    """Refuse a mesh whose coordinates reach beyond :data:`vfactor.parts.MAX_LENGTH_M`
    from its origin once scaled (a unit slip; its arithmetic would overflow), before any
    arithmetic on them."""
    from vfactor.parts import MAX_LENGTH_M

    reach = max(float(np.max(np.abs(v))) if v.size else 0.0 for _, v, _ in pieces) * scale
    if not reach <= MAX_LENGTH_M:
        raise MeshError(f"mesh file {name!r} reaches {reach:.3g} m from its origin (file "
                        f"coordinates times scale and unit), more than "
                        f"{MAX_LENGTH_M / 1e3:g} km; check scale, file_unit and the "
                        f"model's length_unit", where=where)


NAMING_FORMATS = (".glb", ".gltf", ".obj", ".step", ".stp", ".3mf", ".dae")
"""Mesh formats whose bodies carry names: one named body is one group, not split into
flat regions (a body the loader named after the file has no name of its own)."""


def _names_bodies(path) -> bool:
    return os.path.splitext(str(path))[1].lower() in NAMING_FORMATS


_LFS_POINTER = b"version https://git-lfs.github.com/spec/"


def _require_loader_packages(path, name: str, where: str) -> None:
    """Refuse a file whose loader needs a package that is not installed."""
    try:
        with open(path, "rb") as f:
            head = f.read(len(_LFS_POINTER))
    except OSError as exc:
        raise MeshError(f"cannot read mesh file {name!r}: {exc.strerror or exc}",
                        where=where) from None
    if head == _LFS_POINTER:
        raise MeshError(f"mesh file {name!r} is a Git LFS pointer, not the mesh itself; "
                        f"fetch the file (git lfs pull) or download it directly",
                        where=where)
    suffix = os.path.splitext(str(path))[1].lower()
    needs = []
    if suffix in (".step", ".stp"):
        needs.append(("cascadio", "STEP files are converted by it"))
    elif suffix in (".glb", ".gltf") and DRACO_EXTENSION in _gltf_extensions(path):
        needs.append(("DracoPy", f"the file's geometry is Draco-compressed "
                                 f"({DRACO_EXTENSION})"))
    for package, why in needs:
        try:
            __import__(package)
        except ImportError:
            raise MeshError(f"cannot read mesh file {name!r}: {why}, and the package "
                            f"{package!r} is not installed (pip install {package})",
                            where=where) from None


def _gltf_extensions(path) -> set:
    """Extensions a glTF or GLB file declares (``extensionsUsed``/``Required``); empty when
    its JSON cannot be read (the loader then says what is wrong)."""
    try:
        with open(path, "rb") as f:
            head = f.read(12)
            if head[:4] == b"glTF":
                length, kind = struct.unpack("<I4s", f.read(8))
                text = f.read(length) if kind == b"JSON" else b"{}"
            else:
                text = head + f.read()
        doc = json.loads(text.decode("utf-8"))
    except (OSError, ValueError, struct.error, UnicodeDecodeError):
        return set()
    if not isinstance(doc, dict):
        return set()
    out = set()
    for key in ("extensionsUsed", "extensionsRequired"):
        if isinstance(doc.get(key), list):
            out.update(str(x) for x in doc[key])
    return out


class _Collect(logging.Handler):
    """Keeps the messages a loader logs at WARNING and above."""

    def __init__(self):
        super().__init__(logging.WARNING)
        self.messages = []

    def emit(self, record):
        self.messages.append(record.getMessage().splitlines()[0][:200])


def _load_scene(path, name: str, where: str):
    """trimesh's scene of a file, and the messages its loader logged."""
    import trimesh

    options = {}
    if str(path).lower().endswith(".obj"):
        options = dict(split_objects=True, split_groups=True, group_material=False)
    log = logging.getLogger("trimesh")
    handler = _Collect()
    log.addHandler(handler)
    try:
        if os.path.splitext(str(path))[1].lower() in XDMF_SUFFIXES:
            loaded = _xdmf_scene(path)
        else:
            loaded = trimesh.load_scene(path, process=False, **options)
    except ImportError as exc:
        package = getattr(exc, "name", None) or str(exc)
        raise MeshError(f"cannot read mesh file {name!r}: its loader needs the package "
                        f"{package!r}, which is not installed (pip install {package})",
                        where=where) from None
    # trimesh's format loaders raise many unrelated exception types on a damaged file
    # (ValueError, KeyError, IndexError, struct.error, ...); each becomes a MeshError.
    except Exception as exc:  # noqa: BLE001
        raise MeshError(f"cannot read mesh file {name!r}: {type(exc).__name__}: {exc}"
                        f"{_logged(handler.messages)}", where=where) from None
    finally:
        log.removeHandler(handler)
    return loaded, handler.messages


def _xdmf_scene(path):
    """An XDMF file read by meshio directly (relative HDF5 paths resolved against the XDMF
    file's folder), as a trimesh scene of its triangles."""
    import meshio
    import trimesh

    mesh = meshio.read(str(path), file_format="xdmf")
    points = np.zeros((len(mesh.points), 3))
    points[:, :min(3, mesh.points.shape[1])] = mesh.points[:, :3]
    faces = [np.asarray(c.data, np.int64) for c in mesh.cells if c.type == "triangle"]
    tris = np.concatenate(faces) if faces else np.zeros((0, 3), np.int64)
    return trimesh.Scene(trimesh.Trimesh(points, tris, process=False))


def _logged(messages) -> str:
    return f" (the loader reported: {messages[0]})" if messages else ""


def _placed_pieces(loaded, name: str, where: str, logged) -> list:
    """(label, vertices, faces) of every placed triangle geometry, in a stable order."""
    import trimesh

    pieces = []
    others = set()
    parents = loaded.graph.transforms.parents
    for node in loaded.graph.nodes_geometry:
        transform, gname = loaded.graph[node]
        geom = loaded.geometry.get(gname)
        if not isinstance(geom, trimesh.Trimesh):
            others.add(type(geom).__name__)
            continue
        v = trimesh.transform_points(np.asarray(geom.vertices, float), transform)
        pieces.append((_piece_label(str(node), parents.get(node), str(gname)), v,
                       np.asarray(geom.faces, np.int64)))
    pieces.sort(key=_piece_key)
    if not pieces and others:
        raise MeshError(f"mesh file {name!r} holds no triangles (found "
                        f"{', '.join(sorted(others))}){_logged(logged)}", where=where)
    pieces = [p for p in pieces if len(p[2]) > 0]
    if not pieces:
        raise MeshError(f"mesh file {name!r} is empty (no triangles){_logged(logged)}",
                        where=where)
    for _, v, f in pieces:
        if f.ndim != 2 or f.shape[1] != 3:
            raise MeshError(f"mesh file {name!r} is not made of triangles", where=where)
        if not np.isfinite(v).all():
            bad = int((~np.isfinite(v).all(axis=1)).sum())
            raise MeshError(f"mesh file {name!r} has {bad} vertices with non-finite "
                            f"coordinates", where=where)
        if f.min() < 0 or f.max() >= len(v):
            raise MeshError(f"mesh file {name!r} has faces referring to missing vertices"
                            f"{_logged(logged)}", where=where)
    return pieces


_LOADER_FRAME = re.compile(r"^(?P<parent>.+)_[0-9A-Za-z]{6}$")


def _piece_label(node: str, parent, geometry_name: str) -> str:
    """The file's own name for one placed geometry.

    A named node (glTF node, OBJ object) gives its name. Two kinds of frame name are the
    loader's own invention: the frames of a glTF mesh with several primitives, which
    trimesh names ``PARENT_XXXXXX`` with a random six-character suffix that changes on
    every load (the name is then the parent's: the glTF node the user named), and unnamed
    nodes, which it numbers (``1``, ``2``: the bodies of a STEP file, whose names are
    then the geometry's, those of their products).
    """
    m = _LOADER_FRAME.match(node)
    if m and parent is not None and m.group("parent") == str(parent):
        return str(parent)
    if node.isdigit():
        return geometry_name
    return node


def _piece_key(piece) -> tuple:
    """Order of the pieces of a mesh file: by label, ties by a hash of their placed
    coordinates and faces, so that neither the loader's naming nor the order of the
    file decides which of two equally named pieces comes first."""
    label, v, f = piece
    digest = hashlib.sha256(np.ascontiguousarray(v, np.float64).tobytes()
                            + np.ascontiguousarray(f, np.int64).tobytes()).hexdigest()
    return (label, digest)


def mesh_is_watertight(vertices: np.ndarray, triangles: np.ndarray) -> bool:
    """Whether the triangles form a closed 2-manifold once equal vertices are merged."""
    import trimesh

    m = trimesh.Trimesh(vertices, triangles, process=False)
    m.merge_vertices()
    return bool(m.is_watertight)


def _unique_labels(labels) -> list:
    """Labels made unique: a repeated label gets ``.1``, ``.2``, ... in order, skipping a
    suffixed name that the file itself uses (so ``a, a, a.1`` gives ``a, a.2, a.1``)."""
    taken = {lab or "group" for lab in labels}
    used: set = set()
    last: dict = {}
    out = []
    for lab in labels:
        lab = lab or "group"
        if lab in used:
            k = last.get(lab, 0)
            while True:
                k += 1
                candidate = f"{lab}.{k}"
                if candidate not in taken and candidate not in used:
                    break
            last[lab] = k
            lab = candidate
        used.add(lab)
        out.append(lab)
    return out


def _flat_regions(verts, tris):
    """Connected coplanar regions (trimesh facets), numbered by first facet."""
    import trimesh

    m = trimesh.Trimesh(verts, tris, process=False)
    m.merge_vertices()
    region = np.full(len(tris), -1, np.int64)
    if len(m.faces) == len(tris):
        for k, group in enumerate(m.facets):
            region[np.asarray(group, np.int64)] = len(tris) + k  # provisional ids
    # renumber in order of first facet, singletons included
    key = np.where(region >= 0, region, -(np.arange(len(tris)) + 1))
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    rank = np.empty(len(first), np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(first))
    face = rank[inverse.reshape(-1)]
    return tuple(str(k) for k in range(len(first))), face


def _subdivide(verts, tris, face, max_edge):
    import trimesh

    if max_edge_length(verts, tris) <= max_edge:
        return verts, tris, face
    v, f, idx = trimesh.remesh.subdivide_to_size(verts, tris, max_edge=max_edge,
                                                  max_iter=20, return_index=True)
    return np.asarray(v, float), np.asarray(f, np.int64), face[np.asarray(idx, np.int64)]
