"""The geometric checks of a built model: facets, meshes, and parts against each other.

:func:`check_geometry` appends :class:`vfactor.errors.Problem` entries to a check report
(:class:`vfactor.checks.CheckReport`); :mod:`vfactor.checks` runs it for ``vfactor check``
and before every ``run``.

Errors
------
* zero-area or degenerate facets (height below 1e-9 of the longest edge);
* a closed part whose normals point inward (negative signed volume);
* a mesh whose facet winding is inconsistent (neighbours facing opposite ways), checked
  per named body (:mod:`vfactor.topology`); a warning when both sides share a coating;
* coincident overlapping facets (of different parts, or of one part) facing the same way (coplanar within
  the tolerance, same normal, overlapping with a width above the tolerance): two surfaces
  in one place, where the first hit is arbitrary;
* facets that cross each other (of different parts, or within one part): an edge of one
  facet crosses the interior of the other, with both edge ends farther than the tolerance from the plane
  and the crossing point farther than the tolerance from the facet's edges;
* a node with no facets or no area.

Warnings
--------
* a part with no active side (it only casts shadows);
* a curved part whose facet area differs from the exact area by more than 1 %;
* a mesh declared ``closed = true`` that is not watertight (open and non-manifold edges
  counted);
* ``per-group`` on a mesh without names that makes more than 64 nodes;
* a closed part whose back (inner) side is active;
* a very thin closed part (mean thickness 2 V / A below 0.5 % of its size);
* a part lying wholly inside a closed part (ray-parity test from one of its facets);
* face-to-face contact: coincident overlapping facets with opposite normals (a capped boom standing on a face). The contact is physical, but the covered
  area still takes part in the exchange; the message gives the area involved.

Tolerance
---------
``tol = 1e-6 * D`` where D is the diagonal of the bounding box of the whole model (1 µm
for a 1 m vehicle): far above the rounding of float64 coordinates (~1e-16 D) and below any
gap a designer would model on purpose. Parts that touch (a boom standing on a face, two
panels meeting along an edge) are within the tolerance and are not intersections; only
proper interpenetration is.
Notes: the extent and area of every mesh part, and what ``repair``/``simplify`` changed.

Contacts are found by :func:`vfactor.tracing.contacts.find_contacts` (a 3-D broad phase
over all facets at once, so pairs inside one part are found too).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from vfactor.errors import Problem
from vfactor.geometry import Geometry
from vfactor.meshfile import mesh_is_watertight
from vfactor.shapes import CURVED_SHAPES, exact_area
from vfactor.topology import edge_report

__all__ = ["check_geometry", "AreaDifference", "RELATIVE_TOLERANCE", "AREA_WARNING",
           "GROUP_SPLIT_WARNING", "MESH_SIZE_RANGE_M"]

RELATIVE_TOLERANCE = 1e-6
"""Geometric tolerance as a fraction of the model's bounding-box diagonal."""
AREA_WARNING = 0.01
"""Relative tessellated-minus-exact area above which a curved part gets a warning."""
DEGENERATE_RATIO = 1e-9
"""A facet whose height is below this fraction of its longest edge is degenerate."""
THIN_RATIO = 0.005
"""A closed part whose mean thickness 2 V / A is below this fraction of its bounding-box
diagonal is reported as very thin."""
_MAX_EXAMPLES = 5


@dataclass(frozen=True)
class AreaDifference:
    """Tessellated against exact area of one curved part [m2]."""

    part: str
    shape: str
    facets: int
    tessellated: float
    exact: float

    @property
    def relative(self) -> float:
        """(tessellated - exact) / exact [1]."""
        return (self.tessellated - self.exact) / self.exact


