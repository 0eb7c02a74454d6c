"""Benchmark of the orbital heating stage on the demo model (invented satellite).

1. One orbit at 72 steps, with the escaping-direction cache (rays traced once against the
   vehicle, per step only against the planet) and without it (every ray re-traced against
   the vehicle at every step). Both use the same rays, so the results must agree exactly;
   the largest difference is printed with the reported one-sigma error for scale.
2. How the time grows with the number of facets (the demo's max_edge divided by 1, 1.5, 2)
   and with the number of steps (18, 36, 72, 144), with the cache.
3. The statistical error of the demo's per-node planet loads (albedo, planet IR) at equal
   rays (of the estimator: the couplings' error in reflected power, common to all, left
   out, then printed with it), with the control variates of :mod:`vfactor.heatplanet` and
   with the plain Monte Carlo estimates from the very same rays
   (``heatstep.plain_estimates``); then against the previous estimator, the plain
   estimates from one ray sequence per side instead of one per node
   (``heatstep.side_sequences``, :mod:`vfactor.tracing.side_rays`), with the same number
   of rays: the largest and the mean over nodes and steps of each one's error, and their
   ratios. A node's error is the root mean square over several seeds (``--seeds``) of its
   reported one-sigma error: one seed's is the spread of 8 replicates, itself uncertain by
   about a quarter (7 degrees of freedom), and the largest over nodes and steps of such
   figures would pick the luckiest or unluckiest of them. Then the same with more planet
   rays on the nodes of largest error (``[radiation] planet_ray_factor``, as
   :func:`vfactor.planetrays.suggested_factors` suggests from a run with another seed)
   against the previous estimator with as many planet rays in all.
4. The demo with its Sun-tracking wings (``[[hinges]]``): one orbit with the turning parts
   (rigid rays cached once, tested against the moving parts per step; the diffuse
   redistribution by the couplings at the demo's 4 hinge positions, computed before the
   timing as the radiation stage does) against the rigid demo (wings fixed as built) and
   against re-tracing everything at every step (a rigid model built at each step's
   position with that position's couplings; same bits, checked). Also the turning parts
   without positions (each step's own rays give its couplings).

Times exclude numba compilation (a small warm-up run first) and are the best of a few
runs (the machine may be shared); the runs with and without the cache alternate, so that
a slow spell of the machine does not fall on one of them alone. Last line:
``cache speedup: R`` (time without the cache / time with it, heating stage only).

Run: ``.venv/bin/python scripts/bench_heating.py [--quick]``.
"""

from __future__ import annotations

import argparse
import dataclasses
import re
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from vfactor.environment import environment_from_table  # noqa: E402
from vfactor.geometry import build_geometry  # noqa: E402
from vfactor import heatreflect, heatstep  # noqa: E402
from vfactor.heating import HeatingSteps, compute_heating  # noqa: E402
from vfactor.kinematics import motion_of  # noqa: E402
from vfactor.model import load_model_text  # noqa: E402
from vfactor.positions import couplings_at_positions  # noqa: E402
from vfactor.tracing.scene import Scene  # noqa: E402
from vfactor.trajectory import trajectory_from_model  # noqa: E402

DEMO = ROOT / "meshes" / "demo.toml"


def demo_text(edge_divisor=1.0, steps=72):
    """The demo model text with every max_edge divided and steps_per_orbit replaced."""
    text = DEMO.read_text()
    text = re.sub(r"max_edge\s*=\s*([0-9.]+)",
                  lambda m: f"max_edge = {float(m.group(1)) / edge_divisor:.6g}", text)
    text = re.sub(r"steps_per_orbit\s*=\s*\d+", f"steps_per_orbit = {steps}", text)
    return text


def setup(edge_divisor=1.0, steps=72):
    model = load_model_text(demo_text(edge_divisor, steps), str(DEMO), base_dir=DEMO.parent)
    geometry = build_geometry(model)
    scene = Scene.build(geometry.vertices, geometry.triangles)
    trajectory = trajectory_from_model(model)
    environment = environment_from_table(model.environment_table, str(DEMO))
    return model, geometry, scene, trajectory, environment


