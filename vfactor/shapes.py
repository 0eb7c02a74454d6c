"""Tessellation of the primitive shapes.

Every shape is built in its local frame (metres) and returned as a :class:`Tessellation`:
vertices, triangles counter-clockwise seen from the *front* (the outside of closed shapes),
and a face label per triangle. :mod:`vfactor.geometry` places it in the model frame.

Local frames and faces
----------------------
=========  ===========================================================  ==================
shape      local geometry                                               face labels
=========  ===========================================================  ==================
rectangle  ``size[0]`` x ``size[1]`` in the plane z = 0, centred;       (one face)
           front = +z
disk       annulus ``inner_radius`` .. ``radius`` in z = 0; front = +z  (one face)
box        ``size`` centred on the origin; front = outside              ``+x -x +y -y +z -z``
cylinder   axis z from -length/2 to +length/2; front = outside          ``side top bottom``
cone       ``radius`` at z = -length/2, ``top_radius`` at +length/2;    ``side top bottom``
           front = outside
sphere     centred; front = outside                                     (one face)
dish       paraboloid z = depth (rho/radius)^2 for rho <= radius,       (one face)
           vertex at the origin, opening toward +z; front = the
           concave side (the side facing +z, where a reflector's
           focus lies)
mesh       as in the file times ``scale``; front = the side the file's  groups, see below
           counter-clockwise winding faces
=========  ===========================================================  ==================

``top`` and ``bottom`` exist only with ``caps = true`` (``top`` not for a cone with an
apex). A one-face shape has a single face label; :mod:`vfactor.geometry` then gives
``per-face`` the same names as ``single``.

Mesh files are read by :mod:`vfactor.meshfile` into the same :class:`Tessellation`.

Refinement
----------
Vertices always lie on the exact surface. ``max_edge`` (metres) refines until no edge is
longer; curved shapes also honour ``segments`` (divisions around the largest circle).
The facet area of a curved shape converges to :func:`exact_area` as ``max_edge`` shrinks
(from below: the facets are inscribed).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vfactor.errors import ModelError

__all__ = [
    "Tessellation",
    "estimated_facets",
    "exact_area",
    "max_edge_length",
    "merge_exact",
    "tessellate",
    "triangle_areas",
]

FACE_LABELS = {
    "rectangle": ("face",),
    "disk": ("face",),
    "box": ("+x", "-x", "+y", "-y", "+z", "-z"),
    "cylinder": ("side", "top", "bottom"),
    "cone": ("side", "top", "bottom"),
    "sphere": ("face",),
    "dish": ("face",),
}
CURVED_SHAPES = ("disk", "cylinder", "cone", "sphere", "dish")
MAX_FACETS_PER_PART = 2_000_000
"""A part whose refinement would exceed this many facets is refused (ModelError): such a
request is nearly always a ``max_edge`` typed in the wrong unit."""


@dataclass(frozen=True)
class Tessellation:
    """Triangles of one part in its local frame.

    Attributes
    ----------
    vertices : (v, 3) float — local coordinates [m]
    triangles : (f, 3) int64 — counter-clockwise seen from the front
    labels : tuple of str — face (or group) names
    face : (f,) int64 — index into ``labels`` per triangle
    closed : bool — the surface encloses a volume (front = outside)
    one_face : bool — the shape has a single face (rectangle, disk, sphere, dish)
    label_source : str — where the labels come from: ``shape`` (a primitive's faces),
        ``file`` (the names in a mesh file) or ``flat regions`` (a mesh file without
        names, split into connected flat regions)
    notes : tuple of str — what reading changed (repair, simplification), for ``check``
    """

    vertices: np.ndarray
    triangles: np.ndarray
    labels: tuple
    face: np.ndarray
    closed: bool
    one_face: bool = False
    label_source: str = "shape"
    notes: tuple = ()

    @property
    def n_facets(self) -> int:
        return int(self.triangles.shape[0])


def triangle_areas(vertices: np.ndarray, triangles: np.ndarray) -> np.ndarray:
    """Areas of triangles, (f,) [m2]: half the norm of the edge cross product."""
    v = vertices[triangles]
    return 0.5 * np.linalg.norm(np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]), axis=1)


def max_edge_length(vertices: np.ndarray, triangles: np.ndarray) -> float:
    """Longest edge of any triangle [m] (0 for no triangles)."""
    if len(triangles) == 0:
        return 0.0
    v = vertices[triangles]
    e = np.stack([v[:, 1] - v[:, 0], v[:, 2] - v[:, 1], v[:, 0] - v[:, 2]], axis=1)
    return float(np.sqrt((e * e).sum(axis=2)).max())


# --------------------------------------------------------------------------------------
# Building blocks
# --------------------------------------------------------------------------------------

def _grid(nu: int, nv: int):
    """Unit-square grid: (u, v) of (nu+1)(nv+1) points and 2 nu nv CCW (+z) triangles."""
    u, v = np.meshgrid(np.linspace(0.0, 1.0, nu + 1), np.linspace(0.0, 1.0, nv + 1),
                       indexing="ij")
    idx = np.arange((nu + 1) * (nv + 1)).reshape(nu + 1, nv + 1)
    a = idx[:-1, :-1].ravel()
    b = idx[1:, :-1].ravel()
    c = idx[1:, 1:].ravel()
    d = idx[:-1, 1:].ravel()
    tris = np.concatenate([np.stack([a, b, c], 1), np.stack([a, c, d], 1)])
    return u.ravel(), v.ravel(), tris


def _divisions(lengths, h: float | None) -> list:
    """Counts per axis so that every grid cell's diagonal is at most ``h``."""
    if h is None:
        return [1] * len(lengths)
    n = [max(1, math.ceil(L / h)) for L in lengths]
    for _ in range(10_000):
        cells = [L / k for L, k in zip(lengths, n)]
        worst = 0.0
        for i in range(len(cells)):
            for j in range(i + 1, len(cells)):
                worst = max(worst, math.hypot(cells[i], cells[j]))
        if len(cells) == 1:
            worst = cells[0]
        if worst <= h * (1.0 + 1e-12):
            break
        i = int(np.argmax(cells))
        n[i] += 1
    return n


def merge_exact(vertices: np.ndarray, triangles: np.ndarray):
    """Merge vertices with bit-identical coordinates (shared edges of faces)."""
    uniq, inverse = np.unique(vertices, axis=0, return_inverse=True)
    return uniq, inverse.reshape(-1)[triangles]


def _ring_counts(radii, hc: float, segments: int, rmax: float) -> list:
    counts = []
    for r in radii:
        if r <= 0.0:
            counts.append(1)
        else:
            n = math.ceil(segments * r / rmax - 1e-9)
            n = max(n, math.ceil(2.0 * math.pi * r / hc - 1e-9) if hc > 0 else 3)
            counts.append(max(3, n))
    return counts


def _revolve(radii, heights, counts):
    """Surface of revolution through rings (radii[k], heights[k]) with counts[k] points.

    Returns vertices (v,3) and triangles (f,3), not yet oriented (see ``_orient``).
    Rings are zipped by angle so that neighbouring rings may have different counts; a
    ring of count 1 is a pole (a point on the axis).
    """
    rings = []
    starts = []
    total = 0
    for r, z, n in zip(radii, heights, counts):
        starts.append(total)
        total += n
        if n == 1:
            rings.append(np.array([[0.0, 0.0, z]]))
        else:
            th = 2.0 * np.pi * np.arange(n) / n
            rings.append(np.stack([r * np.cos(th), r * np.sin(th), np.full(n, z)], axis=1))
    verts = np.concatenate(rings) if rings else np.zeros((0, 3))
    tris = []
    for k in range(len(radii) - 1):
        na, nb = counts[k], counts[k + 1]
        sa, sb = starts[k], starts[k + 1]
        if na == 1 and nb == 1:
            continue
        if na == 1:
            for j in range(nb):
                tris.append((sa, sb + j, sb + (j + 1) % nb))
            continue
        if nb == 1:
            for i in range(na):
                tris.append((sa + i, sa + (i + 1) % na, sb))
            continue
        # merge the two rings by angle: event (i+1)/na for ring a, (j+1)/nb for ring b,
        # compared exactly on the common denominator na*nb; ring a first on ties
        key = np.concatenate([np.arange(1, na + 1) * nb, np.arange(1, nb + 1) * na])
        kind = np.concatenate([np.zeros(na, np.int64), np.ones(nb, np.int64)])
        order = np.lexsort((kind, key))
        kind = kind[order]
        i = np.cumsum(kind == 0) - (kind == 0)   # a-events before each event
        j = np.cumsum(kind == 1) - (kind == 1)
        is_a = kind == 0
        t0 = sa + i % na
        t1 = np.where(is_a, sa + (i + 1) % na, sb + (j + 1) % nb)
        t2 = sb + j % nb
        tris.extend(zip(t0.tolist(), t1.tolist(), t2.tolist()))
    v = np.ascontiguousarray(verts, dtype=np.float64).reshape(-1, 3)
    t = np.asarray(tris, dtype=np.int64).reshape(-1, 3)
    # Orientation is set afterwards by _orient against the analytic normal.
    return v, t


def _orient(vertices, triangles, expected_normal_fn):
    """Flip triangles whose normal disagrees with the analytic front normal."""
    if len(triangles) == 0:
        return triangles
    v = vertices[triangles]
    n = np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0])
    c = v.mean(axis=1)
    flip = (n * expected_normal_fn(c)).sum(axis=1) < 0.0
    out = triangles.copy()
    out[flip] = out[flip][:, [0, 2, 1]]
    return out


