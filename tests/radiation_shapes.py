"""Small hand-built geometries for the radiation tests (independent of the model loader).

Rectangles, disks, spheres and boxes as triangle meshes, packed into a fully filled
:class:`vfactor.geometry.Geometry` with named nodes on front and back sides.
"""

from __future__ import annotations

import numpy as np

from vfactor.geometry import Coating, assemble_geometry

BLACK = Coating("black", 1.0, 1.0, 0.0, 0.0)


def rectangle(corner, edge_u, edge_v, nu=1, nv=1):
    """Parallelogram ``corner + s edge_u + t edge_v`` split into ``2 nu nv`` triangles.

    Front normal along ``edge_u x edge_v``.
    """
    corner = np.asarray(corner, float)
    eu = np.asarray(edge_u, float)
    ev = np.asarray(edge_v, float)
    s = np.linspace(0.0, 1.0, nu + 1)
    t = np.linspace(0.0, 1.0, nv + 1)
    S, T = np.meshgrid(s, t, indexing="ij")
    verts = corner + S.reshape(-1, 1) * eu + T.reshape(-1, 1) * ev
    tris = []
    for i in range(nu):
        for j in range(nv):
            a = i * (nv + 1) + j
            b = (i + 1) * (nv + 1) + j
            tris.append([a, b, b + 1])
            tris.append([a, b + 1, a + 1])
    return verts, np.array(tris, np.int64)


def disk(center, normal, radius, segments=96, equal_area=True):
    """Regular polygon approximating a disk (a fan of triangles), front along ``normal``.

    With ``equal_area`` the vertex radius is enlarged so that the polygon has the area of
    the disk, pi r^2, which makes the view factors of the polygon agree with those of the
    disk to second order in ``2 pi / segments``.
    """
    center = np.asarray(center, float)
    n = np.asarray(normal, float)
    n = n / np.linalg.norm(n)
    helper = np.array([1.0, 0, 0]) if abs(n[0]) < 0.9 else np.array([0, 1.0, 0])
    e1 = np.cross(n, helper)
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(n, e1)
    phi = 2 * np.pi / segments
    rv = radius * np.sqrt(phi / np.sin(phi)) if equal_area else radius
    ang = np.arange(segments) * phi
    ring = center + rv * (np.cos(ang)[:, None] * e1 + np.sin(ang)[:, None] * e2)
    verts = np.vstack([center, ring])
    tris = np.array([[0, 1 + k, 1 + (k + 1) % segments] for k in range(segments)], np.int64)
    return verts, tris


def icosphere(center, radius, subdivisions=3):
    """Geodesic sphere (subdivided icosahedron), outward normals, vertices on the sphere."""
    t = (1.0 + 5 ** 0.5) / 2.0
    v = [[-1, t, 0], [1, t, 0], [-1, -t, 0], [1, -t, 0], [0, -1, t], [0, 1, t],
         [0, -1, -t], [0, 1, -t], [t, 0, -1], [t, 0, 1], [-t, 0, -1], [-t, 0, 1]]
    f = [[0, 11, 5], [0, 5, 1], [0, 1, 7], [0, 7, 10], [0, 10, 11], [1, 5, 9], [5, 11, 4],
         [11, 10, 2], [10, 7, 6], [7, 1, 8], [3, 9, 4], [3, 4, 2], [3, 2, 6], [3, 6, 8],
         [3, 8, 9], [4, 9, 5], [2, 4, 11], [6, 2, 10], [8, 6, 7], [9, 8, 1]]
    verts = [np.array(p, float) / np.linalg.norm(p) for p in v]
    faces = f
    for _ in range(subdivisions):
        cache = {}

        def mid(a, b):
            key = (min(a, b), max(a, b))
            if key not in cache:
                m = verts[a] + verts[b]
                verts.append(m / np.linalg.norm(m))
                cache[key] = len(verts) - 1
            return cache[key]

        new = []
        for a, b, c in faces:
            ab, bc, ca = mid(a, b), mid(b, c), mid(c, a)
            new += [[a, ab, ca], [b, bc, ab], [c, ca, bc], [ab, bc, ca]]
        faces = new
    V = np.asarray(center, float) + radius * np.array(verts)
    return V, np.array(faces, np.int64)


