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
``per-patch``       ``PART.FACE.K`` (``body.+x.  ``PART.FACE.K.back``
                    4``; one-face shapes
                    ``PART.K``)
==================  ===========================  ================================

``per-patch`` cuts every face into patches: the facets whose centroids fall into one
cube of edge ``patch_size`` (a grid in the part's frame, starting at the face's lowest
centroid coordinates) form one node; K numbers the patches of a face from 0 in order of
their first facet. Whole facets go to a patch, so a patch is as fine as the facets allow.
A mesh file without names (split into flat regions) is cut as one face: ``PART.K``.

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
    group : (f,) int32 — index into ``group_names``: the face of a primitive or the named
        body of a mesh file the facet belongs to (empty: one group per part)
    group_names : tuple of str — ``PART.GROUP`` (``PART`` for a one-face shape)
    part_label_sources : tuple of str — per part: ``shape``, ``file`` or ``flat regions``
        (see :class:`vfactor.shapes.Tessellation`)
    part_notes : tuple of tuple of str — per part: what reading changed (repair, ...)
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
    group: np.ndarray = None
    group_names: tuple = ()
    part_label_sources: tuple = ()
    part_notes: tuple = ()

    def __post_init__(self):
        if self.group is None:   # one group per part
            object.__setattr__(self, "group", self.part)
            object.__setattr__(self, "group_names", tuple(self.part_names))

    @property
    def n_facets(self) -> int:
        return int(self.triangles.shape[0])

    @property
    def n_nodes(self) -> int:
        return len(self.nodes)

    def node_parts(self) -> np.ndarray:
        """(n,) int — index into ``part_names`` of each node: the part of its first facet
        (front sides before back sides), -1 for a node without facets."""
        n, f = self.n_nodes, self.n_facets
        first = np.full(n, 2 * f, np.int64)
        for offset, side in ((0, self.front_node), (f, self.back_node)):
            side = np.asarray(side)
            on = side >= 0
            np.minimum.at(first, side[on], np.flatnonzero(on) + offset)
        part = np.full(n, -1, np.int64)
        held = first < 2 * f
        part[held] = np.asarray(self.part)[first[held] % f]
        return part


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


def _names_for(part, side, tess, facets, back: bool, selection=None):
    """Node names of one side over some facets of a part.

    Returns (names, index per facet of ``facets`` into names). ``selection`` is the
    :class:`vfactor.parts.Selection` that gives the side, or None for the part's own.
    """
    suffix = ".back" if back else ""
    if side.node is not None:
        return [side.node], np.zeros(len(facets), np.int64)
    mode = side.nodes
    if mode in ("per-face", "per-group") and tess.one_face:
        mode = "single"
    if mode == "single":
        base = part.name if selection is None else f"{part.name}.{selection.name}"
        return [base + suffix], np.zeros(len(facets), np.int64)
    if mode in ("per-face", "per-group"):
        used, local = np.unique(tess.face[facets], return_inverse=True)
        return ([f"{part.name}.{tess.labels[k]}{suffix}" for k in used],
                local.reshape(-1).astype(np.int64))
    if mode == "per-patch":
        return _patches(part, side.patch_size, tess, facets, suffix)
    # per-facet
    return ([f"{part.name}.{int(i)}{suffix}" for i in facets],
            np.arange(len(facets), dtype=np.int64))


def _patches(part, size, tess, facets, suffix):
    """``per-patch`` names: facets binned by centroid into cubes of edge ``size`` per face."""
    centroids = tess.vertices[tess.triangles[facets]].mean(axis=1)
    # a mesh file without names is split into flat regions only to name its faces: patches
    # then span the whole part (a filleted CAD part has thousands of tiny flat regions)
    whole = tess.one_face or tess.label_source == "flat regions"
    face = np.zeros(len(facets), np.int64) if whole else tess.face[facets]
    cell = np.empty((len(facets), 3), np.int64)
    for k in np.unique(face):
        on = face == k
        cell[on] = np.floor((centroids[on] - centroids[on].min(axis=0)) / size)
    key = np.column_stack([face, cell])
    _, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
    order = np.argsort(first, kind="stable")         # patches in order of first facet
    rank = np.empty(len(order), np.int64)
    rank[order] = np.arange(len(order))
    local = rank[inverse.reshape(-1)]
    patch_face = face[first[order]]
    names, count = [], {}
    for k in patch_face.tolist():
        index = count.get(k, 0)
        count[k] = index + 1
        base = part.name if whole else f"{part.name}.{tess.labels[k]}"
        names.append(f"{base}.{index}{suffix}")
    return names, local


def _side_assignment(part, tess, chooser, back: bool):
    """Sides of every facet of a part for one side slot (front or back).

    Parameters
    ----------
    chooser : (f,) int — index of the selection that takes each facet, -1 for none

    Returns
    -------
    list of (name, side, where) in order of first facet, and (f,) int index into it per
    facet (-1 where the side is inert)
    """
    slot = "back" if back else "front"
    own = part.back if back else part.front
    owner = chooser.copy()
    for k, sel in enumerate(part.selections):
        if not (sel.sets_back if back else sel.sets_front):
            owner[owner == k] = -1     # the selection leaves this side to the part
    entries, firsts, per_facet = [], [], np.full(tess.n_facets, -1, np.int64)
    for k in np.unique(owner):
        sel = part.selections[k] if k >= 0 else None
        side = own if sel is None else (sel.back if back else sel.front)
        if side is None:
            continue
        facets = np.flatnonzero(owner == k)
        names, local = _names_for(part, side, tess, facets, back, sel)
        first = np.full(len(names), tess.n_facets, np.int64)
        np.minimum.at(first, local, facets)
        where = f"{part.where} {slot}" if sel is None else f"{sel.where} {slot}"
        per_facet[facets] = local + len(entries)
        entries.extend((name, side, where) for name in names)
        firsts.extend(first.tolist())
    order = np.argsort(np.asarray(firsts, np.int64), kind="stable")
    rank = np.empty(len(order), np.int64)
    rank[order] = np.arange(len(order))
    active = per_facet >= 0
    per_facet[active] = rank[per_facet[active]]
    return [entries[i] for i in order], per_facet


