"""``vfactor check``: validate a model file and its geometry, listing every problem found.

:func:`check_model` never raises for bad input: every problem becomes a
:class:`vfactor.errors.Problem` (one line each). Errors make the model unusable (the
command exits 2); warnings flag what is merely suspicious (exit 0).

Errors
------
* from the loader (:mod:`vfactor.model`): invalid TOML, unknown sections or keys, missing
  keys, unknown coatings, properties outside [0, 1], unknown shapes, bad values;
* from the geometry (:mod:`vfactor.geometry`): missing, unreadable or empty mesh files,
  non-finite coordinates, one node name given two different coatings;
* zero-area or degenerate facets (height below 1e-9 of the longest edge);
* a closed part whose normals point inward (negative signed volume);
* a mesh whose facet winding is inconsistent (neighbours facing opposite ways);
* coincident overlapping facets of different parts facing the same way (coplanar within
  the tolerance, same normal, overlapping with a width above the tolerance): two surfaces
  in one place, where the first hit is arbitrary;
* parts that intersect each other: an edge of a facet of one part crosses the interior of
  a facet of another part, with both edge ends farther than the tolerance from the plane
  and the crossing point farther than the tolerance from the facet's edges;
* a node with no facets or no area.

Warnings
--------
* a part with no active side (it only casts shadows);
* a curved part whose facet area differs from the exact area by more than 1 %;
* a mesh declared ``closed = true`` that is not watertight;
* a closed part whose back (inner) side is active;
* a very thin closed part (mean thickness 2 V / A below 0.5 % of its size);
* a part lying wholly inside a closed part (ray-parity test from one of its facets);
* face-to-face contact: coincident overlapping facets of different parts with opposite
  normals (a capped boom standing on a face). The contact is physical, but the covered
  area still takes part in the exchange; the message gives the area involved.

Tolerance
---------
``tol = 1e-6 * D`` where D is the diagonal of the bounding box of the whole model (1 µm
for a 1 m vehicle): far above the rounding of float64 coordinates (~1e-16 D) and below any
gap a designer would model on purpose. Parts that touch (a boom standing on a face, two
panels meeting along an edge) are within the tolerance and are not intersections; only
proper interpenetration is.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from vfactor.errors import ModelError, Problem
from vfactor.geometry import Geometry, build_geometry
from vfactor.meshfile import mesh_is_watertight
from vfactor.model import Model, load_model
from vfactor.shapes import CURVED_SHAPES, exact_area
from vfactor.topology import edge_report

__all__ = [
    "AREA_WARNING",
    "RELATIVE_TOLERANCE",
    "AreaDifference",
    "CheckReport",
    "check_geometry",
    "check_model",
    "format_check_report",
]

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


@dataclass
class CheckReport:
    """Outcome of :func:`check_model`.

    Attributes
    ----------
    path : str — the model file
    model : Model or None — None when the file could not be read at all
    geometry : Geometry or None
    problems : list of Problem
    area_differences : list of AreaDifference — curved parts only
    tolerance : float — geometric tolerance used [m]
    """

    path: str
    model: Model | None
    geometry: Geometry | None
    problems: list = field(default_factory=list)
    area_differences: list = field(default_factory=list)
    tolerance: float = 0.0

    @property
    def ok(self) -> bool:
        """True when no problem has severity ``error``."""
        return not any(p.severity == "error" for p in self.problems)

    @property
    def errors(self) -> list:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def warnings(self) -> list:
        return [p for p in self.problems if p.severity == "warning"]


def check_model(path) -> CheckReport:
    """Load, tessellate and check a model file; collect every problem found.

    Parameters
    ----------
    path : str or os.PathLike — the TOML model file

    Returns
    -------
    CheckReport (never raises for bad input)
    """
    file = str(path)
    problems: list = []
    model = load_model(path, problems=problems)
    report = CheckReport(path=file, model=model, geometry=None, problems=problems)
    if model is None:
        return report
    _check_settings(model, report)
    geometry = build_geometry(model, problems=problems)
    report.geometry = geometry
    # a note about a part that could not be read (its stated unit) only distracts
    unread = {p.where for p in problems if p.severity == "error"}
    unread &= {part.where for part in model.parts
               if part.name not in geometry.part_names}
    problems[:] = [p for p in problems if not (p.severity == "note" and p.where in unread)]
    check_geometry(model, geometry, report)
    if report.ok:
        from vfactor.checkcache import check_key, store_passed

        store_passed(check_key(model, geometry), report.problems)
    return report


def require_clean(model: Model, geometry: Geometry) -> list:
    """Run the checks of ``vfactor check`` on a loaded model before a run.

    A check that passed before for the same model, geometry and check code is not
    repeated: its record (:mod:`vfactor.checkcache`) gives the warnings.

    Parameters
    ----------
    model : Model
    geometry : Geometry — built from ``model``

    Returns
    -------
    list of Problem — the warnings (the run may go on), and a note when the checks were
    not repeated

    Raises
    ------
    ModelError
        For the first error found (intersecting or coincident parts, inward normals, bad
        settings...), naming how many more there are: Monte Carlo results on such a model
        would be meaningless, so no run starts.
    """
    from vfactor.checkcache import check_key, load_passed, store_passed

    key = check_key(model, geometry)
    cached = load_passed(key)
    if cached is not None:
        return [p for p in cached if p.severity == "warning"] + [Problem(
            "note", str(model.path), "", "the checks of this model and geometry passed "
            "before and were not repeated")]
    report = CheckReport(path=str(model.path), model=model, geometry=geometry)
    report.problems.extend(_loader_problems(model))
    _check_settings(model, report)
    check_geometry(model, geometry, report)
    errors = report.errors
    if errors:
        first = errors[0]
        more = (f" (and {len(errors) - 1} more error(s); `vfactor check {model.path}` lists "
                f"them)" if len(errors) > 1 else "")
        raise ModelError(first.message + more, file=first.file, where=first.where)
    store_passed(key, report.problems)
    return report.warnings


def _loader_problems(model: Model) -> list:
    """Warnings and notes of reading the model file (a strict load raises errors only)."""
    if not Path(model.path).is_file():
        return []
    found: list = []
    load_model(model.path, problems=found)
    return [p for p in found if p.severity != "error"]


def _check_settings(model: Model, report: CheckReport) -> None:
    """Validate the optional ``[orbit]``, ``[attitude]`` and ``[environment]`` tables.

    Each table is read by the module that owns it; the first problem of each table becomes
    one error line (the owning reader stops at the first bad key).
    """
    from vfactor.attitude import attitude_from_table
    from vfactor.environment import environment_from_table
    from vfactor.orbit import orbit_from_table

    file = report.path
    readers = (("[orbit]", model.orbit_table, orbit_from_table),
               ("[attitude]", model.attitude_table, attitude_from_table),
               ("[environment]", model.environment_table, environment_from_table))
    for section, table, reader in readers:
        if table is None:
            continue
        try:
            value = reader(table, file=file)
        except ModelError as err:
            report.problems.append(Problem("error", file, err.where or section, err.message))
            continue
        if section == "[orbit]":
            _check_altitude(value, table, file, report)
    _check_ray_count(model, report)
    if model.attitude_table is not None and model.orbit_table is None:
        report.problems.append(Problem("warning", file, "[attitude]",
                                       "has no effect without an [orbit] section"))


RAY_CHECK_VIEW_FACTOR = 0.01
"""View factor whose expected relative error ``check`` reports for the model's ray count."""
RAY_CHECK_RELATIVE_ERROR = 0.10
"""Relative one-sigma error of a view factor of :data:`RAY_CHECK_VIEW_FACTOR` above which
``check`` warns that ``rays_per_node`` is too low (a threshold of our own)."""