def check_geometry(model, geometry: Geometry, report) -> None:
    """Run the geometric checks on a built geometry, appending to ``report``."""
    file = model.path
    add = report.problems.append
    g = geometry
    if g.n_facets == 0:
        if not any(p.severity == "error" for p in report.problems):
            add(Problem("error", file, "", "the model has no facets"))
        return
    lo, hi = g.vertices.min(axis=0), g.vertices.max(axis=0)
    diag = float(np.linalg.norm(hi - lo))
    tol = RELATIVE_TOLERANCE * diag if diag > 0 else 1e-12
    report.tolerance = tol

    parts = {p.name: p for p in model.parts}
    v = g.vertices[g.triangles]
    edges = np.stack([v[:, 1] - v[:, 0], v[:, 2] - v[:, 1], v[:, 0] - v[:, 2]], axis=1)
    longest = np.sqrt((edges ** 2).sum(axis=2)).max(axis=1)
    degenerate = (g.areas <= 0.0) | (2.0 * g.areas <= DEGENERATE_RATIO * longest ** 2)

    for k, pname in enumerate(g.part_names):
        part = parts[pname]
        sel = np.flatnonzero(g.part == k)
        bad = sel[degenerate[sel]]
        if len(bad):
            groups = [g.group_names[j] for j in np.unique(g.group[bad])]
            in_groups = (f" in group{'s' if len(groups) > 1 else ''} "
                         f"{', '.join(repr(n) for n in groups[:3])}"
                         f"{', ...' if len(groups) > 3 else ''}"
                         if part.shape == "mesh" and len(np.unique(g.group[sel])) > 1
                         and g.part_label_sources[k] == "file" else "")
            fix = ("set repair = true on the part to drop them, or fix the mesh"
                   if part.shape == "mesh" else "fix the shape parameters")
            add(Problem("error", file, part.where,
                        f"{len(bad)} zero-area or degenerate facets{in_groups} (facets "
                        f"{_examples(bad)}); {fix}", tuple(int(i) for i in bad)))
        good = sel[~degenerate[sel]]
        closed = g.part_closed[k] if k < len(g.part_closed) else False
        if part.shape == "mesh" and len(good) and not _check_winding(part, g, k, good, file,
                                                                     add):
            closed = False
        if part.shape == "mesh" and part.parameters.get("closed") is True and len(sel):
            local_tris = g.triangles[sel]
            if not mesh_is_watertight(g.vertices, local_tris):
                edges = edge_report(g.triangles[sel])
                where_open = []
                if edges.open_edges:
                    where_open.append(f"{edges.open_edges} open edges")
                if edges.non_manifold_edges:
                    where_open.append(f"{edges.non_manifold_edges} edges shared by three or "
                                      f"more facets (e.g. facets "
                                      f"{_examples(sel[list(edges.non_manifold_example)])})")
                add(Problem("warning", file, part.where,
                            f"declared closed but mesh file "
                            f"{part.parameters.get('file_as_written')!r} is not watertight"
                            f"{' (' + ', '.join(where_open) + ')' if where_open else ''}; "
                            f"its orientation and thickness are not checked"))
                closed = False
        if closed and len(good):
            c = g.centroids[good].mean(axis=0)
            pv = g.vertices[g.triangles[good]] - c
            volume = float(np.einsum("ij,ij->i", pv[:, 0], np.cross(pv[:, 1], pv[:, 2])).sum()
                           / 6.0)
            area = float(g.areas[good].sum())
            pdiag = float(np.linalg.norm(np.ptp(g.vertices[g.triangles[sel]].reshape(-1, 3), axis=0)))
            if volume < 0.0:
                add(Problem("error", file, part.where,
                            f"closed part with inward-pointing normals (signed volume "
                            f"{volume:.4g} m3 < 0); reverse the facet winding of the mesh"))
            elif area > 0.0 and 2.0 * volume / area < THIN_RATIO * pdiag:
                add(Problem("warning", file, part.where,
                            f"very thin closed part (mean thickness {2 * volume / area:.3g} "
                            f"m for a size of {pdiag:.3g} m); a rectangle with a front and a "
                            f"back side is more robust"))
            if part.back is not None:
                add(Problem("warning", file, part.where,
                            "closed part with an active back side: its inside sees only "
                            "itself"))
        if part.shape == "mesh" and len(good):
            _check_mesh_size(part, g, good, file, add)
            _check_group_split(part, g, k, sel, file, add)
        for text in (g.part_notes[k] if k < len(g.part_notes) else ()):
            add(Problem("note", file, part.where, text))
        if part.shape in CURVED_SHAPES and len(sel):
            exact = exact_area(part)
            diff = AreaDifference(pname, part.shape, len(sel), float(g.areas[sel].sum()),
                                  exact)
            report.area_differences.append(diff)
            if abs(diff.relative) > AREA_WARNING:
                add(Problem("warning", file, part.where,
                            f"facet area {diff.tessellated:.5g} m2 differs from the exact "
                            f"{diff.exact:.5g} m2 by {100 * diff.relative:+.2f} %; use a "
                            f"smaller max_edge or more segments"))

    sound = np.zeros(g.n_nodes, bool)     # nodes with a facet that is not degenerate
    for nodes in (g.front_node, g.back_node):
        sound[nodes[(nodes >= 0) & ~degenerate]] = True
    for i, name in enumerate(g.nodes.names):
        if not sound[i] and g.nodes.facet_count[i] > 0:
            continue      # its facets are all degenerate, and that is reported above
        if g.nodes.facet_count[i] == 0 or g.nodes.area[i] <= 0.0:
            add(Problem("error", file, f"node {name!r}",
                        f"node has no facets or no area ({int(g.nodes.facet_count[i])} "
                        f"facets, {g.nodes.area[i]:.3g} m2)"))

    _check_contacts(model, g, ~degenerate, tol, report)
    _check_enclosed(model, g, ~degenerate, tol, report)
    if getattr(model, "hinges", ()):
        from vfactor.hingechecks import check_hinges

        check_hinges(model, g, report, tol)


