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
dw = pi E_cos[L]``: irradiance from radiance and the definition of the view factor,
Siegel & Howell, Thermal Radiation Heat Transfer, 4th ed., chs. 2 and 4; equation numbers
from memory, not given). For rigid geometry the directions in which
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
  escapes and the rest is lost on inert sides (B. Gebhart 1961, Int. J. Heat Mass
  Transfer 3, 341-346).
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
examples", ch. 17). Specular chains and diffuse pools are tallied per replicate too, so the
spread covers the reflected part as well. The node view factors of the diffuse
redistribution are the same in every replicate, so their error is added apart, in
quadrature (independent rays): its first-order propagation through the Gebhart factors
(:func:`vfactor.heatreflect.coupling_variance`).

Approximations (documented, common practice): the Sun is a uniform disk at the Sun
distance of the step, and its direction is the same at the vehicle and over the planet;
in the planet's penumbra the vehicle's self-shadow is still sampled over the whole disk
(the two shadows are combined as a product);
the planet is a sphere of radius ``planet.radius``; planet radiances are Lambertian and
uniform apart from the albedo's cosine law; energy reflected back by the planet is not
followed.
"""

from __future__ import annotations

import math
import uuid
from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from vfactor.constants import SUN_RADIUS_M
from vfactor.heatmotion import placed_step, rigid_part
from vfactor.heatreflect import bands_of
from vfactor.heatstep import Step, prepare, reuse_trace, trace_once, unit
from vfactor.heatthreads import run_steps
from vfactor.planetrays import checked_blocks

__all__ = ["Heating", "HeatingExtremes", "HeatingSteps", "compute_heating", "heating_extremes",
           "step_weights", "SOURCES", "ROWS"]

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
        one-sigma Monte Carlo error of the absorbed power of each node [W] (spread of
        independent replicates, reflections included; the error of the node view factors
        used for the diffuse redistribution is not included)
    escaped_solar, escaped_albedo, escaped_planet_ir : (t,) float or None — power reflected
        by the vehicle that left it [W]
    inert_solar, inert_albedo, inert_planet_ir : (t,) float or None — reflected power that
        ended on inert sides [W]
    time : (t,) float or None — time of each step since the trajectory epoch [s]
    rays_per_facet : int — planet rays per facet side actually used (0 when unknown); the
        nodes given more (``planet_blocks``) have ``node_planet_rays``
    sun_samples : int — Sun sample points per facet side actually used (0 when unknown)
    seed : int — random seed
    node_albedo_ray_stderr, node_planet_ir_ray_stderr : (t, n) float or None — the part of
        the planet loads' error that their rays carry (without the couplings' error in
        reflected power): what more planet rays lower (:mod:`vfactor.planetrays`) [W]
    node_planet_rays : (n,) int or None — planet rays per facet side of each node
        (``rays_per_facet`` times its blocks, :mod:`vfactor.planetrays`)
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
    node_albedo_ray_stderr: np.ndarray | None = None
    node_planet_ir_ray_stderr: np.ndarray | None = None
    node_planet_rays: np.ndarray | None = None

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
    for name in ("sun_body", "nadir_body"):
        norm = np.linalg.norm(np.asarray(getattr(trajectory, name), dtype=np.float64), axis=1)
        if t and not np.all(norm > 0.0):
            raise ValueError(f"compute_heating: trajectory.{name} is a zero vector at step "
                             f"{int(np.flatnonzero(~(norm > 0.0))[0])}")
    frac = np.asarray(trajectory.sun_fraction, dtype=np.float64)
    bad = (frac < 0.0) | (frac > 1.0)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise ValueError(f"compute_heating: trajectory.sun_fraction must be in [0, 1], step {k} "
                         f"has {frac[k]!r}")
    radius = float(trajectory.planet.radius)
    below = np.asarray(trajectory.planet_distance) <= radius
    if below.any():
        k = int(np.flatnonzero(below)[0])
        raise ValueError(f"compute_heating: step {k} is at {trajectory.planet_distance[k]!r} m "
                         f"from the planet centre, not above the radius {radius!r} m")


def compute_heating(geometry, scene, trajectory, environment, *, view_factors=None,
                    rays_per_facet=256, sun_samples=16, seed=1, use_cache=True,
                    reflections=True, replicates=8, max_bounces=16, motion=None,
                    positions=None, planet_blocks=None, reporter=None) -> Heating:
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
        with the planet per step. False: re-trace every planet ray against the vehicle at
        every step (same rays, same numbers, slower; the node view factors and the mirror
        rays of specular shares still come from the one-off trace).
    reflections : bool
        False: report only the directly absorbed part (no reflection inside the vehicle).
    replicates : int
        Independent randomisations per side for the error estimate (>= 2).
    max_bounces : int
        Longest chain of mirror reflections followed for specular shares.
    motion : vfactor.kinematics.Motion, optional
        Turning parts: every step is traced on the vehicle placed at that step's hinge
        angles (:mod:`vfactor.heatmotion`; ``use_cache`` and ``view_factors`` then do not
        apply).
    positions : vfactor.positions.PositionCouplings, optional
        With ``motion``: the diffuse redistribution of a step uses the view factors of the
        hinge position nearest to it (``step_position``), whose Gebhart factors are solved
        once per position. Without: the placed vehicle's own rays at each step give its
        couplings (exact for the step, and the slowest part of a step).
    planet_blocks : (n,) int, optional
        Per node, how many times ``rays_per_facet`` planet rays each of its facet sides
        draws (1 to :data:`vfactor.planetrays.MAX_FACTOR`; independent blocks, see
        :mod:`vfactor.planetrays`); default one block everywhere.
    reporter : vfactor.progress.Reporter, optional
        Receives a ``"heating: escaping directions"`` stage (facet sides traced once) and
        a ``"heating"`` stage advanced once per step.

    Returns
    -------
    Heating

    Raises
    ------
    TypeError, ValueError
        Inputs of the wrong type, shape or value (the message names the argument).

    Notes
    -----
    Cost: once, ``rays_per_facet`` closest-hit rays per facet side; per step,
    ``sun_samples`` occlusion rays per sunlit side, one ray-sphere test per cached escaping
    ray, and the mirror chains of specular sides. Memory of the cache: 4 bytes per ray
    (first hit) plus 48 bytes per escaping ray (origin and direction in float64), about
    10 kB per facet side at 256 rays. See the module notes for the physics and sources.
    """
    from vfactor.progress import NullReporter

    reporter = reporter or NullReporter()
    task = HeatingSteps.of(geometry, scene, trajectory, environment, view_factors=view_factors,
                           rays_per_facet=rays_per_facet, sun_samples=sun_samples, seed=seed,
                           use_cache=use_cache, reflections=reflections,
                           replicates=replicates, max_bounces=max_bounces, motion=motion,
                           positions=positions, planet_blocks=planet_blocks)
    state = task.prepare(geometry, scene, reporter)
    steps = np.arange(task.n_steps)
    with reporter.stage("heating", total=task.n_steps, unit="steps") as bar:
        rows = task.run(state, steps, bar)
    return task.assemble(rows)


