"""Write the small mesh fixtures of tests/data (self-made, invented geometry).

* ``bus_wing_draco.glb`` — a Draco-compressed GLB (glTF extension
  KHR_draco_mesh_compression) of two named nodes: a 0.3 x 0.2 x 0.1 m box "bus" and a
  0.5 x 0.2 m plate "wing" 0.3 m above it. Written by trimesh's glTF exporter with
  DracoPy (both dependencies of vfactor).
* ``messy_box.stl`` — a 1 x 1 x 1 m box (12 facets) with two facets wound the other way,
  one facet repeated and one zero-area facet added: 14 facets, the defects an exporter
  leaves that ``repair = true`` fixes.
* ``crossing_boxes.stl`` — two 1 m cubes in one file, the second moved by
  (0.5, 0.3, 0.2) m so that they interpenetrate: one part that intersects itself.

Run from the repository root:  python scripts/make_mesh_fixtures.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import trimesh

DATA = Path(__file__).resolve().parent.parent / "tests" / "data"


def bus_wing_draco() -> bytes:
    scene = trimesh.Scene()
    scene.add_geometry(trimesh.creation.box(extents=[0.3, 0.2, 0.1]), node_name="bus",
                       geom_name="bus")
    wing = trimesh.Trimesh([[0, 0, 0], [0.5, 0, 0], [0.5, 0.2, 0], [0, 0.2, 0]],
                           [[0, 1, 2], [0, 2, 3]], process=False)
    scene.add_geometry(wing, node_name="wing", geom_name="wing",
                       transform=trimesh.transformations.translation_matrix([0.2, 0, 0.3]))
    return trimesh.exchange.gltf.export_glb(scene, extension_draco=True)


def messy_box() -> bytes:
    box = trimesh.creation.box(extents=[1.0, 1.0, 1.0])
    faces = np.asarray(box.faces).copy()
    faces[[3, 8]] = faces[[3, 8]][:, ::-1]                 # two facets wound the other way
    faces = np.vstack([faces, faces[5], [[0, 0, 1]]])      # a repeat and a zero-area facet
    mesh = trimesh.Trimesh(box.vertices, faces, process=False)
    return trimesh.exchange.stl.export_stl_ascii(mesh).encode()


def crossing_boxes() -> bytes:
    a = trimesh.creation.box(extents=[1.0, 1.0, 1.0])
    b = trimesh.creation.box(extents=[1.0, 1.0, 1.0])
    b.apply_translation([0.5, 0.3, 0.2])
    mesh = trimesh.util.concatenate([a, b])
    return trimesh.exchange.stl.export_stl_ascii(mesh).encode()


def main() -> None:
    for name, make in (("bus_wing_draco.glb", bus_wing_draco), ("messy_box.stl", messy_box),
                       ("crossing_boxes.stl", crossing_boxes)):
        path = DATA / name
        path.write_bytes(make())
        print(f"wrote {path} ({path.stat().st_size} bytes)")


if __name__ == "__main__":
    main()