def _profile_samples(length: float, h: float | None, straight: bool, default_h: float):
    """Number of profile intervals: straight profiles need none without max_edge."""
    if h is None:
        return 1 if straight else max(1, math.ceil(length / default_h - 1e-9))
    step = h / math.sqrt(2.0)
    if not straight:
        step = min(step, default_h)
    return max(1, math.ceil(length / step - 1e-9))


# --------------------------------------------------------------------------------------
# Primitives (h = max_edge or None)
# --------------------------------------------------------------------------------------

def _rectangle(size, h):
    a, b = size
    nu, nv = _divisions([a, b], h)
    u, v, tris = _grid(nu, nv)
    verts = np.stack([(u - 0.5) * a, (v - 0.5) * b, np.zeros_like(u)], axis=1)
    return Tessellation(verts, tris.astype(np.int64), FACE_LABELS["rectangle"],
                        np.zeros(len(tris), np.int64), closed=False, one_face=True)


def _box(size, h):
    a, b, c = size
    n = _divisions([a, b, c], h)
    half = np.array([a, b, c]) / 2.0
    coords = [np.linspace(-half[i], half[i], n[i] + 1) for i in range(3)]
    verts_all, tris_all, face_all = [], [], []
    offset = 0
    # (normal axis, sign, u axis, v axis) with u x v = outward normal
    faces = [(0, +1, 1, 2), (0, -1, 2, 1), (1, +1, 2, 0), (1, -1, 0, 2),
             (2, +1, 0, 1), (2, -1, 1, 0)]
    for k, (ax, sign, ua, va) in enumerate(faces):
        uu, vv = np.meshgrid(coords[ua], coords[va], indexing="ij")
        pts = np.zeros((uu.size, 3))
        pts[:, ua] = uu.ravel()
        pts[:, va] = vv.ravel()
        pts[:, ax] = sign * half[ax]
        _, _, tris = _grid(n[ua], n[va])
        verts_all.append(pts)
        tris_all.append(tris + offset)
        face_all.append(np.full(len(tris), k, np.int64))
        offset += len(pts)
    verts, tris = merge_exact(np.concatenate(verts_all), np.concatenate(tris_all))
    return Tessellation(verts, tris.astype(np.int64), FACE_LABELS["box"],
                        np.concatenate(face_all), closed=True)