#: The per-step outputs of the heating stage: name -> which width ("node", "facet", None).
ROWS = {**{f"{kind}_{src}": "node" for kind in ("node", "incident") for src in SOURCES},
        **{f"node_{src}_stderr": "node" for src in SOURCES},
        **{f"node_{src}_ray_stderr": "node" for src in ("albedo", "planet_ir")},
        **{f"facet_{src}": "facet" for src in SOURCES},
        **{f"{kind}_{src}": None for kind in ("escaped", "inert") for src in SOURCES}}


class _View(NamedTuple):
    """The node view factors the diffuse redistribution uses (fields of ViewFactors), and
    the variances of their node entries (transposed) with the factor that makes each a
    bound (:func:`vfactor.reflecterror.coupling_variance`)."""

    matrix: object
    space: np.ndarray
    inert: np.ndarray
    variances: tuple = ()


def _view_of(view_factors) -> _View:
    from vfactor.reflecterror import transposed_variance

    variances = []
    for name, bound in (("stderr", 1.0), ("smoothed_stderr", 2.0)):
        err = getattr(view_factors, name, None)
        if err is not None:
            variances.append((transposed_variance(err), bound))
    return _View(view_factors.matrix, np.asarray(view_factors.space, dtype=np.float64),
                 np.asarray(view_factors.inert, dtype=np.float64), tuple(variances))