def _apply_selections(part, tess, fail):
    """Which selection takes each facet, and the part without its omitted groups.

    Returns (tess, chooser (f,) int) or None when a selection matches no group (the
    error went to ``fail``).
    """
    from dataclasses import replace

    from vfactor.errors import ModelError
    from vfactor.meshfile import mesh_is_watertight
    from vfactor.parts import select_groups

    if not part.selections:
        return tess, np.full(tess.n_facets, -1, np.int64)
    present = np.unique(tess.face)
    labels = [tess.labels[k] for k in present]
    taken = np.asarray(select_groups(part.selections, labels), np.int64)
    ok = True
    for k, sel in enumerate(part.selections):
        if not (taken == k).any():
            if any(sel.matches(lab) for lab in labels):
                why = "every group it matches is taken by an earlier selection"
            elif tess.label_source == "flat regions":
                why = (f"the file names no groups (its {len(labels)} groups are flat regions "
                       f"numbered 0..{len(labels) - 1})")
            else:
                shown = ", ".join(labels[:12]) + (", ..." if len(labels) > 12 else "")
                why = f"the groups are {shown}"
            fail(ModelError(f"match {list(sel.patterns)} matches no group of the part; "
                            f"{why}", where=sel.where))
            ok = False
    if not ok:
        return None
    chooser_of_label = np.full(len(tess.labels), -1, np.int64)
    chooser_of_label[present] = taken
    chooser = chooser_of_label[tess.face]
    omitted = np.array([s.omit for s in part.selections] + [False], bool)[chooser]
    if omitted.any():
        keep = ~omitted
        tris = tess.triangles[keep]
        closed = tess.closed and bool(len(tris)) and mesh_is_watertight(tess.vertices, tris)
        tess = replace(tess, triangles=tris, face=tess.face[keep], closed=closed)
        chooser = chooser[keep]
    return tess, chooser


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
    group_all, group_names, part_sources, part_notes = [], [], [], []
    v_offset = 0
    for part in model.parts:
        try:
            tess = tessellate(part)
        except ModelError as err:
            fail(err)
            continue
        selected = _apply_selections(part, tess, fail)
        if selected is None:
            continue
        tess, chooser = selected
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
        for back in (False, True):
            entries, per_facet = _side_assignment(part, tess, chooser, back)
            node_of = np.full(tess.n_facets, -1, np.int32)
            coat_of = np.full(tess.n_facets, -1, np.int32)
            idx = np.empty(len(entries), np.int64)
            coat = np.empty(len(entries), np.int64)
            for k, (name, side, where_set) in enumerate(entries):
                if name not in node_lookup:
                    node_lookup[name] = len(node_names)
                    node_names.append(name)
                n = node_lookup[name]
                idx[k] = n
                coat[k] = coating_index[side.coating]
                if n in node_coating and node_coating[n][0] != side.coating:
                    c0, w0 = node_coating[n]
                    fail(ModelError(f"node {name!r} has coating {side.coating!r} here but "
                                    f"coating {c0!r} on {w0}; a node has one coating",
                                    where=where_set))
                else:
                    node_coating.setdefault(n, (side.coating, where_set))
            active = per_facet >= 0
            node_of[active] = idx[per_facet[active]]
            coat_of[active] = coat[per_facet[active]]
            sides.append((node_of, coat_of))
        used, local = np.unique(tess.face, return_inverse=True)
        group_all.append(local.reshape(-1).astype(np.int32) + len(group_names))
        group_names.extend(part.name if tess.one_face else f"{part.name}.{tess.labels[k]}"
                           for k in used)
        part_sources.append(tess.label_source)
        part_notes.append(tuple(tess.notes))
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
    group = cat(group_all, np.int32)

    node_coats = [model.coatings[node_coating[i][0]] for i in range(len(node_names))]
    return assemble_geometry(
        vertices, triangles, front_node=front_node, back_node=back_node,
        front_coating=front_coat, back_coating=back_coat, part=part_idx,
        part_names=part_names, coatings=coatings, node_names=node_names,
        node_coatings=node_coats, part_closed=part_closed, part_shapes=part_shapes,
        group=group, group_names=group_names, part_label_sources=part_sources,
        part_notes=part_notes)


def assemble_geometry(vertices, triangles, *, front_node, back_node, front_coating,
                      back_coating, part, part_names, coatings, node_names, node_coatings,
                      part_closed=None, part_shapes=None, group=None, group_names=None,
                      part_label_sources=None, part_notes=None) -> "Geometry":
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
    group : (f,) int, optional, with group_names — facet groups (default: the parts)
    part_label_sources, part_notes : sequence, optional — per part

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
    if group is not None:
        extra["group"] = np.ascontiguousarray(group, np.int32)
        extra["group_names"] = tuple(group_names)
    if part_label_sources is not None:
        extra["part_label_sources"] = tuple(part_label_sources)
    if part_notes is not None:
        extra["part_notes"] = tuple(part_notes)
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
