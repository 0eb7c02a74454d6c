"""Orbital heating: absorbed solar, albedo and planet IR per facet and node along the orbit.

:func:`compute_heating` takes the geometry, its ray-tracing scene, the trajectory (Sun and
planet in the body frame at each step) and the environment, and returns a :class:`Heating`:
incident and absorbed power per node and step for each source, absorbed flux per facet and
step, the one-sigma statistical error of the Monte Carlo parts, and the reflected power
that left the vehicle. :func:`heating_extremes` gives orbit average, minimum and maximum.

Physics
-------
Per step ``k`` and active facet side ``s`` (area ``A``, outward normal ``n``):

- **Direct solar**: ``Q = S_k f_k max(0, n.s_k) A g_s``, with ``S_k`` the solar constant,
  ``f_k`` the visible share of the solar disk (planet eclipse, from the trajectory) and
  ``g_s`` the share of sample points of the side that see the Sun past the vehicle itself
  (each point traced toward a point of the solar disk, so self-shadows have a penumbra).
- **Planet IR**: Lambertian planet of uniform outgoing long-wave flux ``E``; incident
  ``Q = E A F_s``, ``F_s`` the side's unblocked view factor to the planet.
- **Albedo**: the planet reflects diffusely, with radiance ``L = a S_k max(0, cos Z) / pi``
  at a point of solar zenith angle ``Z``; only the sunlit part of the visible cap and only
  directions not blocked by the vehicle count.

Both planet terms use one estimator: for a side, the incident flux is ``pi`` times the mean,
over cosine-weighted directions, of the radiance seen in each direction (``E = int L cos
dw = pi E_cos[L]``; Siegel & Howell, Thermal Radiation Heat Transfer, 4th ed., eq. 2.13 and
the definition of the view factor, section 4.3). For rigid geometry the directions in which
a side sees out do not change along the orbit: they are traced once against the vehicle
(body frame) and kept; per step only those are intersected with the planet sphere
(``use_cache=False`` re-traces every ray at every step, for articulated geometry and as the
benchmark's reference). Direct solar is traced toward the Sun at every step.

Reflections inside the vehicle
------------------------------
Of the power incident on a side, ``alpha`` is absorbed there (solar-band absorptivity for
solar and albedo, infrared emissivity for planet IR, Kirchhoff's law for the grey surface),
``(1 - alpha)(1 - s)`` is reflected diffusely and ``(1 - alpha) s`` specularly, with ``s``
the coating's specular share in that band.

- Specular shares are traced: the mirror ray of each sample is followed through the
  vehicle (up to ``max_bounces`` mirror reflections); at each side it meets, the same split
  applies, the diffuse part joining that node's diffuse pool.
- Diffuse pools are redistributed by the diffuse Gebhart factors of the band
  (:func:`vfactor.radiation.gebhart_matrix`): power ``D_i`` reflected diffusely by node
  ``i`` leaves it like emission and node ``j`` absorbs ``D_i B_ij``; ``D_i B_i,space``
  escapes and the rest is lost on inert sides (Gebhart 1961, "Heat Transfer", ch. 5).
  The node view factors come from ``view_factors`` when given, otherwise from the same
  cached rays (first hits of the cosine-weighted rays of each side). Subsequent reflections
  of that diffusely reflected energy are treated as diffuse (the Gebhart model).
- Power a node absorbs after a reflection is spread over the node's facet sides in
  proportion to their areas (it is known per node, not per facet); per-facet output is
  therefore exact for the directly absorbed part and an area-share approximation for the
  reflected part. Node totals are exact sums over their sides.

Energy bookkeeping per step and source: ``sum(absorbed) + escaped + inert = sum(incident)``
to rounding.

Statistical error
-----------------
Each side's rays (and its Sun sample points) form ``replicates`` independently randomised
quasi-Monte Carlo sequences; the per-node one-sigma error is the spread of the replicate
estimates (``std(ddof=1) / sqrt(M)``; Owen 2013, "Monte Carlo theory, methods and
examples", ch. 17). It is reported for the directly absorbed part of each source.

Approximations (documented, common practice): the Sun is a uniform disk at the Sun
distance of the step, and its direction is the same at the vehicle and over the planet;
the planet is a sphere of radius ``planet.radius``; planet radiances are Lambertian and
uniform apart from the albedo's cosine law; energy reflected back by the planet is not
followed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from vfactor.constants import SUN_RADIUS_M

__all__ = ["Heating", "HeatingExtremes", "compute_heating", "heating_extremes", "SOURCES"]

SOURCES = ("solar", "albedo", "planet_ir")
"""Names of the three environmental sources, in output order."""


@dataclass(frozen=True)
class Heating:
    """Absorbed environmental heat per step, per node and per facet.

    Attributes
    ----------
    node_solar, node_albedo, node_planet_ir : (t, n) float — absorbed power per node [W],
        reflections inside the vehicle included
    facet_solar, facet_albedo, facet_planet_ir : (t, f) float — absorbed flux per facet
        (both sides summed, divided by the facet area) [W m-2]
    incident_solar, incident_albedo, incident_planet_ir : (t, n) float — incident power on
        each node before absorption [W]
    solar_constant : (t,) float — solar irradiance used at each step [W m-2]
    albedo : float — planet albedo used [1]
    planet_ir : float — planet outgoing long-wave flux used [W m-2]
    case : str — environment case name
    node_solar_stderr, node_albedo_stderr, node_planet_ir_stderr : (t, n) float or None —
        one-sigma Monte Carlo error of the directly absorbed power of each node [W]
        (spread of independent replicates; reflected contributions not included)
    escaped_solar, escaped_albedo, escaped_planet_ir : (t,) float or None — power reflected
        by the vehicle that left it [W]
    inert_solar, inert_albedo, inert_planet_ir : (t,) float or None — reflected power that
        ended on inert sides [W]
    time : (t,) float or None — time of each step since the trajectory epoch [s]
    rays_per_facet : int — planet rays per facet side actually used (0 when unknown)
    sun_samples : int — Sun sample points per facet side actually used (0 when unknown)
    seed : int — random seed
    """

    node_solar: np.ndarray
    node_albedo: np.ndarray
    node_planet_ir: np.ndarray
    facet_solar: np.ndarray
    facet_albedo: np.ndarray
    facet_planet_ir: np.ndarray
    incident_solar: np.ndarray
    incident_albedo: np.ndarray
    incident_planet_ir: np.ndarray
    solar_constant: np.ndarray
    albedo: float
    planet_ir: float
    case: str
    node_solar_stderr: np.ndarray | None = None
    node_albedo_stderr: np.ndarray | None = None
    node_planet_ir_stderr: np.ndarray | None = None
    escaped_solar: np.ndarray | None = None
    escaped_albedo: np.ndarray | None = None
    escaped_planet_ir: np.ndarray | None = None
    inert_solar: np.ndarray | None = None
    inert_albedo: np.ndarray | None = None
    inert_planet_ir: np.ndarray | None = None
    time: np.ndarray | None = None
    rays_per_facet: int = 0
    sun_samples: int = 0
    seed: int = 0

    @property
    def n_steps(self) -> int:
        return int(self.node_solar.shape[0])


@dataclass(frozen=True)
class HeatingExtremes:
    """Orbit average, minimum and maximum of the absorbed power per node and source.

    Attributes
    ----------
    sources : tuple of str — ``("solar", "albedo", "planet_ir", "total")``, rows below
    average : (4, n) float — time-weighted average over the steps [W]
    minimum, maximum : (4, n) float — smallest and largest value over the steps [W]
    step_of_minimum, step_of_maximum : (4, n) int — step index where they occur
    weights : (t,) float — time weight of each step (sums to 1) [1]
    """

    sources: tuple
    average: np.ndarray
    minimum: np.ndarray
    maximum: np.ndarray
    step_of_minimum: np.ndarray
    step_of_maximum: np.ndarray
    weights: np.ndarray

    def row(self, source: str) -> int:
        """Row index of ``source`` (raises KeyError naming the known sources)."""
        try:
            return self.sources.index(source)
        except ValueError:
            raise KeyError(f"no source {source!r}; sources are {', '.join(self.sources)}") \
                from None


def step_weights(time) -> np.ndarray:
    """Time weight of each step: the interval from the midpoint before to the midpoint after.

    Parameters
    ----------
    time : (t,) float, increasing [s]

    Returns
    -------
    (t,) float64 — weights summing to 1 [1]; equal for equally spaced steps (the first and
    last steps are given the length of their one neighbouring interval, so that steps that
    sample a whole orbit at equal spacing weigh the same).
    """
    t = np.asarray(time, dtype=np.float64)
    if t.ndim != 1 or t.size == 0:
        raise ValueError(f"step_weights: time must be a non-empty 1-D array, got shape {t.shape}")
    if t.size == 1:
        return np.ones(1)
    dt = np.diff(t)
    if not np.all(dt > 0.0):
        i = int(np.flatnonzero(~(dt > 0.0))[0])
        raise ValueError(f"step_weights: time must increase, step {i + 1} is {t[i + 1]!r} s "
                         f"after {t[i]!r} s")
    w = np.empty_like(t)
    w[0] = dt[0]
    w[-1] = dt[-1]
    w[1:-1] = 0.5 * (dt[:-1] + dt[1:])
    return w / w.sum()


def heating_extremes(heating, time=None) -> HeatingExtremes:
    """Orbit average, minimum and maximum of the absorbed power per node and source.

    Parameters
    ----------
    heating : Heating (or any object with ``node_solar``, ``node_albedo``,
        ``node_planet_ir`` of shape (t, n) [W])
    time : (t,) float, optional
        Step times [s]; default ``heating.time``, else equally weighted steps.

    Returns
    -------
    HeatingExtremes
        Rows solar, albedo, planet IR and their total; the average is weighted by
        :func:`step_weights` (each step stands for the interval between the midpoints to
        its neighbours).
    """
    arrays = [np.asarray(getattr(heating, f"node_{s}"), dtype=np.float64) for s in SOURCES]
    shape = arrays[0].shape
    for s, a in zip(SOURCES, arrays):
        if a.ndim != 2 or a.shape != shape:
            raise ValueError(f"heating_extremes: node_{s} must have shape {shape}, got {a.shape}")
    if time is None:
        time = getattr(heating, "time", None)
    if time is None:
        weights = np.full(shape[0], 1.0 / shape[0]) if shape[0] else np.zeros(0)
    else:
        time = np.asarray(time, dtype=np.float64)
        if time.shape != (shape[0],):
            raise ValueError(f"heating_extremes: time must have shape ({shape[0]},), got "
                             f"{time.shape}")
        weights = step_weights(time)
    stack = np.stack(arrays + [arrays[0] + arrays[1] + arrays[2]])   # (4, t, n)
    return HeatingExtremes(
        sources=SOURCES + ("total",),
        average=np.einsum("t,stn->sn", weights, stack),
        minimum=stack.min(axis=1), maximum=stack.max(axis=1),
        step_of_minimum=stack.argmin(axis=1), step_of_maximum=stack.argmax(axis=1),
        weights=weights)


# --------------------------------------------------------------------------------------
# compute_heating


@dataclass(frozen=True)
class _Sides:
    """Active facet sides and per-side properties (internal)."""

    facet: np.ndarray        # (s,) int64
    sign: np.ndarray         # (s,) int64, +1 front, -1 back
    node: np.ndarray         # (s,) int64
    area: np.ndarray         # (s,) m2
    normal: np.ndarray       # (s, 3) outward unit normal
    absorptivity: np.ndarray  # (s,) solar band
    emissivity: np.ndarray   # (s,) infrared band
    solar_specular: np.ndarray
    ir_specular: np.ndarray


def _band_tables(geometry):
    """(f, 2) node and band properties of the front (col 0) and back (col 1) sides."""
    f = geometry.n_facets
    node = np.stack([geometry.front_node, geometry.back_node], axis=1).astype(np.int64)
    coat = np.stack([geometry.front_coating, geometry.back_coating], axis=1).astype(np.int64)
    props = np.zeros((4, f, 2))
    for ci, c in enumerate(geometry.coatings):
        mask = coat == ci
        props[0][mask] = c.solar_absorptivity
        props[1][mask] = c.ir_emissivity
        props[2][mask] = c.solar_specular
        props[3][mask] = c.ir_specular
    inert = node < 0
    for p in props:
        p[inert] = 0.0
    return node, [np.ascontiguousarray(p) for p in props]


def _sides(geometry, normals, facet_node, props) -> _Sides:
    facet_idx = []
    signs = []
    for col, sign in ((0, 1), (1, -1)):
        active = (facet_node[:, col] >= 0) & (geometry.areas > 0.0)
        idx = np.flatnonzero(active)
        facet_idx.append(idx)
        signs.append(np.full(idx.size, sign, dtype=np.int64))
    facet = np.concatenate(facet_idx).astype(np.int64)
    sign = np.concatenate(signs)
    order = np.lexsort((-sign, facet))       # facet-major, front before back
    facet = np.ascontiguousarray(facet[order])
    sign = np.ascontiguousarray(sign[order])
    col = np.where(sign > 0, 0, 1)
    return _Sides(facet=facet, sign=sign, node=facet_node[facet, col],
                  area=np.asarray(geometry.areas, dtype=np.float64)[facet],
                  normal=normals[facet] * sign[:, None],
                  absorptivity=props[0][facet, col], emissivity=props[1][facet, col],
                  solar_specular=props[2][facet, col], ir_specular=props[3][facet, col])


def _check_inputs(geometry, scene, trajectory, environment, rays_per_facet, sun_samples,
                  seed, replicates, max_bounces):
    from vfactor.environment import Environment

    if not isinstance(environment, Environment):
        raise TypeError(f"compute_heating: environment must be a vfactor.environment."
                        f"Environment, got {type(environment).__name__}")
    if scene.triangles.shape != geometry.triangles.shape:
        raise ValueError(f"compute_heating: the scene has {scene.triangles.shape[0]} facets, "
                         f"the geometry {geometry.triangles.shape[0]}")
    for name, value, lo in (("rays_per_facet", rays_per_facet, 1),
                            ("sun_samples", sun_samples, 1), ("replicates", replicates, 2),
                            ("max_bounces", max_bounces, 1), ("seed", seed, 0)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < lo:
            raise ValueError(f"compute_heating: {name} must be an integer >= {lo}, got "
                             f"{value!r}")
    t = trajectory.n_steps
    for name, shape in (("sun_body", (t, 3)), ("nadir_body", (t, 3)),
                        ("planet_distance", (t,)), ("sun_fraction", (t,)),
                        ("sun_distance", (t,))):
        a = np.asarray(getattr(trajectory, name), dtype=np.float64)
        if a.shape != shape:
            raise ValueError(f"compute_heating: trajectory.{name} must have shape {shape}, "
                             f"got {a.shape}")
        if not np.all(np.isfinite(a)):
            raise ValueError(f"compute_heating: trajectory.{name} is not finite at step "
                             f"{int(np.flatnonzero(~np.isfinite(a).reshape(t, -1).all(1))[0])}")
    radius = float(trajectory.planet.radius)
    below = np.asarray(trajectory.planet_distance) <= radius
    if below.any():
        k = int(np.flatnonzero(below)[0])
        raise ValueError(f"compute_heating: step {k} is at {trajectory.planet_distance[k]!r} m "
                         f"from the planet centre, not above the radius {radius!r} m")


def _node_view_factors(sides, targets, n_nodes, node_area):
    """Node-to-node, space and inert view factors from the cached first hits [1]."""
    rays = targets.shape[1]
    weight = np.repeat(sides.area / rays, rays)          # each ray carries A_s / N
    src = np.repeat(sides.node, rays)
    tgt = targets.ravel().astype(np.int64)
    hit = tgt >= 0
    matrix = np.zeros((n_nodes, n_nodes))
    np.add.at(matrix, (src[hit], tgt[hit]), weight[hit])
    space = np.bincount(src[tgt == -1], weights=weight[tgt == -1], minlength=n_nodes)
    inert = np.bincount(src[tgt == -2], weights=weight[tgt == -2], minlength=n_nodes)
    area = np.where(node_area > 0.0, node_area, 1.0)
    return matrix / area[:, None], space / area, inert / area


def _gebhart(view, absorptivity):
    """(B, B_space, B_inert) of one band from node view factors (matrix, space, inert)."""
    from vfactor.radiation import gebhart_matrix

    matrix, space, inert = view
    b, b_space = gebhart_matrix(matrix, space, inert, absorptivity)
    b = np.asarray(b, dtype=np.float64)
    b_space = np.asarray(b_space, dtype=np.float64)
    return b, b_space, 1.0 - b.sum(axis=1) - b_space


def compute_heating(geometry, scene, trajectory, environment, *, view_factors=None,
                    rays_per_facet=256, sun_samples=16, seed=1, use_cache=True,
                    reflections=True, replicates=8, max_bounces=16,
                    reporter=None) -> Heating:
    """Absorbed solar, albedo and planet IR per node and facet at every trajectory step.

    Parameters
    ----------
    geometry : vfactor.geometry.Geometry
        Facets, nodes and coatings (body frame, metres).
    scene : vfactor.tracing.scene.Scene
        The BVH of the same facets (``Scene.build(geometry.vertices, geometry.triangles)``).
    trajectory : vfactor.trajectory.Trajectory
        Uses ``sun_body (t, 3)``, ``nadir_body (t, 3)``, ``planet_distance (t,) [m]``,
        ``sun_fraction (t,)``, ``sun_distance (t,) [m]``, ``time (t,) [s]`` and
        ``planet.radius [m]``.
    environment : vfactor.environment.Environment
        Solar constant (or None: scaled by the Sun distance), albedo, planet IR.
    view_factors : vfactor.radiation.ViewFactors, optional
        Node view factors for the diffuse redistribution of reflected power (``matrix``,
        ``space``, ``inert``); default: estimated from this function's own rays.
    rays_per_facet : int
        Cosine-weighted rays per facet side toward the planet; rounded up to a multiple of
        ``replicates``.
    sun_samples : int
        Sample points per facet side traced toward the Sun; rounded up likewise.
    seed : int
        Random seed (results are a pure function of it).
    use_cache : bool
        True: trace the escaping directions once (rigid geometry) and intersect only those
        with the planet per step. False: re-trace every ray against the vehicle at every
        step (same rays, same numbers, slower).
    reflections : bool
        False: report only the directly absorbed part (no reflection inside the vehicle).
    replicates : int
        Independent randomisations per side for the error estimate (>= 2).
    max_bounces : int
        Longest chain of mirror reflections followed for specular shares.
    reporter : vfactor.progress.Reporter, optional
        Receives one ``"heating"`` stage advanced once per step.

    Returns
    -------
    Heating

    Raises
    ------
    TypeError, ValueError
        Inputs of the wrong type, shape or value (the message names the argument).
    """
    from vfactor.progress import NullReporter
    from vfactor.tracing import heat_kernels as hk

    _check_inputs(geometry, scene, trajectory, environment, rays_per_facet, sun_samples,
                  seed, replicates, max_bounces)
    reporter = reporter or NullReporter()
    m = int(replicates)
    k_planet = -(-int(rays_per_facet) // m)
    k_sun = -(-int(sun_samples) // m)
    n_rays = m * k_planet
    n_sun = m * k_sun
    seed_u = np.uint64(seed)

    vertices = np.ascontiguousarray(scene.vertices, dtype=np.float64)
    triangles = np.ascontiguousarray(scene.triangles, dtype=np.int64)
    normals = np.ascontiguousarray(scene.normals, dtype=np.float64)
    arrays = scene.arrays
    facet_node, (f_alpha, f_eps, f_sspec, f_ispec) = _band_tables(geometry)
    sides = _sides(geometry, normals, facet_node, (f_alpha, f_eps, f_sspec, f_ispec))
    n_sides = sides.facet.shape[0]
    n_nodes = geometry.n_nodes
    n_facets = geometry.n_facets
    n_steps = trajectory.n_steps
    node_area = np.asarray(geometry.nodes.area, dtype=np.float64)

    # --- once: first hits of every planet ray, and the cache of escaping rays ----------
    targets = np.empty((n_sides, n_rays), dtype=np.int32)
    if n_sides:
        hk.trace_targets(arrays, vertices, triangles, normals, sides.facet, sides.sign,
                         facet_node, seed_u, m, k_planet, targets)
    escaping = (targets == hk.TARGET_ESCAPE).reshape(n_sides * m, k_planet)
    segment_start = np.zeros(n_sides * m + 1, dtype=np.int64)
    np.cumsum(escaping.sum(axis=1), out=segment_start[1:])
    n_esc = int(segment_start[-1])
    esc_origin = np.empty((n_esc, 3))
    esc_dir = np.empty((n_esc, 3))
    if use_cache or reflections:
        if n_sides:
            hk.fill_escaping(vertices, triangles, normals, sides.facet, sides.sign, seed_u, m,
                             k_planet, targets, segment_start, esc_origin, esc_dir)

    # --- reflection set-up: Gebhart factors per band, specular sides ------------------
    bands = {}
    if reflections:
        if view_factors is not None:
            view = (np.asarray(view_factors.matrix, dtype=np.float64),
                    np.asarray(view_factors.space, dtype=np.float64),
                    np.asarray(view_factors.inert, dtype=np.float64))
            if view[0].shape != (n_nodes, n_nodes):
                raise ValueError(f"compute_heating: view_factors.matrix must have shape "
                                 f"({n_nodes}, {n_nodes}), got {view[0].shape}")
        else:
            view = _node_view_factors(sides, targets, n_nodes, node_area)
        for band, absorb, spec, f_abs, f_spec, s_abs, s_spec in (
                ("solar", geometry.nodes.solar_absorptivity, None, f_alpha, f_sspec,
                 sides.absorptivity, sides.solar_specular),
                ("ir", geometry.nodes.ir_emissivity, None, f_eps, f_ispec,
                 sides.emissivity, sides.ir_specular)):
            absorb = np.asarray(absorb, dtype=np.float64)
            if n_nodes and np.all(absorb >= 1.0):
                gebhart = None            # black vehicle in this band: nothing reflected
            else:
                gebhart = _gebhart(view, absorb) if n_nodes else None
            spec_sides = np.flatnonzero((1.0 - s_abs) * s_spec > 0.0)
            bands[band] = dict(gebhart=gebhart, f_abs=f_abs, f_spec=f_spec, s_abs=s_abs,
                               s_spec=s_spec, spec_sides=spec_sides)
        # cached planet rays of the specular sides, with their mirror directions
        for band in ("solar", "ir"):
            b = bands[band]
            rows, owner = _rows_of_sides(b["spec_sides"], segment_start, m)
            d = esc_dir[rows]
            n = sides.normal[owner]
            dn = np.einsum("ij,ij->i", d, n)
            b["rows"] = rows
            b["owner"] = owner
            b["mirror"] = np.ascontiguousarray(-d + 2.0 * dn[:, None] * n)
            b["mirror_origin"] = np.ascontiguousarray(esc_origin[rows])

    # --- per step -------------------------------------------------------------------------
    sun_all = np.ascontiguousarray(trajectory.sun_body, dtype=np.float64)
    nadir_all = np.asarray(trajectory.nadir_body, dtype=np.float64)
    dist_all = np.asarray(trajectory.planet_distance, dtype=np.float64)
    frac_all = np.asarray(trajectory.sun_fraction, dtype=np.float64)
    sun_dist_all = np.asarray(trajectory.sun_distance, dtype=np.float64)
    s_const = environment.solar_constant_series(sun_dist_all)
    radius = float(trajectory.planet.radius)
    olr = float(environment.planet_ir)
    albedo = float(environment.albedo)

    out = {key: np.zeros((n_steps, n_nodes)) for key in
           ("node_solar", "node_albedo", "node_planet_ir", "incident_solar",
            "incident_albedo", "incident_planet_ir", "node_solar_stderr",
            "node_albedo_stderr", "node_planet_ir_stderr")}
    facet_out = {src: np.zeros((n_steps, n_facets)) for src in SOURCES}
    escaped = {src: np.zeros(n_steps) for src in SOURCES}
    inert = {src: np.zeros(n_steps) for src in SOURCES}

    lit = np.zeros((n_sides, m))
    hits = np.zeros(n_sides * m)
    cos_sum = np.zeros(n_sides * m)
    side_area_facet = np.asarray(geometry.areas, dtype=np.float64)

    with reporter.stage("heating", total=n_steps, unit="steps") as bar:
        for k in range(n_steps):
            sun = sun_all[k] / np.linalg.norm(sun_all[k])
            nadir = nadir_all[k] / np.linalg.norm(nadir_all[k])
            centre = np.ascontiguousarray(nadir * dist_all[k])
            solar_k = float(s_const[k])
            frac = float(frac_all[k])
            cos_half = math.cos(math.asin(min(1.0, SUN_RADIUS_M / sun_dist_all[k])))

            # direct solar: per side and replicate, incident power
            cos_t = np.maximum(sides.normal @ sun, 0.0)
            if n_sides and frac > 0.0 and solar_k > 0.0:
                hk.sun_lit(arrays, vertices, triangles, normals, sides.facet, sides.sign,
                           seed_u, m, k_sun, sun, cos_half, lit)
                solar_rep = (solar_k * frac * cos_t * sides.area)[:, None] * (lit / k_sun)
            else:
                solar_rep = np.zeros((n_sides, m))

            # planet: hits and albedo cosines per (side, replicate)
            if n_sides:
                if use_cache:
                    hk.planet_cached(segment_start, esc_origin, esc_dir, centre, radius, sun,
                                     hits, cos_sum)
                else:
                    hk.planet_uncached(arrays, vertices, triangles, normals, sides.facet,
                                       sides.sign, seed_u, m, k_planet, centre, radius, sun,
                                       hits, cos_sum)
            ir_rep = (olr * sides.area)[:, None] * (hits.reshape(n_sides, m) / k_planet)
            alb_rep = (albedo * solar_k * sides.area)[:, None] * (
                cos_sum.reshape(n_sides, m) / k_planet)

            for src, rep, absorb in (("solar", solar_rep, sides.absorptivity),
                                     ("albedo", alb_rep, sides.absorptivity),
                                     ("planet_ir", ir_rep, sides.emissivity)):
                incident_side = rep.mean(axis=1)
                absorbed_side = absorb * incident_side
                out[f"incident_{src}"][k] = np.bincount(sides.node, weights=incident_side,
                                                        minlength=n_nodes)
                # replicate estimates of each node's directly absorbed power -> stderr
                node_rep = np.zeros((n_nodes, m))
                np.add.at(node_rep, sides.node, absorb[:, None] * rep)
                out[f"node_{src}_stderr"][k] = node_rep.std(axis=1, ddof=1) / math.sqrt(m)
                absorbed_node = np.bincount(sides.node, weights=absorbed_side,
                                            minlength=n_nodes)
                facet_w = np.bincount(sides.facet, weights=absorbed_side, minlength=n_facets)
                if reflections and n_sides:
                    band = bands["ir" if src == "planet_ir" else "solar"]
                    extra, esc, lost = _reflect(
                        src, band, sides, incident_side, arrays, normals, facet_node,
                        n_nodes, k, hk, dict(vertices=vertices, triangles=triangles,
                                             seed=seed_u, m=m, k_sun=k_sun, sun=sun,
                                             cos_half=cos_half, solar=solar_k, frac=frac,
                                             cos_t=cos_t, centre=centre, radius=radius,
                                             albedo=albedo, olr=olr, k_planet=k_planet,
                                             esc_origin=esc_origin, esc_dir=esc_dir,
                                             normals=normals, max_bounces=max_bounces))
                    absorbed_node = absorbed_node + extra
                    share = np.where(node_area > 0.0, extra / np.where(node_area > 0.0,
                                                                       node_area, 1.0), 0.0)
                    facet_w = facet_w + np.bincount(
                        sides.facet, weights=share[sides.node] * sides.area,
                        minlength=n_facets)
                    escaped[src][k] = esc
                    inert[src][k] = lost
                out[f"node_{src}"][k] = absorbed_node
                facet_out[src][k] = np.where(side_area_facet > 0.0, facet_w / np.where(
                    side_area_facet > 0.0, side_area_facet, 1.0), 0.0)
            bar.advance(1)

    time = np.asarray(trajectory.time, dtype=np.float64).copy()
    return Heating(
        node_solar=out["node_solar"], node_albedo=out["node_albedo"],
        node_planet_ir=out["node_planet_ir"], facet_solar=facet_out["solar"],
        facet_albedo=facet_out["albedo"], facet_planet_ir=facet_out["planet_ir"],
        incident_solar=out["incident_solar"], incident_albedo=out["incident_albedo"],
        incident_planet_ir=out["incident_planet_ir"], solar_constant=np.asarray(s_const),
        albedo=albedo, planet_ir=olr, case=environment.case,
        node_solar_stderr=out["node_solar_stderr"],
        node_albedo_stderr=out["node_albedo_stderr"],
        node_planet_ir_stderr=out["node_planet_ir_stderr"],
        escaped_solar=escaped["solar"], escaped_albedo=escaped["albedo"],
        escaped_planet_ir=escaped["planet_ir"], inert_solar=inert["solar"],
        inert_albedo=inert["albedo"], inert_planet_ir=inert["planet_ir"], time=time,
        rays_per_facet=n_rays, sun_samples=n_sun, seed=int(seed))


def _rows_of_sides(side_list, segment_start, m):
    """Rows of the escaping-ray cache that belong to the given sides, and their owner."""
    rows = []
    owner = []
    for s in side_list:
        a = segment_start[s * m]
        b = segment_start[(s + 1) * m]
        rows.append(np.arange(a, b, dtype=np.int64))
        owner.append(np.full(b - a, s, dtype=np.int64))
    if not rows:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    return np.concatenate(rows), np.concatenate(owner)


_CHUNK = 4096


def _run_chains(hk, arrays, normals, facet_node, band, origin, direction, exclude, weight,
                n_nodes, max_bounces):
    """Specular chains of a batch of rays: (absorbed (n,), diffuse (n,), escaped, inert)."""
    count = origin.shape[0]
    if count == 0:
        return np.zeros(n_nodes), np.zeros(n_nodes), 0.0, 0.0
    chunks = -(-count // _CHUNK)
    absorbed = np.empty((chunks, n_nodes))
    diffuse = np.empty((chunks, n_nodes))
    esc = np.empty(chunks)
    lost = np.empty(chunks)
    hk.specular_chains(arrays, normals, facet_node, band["f_abs"], band["f_spec"],
                       np.ascontiguousarray(origin), np.ascontiguousarray(direction),
                       np.ascontiguousarray(exclude, dtype=np.int64),
                       np.ascontiguousarray(weight), _CHUNK, max_bounces, absorbed, diffuse,
                       esc, lost)
    return absorbed.sum(axis=0), diffuse.sum(axis=0), float(esc.sum()), float(lost.sum())


def _reflect(src, band, sides, incident_side, arrays, normals, facet_node, n_nodes, step,
             hk, ctx):
    """Power absorbed after reflection inside the vehicle, per node, for one source.

    Returns (absorbed (n,) [W], escaped [W], inert [W]).
    """
    s_abs = band["s_abs"]
    s_spec = band["s_spec"]
    reflected = (1.0 - s_abs) * incident_side
    diffuse = np.bincount(sides.node, weights=reflected * (1.0 - s_spec), minlength=n_nodes)
    absorbed = np.zeros(n_nodes)
    escaped = 0.0
    lost = 0.0
    spec_sides = band["spec_sides"]
    if spec_sides.size and reflected[spec_sides].sum() > 0.0:
        if src == "solar":
            origin, direction, exclude, weight = _sun_mirror(hk, arrays, sides, spec_sides,
                                                             band, ctx)
        else:
            origin, direction, exclude, weight = _planet_mirror(hk, src, sides, band, ctx)
        a, d, e, q = _run_chains(hk, arrays, normals, facet_node, band, origin, direction,
                                 exclude, weight, n_nodes, ctx["max_bounces"])
        absorbed += a
        diffuse += d
        escaped += e
        lost += q
    if band["gebhart"] is not None and diffuse.any():
        b, b_space, b_inert = band["gebhart"]
        absorbed += diffuse @ b
        escaped += float(diffuse @ b_space)
        lost += float(diffuse @ b_inert)
    else:
        escaped += float(diffuse.sum())
    return absorbed, escaped, lost


def _sun_mirror(hk, arrays, sides, spec_sides, band, ctx):
    m = ctx["m"]
    k_sun = ctx["k_sun"]
    n = m * k_sun
    sub_facet = np.ascontiguousarray(sides.facet[spec_sides])
    sub_sign = np.ascontiguousarray(sides.sign[spec_sides])
    mask = np.zeros((spec_sides.size, n), dtype=np.bool_)
    hk.sun_lit_mask(arrays, ctx["vertices"], ctx["triangles"], ctx["normals"],
                    sub_facet, sub_sign, ctx["seed"], m, k_sun, ctx["sun"], ctx["cos_half"],
                    mask)
    origin = np.zeros((spec_sides.size, n, 3))
    direction = np.zeros((spec_sides.size, n, 3))
    hk.sun_mirror_rays(ctx["vertices"], ctx["triangles"], ctx["normals"],
                       sub_facet, sub_sign, ctx["seed"], m, k_sun, ctx["sun"],
                       ctx["cos_half"], mask, origin, direction)
    per_sample = (ctx["solar"] * ctx["frac"] * ctx["cos_t"][spec_sides] *
                  sides.area[spec_sides] / n * (1.0 - band["s_abs"][spec_sides]) *
                  band["s_spec"][spec_sides])
    weight = np.broadcast_to(per_sample[:, None], mask.shape)[mask]
    exclude = np.broadcast_to(sub_facet[:, None], mask.shape)[mask]
    return origin[mask], direction[mask], exclude, weight


def _planet_mirror(hk, src, sides, band, ctx):
    rows = band["rows"]
    owner = band["owner"]
    hit = np.zeros(rows.size, dtype=np.bool_)
    mu = np.zeros(rows.size)
    if rows.size:
        hk.planet_ray_cos(ctx["esc_origin"], ctx["esc_dir"], rows, ctx["centre"],
                          ctx["radius"], ctx["sun"], hit, mu)
    base = sides.area[owner] / (ctx["m"] * ctx["k_planet"]) * (
        1.0 - band["s_abs"][owner]) * band["s_spec"][owner]
    if src == "albedo":
        weight = base * ctx["albedo"] * ctx["solar"] * mu
    else:
        weight = base * ctx["olr"]
    keep = hit & (weight > 0.0)
    return (band["mirror_origin"][keep], band["mirror"][keep], sides.facet[owner[keep]],
            weight[keep])
