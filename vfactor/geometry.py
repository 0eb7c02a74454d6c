"""The model's geometry as one flat set of facet arrays, and its node table.

Built from a :class:`vfactor.model.Model` by :func:`build_geometry`. Every later stage (ray
tracing, couplings, heating, output) reads only these arrays.

Placement
---------
A part's local frame (see :mod:`vfactor.shapes`) is placed with its origin at ``center``,
local +z along ``z_axis`` and local +x along ``x_axis`` made orthogonal to ``z_axis``
(local +y = z cross x, a right-handed frame).

Node names
----------
==================  ===========================  ================================
side setting        front side                   back side
==================  ===========================  ================================
``node = "NAME"``   ``NAME``                     ``NAME``
``single``          ``PART``                     ``PART.back``
``per-face``        ``PART.FACE`` (``body.+x``,  ``PART.FACE.back``
                    ``tank.side``, ``tank.top``)
``per-group``       ``PART.GROUP``               ``PART.GROUP.back``
``per-facet``       ``PART.I`` (``wing.3``,      ``PART.I.back``
                    I = facet index in the part
                    from 0)
==================  ===========================  ================================

A one-face shape (rectangle, disk, sphere, dish) gives ``per-face`` and ``per-group`` the
names of ``single``; on primitives ``per-group`` equals ``per-face``; on meshes
``per-face`` equals ``per-group``. Any two sides (of one part or of several) that carry
the same node name form one node; they must have the same coating. Nodes are numbered in
order of first appearance (parts in file order, front before back, facets in order).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Coating", "NodeTable", "Geometry", "assemble_geometry", "build_geometry",
           "part_rotation"]


@dataclass(frozen=True)
class Coating:
    """A thermo-optical property set (one ``[coatings.NAME]`` table).

    Attributes
    ----------
    name : str
    solar_absorptivity : float — alpha in the solar band [1]
    ir_emissivity : float — epsilon in the infrared band [1]
    solar_specular : float — share of reflected solar energy reflected specularly [1]
    ir_specular : float — share of reflected infrared energy reflected specularly [1]
    source : str — where the values come from (free text from the model file)
    """

    name: str
    solar_absorptivity: float
    ir_emissivity: float
    solar_specular: float = 0.0
    ir_specular: float = 0.0
    source: str = ""


@dataclass(frozen=True)
class NodeTable:
    """Radiation nodes: named groups of facet sides sharing one coating.

    Attributes
    ----------
    names : tuple of str, (n,)
    area : (n,) float — sum of the areas of the facet sides assigned to the node [m2]
    solar_absorptivity, ir_emissivity, solar_specular, ir_specular : (n,) float [1]
    coating : tuple of str, (n,) — coating name of each node
    facet_count : (n,) int — number of facet sides assigned to the node
    """

    names: tuple
    area: np.ndarray
    solar_absorptivity: np.ndarray
    ir_emissivity: np.ndarray
    solar_specular: np.ndarray
    ir_specular: np.ndarray
    coating: tuple
    facet_count: np.ndarray

    def __len__(self) -> int:
        return len(self.names)

    def index(self, name: str) -> int:
        """Index of the node called ``name`` (raises KeyError with the known names)."""
        try:
            return self.names.index(name)
        except ValueError:
            raise KeyError(f"no node named {name!r}; nodes are {', '.join(self.names)}") from None


@dataclass(frozen=True)
class Geometry:
    """Flat triangle arrays of the whole model (model frame = body frame, metres).

    Attributes
    ----------
    vertices : (v, 3) float — vertex coordinates [m]
    triangles : (f, 3) int64 — vertex indices, counter-clockwise seen from the front
    normals : (f, 3) float — unit normal of the front side [1]
    areas : (f,) float — facet areas [m2]
    centroids : (f, 3) float — facet centroids [m]
    front_node, back_node : (f,) int32 — node of each side, -1 where the side is inert
    front_coating, back_coating : (f,) int32 — index into ``coatings``, -1 where inert
    part : (f,) int32 — index into ``part_names``
    part_names : tuple of str
    coatings : tuple of Coating
    nodes : NodeTable
    part_closed : tuple of bool — per part: it encloses a volume (front = outside)
    part_shapes : tuple of str — per part: its shape
    """

    vertices: np.ndarray
    triangles: np.ndarray
    normals: np.ndarray
    areas: np.ndarray
    centroids: np.ndarray
    front_node: np.ndarray
    back_node: np.ndarray
    front_coating: np.ndarray
    back_coating: np.ndarray
    part: np.ndarray
    part_names: tuple
    coatings: tuple
    nodes: NodeTable
    part_closed: tuple = ()
    part_shapes: tuple = ()

    @property
    def n_facets(self) -> int:
        return int(self.triangles.shape[0])

    @property
    def n_nodes(self) -> int:
        return len(self.nodes)


# --------------------------------------------------------------------------------------
# Building
# --------------------------------------------------------------------------------------

def part_rotation(part) -> np.ndarray:
    """Rotation (3, 3) whose columns are the part's local x, y, z axes in model axes [1]."""
    z = np.asarray(part.z_axis, float)
    z = z / np.linalg.norm(z)
    x = np.asarray(part.x_axis, float)
    x = x - np.dot(x, z) * z
    x = x / np.linalg.norm(x)
    y = np.cross(z, x)
    return np.stack([x, y, z], axis=1)