def flipped(mesh):
    """The same mesh with reversed winding (front and back swapped)."""
    v, t = mesh
    return v, t[:, ::-1].copy()


def box_faces(size, divisions=1, inward=True):
    """Six faces of the box [0, sx] x [0, sy] x [0, sz] as separate meshes.

    Returns a dict ``{"-x": mesh, "+x": ..., "-y", "+y", "-z", "+z"}`` with fronts facing
    into the box when ``inward`` (out of it otherwise).
    """
    sx, sy, sz = size
    d = divisions
    faces = {
        "-z": rectangle([0, 0, 0], [0, sy, 0], [sx, 0, 0], d, d),   # normal +z (inward)
        "+z": rectangle([0, 0, sz], [sx, 0, 0], [0, sy, 0], d, d),  # normal -z? fixed below
        "-x": rectangle([0, 0, 0], [0, 0, sz], [0, sy, 0], d, d),
        "+x": rectangle([sx, 0, 0], [0, sy, 0], [0, 0, sz], d, d),
        "-y": rectangle([0, 0, 0], [sx, 0, 0], [0, 0, sz], d, d),
        "+y": rectangle([0, sy, 0], [0, 0, sz], [sx, 0, 0], d, d),
    }
    centre = np.array([sx, sy, sz]) / 2.0
    out = {}
    for name, mesh in faces.items():
        v, t = mesh
        n = np.cross(v[t[0, 1]] - v[t[0, 0]], v[t[0, 2]] - v[t[0, 0]])
        points_in = np.dot(centre - v[t[0, 0]], n) > 0
        if points_in != inward:
            mesh = flipped(mesh)
        out[name] = mesh
    return out


def make_geometry(sheets, coatings=None):
    """Pack meshes into a :class:`Geometry`.

    Parameters
    ----------
    sheets : list of dict
        Each with ``mesh=(vertices, triangles)``, ``front=(node_name, coating_name) or
        None`` and optionally ``back=(node_name, coating_name)`` (None = inert), ``part``.
    coatings : dict name -> Coating, default ``{"black": BLACK}``
    """
    coatings = dict(coatings or {"black": BLACK})
    coat_names = list(coatings)
    verts, tris, fn, bn, fc, bc, part = [], [], [], [], [], [], []
    node_names, node_coat = [], []
    part_names = []

    def node_index(spec):
        if spec is None:
            return -1, -1
        name, coat = spec
        if name not in node_names:
            node_names.append(name)
            node_coat.append(coat)
        elif node_coat[node_names.index(name)] != coat:
            raise ValueError(f"node {name} with two coatings")
        return node_names.index(name), coat_names.index(coat)

    offset = 0
    for k, sheet in enumerate(sheets):
        v, t = sheet["mesh"]
        verts.append(np.asarray(v, float))
        tris.append(np.asarray(t, np.int64) + offset)
        offset += len(v)
        f_node, f_coat = node_index(sheet.get("front"))
        b_node, b_coat = node_index(sheet.get("back"))
        m = len(t)
        fn += [f_node] * m
        bn += [b_node] * m
        fc += [f_coat] * m
        bc += [b_coat] * m
        part += [k] * m
        part_names.append(sheet.get("part", f"part{k}"))
    return assemble_geometry(
        np.vstack(verts), np.vstack(tris), front_node=fn, back_node=bn, front_coating=fc,
        back_coating=bc, part=part, part_names=part_names,
        coatings=tuple(coatings[c] for c in coat_names), node_names=node_names,
        node_coatings=[coatings[c] for c in node_coat])