@dataclass(frozen=True, eq=False)
class HeatingSteps:
    """Task of the heating stage (see :mod:`vfactor.runners`): a job is an array of step
    indices, its result the rows of every output at those steps (:data:`ROWS`).

    :meth:`prepare` (once per worker) traces the cached escape directions and builds the
    Gebhart factors of the diffuse redistribution; a step is then a pure function of the
    task and its index, so steps computed anywhere, in any order, give the same bits.
    Build with :meth:`of` (checks the inputs); :meth:`assemble` turns the rows of all
    steps into a :class:`Heating`.
    """

    steps: tuple                  # per step: (sun, centre, solar, fraction, cos_half)
    env: dict
    view: object                  # _View or None
    n_nodes: int
    n_facets: int
    time: np.ndarray
    solar_constant: np.ndarray
    case: str
    rays_per_facet: int
    sun_samples: int
    seed: int
    use_cache: bool
    reflections: bool
    replicates: int
    max_bounces: int
    motion: object = None         # vfactor.kinematics.Motion when parts turn
    step_position: object = None  # (t,) int: hinge position of each step (with motion)
    position_views: tuple = None  # per hinge position: _View
    blocks: np.ndarray = None     # (n,) int: planet-ray blocks per side (vfactor.planetrays)
    key: str = field(default_factory=lambda: "heating:" + uuid.uuid4().hex)

    @classmethod
    def of(cls, geometry, scene, trajectory, environment, *, view_factors=None,
           rays_per_facet=256, sun_samples=16, seed=1, use_cache=True, reflections=True,
           replicates=8, max_bounces=16, motion=None, positions=None,
           planet_blocks=None) -> "HeatingSteps":
        """The task of :func:`compute_heating` with these arguments (checked here)."""
        _check_inputs(geometry, scene, trajectory, environment, rays_per_facet, sun_samples,
                      seed, replicates, max_bounces)
        blocks = checked_blocks(planet_blocks, geometry.n_nodes)
        sun_all = np.asarray(trajectory.sun_body, dtype=np.float64)
        nadir_all = np.asarray(trajectory.nadir_body, dtype=np.float64)
        dist_all = np.asarray(trajectory.planet_distance, dtype=np.float64)
        frac_all = np.asarray(trajectory.sun_fraction, dtype=np.float64)
        sun_dist_all = np.asarray(trajectory.sun_distance, dtype=np.float64)
        s_const = np.asarray(environment.solar_constant_series(sun_dist_all), dtype=np.float64)
        steps = tuple(
            (unit(sun_all[k]), np.ascontiguousarray(unit(nadir_all[k]) * dist_all[k]),
             float(s_const[k]), float(frac_all[k]),
             math.cos(math.asin(min(1.0, SUN_RADIUS_M / sun_dist_all[k]))))
            for k in range(trajectory.n_steps))
        view = None if view_factors is None else _view_of(view_factors)
        by_position = None
        if motion is not None and positions is not None:
            step_position = np.asarray(positions.step_position, dtype=np.int64)
            if step_position.shape != (trajectory.n_steps,):
                raise ValueError(f"compute_heating: positions.step_position must have shape "
                                 f"({trajectory.n_steps},), got {step_position.shape}")
            by_position = dict(step_position=step_position, position_views=tuple(
                _view_of(vf) for vf in positions.view_factors))
        return cls(steps=steps,
                   env=dict(radius=float(trajectory.planet.radius),
                            olr=float(environment.planet_ir), albedo=float(environment.albedo)),
                   blocks=blocks,
                   view=view, n_nodes=geometry.n_nodes, n_facets=geometry.n_facets,
                   time=np.asarray(trajectory.time, dtype=np.float64).copy(),
                   solar_constant=s_const, case=environment.case,
                   rays_per_facet=int(rays_per_facet), sun_samples=int(sun_samples),
                   seed=int(seed), use_cache=bool(use_cache), reflections=bool(reflections),
                   replicates=int(replicates), max_bounces=int(max_bounces), motion=motion,
                   **(by_position or {}))

    @property
    def n_steps(self) -> int:
        return len(self.steps)

    def prepare(self, geometry, scene, reporter=None, traced=None):
        """The vehicle's fixed part: sides, cached escape directions, Gebhart factors.
        ``traced``: the model of an earlier prepare of the same facets (another case's
        coating values): its escape directions are reused instead of traced again."""
        from vfactor.progress import NullReporter

        reporter = reporter or NullReporter()
        model = prepare(geometry, scene, self.replicates, self.rays_per_facet,
                        self.sun_samples, self.seed, self.max_bounces, self.blocks)
        if self.motion is None and traced is not None and reuse_trace(model, traced):
            bands = bands_of(model, geometry, self.view) if self.reflections else None
            return model, bands
        with reporter.stage("heating: escaping directions", total=max(model.sides.count, 1),
                            unit="facet sides") as bar:
            if self.motion is not None:   # the rigid part once, the rest at each step
                # Gebhart factors of each hinge position, solved when a step first uses it
                return None, (geometry, rigid_part(self, geometry, model, bar), {})
            trace_once(model, bar, need_rays=self.use_cache or self.reflections)
        bands = bands_of(model, geometry, self.view) if self.reflections else None
        return model, bands

    def empty_rows(self, count=None) -> dict:
        """Zero rows of every output for ``count`` steps (default all)."""
        t = self.n_steps if count is None else int(count)
        width = {"node": self.n_nodes, "facet": self.n_facets}
        return {name: np.zeros((t, width[w])) if w else np.zeros(t) for name, w in ROWS.items()}

    def run(self, state, job, bar=None) -> dict:
        """Rows of every output at the steps ``job`` (row ``p`` is step ``job[p]``)."""
        model, held = state    # rigid: (model, bands); turning parts: (None, (geometry, rigid))
        ks = np.asarray(job, dtype=np.int64).reshape(-1).tolist()
        out = self.empty_rows(len(ks))
        steps = [_step_of(self.steps[k], self.env) for k in ks]
        if model is not None:      # rigid: the steps on threads (vfactor.heatthreads)
            run_steps(model, held, steps, self.use_cache, out, bar)
            return out
        for p, (k, step) in enumerate(zip(ks, steps)):
            placed_step(self, *held, k, step, p, out)
            if bar is not None:
                bar.advance(1)
        return out

    def assemble(self, rows: dict) -> Heating:
        """The :class:`Heating` of the rows of all steps (as :meth:`empty_rows` lays out)."""
        m = self.replicates
        return Heating(**{name: rows[name] for name in ROWS},
                       solar_constant=self.solar_constant, albedo=self.env["albedo"],
                       planet_ir=self.env["olr"], case=self.case, time=self.time,
                       rays_per_facet=m * -(-self.rays_per_facet // m),
                       sun_samples=m * -(-self.sun_samples // m), seed=self.seed,
                       node_planet_rays=None if self.blocks is None else
                       m * -(-self.rays_per_facet // m) * self.blocks)


def _step_of(values, env) -> Step:
    """The :class:`Step` of one entry of ``HeatingSteps.steps``."""
    sun, centre, solar, fraction, cos_half = values
    return Step(sun=sun, centre=centre, solar=solar, fraction=fraction, cos_half=cos_half,
                **env)