def _side_node_names(part, side, tess, back: bool):
    """Node name per facet of one side: (names list, index per facet into names)."""
    suffix = ".back" if back else ""
    f = tess.n_facets
    if side.node is not None:
        return [side.node], np.zeros(f, np.int64)
    mode = side.nodes
    if mode in ("per-face", "per-group") and tess.one_face:
        mode = "single"
    if mode == "single":
        return [part.name + suffix], np.zeros(f, np.int64)
    if mode in ("per-face", "per-group"):
        used = np.unique(tess.face)
        names = [f"{part.name}.{tess.labels[k]}{suffix}" for k in used]
        remap = np.full(len(tess.labels), -1, np.int64)
        remap[used] = np.arange(len(used))
        return names, remap[tess.face]
    # per-facet
    return [f"{part.name}.{i}{suffix}" for i in range(f)], np.arange(f, dtype=np.int64)


def build_geometry(model, problems: list | None = None) -> "Geometry":
    """Tessellate and place every part of a model; assign facet sides to nodes.

    Parameters
    ----------
    model : vfactor.model.Model
    problems : list, optional
        Collecting mode: problems (:class:`vfactor.errors.Problem`) are appended here
        and the offending part is left out instead of raising. Degenerate facets are
        then left for :func:`vfactor.checks.check_model` to report.

    Returns
    -------
    Geometry
        Normals of degenerate (zero-area) facets are zero vectors.

    Raises
    ------
    MeshError
        A mesh file is missing, unreadable, empty or not triangles (strict mode).
    GeometryError
        Non-finite coordinates, zero-area facets, or a node given two different coatings
        (strict mode).
    """
    from vfactor.errors import GeometryError, ModelError, Problem
    from vfactor.shapes import tessellate

    file = model.path

    def fail(err: ModelError):
        err = err.with_file(file)
        if problems is None:
            raise err
        problems.append(Problem("error", file, err.where or "", err.message,
                                tuple(getattr(err, "facets", None) or ())))

    coating_names = list(model.coatings)
    coatings = tuple(model.coatings[c] for c in coating_names)
    coating_index = {c: i for i, c in enumerate(coating_names)}

    node_names: list = []
    node_lookup: dict = {}
    node_coating: dict = {}   # node index -> (coating name, where it was set)

    verts_all, tris_all, part_all = [], [], []
    front_node_all, back_node_all, front_coat_all, back_coat_all = [], [], [], []
    part_names, part_closed, part_shapes = [], [], []
    v_offset = 0
    for part in model.parts:
        try:
            tess = tessellate(part)
        except ModelError as err:
            fail(err)
            continue
        rot = part_rotation(part)
        with np.errstate(over="ignore", invalid="ignore"):
            world = tess.vertices @ rot.T + np.asarray(part.center, float)
        if not np.isfinite(world).all():
            fail(GeometryError(f"non-finite vertex coordinates after placement "
                               f"(center {part.center})", where=part.where))
            continue
        tris = tess.triangles
        if problems is None and tess.n_facets:
            v = world[tris]
            a2 = np.linalg.norm(np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]), axis=1)
            bad = np.flatnonzero(a2 <= 0.0)
            if len(bad):
                raise GeometryError(f"{len(bad)} zero-area facets (first: local facet "
                                    f"{int(bad[0])}); run 'vfactor check' for details",
                                    file=file, where=part.where, facets=tuple(bad.tolist()))
        pidx = len(part_names)
        sides = []
        clash = False
        for side, back in ((part.front, False), (part.back, True)):
            if side is None:
                sides.append((np.full(tess.n_facets, -1, np.int32),
                              np.full(tess.n_facets, -1, np.int32)))
                continue
            names, per_facet = _side_node_names(part, side, tess, back)
            idx = np.empty(len(names), np.int64)
            for k, name in enumerate(names):
                if name not in node_lookup:
                    node_lookup[name] = len(node_names)
                    node_names.append(name)
                n = node_lookup[name]
                idx[k] = n
                where_set = f"{part.where} {'back' if back else 'front'}"
                if n in node_coating and node_coating[n][0] != side.coating:
                    c0, w0 = node_coating[n]
                    fail(ModelError(f"node {name!r} has coating {side.coating!r} here but "
                                    f"coating {c0!r} on {w0}; a node has one coating",
                                    where=where_set))
                    clash = True
                else:
                    node_coating.setdefault(n, (side.coating, where_set))
            sides.append((idx[per_facet].astype(np.int32),
                          np.full(tess.n_facets, coating_index[side.coating], np.int32)))
        if clash and problems is not None:
            pass  # keep the part; the node keeps its first coating
        verts_all.append(world)
        tris_all.append(tris + v_offset)
        v_offset += len(world)
        part_all.append(np.full(tess.n_facets, pidx, np.int32))
        front_node_all.append(sides[0][0]); front_coat_all.append(sides[0][1])
        back_node_all.append(sides[1][0]); back_coat_all.append(sides[1][1])
        part_names.append(part.name)
        part_closed.append(bool(tess.closed))
        part_shapes.append(part.shape)

    def cat(arrs, dtype, shape_tail=()):
        if not arrs:
            return np.zeros((0,) + shape_tail, dtype)
        return np.ascontiguousarray(np.concatenate(arrs), dtype=dtype)

    vertices = cat(verts_all, np.float64, (3,))
    triangles = cat(tris_all, np.int64, (3,))
    part_idx = cat(part_all, np.int32)
    front_node = cat(front_node_all, np.int32)
    back_node = cat(back_node_all, np.int32)
    front_coat = cat(front_coat_all, np.int32)
    back_coat = cat(back_coat_all, np.int32)

    node_coats = [model.coatings[node_coating[i][0]] for i in range(len(node_names))]
    return assemble_geometry(
        vertices, triangles, front_node=front_node, back_node=back_node,
        front_coating=front_coat, back_coating=back_coat, part=part_idx,
        part_names=part_names, coatings=coatings, node_names=node_names,
        node_coatings=node_coats, part_closed=part_closed, part_shapes=part_shapes)