def _disk_rings(r_in, r_out, z, h, segments, hc, rmax, rim_count=None):
    n = _profile_samples(r_out - r_in, h, straight=True, default_h=hc)
    radii = list(np.linspace(r_in, r_out, n + 1))
    counts = _ring_counts(radii, hc, segments, rmax)
    if rim_count is not None:   # match the rim of an adjoining surface (watertight)
        counts = [min(c, rim_count) for c in counts[:-1]] + [rim_count]
    return _revolve(radii, [z] * len(radii), counts)


def _circ_step(h, segments, rmax):
    """Largest chord allowed around a circle: from segments and, if given, max_edge."""
    hc = 2.0 * math.pi * rmax / segments
    if h is not None:
        hc = min(hc, h / math.sqrt(2.0))
    return hc


def _disk(params, h):
    R, r_in, seg = params["radius"], params.get("inner_radius", 0.0), params["segments"]
    hc = _circ_step(h, seg, R)
    v, t = _disk_rings(r_in, R, 0.0, h, seg, hc, R)
    t = _orient(v, t, lambda c: np.tile([0.0, 0.0, 1.0], (len(c), 1)))
    return Tessellation(v, t, FACE_LABELS["disk"], np.zeros(len(t), np.int64),
                        closed=False, one_face=True)