def _check_winding(part, g: Geometry, k: int, facets, file: str, add) -> bool:
    """Error for each group of a mesh part whose facets disagree on their front side.

    A mesh file with named bodies is checked body by body (two bodies never make each
    other inconsistent); a file without names as a whole. Returns True when consistent.
    """
    by_group = (k < len(g.part_label_sources) and g.part_label_sources[k] == "file")
    sets = ([facets[g.group[facets] == j] for j in np.unique(g.group[facets])] if by_group
            else [facets])
    ok = True
    shown = repr(part.parameters.get("file_as_written"))
    for sub in sets:
        edges = edge_report(g.triangles[sub])
        if edges.consistent:
            continue
        ok = False
        a, b = (int(sub[i]) for i in edges.example) if edges.example else (-1, -1)
        what = (f"group {g.group_names[g.group[sub[0]]]!r} of mesh file {shown}" if by_group
                else f"mesh file {shown}")
        fix = ("it cannot be oriented (a one-sided surface)" if edges.non_orientable else
               f"about {edges.facets_to_turn} of its {len(sub)} facets face the other way")
        both = part.front is not None and part.back is not None
        same_coating = both and part.front.coating == part.back.coating
        same_node = same_coating and part.front.node is not None and \
            part.front.node == part.back.node
        if same_node:
            continue      # front and back are one node: the winding decides nothing
        severity = "warning" if same_coating else "error"
        if same_coating:
            fix = (f"{fix}; both sides have coating {part.front.coating!r}, so only the node "
                   f"each side belongs to swaps")
        add(Problem(severity, file, part.where,
                    f"inconsistent facet winding in {what}: {edges.disagreeing_edges} edges "
                    f"where neighbouring facets face opposite ways (e.g. facets {a} and {b}); "
                    f"{fix}, so front and back swap across them; set repair = true on the "
                    f"part or fix the mesh's orientation", (a, b)))
    return ok


GROUP_SPLIT_WARNING = 64
"""Nodes above which ``check`` warns that ``per-group`` split a mesh without named groups
into flat regions (a threshold of our own: a radiation model of one body rarely wants
more nodes than this from one file without saying so)."""


def _check_group_split(part, g: Geometry, k: int, facets, file: str, add) -> None:
    """Warn when ``per-group``/``per-face`` on a mesh without names made many nodes."""
    if k >= len(g.part_label_sources) or g.part_label_sources[k] != "flat regions":
        return
    modes = {s.nodes for s in (part.front, part.back) if s is not None and s.node is None}
    if not modes & {"per-group", "per-face"}:
        return
    nodes = np.unique(np.concatenate([g.front_node[facets], g.back_node[facets]]))
    count = int((nodes >= 0).sum())
    if count > GROUP_SPLIT_WARNING:
        add(Problem("warning", file, part.where,
                    f"nodes = 'per-group' on mesh file "
                    f"{part.parameters.get('file_as_written')!r}, which names no groups, "
                    f"split it into {count} nodes (one per flat region of its "
                    f"{len(facets)} facets); use nodes = 'single', a file with named bodies "
                    f"(OBJ objects, glTF nodes, STEP products), or [[parts.select]]"))


MESH_SIZE_RANGE_M = (0.001, 300.0)
"""Bounding-box diagonal [m] of a mesh part outside which ``check`` suspects a unit slip:
a part of a satellite is rarely under a millimetre or over 300 m (common practice), and a
factor of 1000 off (mm read as m, or m read as mm) lands outside this range."""


