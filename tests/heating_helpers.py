"""Small hand-built geometries and trajectories for tests/test_heating.py.

Geometry objects are assembled here with vfactor.geometry.assemble_geometry (not through
the model loader), so that the heating tests depend only on the documented interfaces.
"""

from __future__ import annotations

import numpy as np

from vfactor.geometry import Coating, assemble_geometry
from vfactor.planet import Planet
from vfactor.trajectory import Trajectory

EARTH_R = 6_378_137.0
TEST_EARTH = Planet(name="Earth", radius=EARTH_R, gm=3.986004418e14, j2=0.0,
                    rotation_rate=7.292115e-5)


def rectangle(center, u, v, size_u, size_v):
    """Two triangles of a rectangle; front normal = u x v (unit vectors u, v)."""
    c = np.asarray(center, float)
    u = np.asarray(u, float) * size_u / 2
    v = np.asarray(v, float) * size_v / 2
    verts = np.array([c - u - v, c + u - v, c + u + v, c - u + v])
    return verts, np.array([[0, 1, 2], [0, 2, 3]])


def icosphere(radius, subdivisions=3, center=(0, 0, 0)):
    import trimesh

    mesh = trimesh.creation.icosphere(subdivisions=subdivisions, radius=radius)
    return np.asarray(mesh.vertices) + np.asarray(center, float), np.asarray(mesh.faces)


def make_geometry(parts, coatings):
    """Geometry from parts.

    parts : list of dict(mesh=(vertices, triangles), front=(coating, node) or None,
            back=(coating, node) or None); coating = name in ``coatings``; node = name.
    coatings : dict name -> Coating
    """
    coat_names = list(coatings)
    verts = []
    tris = []
    front_node, back_node, front_coat, back_coat, part_idx = [], [], [], [], []
    node_names = []
    node_coat = []
    offset = 0
    for p_i, part in enumerate(parts):
        v, t = part["mesh"]
        verts.append(np.asarray(v, float))
        tris.append(np.asarray(t, np.int64) + offset)
        offset += len(v)
        for side, nodes_out, coats_out in (("front", front_node, front_coat),
                                           ("back", back_node, back_coat)):
            spec = part.get(side)
            if spec is None:
                nodes_out.extend([-1] * len(t))
                coats_out.extend([-1] * len(t))
                continue
            coat, node = spec
            if node not in node_names:
                node_names.append(node)
                node_coat.append(coat)
            nodes_out.extend([node_names.index(node)] * len(t))
            coats_out.extend([coat_names.index(coat)] * len(t))
        part_idx.extend([p_i] * len(t))
    return assemble_geometry(
        np.concatenate(verts), np.concatenate(tris), front_node=front_node,
        back_node=back_node, front_coating=front_coat, back_coating=back_coat, part=part_idx,
        part_names=tuple(f"part{i}" for i in range(len(parts))),
        coatings=tuple(coatings[c] for c in coat_names), node_names=node_names,
        node_coatings=[coatings[c] for c in node_coat])


def make_trajectory(sun_body, nadir_body, planet_distance, sun_fraction=None, time=None,
                    sun_distance=1.495978707e11, planet=TEST_EARTH):
    """Trajectory with hand-set body-frame vectors; inertial frame = body frame."""
    sun_body = np.atleast_2d(np.asarray(sun_body, float))
    sun_body = sun_body / np.linalg.norm(sun_body, axis=1, keepdims=True)
    t = sun_body.shape[0]
    nadir_body = np.broadcast_to(np.asarray(nadir_body, float), (t, 3)).copy()
    nadir_body /= np.linalg.norm(nadir_body, axis=1, keepdims=True)
    dist = np.broadcast_to(np.asarray(planet_distance, float), (t,)).copy()
    frac = np.ones(t) if sun_fraction is None else np.broadcast_to(
        np.asarray(sun_fraction, float), (t,)).copy()
    time = np.arange(t, dtype=float) * 60.0 if time is None else np.asarray(time, float)
    position = -nadir_body * dist[:, None]
    return Trajectory(
        epoch_utc="2027-03-21T00:00:00Z", time=time, position=position,
        velocity=np.zeros((t, 3)), sun_inertial=sun_body.copy(),
        sun_distance=np.full(t, float(sun_distance)), sun_fraction=frac,
        beta=np.zeros(t), body_to_inertial=np.broadcast_to(np.eye(3), (t, 3, 3)).copy(),
        sun_body=sun_body, nadir_body=nadir_body, planet_distance=dist, period=5400.0,
        planet=planet)