def _cone_like(params, h, shape):
    R = params["radius"]
    Rt = params["radius"] if shape == "cylinder" else params.get("top_radius", 0.0)
    L = params["length"]
    seg = params["segments"]
    caps = params.get("caps", True)
    rmax = max(R, Rt)
    hc = _circ_step(h, seg, rmax)
    slant = math.hypot(L, R - Rt)
    n = _profile_samples(slant, h, straight=True, default_h=hc)
    s = np.linspace(0.0, 1.0, n + 1)
    radii = list(R + (Rt - R) * s)
    heights = list(-L / 2 + L * s)
    radii[0], radii[-1] = R, Rt           # exact rims, shared bit for bit with the caps
    heights[0], heights[-1] = -L / 2, L / 2
    # One count on every ring of the lateral surface (its normal varies only with the
    # angle, so a tip fan with few points would tilt the facets); apex: a single point.
    n_around = max(_ring_counts([rmax], hc, seg, rmax))
    counts = [n_around if r > 0.0 else 1 for r in radii]
    parts_v, parts_t, parts_f = [], [], []
    v, t = _revolve(radii, heights, counts)
    # outward normal of the lateral surface: (L cos, L sin, R - Rt) / norm
    t = _orient(v, t, lambda c: np.stack(
        [L * c[:, 0], L * c[:, 1], (R - Rt) * np.hypot(c[:, 0], c[:, 1])], axis=1))
    parts_v.append(v); parts_t.append(t); parts_f.append(np.zeros(len(t), np.int64))
    closed = False
    if caps:
        closed = True
        for z, r, label, sign in ((L / 2, Rt, 1, 1.0), (-L / 2, R, 2, -1.0)):
            if r <= 0.0:
                continue
            vc, tc = _disk_rings(0.0, r, z, h, seg, hc, rmax, rim_count=n_around)
            tc = _orient(vc, tc, lambda c, s_=sign: np.tile([0.0, 0.0, s_], (len(c), 1)))
            parts_v.append(vc); parts_t.append(tc); parts_f.append(np.full(len(tc), label))
    offs = np.cumsum([0] + [len(x) for x in parts_v])
    verts = np.concatenate(parts_v)
    tris = np.concatenate([t + o for t, o in zip(parts_t, offs)])
    verts, tris = merge_exact(verts, tris)
    return Tessellation(verts, tris.astype(np.int64), FACE_LABELS[shape],
                        np.concatenate(parts_f).astype(np.int64), closed=closed)


def _sphere(params, h):
    R, seg = params["radius"], params["segments"]
    hc = _circ_step(h, seg, R)
    n = _profile_samples(math.pi * R, h, straight=False, default_h=hc)
    n = max(n, 2)
    phi = np.linspace(math.pi, 0.0, n + 1)   # south pole to north pole
    radii = list(R * np.sin(phi))
    radii[0] = radii[-1] = 0.0
    heights = list(R * np.cos(phi))
    counts = _ring_counts(radii, hc, seg, R)
    v, t = _revolve(radii, heights, counts)
    t = _orient(v, t, lambda c: c)
    return Tessellation(v, t, FACE_LABELS["sphere"], np.zeros(len(t), np.int64),
                        closed=True, one_face=True)


def _paraboloid_arc(R: float, d: float, rho):
    """Arc length of z = d (rho/R)^2 from 0 to rho [m]; standard integral of
    sqrt(1 + (k rho)^2), k = 2 d / R^2 (any calculus table)."""
    k = 2.0 * d / (R * R)
    x = k * np.asarray(rho, dtype=float)
    return (x * np.sqrt(1 + x * x) + np.arcsinh(x)) / (2.0 * k)


def _dish(params, h):
    R, d, seg = params["radius"], params["depth"], params["segments"]
    hc = _circ_step(h, seg, R)
    arc = float(_paraboloid_arc(R, d, R))
    n = _profile_samples(arc, h, straight=False, default_h=hc)
    fine = np.linspace(0.0, R, 4097)
    s_fine = _paraboloid_arc(R, d, fine)
    rho = np.interp(np.linspace(0.0, arc, n + 1), s_fine, fine)
    rho[0], rho[-1] = 0.0, R
    radii = list(rho)
    heights = list(d * (rho / R) ** 2)
    counts = _ring_counts(radii, hc, seg, R)
    v, t = _revolve(radii, heights, counts)
    k = 2.0 * d / (R * R)
    # concave-side normal of z = d rho^2 / R^2: (-k x, -k y, 1)
    t = _orient(v, t, lambda c: np.stack([-k * c[:, 0], -k * c[:, 1],
                                          np.ones(len(c))], axis=1))
    return Tessellation(v, t, FACE_LABELS["dish"], np.zeros(len(t), np.int64),
                        closed=False, one_face=True)