def _check_ray_count(model: Model, report: CheckReport) -> None:
    """Warn when ``rays_per_node`` leaves a 1 % view factor with a large error.

    The binomial one-sigma relative error of a view factor F from N rays is
    sqrt((1 - F) / (F N)) (e.g. Howell, Menguc & Siegel, Thermal Radiation Heat Transfer,
    6th ed., 2016, ch. 7 on Monte Carlo error); the stratified sampling of the tracer does
    better, so this is an upper estimate.
    """
    rays = model.radiation.rays_per_node
    F = RAY_CHECK_VIEW_FACTOR
    rel = ((1.0 - F) / (F * rays)) ** 0.5
    if rel > RAY_CHECK_RELATIVE_ERROR:
        needed = int(np.ceil((1.0 - F) / (F * RAY_CHECK_RELATIVE_ERROR ** 2)))
        report.problems.append(Problem(
            "warning", report.path, "[radiation] rays_per_node",
            f"{rays} rays per node leave a view factor of {F:g} with up to "
            f"{100 * rel:.0f} % relative error (one sigma); use at least {needed} rays or "
            f"set target_error"))


ALTITUDE_WARNING_KM = 100_000.0
"""Apogee altitude [km] above which ``check`` asks whether metres were written as km
(about 2.8 times the geostationary altitude of 35 786 km, common practice)."""