def _check_mesh_size(part, g: Geometry, facets, file: str, add) -> None:
    """Warn when a mesh part's size looks off by a factor of about 1000."""
    pts = g.vertices[g.triangles[facets]].reshape(-1, 3)
    extent = pts.max(axis=0) - pts.min(axis=0)
    diag = float(np.linalg.norm(extent))
    low, high = MESH_SIZE_RANGE_M
    if low <= diag <= high:
        # the size, so that a slip inside the range (a 0.1 m frame read as 100 m) shows
        per = part.parameters.get("scale", 1.0)
        add(Problem("note", file, part.where,
                    f"mesh file {part.parameters.get('file_as_written')!r}: "
                    f"{' x '.join(f'{x:.4g}' for x in extent)} m, "
                    f"{float(g.areas[facets].sum()):.4g} m2 (1 file unit = {per:g} m)"))
        return
    cause = ("coordinates in mm read as m? set file_unit = \"mm\"" if diag > high else
             "a unit applied twice, or metres read as mm? check length_unit, file_unit "
             "and scale")
    add(Problem("warning", file, part.where,
                f"mesh file {part.parameters.get('file_as_written')!r} gives a part "
                f"{diag:.4g} m across (outside {low:g}..{high:g} m); {cause}"))


def _ray_crossings(origin, direction, tris) -> int:
    """Number of triangles (m,3,3) crossed by the ray origin + t d, t > 0
    (Moller & Trumbore, J. Graphics Tools 2(1), 1997)."""
    e1 = tris[:, 1] - tris[:, 0]
    e2 = tris[:, 2] - tris[:, 0]
    p = np.cross(direction, e2)
    det = np.einsum("ij,ij->i", e1, p)
    ok = np.abs(det) > 1e-300
    inv = np.where(ok, 1.0 / np.where(ok, det, 1.0), 0.0)
    s = origin - tris[:, 0]
    u = np.einsum("ij,ij->i", s, p) * inv
    q = np.cross(s, e1)
    v = (q @ direction) * inv
    t = np.einsum("ij,ij->i", e2, q) * inv
    return int((ok & (u >= 0) & (v >= 0) & (u + v <= 1) & (t > 0)).sum())


def _check_enclosed(model, g: Geometry, usable, tol, report) -> None:
    """Warn about a part lying wholly inside a closed part (by ray parity)."""
    v = g.vertices[g.triangles]
    direction = np.array([0.5773, 0.5791, 0.5755])   # no special alignment with the axes
    direction /= np.linalg.norm(direction)
    nparts = len(g.part_names)
    sel = [np.flatnonzero((g.part == k) & usable) for k in range(nparts)]
    if not any(g.part_closed):
        return
    lo = [v[s].reshape(-1, 3).min(0) if len(s) else None for s in sel]
    hi = [v[s].reshape(-1, 3).max(0) if len(s) else None for s in sel]
    for j in range(nparts):
        if not g.part_closed[j] or lo[j] is None:
            continue
        for i in range(nparts):
            if i == j or lo[i] is None:
                continue
            # strictly inside the box (a part lying on a face is not inside)
            if (lo[i] <= lo[j] + tol).any() or (hi[i] >= hi[j] - tol).any():
                continue
            point = g.centroids[sel[i][0]]
            if _ray_crossings(point, direction, v[sel[j]]) % 2 == 1:
                report.problems.append(Problem(
                    "warning", model.path, f"part {g.part_names[i]!r}",
                    f"lies inside the closed part {g.part_names[j]!r}: it can exchange "
                    f"radiation only with that part's inner side; check its center and "
                    f"size"))


def _examples(indices) -> str:
    shown = ", ".join(str(int(i)) for i in indices[:_MAX_EXAMPLES])
    return shown + (", ..." if len(indices) > _MAX_EXAMPLES else "")


# --------------------------------------------------------------------------------------
# Contacts: crossing and coincident facets, between parts and within one part
# --------------------------------------------------------------------------------------