_BUILDERS = {
    "rectangle": lambda p, h: _rectangle(p["size"], h),
    "box": lambda p, h: _box(p["size"], h),
    "disk": _disk,
    "cylinder": lambda p, h: _cone_like(p, h, "cylinder"),
    "cone": lambda p, h: _cone_like(p, h, "cone"),
    "sphere": _sphere,
    "dish": _dish,
}


def tessellate(part) -> Tessellation:
    """Triangles of a part (a :class:`vfactor.model.Part`) in its local frame.

    Parameters
    ----------
    part : vfactor.model.Part — ``shape``, ``parameters`` (metres) and ``max_edge`` [m]

    Returns
    -------
    Tessellation

    Raises
    ------
    MeshError
        For ``shape = "mesh"``: the file is missing, unreadable, empty or not triangles.
    """
    if part.shape == "mesh":
        from vfactor.meshfile import read_mesh

        p = part.parameters
        return read_mesh(p["file"], p["scale"], part.max_edge, p.get("closed"),
                         where=part.where, shown_name=p.get("file_as_written", p["file"]),
                         repair=p.get("repair", False), simplify=p.get("simplify"))
    build = _BUILDERS[part.shape]
    h = part.max_edge
    estimate = estimated_facets(part)
    if estimate > MAX_FACETS_PER_PART:
        raise ModelError(f"max_edge {h} m / segments {part.parameters.get('segments')} would "
                         f"make about {estimate:.3g} facets (limit {MAX_FACETS_PER_PART}); "
                         f"use a larger max_edge", where=part.where)
    tess = build(part.parameters, h)
    # Refine until the bound holds (the analytic counts above nearly always suffice).
    shrink = 1.0
    for _ in range(60):
        if h is None or max_edge_length(tess.vertices, tess.triangles) <= h * (1 + 1e-9):
            break
        shrink *= 0.85
        tess = build(part.parameters, h * shrink)
    return tess


def estimated_facets(part) -> float:
    """Rough (generous) facet count of a primitive before tessellating it: 8 area / h^2."""
    p = part.parameters
    area = exact_area(part) or 0.0
    h = part.max_edge if part.max_edge is not None else math.inf
    if part.shape in CURVED_SHAPES:
        rmax = max(p.get("radius", 0.0), p.get("top_radius", 0.0))
        h = min(h, 2.0 * math.pi * rmax / p["segments"])
    if not math.isfinite(h):
        return 12.0
    return 8.0 * area / (h * h)


def exact_area(part) -> float | None:
    """Exact area of a primitive's surface [m2] (None for meshes).

    Notes
    -----
    Closed forms (e.g. CRC Standard Mathematical Tables, "mensuration" section; any
    calculus text for the paraboloid):

    * sphere 4 pi r^2; cylinder lateral 2 pi r L, caps 2 pi r^2;
    * cone frustum lateral pi (R + r) sqrt((R - r)^2 + L^2), caps pi R^2 + pi r^2;
    * paraboloid of revolution of radius r and depth h:
      (pi r / (6 h^2)) ((r^2 + 4 h^2)^(3/2) - r^3);
    * disk pi (R^2 - r_in^2); rectangle and box: the product of their sides.
    """
    p = part.parameters
    s = part.shape
    if s == "rectangle":
        return p["size"][0] * p["size"][1]
    if s == "box":
        a, b, c = p["size"]
        return 2.0 * (a * b + b * c + a * c)
    if s == "disk":
        return math.pi * (p["radius"] ** 2 - p.get("inner_radius", 0.0) ** 2)
    if s == "sphere":
        return 4.0 * math.pi * p["radius"] ** 2
    if s in ("cylinder", "cone"):
        R = p["radius"]
        r = R if s == "cylinder" else p.get("top_radius", 0.0)
        L = p["length"]
        area = math.pi * (R + r) * math.hypot(R - r, L)
        if p.get("caps", True):
            area += math.pi * (R * R + r * r)
        return area
    if s == "dish":
        r, h = p["radius"], p["depth"]
        return math.pi * r / (6.0 * h * h) * ((r * r + 4.0 * h * h) ** 1.5 - r ** 3)
    return None
