"""Write the mesh file(s) of the demo model (meshes/demo.toml).

The demo satellite is invented. Its camera is a closed octagonal prism written here as an
ASCII STL file, so that the demo exercises mesh reading (``shape = "mesh"``). The file is
committed; run this script again only to regenerate it:

    .venv/bin/python scripts/make_demo_meshes.py

Geometry of ``meshes/camera.stl`` (file units: millimetres, the model scales by 0.001):
an octagonal prism of circumradius 80 mm and height 150 mm, its axis along +z, its base
at z = 0, outward-facing counter-clockwise triangles (a closed, watertight solid).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import trimesh

OUT_DIR = Path(__file__).resolve().parent.parent / "meshes"


def octagonal_prism(circumradius: float, height: float, sections: int = 8):
    """Vertices (2 s + 2, 3) and outward CCW triangles (4 s, 3) of a closed prism."""
    angles = 2.0 * np.pi * np.arange(sections) / sections + np.pi / sections
    ring = np.stack([circumradius * np.cos(angles), circumradius * np.sin(angles)], axis=1)
    bottom = np.column_stack([ring, np.zeros(sections)])
    top = np.column_stack([ring, np.full(sections, height)])
    vertices = np.vstack([bottom, top, [[0.0, 0.0, 0.0]], [[0.0, 0.0, height]]])
    cb, ct = 2 * sections, 2 * sections + 1
    faces = []
    for i in range(sections):
        j = (i + 1) % sections
        faces.append((i, j, sections + j))            # side, outward
        faces.append((i, sections + j, sections + i))
        faces.append((cb, j, i))                       # bottom cap, facing -z
        faces.append((ct, sections + i, sections + j))  # top cap, facing +z
    return vertices, np.asarray(faces, dtype=np.int64)


def main() -> None:
    vertices, faces = octagonal_prism(80.0, 150.0)
    mesh = trimesh.Trimesh(vertices, faces, process=False)
    if not mesh.is_watertight or mesh.volume <= 0.0:
        raise SystemExit("camera mesh is not a closed outward-facing solid")
    text = trimesh.exchange.stl.export_stl_ascii(mesh)
    out = OUT_DIR / "camera.stl"
    out.write_text(text)
    print(f"wrote {out} ({len(faces)} triangles, volume {mesh.volume / 1e9:.6f} m3)")


if __name__ == "__main__":
    main()