def assemble_geometry(vertices, triangles, *, front_node, back_node, front_coating,
                      back_coating, part, part_names, coatings, node_names, node_coatings,
                      part_closed=None, part_shapes=None) -> "Geometry":
    """A :class:`Geometry` from flat facet arrays and side assignments.

    Facet normals, areas and centroids and the node table (areas, facet counts, coating
    properties) are derived here, once, for the model builder and for hand-made test
    geometry alike.

    Parameters
    ----------
    vertices : (v, 3) float [m]; triangles : (f, 3) int
    front_node, back_node, front_coating, back_coating, part : (f,) int — -1 = inert side
    part_names : sequence of str; coatings : sequence of Coating (indexed by *_coating)
    node_names : sequence of str, (n,); node_coatings : sequence of Coating, (n,)
    part_closed, part_shapes : sequence, optional — per part

    Returns
    -------
    Geometry
        Zero-area facets get a zero normal (the checks report them).
    """
    vertices = np.ascontiguousarray(vertices, np.float64)
    triangles = np.ascontiguousarray(triangles, np.int64)
    front_node = np.ascontiguousarray(front_node, np.int32)
    back_node = np.ascontiguousarray(back_node, np.int32)
    v = vertices[triangles]
    cross = np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]).reshape(-1, 3)
    norm = np.linalg.norm(cross, axis=1)
    areas = 0.5 * norm
    with np.errstate(invalid="ignore", divide="ignore"):
        normals = np.where(norm[:, None] > 0.0, cross / np.where(norm > 0, norm, 1.0)[:, None],
                           0.0)
    centroids = v.mean(axis=1).reshape(-1, 3)

    n = len(node_names)
    area = np.zeros(n)
    count = np.zeros(n, np.int64)
    for nodes in (front_node, back_node):
        active = nodes >= 0
        area += np.bincount(nodes[active], weights=areas[active], minlength=n)
        count += np.bincount(nodes[active], minlength=n)
    table = NodeTable(
        names=tuple(node_names),
        area=area,
        solar_absorptivity=np.array([c.solar_absorptivity for c in node_coatings], float),
        ir_emissivity=np.array([c.ir_emissivity for c in node_coatings], float),
        solar_specular=np.array([c.solar_specular for c in node_coatings], float),
        ir_specular=np.array([c.ir_specular for c in node_coatings], float),
        coating=tuple(c.name for c in node_coatings),
        facet_count=count,
    )
    extra = {}
    if part_closed is not None:
        extra["part_closed"] = tuple(part_closed)
    if part_shapes is not None:
        extra["part_shapes"] = tuple(part_shapes)
    return Geometry(
        vertices=vertices,
        triangles=triangles,
        normals=np.ascontiguousarray(normals, np.float64),
        areas=np.ascontiguousarray(areas, np.float64),
        centroids=np.ascontiguousarray(centroids, np.float64),
        front_node=front_node,
        back_node=back_node,
        front_coating=np.ascontiguousarray(front_coating, np.int32),
        back_coating=np.ascontiguousarray(back_coating, np.int32),
        part=np.ascontiguousarray(part, np.int32),
        part_names=tuple(part_names),
        coatings=tuple(coatings),
        nodes=table,
        **extra,
    )