def timed(geometry, scene, trajectory, environment, repeat=1, **kw):
    """Best wall time of ``repeat`` runs (the machine is shared: the minimum is the least
    disturbed measurement) and the result."""
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        result = compute_heating(geometry, scene, trajectory, environment, seed=1, **kw)
        best = min(best, time.perf_counter() - t0)
    return best, result


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer sizes (smoke test)")
    parser.add_argument("--rays", type=int, default=256, help="planet rays per facet side")
    parser.add_argument("--sun", type=int, default=16, help="Sun sample points per side")
    parser.add_argument("--seeds", type=int, default=None,
                        help="seeds of the error comparison (default 8, 4 with --quick)")
    args = parser.parse_args(argv)
    kw = dict(rays_per_facet=args.rays, sun_samples=args.sun)

    # warm-up: compile every kernel on a short trajectory
    model, geometry, scene, trajectory, environment = setup(1.0, 4)
    timed(geometry, scene, trajectory, environment, **kw)
    timed(geometry, scene, trajectory, environment, use_cache=False, **kw)

    model, geometry, scene, trajectory, environment = setup(1.0, 72)
    print(f"demo model: {geometry.n_facets} facets, {geometry.n_nodes} nodes, "
          f"{trajectory.n_steps} steps, {args.rays} planet rays and {args.sun} Sun samples "
          f"per facet side")
    # interleaved (cache, re-trace, cache, re-trace, cache): a slow spell of the shared
    # machine then falls on both, not on one of them; best of each
    t_cache, t_trace = float("inf"), float("inf")
    for use_cache in (True, False, True, False, True):
        t, result = timed(geometry, scene, trajectory, environment, use_cache=use_cache, **kw)
        if use_cache:
            t_cache, with_cache = min(t_cache, t), result
        else:
            t_trace, without = min(t_trace, t), result
    worst = 0.0
    for src in ("solar", "albedo", "planet_ir"):
        a = getattr(with_cache, f"node_{src}")
        b = getattr(without, f"node_{src}")
        diff = float(np.abs(a - b).max())
        sigma = float(getattr(with_cache, f"node_{src}_stderr").max())
        worst = max(worst, diff)
        print(f"  {src:9s}: max |cache - retrace| = {diff:.3e} W "
              f"(largest reported 1-sigma error {sigma:.3e} W, largest value "
              f"{float(np.abs(a).max()):.3e} W)")
    print(f"  with cache   : {t_cache:8.2f} s ({t_cache / trajectory.n_steps * 1e3:.1f} ms/step)")
    print(f"  re-trace all : {t_trace:8.2f} s ({t_trace / trajectory.n_steps * 1e3:.1f} ms/step)")
    if worst != 0.0:
        print("  WARNING: cache and re-trace differ")

    seeds = range(1, 1 + (args.seeds or (4 if args.quick else 8)))
    by_seed = [estimators(geometry, scene, trajectory, environment, seed=seed, **kw)
               for seed in seeds]
    runs = {name: [one[name] for one in by_seed] for name in ("ours", "plain", "previous")}
    print(f"planet loads at equal rays, seeds 1..{len(seeds)} (a node's error: the RMS over "
          f"the seeds of its reported one-sigma error, that of the estimator alone: the "
          f"couplings' error in reflected power, the same for all, left out)")
    print("  with the control variates / the plain estimates (same rays):")
    _error_ratios(runs["ours"], runs["plain"])
    print("  this estimator / the plain estimates with one ray sequence per side (the "
          "previous estimator):")
    _error_ratios(runs["ours"], runs["previous"])
    factors = suggested(geometry, scene, trajectory, environment, **kw)
    more = [estimators(geometry, scene, trajectory, environment, seed=seed,
                       names=("ours", "previous"), planet_blocks=factors, **kw)
            for seed in seeds]
    chosen = ", ".join(f"{geometry.nodes.names[j]} x{factors[j]}"
                       for j in np.flatnonzero(factors > 1))
    ours_rays, before_rays = more[0]["rays_per_side"]
    print(f"  with more planet rays on the nodes of largest error in a run with seed "
          f"{REFERENCE_SEED} (planetrays.suggested_factors: {chosen}; {ours_rays:.0f} rays "
          f"per side on average), against the previous estimator with as many in all "
          f"({before_rays} per side):")
    _error_ratios([r["ours"] for r in more], [r["previous"] for r in more])
    print("with the couplings' error in reflected power (seed 1; the stage's own 256 rays per "
          "side here; the radiation stage's couplings in a run):")
    for src in ("albedo", "planet_ir"):
        total = getattr(with_cache, f"node_{src}_stderr")
        alone = getattr(runs["ours"][0], f"node_{src}_stderr")
        print(f"  {src:9s}: largest {total.max():.4f} W (estimator {alone.max():.4f}); "
              f"mean {total.mean():.5f} W (estimator {alone.mean():.5f})")

    print("time with the cache against facets (72 steps):")
    divisors = (1.0, 2.0) if args.quick else (1.0, 1.5, 2.0)
    for div in divisors:
        _, g, sc, tr, env = setup(div, 72)
        t, _ = timed(g, sc, tr, env, repeat=2, **kw)
        print(f"  {g.n_facets:7d} facets: {t:8.2f} s  ({t / g.n_facets * 1e3:.3f} ms/facet)")

    print("time with the cache against steps (demo facets):")
    for steps in ((18, 72) if args.quick else (18, 36, 72, 144)):
        _, g, sc, tr, env = setup(1.0, steps)
        t, _ = timed(g, sc, tr, env, repeat=2, **kw)
        print(f"  {tr.n_steps:5d} steps : {t:8.2f} s  ({t / tr.n_steps * 1e3:.1f} ms/step)")

    print("turning wings (demo, 72 steps):")
    motion = motion_of(geometry, model.hinges, trajectory)
    positions = couplings_at_positions(geometry, motion, 4, rays_per_node=20000, seed=1)
    compute_heating(geometry, scene, _first(trajectory, 2), environment, seed=1,
                    motion=motion, **kw)                                  # warm-up
    t_move, moving = timed(geometry, scene, trajectory, environment, repeat=2, motion=motion,
                           positions=positions, **kw)
    t_own, _ = timed(geometry, scene, trajectory, environment, repeat=1, motion=motion, **kw)
    t0 = time.perf_counter()
    same = True
    for k in range(trajectory.n_steps):
        placed = dataclasses.replace(geometry, vertices=motion.vertices(geometry, k),
                                     normals=motion.normals(geometry, k))
        view = positions.view_factors[positions.step_position[k]]
        one = compute_heating(placed, Scene.build(placed.vertices, placed.triangles),
                              _first(trajectory, k + 1, k), environment, seed=1,
                              view_factors=view, **kw)
        same &= bool(np.array_equal(one.node_solar[0], moving.node_solar[k]))
    t_all = time.perf_counter() - t0
    print(f"  turning parts: {t_move:8.2f} s ({t_move / trajectory.n_steps * 1e3:.1f} ms/step)"
          f"; {t_move / t_cache:.2f} x the rigid demo (goal: within 2)")
    print(f"  re-trace all : {t_all:8.2f} s ({t_all / trajectory.n_steps * 1e3:.1f} ms/step)"
          f"; turning parts {t_all / t_move:.2f} x faster"
          + ("" if same else "  WARNING: the two differ"))
    print(f"  without hinge positions (couplings from each step's rays): {t_own:8.2f} s "
          f"({t_own / trajectory.n_steps * 1e3:.1f} ms/step)")
    print(f"cache speedup: {t_trace / t_cache:.2f}")