def _check_altitude(orbit, table: dict, file: str, report: CheckReport) -> None:
    """Warn when the apogee altitude is far beyond Earth orbits in use: most often a value
    in metres given to a ``*_km`` key (``altitude_km = 550000``)."""
    apogee_km = (orbit.semi_major_axis * (1.0 + orbit.eccentricity)
                 - orbit.planet.radius) / 1e3
    if not apogee_km > ALTITUDE_WARNING_KM:
        return
    key = next((k for k in ("altitude_km", "apogee_km", "semi_major_axis_km", "perigee_km")
                if k in table), "tle")
    shown = f" = {table[key]!r}" if key in table and key != "tle" else ""
    report.problems.append(Problem(
        "warning", file, f"[orbit] {key}",
        f"apogee altitude {apogee_km:,.0f} km{f' (from {key}{shown})' if shown else ''} "
        f"is beyond {ALTITUDE_WARNING_KM:,.0f} km; were metres given where km are asked?"))


def check_geometry(model: Model, geometry: Geometry, report: CheckReport) -> None:
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
                         else "")
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


def _check_enclosed(model: Model, g: Geometry, usable, tol, report: CheckReport) -> None:
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
# Contacts between parts: coincident facets and intersections
# --------------------------------------------------------------------------------------

def _candidate_pairs(box_lo, box_hi, ia, ib, tol, chunk=2048):
    """Facet pairs (a in ia, b in ib) whose bounding boxes overlap (grown by tol)."""
    out_a, out_b = [], []
    lo_b, hi_b = box_lo[ib], box_hi[ib]
    order = np.argsort(lo_b[:, 0], kind="stable")
    lo_b, hi_b, ib_sorted = lo_b[order], hi_b[order], ib[order]
    for s in range(0, len(ia), chunk):
        a = ia[s:s + chunk]
        la, ha = box_lo[a], box_hi[a]
        # sweep along x: b must start before a ends
        end = np.searchsorted(lo_b[:, 0], ha[:, 0].max() + tol, side="right")
        if end == 0:
            continue
        lb, hb = lo_b[:end], hi_b[:end]
        ov = np.ones((len(a), end), bool)
        for d in range(3):
            ov &= (la[:, d, None] <= hb[None, :, d] + tol)
            ov &= (lb[None, :, d] <= ha[:, d, None] + tol)
        r, c = np.nonzero(ov)
        out_a.append(a[r])
        out_b.append(ib_sorted[c])
    if not out_a:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    return np.concatenate(out_a), np.concatenate(out_b)


def _edge_crossings(P, Q, T, n, tol):
    """Which segments P->Q (m,3) cross the interior of triangles T (m,3,3), normals n.

    Both ends must lie farther than ``tol`` on opposite sides of the triangle's plane and
    the crossing point farther than ``tol`` inside every edge of the triangle.
    """
    dp = np.einsum("ij,ij->i", P - T[:, 0], n)
    dq = np.einsum("ij,ij->i", Q - T[:, 0], n)
    cross = ((dp > tol) & (dq < -tol)) | ((dp < -tol) & (dq > tol))
    if not cross.any():
        return cross
    idx = np.flatnonzero(cross)
    t = dp[idx] / (dp[idx] - dq[idx])
    X = P[idx] + t[:, None] * (Q[idx] - P[idx])
    Ti, ni = T[idx], n[idx]
    inside = np.ones(len(idx), bool)
    for k in range(3):
        a, b = Ti[:, k], Ti[:, (k + 1) % 3]
        e = b - a
        elen = np.linalg.norm(e, axis=1)
        d = np.einsum("ij,ij->i", np.cross(e, X - a), ni) / elen
        inside &= d > tol
    out = np.zeros_like(cross)
    out[idx[inside]] = True
    return out