def _check_contacts(model, g: Geometry, usable, tol, report) -> None:
    """Problems from the facet pairs that cross or coincide (:mod:`vfactor.tracing.
    contacts`): one line per pair of parts and kind, and per part for pairs inside it."""
    from vfactor.tracing.contacts import (
        COINCIDENT_OPPOSITE,
        COINCIDENT_SAME,
        CROSSING,
        find_contacts,
    )

    found = find_contacts(g.vertices, g.triangles, g.normals, np.asarray(usable, bool), tol)
    if not len(found.a):
        return
    pa, pb = g.part[found.a], g.part[found.b]
    lo, hi = np.minimum(pa, pb), np.maximum(pa, pb)
    key = (lo.astype(np.int64) * len(g.part_names) + hi) * 4 + found.kind
    for k in np.unique(key):
        sel = np.flatnonzero(key == k)
        i, j = int(lo[sel[0]]), int(hi[sel[0]])
        kind = int(found.kind[sel[0]])
        a, b = found.a[sel], found.b[sel]
        # facet of part i first in the pair
        swap = g.part[a] != i
        a, b = np.where(swap, b, a), np.where(swap, a, b)
        facets = tuple(sorted(set(a.tolist()) | set(b.tolist())))
        if i == j:
            where = f"part {g.part_names[i]!r}"
            between = _bodies(g, i, a, b)
        else:
            where = f"parts {g.part_names[i]!r} and {g.part_names[j]!r}"
            between = ""
        e = f"e.g. facets {int(a[0])} and {int(b[0])} near {_point(g.centroids[a[0]])} m"
        # messages: WHAT: COUNT[, between bodies]; e.g. ...; FIX
        if kind == CROSSING:
            fix = ("move the bodies apart, let them only touch, or leave one out "
                   "([[parts.select]] with omit = true)" if i == j else
                   "move the parts apart or let them only touch")
            what = "intersects itself" if i == j else "parts intersect"
            allowed = i == j and model.part(g.part_names[i]).parameters.get(
                "self_crossing") == "warn"
            if allowed:
                share = g.areas[np.unique(np.concatenate([a, b]))].sum() / max(
                    g.areas[g.part == i].sum(), 1e-300)
                fix = (f"the crossing facets are {100 * share:.1f} % of the part's area; "
                       f"allowed by self_crossing = 'warn', but area inside other bodies "
                       f"still emits and absorbs in the model")
            elif i == j:
                fix += " (or self_crossing = 'warn' to go on with a warning)"
            report.problems.append(Problem(
                "warning" if allowed else "error", model.path, where,
                f"{what}: {len(sel)} facet pairs cross each other{between}; {e}; {fix}",
                facets))
        elif kind == COINCIDENT_SAME:
            repairing = model.part(g.part_names[i]).parameters.get("repair")
            fix = ("remove one of the surfaces" + (
                   "" if repairing else " (repair = true drops facets repeated vertex for "
                   "vertex)") if i == j else "leave a gap or remove one of the surfaces")
            same_sides = ((g.front_node[a] == g.front_node[b]) &
                          (g.back_node[a] == g.back_node[b])).all()
            if same_sides:
                # one node either way: the first hit does not matter, the area counts twice
                doubled = min(g.areas[np.unique(a)].sum(), g.areas[np.unique(b)].sum())
                report.problems.append(Problem(
                    "warning", model.path, where,
                    f"{len(sel)} pairs of coincident overlapping facets facing the same "
                    f"way{between}, in the same nodes; {e}; their node areas count about "
                    f"{doubled:.3g} m2 twice: {fix}", facets))
            else:
                report.problems.append(Problem(
                    "error", model.path, where,
                    f"{len(sel)} pairs of coincident overlapping facets facing the same "
                    f"way{between}; {e}; Monte Carlo results are meaningless there (a ray "
                    f"hits either node): {fix}", facets))
        elif kind == COINCIDENT_OPPOSITE:
            covered = min(g.areas[np.unique(a)].sum(), g.areas[np.unique(b)].sum())
            fix = ("a surface written twice, once each way (repair = true drops such a "
                   "copy), or two bodies face to face: remove the covered faces or "
                   "leave a gap" if i == j else
                   "remove the covered face (e.g. caps = false) or leave a gap")
            report.problems.append(Problem(
                "warning", model.path, where,
                f"face-to-face contact: {len(sel)} pairs of coincident facets with "
                f"opposite normals{between}, about {covered:.3g} m2; {e}; the covered "
                f"area still exchanges radiation in the model: {fix}", facets))


def _bodies(g: Geometry, part: int, a, b) -> str:
    """``, between bodies 'X' and 'Y' (N pairs), ...`` for pairs inside one part whose
    mesh file names its bodies ('' otherwise)."""
    if part >= len(g.part_label_sources) or g.part_label_sources[part] != "file":
        return ""
    ga, gb = np.minimum(g.group[a], g.group[b]), np.maximum(g.group[a], g.group[b])
    pairs, counts = np.unique(np.stack([ga, gb], axis=1), axis=0, return_counts=True)
    order = np.argsort(-counts, kind="stable")[:3]
    shown = []
    for k in order:
        x, y = (g.group_names[int(t)] for t in pairs[k])
        shown.append((f"within {x!r}" if x == y else f"between {x!r} and {y!r}")
                     + f" ({int(counts[k])})")
    more = f" and {len(pairs) - 3} more pairs of bodies" if len(pairs) > 3 else ""
    return f", {', '.join(shown)}{more}"


def _point(p) -> str:
    return "(" + ", ".join(f"{x:.4g}" for x in p) + ")"