def _error_ratios(ours, other):
    """Print the largest and mean over nodes and steps of the errors of albedo and planet
    IR of two estimators, and their ratios (other / ours); ``ours``, ``other``: heating
    results of the same seeds, a node's error the RMS over them of its reported one-sigma
    error."""
    for src in ("albedo", "planet_ir"):
        ours_err, other_err = (
            np.sqrt(np.mean([getattr(r, f"node_{src}_stderr") ** 2 for r in runs], axis=0))
            for runs in (ours, other))
        print(f"    {src:9s}: largest {ours_err.max():.4f} / {other_err.max():.4f} W "
              f"(ratio {other_err.max() / ours_err.max():.2f}); mean {ours_err.mean():.5f} / "
              f"{other_err.mean():.5f} W (ratio {other_err.mean() / ours_err.mean():.2f})")


class _Quiet:
    def advance(self, n):
        pass


def estimators(geometry, scene, trajectory, environment, seed=1,
               names=("ours", "plain", "previous"), **kw):
    """The heating of :func:`timed` (at ``seed``) by up to three estimators of planet IR and
    albedo: {"ours": the control variates, "plain": the plain Monte Carlo estimates on
    every side from the very same rays (``heatstep.plain_estimates``), "previous": the
    plain estimates from one sequence per side and one block of rays per side
    (``heatstep.side_sequences``), with as many planet rays in all as "ours" (more per side
    when ``kw`` gives ``planet_blocks``: :mod:`vfactor.planetrays`)}, and "rays_per_side":
    the planet rays per facet side of "ours" (on average) and of "previous". The reported
    errors are those of the estimator alone: the error of the couplings in the reflected
    power (:mod:`vfactor.reflecterror`), the same for every estimator, is left out."""
    task = HeatingSteps.of(geometry, scene, trajectory, environment, seed=seed, **kw)
    model, _ = task.prepare(geometry, scene)
    m = task.replicates
    per_side = model.sides.count * m * -(-task.rays_per_facet // m) / max(_facet_sides(model), 1)
    before, traced = task, model
    if task.blocks is not None:
        before = HeatingSteps.of(geometry, scene, trajectory, environment, seed=seed, **{
            **kw, "rays_per_facet": int(m * np.ceil(per_side / m)), "planet_blocks": None})
        traced = before.prepare(geometry, scene)[0] if "previous" in names else None
    states = {"ours": model}
    if "plain" in names:
        states["plain"] = heatstep.plain_estimates(model)
    if "previous" in names:
        states["previous"] = heatstep.plain_estimates(heatstep.side_sequences(traced, _Quiet()))
    out = {"rays_per_side": (per_side, before.rays_per_facet)}
    gebhart = None
    for name, state in states.items():
        if gebhart is None or name == "previous":   # "plain" has the first hits of "ours"
            gebhart = {band: None if geb is None else geb._replace(errors=None)
                       for band, geb in heatreflect.band_gebhart(state, geometry, None).items()}
        bands = heatreflect.bands_of(state, geometry, None, gebhart)
        out[name] = task.assemble(task.run((state, bands), np.arange(task.n_steps)))
    return out


REFERENCE_SEED = 1000
"""Seed of the earlier run whose errors choose the nodes given more planet rays."""


def suggested(geometry, scene, trajectory, environment, **kw) -> np.ndarray:
    """The ``planet_ray_factor`` per node that :func:`vfactor.planetrays.suggested_factors`
    gives from a run at :data:`REFERENCE_SEED` (its estimator errors, its own node view
    factors): what an engineer would take from the summary of an earlier run."""
    from vfactor.planetrays import suggested_factors

    task = HeatingSteps.of(geometry, scene, trajectory, environment, seed=REFERENCE_SEED, **kw)
    model, _ = task.prepare(geometry, scene)
    run = estimators(geometry, scene, trajectory, environment, seed=REFERENCE_SEED,
                     names=("ours",), **kw)["ours"]
    error = np.maximum(run.node_albedo_stderr, run.node_planet_ir_stderr).max(axis=0)
    view = heatreflect._node_view_factors(model.sides, model.targets, model.n_nodes,
                                          model.node_area)[0]
    sides = np.bincount(model.sides.node, minlength=model.n_nodes)
    return suggested_factors(error, sides, view)


def _facet_sides(model) -> int:
    """Facet sides of a prepared vehicle (each counted once, whatever its blocks)."""
    s = model.sides
    return int(np.unique(2 * s.facet + (s.sign < 0)).size)


def _first(trajectory, stop, start=0):
    """The trajectory's steps ``start .. stop - 1``."""
    return dataclasses.replace(trajectory, **{name: getattr(trajectory, name)[start:stop]
                                              for name in _PER_STEP})


_PER_STEP = ("time", "position", "velocity", "sun_inertial", "sun_distance", "sun_fraction",
             "beta", "body_to_inertial", "sun_body", "nadir_body", "planet_distance")


if __name__ == "__main__":
    main()