def _coplanar_overlap(A, B, n, tol):
    """Coplanar triangle pairs that overlap by more than ``tol`` (separating axis test).

    A, B : (m, 3, 3) triangles in (nearly) the same plane with unit normal n (m, 3).
    The axes are the in-plane normals of the six edges; two convex polygons are disjoint
    iff one of them separates them (separating axis theorem, e.g. Ericson, Real-Time
    Collision Detection, 2005, section 5.2.1). Overlap below ``tol`` counts as touching.
    """
    overlap = np.ones(len(A), bool)
    for tri in (A, B):
        for k in range(3):
            e = tri[:, (k + 1) % 3] - tri[:, k]
            axis = np.cross(e, n)
            axis /= np.maximum(np.linalg.norm(axis, axis=1), 1e-300)[:, None]
            pa = np.einsum("ijk,ik->ij", A, axis)
            pb = np.einsum("ijk,ik->ij", B, axis)
            depth = np.minimum(pa.max(1), pb.max(1)) - np.maximum(pa.min(1), pb.min(1))
            overlap &= depth > tol
    return overlap


def _check_contacts(model: Model, g: Geometry, usable, tol, report: CheckReport) -> None:
    file = model.path
    v = g.vertices[g.triangles]
    box_lo, box_hi = v.min(axis=1), v.max(axis=1)
    nparts = len(g.part_names)
    facets_of = [np.flatnonzero((g.part == k) & usable) for k in range(nparts)]
    part_lo = [box_lo[f].min(0) if len(f) else None for f in facets_of]
    part_hi = [box_hi[f].max(0) if len(f) else None for f in facets_of]
    for i in range(nparts):
        for j in range(i + 1, nparts):
            if part_lo[i] is None or part_lo[j] is None:
                continue
            lo = np.maximum(part_lo[i], part_lo[j]) - tol
            hi = np.minimum(part_hi[i], part_hi[j]) + tol
            if (lo > hi).any():
                continue
            fi, fj = facets_of[i], facets_of[j]
            fi = fi[((box_hi[fi] >= lo) & (box_lo[fi] <= hi)).all(axis=1)]
            fj = fj[((box_hi[fj] >= lo) & (box_lo[fj] <= hi)).all(axis=1)]
            if not len(fi) or not len(fj):
                continue
            a, b = _candidate_pairs(box_lo, box_hi, fi, fj, tol)
            if not len(a):
                continue
            na, nb = g.normals[a], g.normals[b]
            A, B = v[a], v[b]
            dist_b = np.abs(np.einsum("ijk,ik->ij", B - A[:, :1], na)).max(axis=1)
            dist_a = np.abs(np.einsum("ijk,ik->ij", A - B[:, :1], nb)).max(axis=1)
            coplanar = (np.abs((na * nb).sum(1)) > 1.0 - 1e-9) | \
                ((dist_b <= tol) & (dist_a <= tol))
            where = f"parts {g.part_names[i]!r} and {g.part_names[j]!r}"
            cp = np.flatnonzero(coplanar & (dist_b <= tol))
            if len(cp):
                ov = _coplanar_overlap(A[cp], B[cp], na[cp], tol)
                hits = cp[ov]
                same = hits[(na[hits] * nb[hits]).sum(1) > 0.0]
                facing = hits[(na[hits] * nb[hits]).sum(1) <= 0.0]
                if len(same):
                    k0 = same[0]
                    report.problems.append(Problem(
                        "error", file, where,
                        f"{len(same)} pairs of coincident overlapping facets facing the same "
                        f"way (e.g. facets {int(a[k0])} and {int(b[k0])} near "
                        f"{_point(g.centroids[a[k0]])} m); Monte Carlo results are "
                        f"meaningless there: leave a gap or remove one of the surfaces",
                        tuple(sorted(set(a[same].tolist()) | set(b[same].tolist())))))
                if len(facing):
                    k0 = facing[0]
                    covered = min(g.areas[np.unique(a[facing])].sum(),
                                  g.areas[np.unique(b[facing])].sum())
                    report.problems.append(Problem(
                        "warning", file, where,
                        f"face-to-face contact: {len(facing)} pairs of coincident facets "
                        f"with opposite normals, about {covered:.3g} m2 (e.g. facets "
                        f"{int(a[k0])} and {int(b[k0])} near {_point(g.centroids[a[k0]])} "
                        f"m); the covered area still exchanges radiation in the model: "
                        f"remove the covered face (e.g. caps = false) or leave a gap",
                        tuple(sorted(set(a[facing].tolist()) | set(b[facing].tolist())))))
            nc = ~coplanar
            if not nc.any():
                continue
            idx = np.flatnonzero(nc)
            Ai, Bi, nai, nbi = A[idx], B[idx], na[idx], nb[idx]
            hit = np.zeros(len(idx), bool)
            for k in range(3):
                hit |= _edge_crossings(Ai[:, k], Ai[:, (k + 1) % 3], Bi, nbi, tol)
                hit |= _edge_crossings(Bi[:, k], Bi[:, (k + 1) % 3], Ai, nai, tol)
            if hit.any():
                hits = idx[hit]
                k0 = hits[0]
                report.problems.append(Problem(
                    "error", file, where,
                    f"parts intersect: {len(hits)} facet pairs cross each other (e.g. "
                    f"facets {int(a[k0])} and {int(b[k0])} near "
                    f"{_point(g.centroids[a[k0]])} m); move the parts apart or let them "
                    f"only touch",
                    tuple(sorted(set(a[hits].tolist()) | set(b[hits].tolist())))))


