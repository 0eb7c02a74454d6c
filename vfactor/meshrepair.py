"""Opt-in repair and simplification of one mesh geometry (``repair``, ``simplify`` keys).

Both go through trimesh (``trimesh.Trimesh`` processing and ``trimesh.repair``), the
library the mesh files are read with; simplification is trimesh's quadric decimation,
which runs the ``fast-simplification`` package (Garland & Heckbert, "Surface
simplification using quadric error metrics", SIGGRAPH 1997). trimesh was chosen over
``pymeshfix`` and ``manifold3d`` because the defects of exported spacecraft meshes are
bookkeeping ones (repeated vertices, duplicate and zero-area facets, facets wound the
other way) that its processing fixes without moving any vertex, while those two rebuild
the surface (hole filling, boolean union) and would change areas the radiation depends on.

Repair of one geometry, in this order:

1. merge vertices closer than trimesh's merge tolerance (``trimesh.tol.merge``, 1e-8;
   bit-identical copies, which STL repeats per facet, are shared without being counted);
2. drop degenerate facets (height below that tolerance) and duplicate facets (the same
   three vertices, in either winding: a surface exported "double-sided");
3. make the winding agree across every edge shared by two facets, per connected body
   (the orientation classes of :func:`vfactor.topology.orientation_classes`, vectorised,
   where ``trimesh.repair.fix_winding`` walks the facets in Python: measured on a
   224k-facet public model, 14.6 s for that step alone against 3.2 s for this whole
   repair); an open body then keeps the orientation that
   most of its area had in the file, a closed body is turned to face outward (positive
   volume). A body that cannot be oriented (a one-sided surface) is left as it is.

Nothing else changes: vertices keep their coordinates, so areas change only by what was
dropped.
"""

from __future__ import annotations

import numpy as np

__all__ = ["REPAIR_COUNTS", "describe_repairs", "repair_piece", "simplify_piece"]

REPAIR_COUNTS = ("merged_vertices", "degenerate_facets", "duplicate_facets",
                 "flipped_facets", "bodies_turned_outward")
"""Keys of the counts :func:`repair_piece` returns."""


def repair_piece(vertices: np.ndarray, faces: np.ndarray):
    """Repair one geometry (see the module docstring).

    Parameters
    ----------
    vertices : (v, 3) float [m]; faces : (f, 3) int

    Returns
    -------
    (vertices, faces, counts) — counts is a dict over :data:`REPAIR_COUNTS`
    """
    import trimesh

    from vfactor.shapes import merge_exact
    from vfactor.topology import closed_bodies, orientation_classes

    # bit-identical copies (an STL file repeats every vertex per facet) are not a defect
    vertices, faces = merge_exact(np.asarray(vertices, float), np.asarray(faces, np.int64))
    m = trimesh.Trimesh(vertices, faces, process=False)
    counts = dict.fromkeys(REPAIR_COUNTS, 0)
    n0 = len(m.vertices)
    m.merge_vertices()
    counts["merged_vertices"] = n0 - len(m.vertices)
    keep = m.nondegenerate_faces()
    counts["degenerate_facets"] = int((~keep).sum())
    m.update_faces(keep)
    unique = np.asarray(m.unique_faces())     # a mask in trimesh 5, indices before
    if unique.dtype != bool:
        unique = np.isin(np.arange(len(m.faces)), unique)
    counts["duplicate_facets"] = int((~unique).sum())
    m.update_faces(unique)
    m.remove_unreferenced_vertices()
    if len(m.faces) == 0:
        return np.asarray(m.vertices, float), np.asarray(m.faces, np.int64), counts

    v = np.asarray(m.vertices, float)
    faces_now = np.asarray(m.faces, np.int64).copy()
    body, flipped, _ = orientation_classes(faces_now)
    faces_now[flipped] = faces_now[flipped][:, ::-1]
    tri = v[faces_now]
    cross = np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0])
    area = 0.5 * np.linalg.norm(cross, axis=1)
    volume = np.einsum("ij,ij->i", tri[:, 0], np.cross(tri[:, 1], tri[:, 2])) / 6.0
    closed_of = closed_bodies(faces_now, body)
    for b in np.unique(body):
        sel = body == b
        closed = bool(closed_of[b])
        if closed:
            turn = volume[sel].sum() < 0.0
        else:
            turn = area[sel & flipped].sum() > area[sel & ~flipped].sum()
        if turn:
            faces_now[sel] = faces_now[sel][:, ::-1]
            flipped[sel] = ~flipped[sel]
            if closed:
                counts["bodies_turned_outward"] += 1
    counts["flipped_facets"] = int(flipped.sum())
    return v, faces_now, counts


def simplify_piece(vertices: np.ndarray, faces: np.ndarray, target: int):
    """Quadric decimation of one geometry to about ``target`` facets.

    Parameters
    ----------
    vertices : (v, 3) float [m]; faces : (f, 3) int; target : int — facets wanted

    Returns
    -------
    (vertices, faces) — unchanged when the geometry has no more than ``target`` facets
    """
    import trimesh

    if len(faces) <= target:
        return vertices, faces
    m = trimesh.Trimesh(np.asarray(vertices, float), np.asarray(faces, np.int64),
                        process=False)
    m.merge_vertices()
    s = m.simplify_quadric_decimation(face_count=int(target))
    keep = s.nondegenerate_faces()
    return np.asarray(s.vertices, float), np.asarray(s.faces, np.int64)[keep]


def describe_repairs(name: str, counts: list) -> str:
    """One line saying what :func:`repair_piece` changed in the geometries of a file."""
    total = {k: sum(c[k] for c in counts) for k in REPAIR_COUNTS}
    done = []
    if total["merged_vertices"]:
        done.append(f"merged {total['merged_vertices']} vertices closer than 1e-8")
    if total["degenerate_facets"]:
        done.append(f"dropped {total['degenerate_facets']} degenerate facets")
    if total["duplicate_facets"]:
        done.append(f"dropped {total['duplicate_facets']} duplicate facets")
    if total["flipped_facets"]:
        done.append(f"turned {total['flipped_facets']} facets to agree with their "
                    f"neighbours")
    if total["bodies_turned_outward"]:
        done.append(f"turned {total['bodies_turned_outward']} closed bodies to face "
                    f"outward")
    what = "; ".join(done) if done else "nothing to repair"
    bodies = f"{len(counts)} {'body' if len(counts) == 1 else 'bodies'}"
    return f"repair of mesh file {name!r} ({bodies}): {what}"