def _area(a: float) -> str:
    """An area [m2] with 5 significant digits (fixed point from 0.001 m2 up)."""
    return f"{a:.5f}" if a >= 1e-3 or a == 0.0 else f"{a:.4e}"


def _point(p) -> str:
    return "(" + ", ".join(f"{x:.4g}" for x in p) + ")"


# --------------------------------------------------------------------------------------
# Text report
# --------------------------------------------------------------------------------------

def format_check_report(report: CheckReport) -> str:
    """The text ``vfactor check`` prints: problems (errors, warnings, notes), node table,
    curved-part areas, verdict.

    Parameters
    ----------
    report : CheckReport

    Returns
    -------
    str (no trailing newline)
    """
    lines = []
    m, g = report.model, report.geometry
    order = {"error": 0, "warning": 1, "note": 2}
    for p in sorted(report.problems, key=lambda p: order.get(p.severity, 3)):
        lines.append(p.line())
    if report.problems:
        lines.append("")
    if m is not None:
        lines.append(f"model {m.name!r} ({report.path}), length unit {m.length_unit}")
    else:
        lines.append(f"model {report.path}: not readable")
    if g is not None:
        total = float(g.areas.sum())
        lines.append(f"{len(g.part_names)} parts, {g.n_facets} facets, {g.n_nodes} nodes, "
                     f"facet area {total:.4g} m2 (one side)")
        if g.n_nodes:
            w = max(4, max(len(n) for n in g.nodes.names))
            lines.append("")
            lines.append(f"{'node':<{w}}  {'facets':>7}  {'area m2':>10}  "
                         f"{'solar abs':>9}  {'IR emis':>7}  coating")
            for k, name in enumerate(g.nodes.names):
                lines.append(
                    f"{name:<{w}}  {int(g.nodes.facet_count[k]):>7d}  "
                    f"{_area(g.nodes.area[k]):>10}  {g.nodes.solar_absorptivity[k]:>9.3f}  "
                    f"{g.nodes.ir_emissivity[k]:>7.3f}  {g.nodes.coating[k]}")
    if report.area_differences:
        w = max(len("curved part"), max(len(d.part) for d in report.area_differences))
        lines.append("")
        lines.append(f"{'curved part':<{w}}  {'shape':<8}  {'facets':>7}  "
                     f"{'facet m2':>10}  {'exact m2':>10}  {'difference':>10}")
        for d in report.area_differences:
            lines.append(f"{d.part:<{w}}  {d.shape:<8}  {d.facets:>7d}  "
                         f"{d.tessellated:>10.5f}  {d.exact:>10.5f}  "
                         f"{100 * d.relative:>+9.3f}%")
    lines.append("")
    n_err, n_warn = len(report.errors), len(report.warnings)
    if n_err:
        lines.append(f"FAILED: {n_err} error(s), {n_warn} warning(s) in {report.path}")
    else:
        lines.append(f"OK: no errors, {n_warn} warning(s) in {report.path}")
    return "\n".join(lines)
