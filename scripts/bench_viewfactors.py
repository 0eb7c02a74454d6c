"""Benchmark of Monte Carlo view factors: error vs rays vs time, and time to a target error.

1. Catalog case: two opposed parallel unit squares one unit apart (F = 0.199825, Incropera
   & DeWitt, "Fundamentals of Heat and Mass Transfer", 6th ed., Table 13.2), each square
   as 4 x 4 x 2 triangles. For each ray count, ``--seeds`` independent runs of
   :func:`vfactor.radiation.compute_view_factors` give the RMS of the true error (against
   the closed form) and the mean reported one-sigma error; the same for plain Monte Carlo
   (independent rays, numpy generator, traced by Embree). Printed: the fitted slope of
   log(RMS error) against log(rays) — -1/2 for plain Monte Carlo, steeper where the
   randomised quasi-Monte Carlo design helps.
2. Demo model (``meshes/demo.toml``, an invented satellite): the time vfactor takes to bring
   every significant coupling (node or space entry >= 1 % of its row) to 0.5 % one-sigma
   relative error (``target_error = 0.005``, starting from the model's ``rays_per_node``:
   8 rounds of ``rays_per_node / 8`` rays, then the rounds its planning adds, which grow
   in size; the error is vfactor's reported one, from the spread of the rounds, of the
   values it delivers: smoothed, each pair's two raw estimates combined; the time and rays
   under the raw criterion, every raw entry to the target, are printed as well),
   against plain Monte Carlo with independent rays traced by Embree (``embreex``, 2 Python
   threads) reaching the same error by the binomial error sqrt(F (1 - F) / N) of
   independent rays: a pilot of ``--pilot`` rays per node, then as many rays per row as
   its smallest significant entry needs (plus 5 %), repeated until every significant entry
   passes; each of the 2 threads generates (numpy), traces and tallies its share of the
   rays. Both are timed in this run, ray generation and tallying included; Embree's pure
   tracing time (the slower thread's) is printed as well.

Last line: ``time to 0.5% vs embree plain MC: ratio R`` with R = Embree time / vfactor time
(vfactor's default behaviour: the target on the delivered values). The agreement line
compares vfactor's delivered values with the Embree estimates in combined sigma.

Usage: ``python scripts/bench_viewfactors.py [--seeds 8] [--pilot 100000] [--quick]``
"""

from __future__ import annotations

import argparse
import sys
import threading
import time
from pathlib import Path

import numba
import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from radiation_shapes import flipped, make_geometry, rectangle  # noqa: E402

from vfactor import radiation  # noqa: E402
from vfactor.geometry import build_geometry  # noqa: E402
from vfactor.model import load_model  # noqa: E402
from vfactor.sparsetools import dense  # noqa: E402
from vfactor.tracing.scene import Scene  # noqa: E402

F_SQUARES = 0.19982489569838746   # Incropera & DeWitt 6th ed., Table 13.2, X/L = Y/L = 1
TARGET = 0.005
SIGNIFICANCE = radiation.SIGNIFICANCE


# --------------------------------------------------------------------------------------
# Plain Monte Carlo with Embree
# --------------------------------------------------------------------------------------
class EmbreePlain:
    """Plain (independent-ray) Monte Carlo view factors traced by Embree."""

    def __init__(self, geometry, threads=2):
        from embreex import rtcore_scene as rtcs
        from embreex.mesh_construction import TriangleMesh

        self.g = geometry
        self.threads = threads
        self.scene = rtcs.EmbreeScene()
        TriangleMesh(self.scene, geometry.vertices.astype(np.float32),
                     geometry.triangles.astype(np.int32))
        self.scene.run(np.zeros((1, 3), np.float32), np.ones((1, 3), np.float32))
        n = geometry.n_nodes
        self.n = n
        ptr, facet, sign, cum, _ = __import__(
            "vfactor.tracing.vf_kernels", fromlist=["emitter_table"]).emitter_table(
            geometry.front_node, geometry.back_node, geometry.areas, n)
        self.sides = [(facet[ptr[i]:ptr[i + 1]], sign[ptr[i]:ptr[i + 1]],
                       cum[ptr[i]:ptr[i + 1]]) for i in range(n)]
        tri = geometry.vertices[geometry.triangles]
        self.a = tri[:, 0]
        self.e1 = tri[:, 1] - tri[:, 0]
        self.e2 = tri[:, 2] - tri[:, 0]
        self.offset = 1e-6 * float(np.ptp(geometry.vertices, axis=0).max())
        self.trace_time = 0.0

    def _rays(self, node, count, rng):
        facet, sign, cum = self.sides[node]
        s = np.minimum(np.searchsorted(cum, rng.random(count), side="right"), cum.size - 1)
        f = facet[s]
        sg = sign[s][:, None]
        u = rng.random((count, 4))
        r = np.sqrt(u[:, 0:1])
        o = self.a[f] + r * (1 - u[:, 1:2]) * self.e1[f] + r * u[:, 1:2] * self.e2[f]
        nrm = sg * self.g.normals[f]
        # cosine-weighted direction (Malley's method, polar form)
        rad = np.sqrt(u[:, 2])
        phi = 2 * np.pi * u[:, 3]
        helper = np.where(np.abs(nrm[:, :1]) < 0.9, [[1.0, 0, 0]], [[0, 1.0, 0]])
        t1 = np.cross(nrm, helper)
        t1 /= np.linalg.norm(t1, axis=1, keepdims=True)
        t2 = np.cross(nrm, t1)
        d = ((rad * np.cos(phi))[:, None] * t1 + (rad * np.sin(phi))[:, None] * t2
             + np.sqrt(np.maximum(0, 1 - u[:, 2]))[:, None] * nrm)
        return (o + self.offset * nrm).astype(np.float32), d.astype(np.float32)

    def _work(self, node, count, rng, batch):
        """Generate, trace and tally ``count`` rays (runs in one worker thread)."""
        n = self.n
        total = np.zeros(n + 2, np.int64)
        traced = 0.0
        for start in range(0, count, batch):
            k = min(batch, count - start)
            o, d = self._rays(node, k, rng)
            t0 = time.perf_counter()
            hit = self.scene.run(o, d).astype(np.int64)
            traced += time.perf_counter() - t0
            col = np.full(k, n, np.int64)
            ok = hit >= 0
            front = np.einsum("ij,ij->i", d[ok].astype(np.float64), self.g.normals[hit[ok]]) < 0
            side_node = np.where(front, self.g.front_node[hit[ok]], self.g.back_node[hit[ok]])
            col[ok] = np.where(side_node >= 0, side_node, n + 1)
            total += np.bincount(col, minlength=n + 2)
        return total, traced

    def tally(self, node, count, rng, batch=1 << 18):
        """(n + 2,) counts of ``count`` independent rays from ``node``: each of the worker
        threads generates (numpy), traces (Embree) and tallies its share of the rays."""
        rngs = rng.spawn(self.threads)
        shares = [count // self.threads + (1 if i < count % self.threads else 0)
                  for i in range(self.threads)]
        out = [None] * self.threads

        def work(i):
            out[i] = self._work(node, shares[i], rngs[i], batch)

        threads = [threading.Thread(target=work, args=(i,)) for i in range(self.threads)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        self.trace_time += max(o[1] for o in out)
        return sum(o[0] for o in out)


def plain_to_target(engine, target, pilot, seed):
    """Independent rays per node until every significant entry has binomial error <= target."""
    rng = np.random.default_rng(seed)
    n = engine.n
    counts = np.zeros((n, n + 2), np.int64)
    rays = np.zeros(n, np.int64)
    for i in range(n):
        counts[i] = engine.tally(i, pilot, rng)
        rays[i] = pilot
    for _ in range(20):
        F = counts / rays[:, None]
        sig = F >= SIGNIFICANCE
        sig[:, -1] = False
        with np.errstate(divide="ignore", invalid="ignore"):
            need = np.where(sig, (1 - F) / (F * target ** 2), 0.0).max(axis=1)
        todo = np.flatnonzero(need > rays)
        if todo.size == 0:
            break
        for i in todo:
            extra = int(np.ceil(need[i] * 1.05)) - rays[i]
            counts[i] += engine.tally(i, extra, rng)
            rays[i] += extra
    F = counts / rays[:, None]
    return F, np.sqrt(F * (1 - F) / rays[:, None]), rays


# --------------------------------------------------------------------------------------
# 1. catalog case
# --------------------------------------------------------------------------------------
def squares():
    return make_geometry([
        dict(mesh=rectangle([0, 0, 0], [1, 0, 0], [0, 1, 0], 4, 4), front=("lower", "black")),
        dict(mesh=flipped(rectangle([0, 0, 1], [1, 0, 0], [0, 1, 0], 4, 4)),
             front=("upper", "black")),
    ])


def fit_slope(x, y):
    return float(np.polyfit(np.log(x), np.log(y), 1)[0])


def catalog(seeds, ray_counts):
    g = squares()
    sc = Scene.build(g.vertices, g.triangles)
    radiation.compute_view_factors(g, sc, rays_per_node=800, seed=0)       # compile
    engine = EmbreePlain(g)
    print("catalog case: opposed parallel unit squares at unit distance, F = 0.199825 "
          "(Incropera & DeWitt 6th ed., Table 13.2)")
    print(f"{'rays/node':>10} {'vfactor rms err':>16} {'reported sigma':>15} {'time [s]':>9} "
          f"{'plain MC rms err':>17} {'time [s]':>9}")
    rows = []
    for N in ray_counts:
        err, rep, tv = [], [], 0.0
        for s in range(seeds):
            t0 = time.perf_counter()
            vf = radiation.compute_view_factors(g, sc, rays_per_node=N, seed=100 + s)
            tv += time.perf_counter() - t0
            raw, se = dense(vf.raw_matrix), dense(vf.stderr)
            err += [raw[0, 1] - F_SQUARES, raw[1, 0] - F_SQUARES]
            rep += [se[0, 1], se[1, 0]]
        rng = np.random.default_rng(N)
        perr, tp = [], 0.0
        for s in range(seeds):
            t0 = time.perf_counter()
            c0 = engine.tally(0, N, rng)
            c1 = engine.tally(1, N, rng)
            tp += time.perf_counter() - t0
            perr += [c0[1] / N - F_SQUARES, c1[0] / N - F_SQUARES]
        rms = float(np.sqrt(np.mean(np.square(err))))
        prms = float(np.sqrt(np.mean(np.square(perr))))
        rows.append((N, rms, float(np.sqrt(np.mean(np.square(rep)))), tv / seeds, prms,
                     tp / seeds))
        print(f"{N:>10d} {rms:>16.3e} {rows[-1][2]:>15.3e} {tv / seeds:>9.3f} {prms:>17.3e} "
              f"{tp / seeds:>9.3f}")
    r = np.array(rows)
    print(f"fitted slope of log(rms error) vs log(rays): vfactor "
          f"{fit_slope(r[:, 0], r[:, 1]):.3f}, plain MC (Embree) "
          f"{fit_slope(r[:, 0], r[:, 4]):.3f} (expected -0.5)")
    print(f"fitted slope of log(reported sigma) vs log(rays): vfactor "
          f"{fit_slope(r[:, 0], r[:, 2]):.3f}")


# --------------------------------------------------------------------------------------
# 2. demo model
# --------------------------------------------------------------------------------------
def demo(pilot, rays_per_node=None):
    model = load_model(ROOT / "meshes" / "demo.toml")
    g = build_geometry(model)
    sc = Scene.build(g.vertices, g.triangles)
    rays0 = int(rays_per_node or model.radiation.rays_per_node)
    radiation.compute_view_factors(g, sc, rays_per_node=800, seed=0)       # compile
    print(f"\ndemo model: {g.n_facets} facets, {g.n_nodes} nodes; target {TARGET:.1%} one-sigma "
          f"relative error on entries >= {SIGNIFICANCE:.0%} of their row")
    t0 = time.perf_counter()
    old = radiation.compute_view_factors(g, sc, rays_per_node=rays0, seed=1, target_error=TARGET,
                                         max_rays_per_node=1000 * rays0, smooth=False)
    t_old = time.perf_counter() - t0
    raw_o = np.c_[dense(old.raw_matrix), old.raw_space]
    err_o = np.c_[dense(old.stderr), old.stderr_space]
    sig_o = raw_o >= SIGNIFICANCE
    print(f"vfactor, raw criterion (every raw entry to the target; smoothing off): {t_old:.2f} s, "
          f"{old.rays.sum() / 1e6:.2f} M rays, worst relative error {np.max(err_o[sig_o] / raw_o[sig_o]):.4f}")
    t0 = time.perf_counter()
    vf = radiation.compute_view_factors(g, sc, rays_per_node=rays0, seed=1, target_error=TARGET,
                                        max_rays_per_node=1000 * rays0)
    tv = time.perf_counter() - t0
    raw = np.c_[dense(vf.raw_matrix), vf.raw_space]
    err = np.c_[dense(vf.stderr), vf.stderr_space]
    sig = raw >= SIGNIFICANCE
    val = np.c_[dense(vf.matrix), vf.space]
    d_err = np.c_[dense(vf.smoothed_stderr), vf.smoothed_stderr_space]
    d_sig = val >= SIGNIFICANCE
    print(f"vfactor (default: target on the delivered, smoothed values): {tv:.2f} s, "
          f"{vf.rays.sum() / 1e6:.2f} M rays (start {rays0} per node, "
          f"first rounds of {-(-rays0 // radiation.MIN_ROUNDS)}, most rays in a row "
          f"{vf.rays.max() / 1e6:.2f} M), converged {vf.converged}, "
          f"worst relative error of the delivered values {np.max(d_err[d_sig] / val[d_sig]):.4f} "
          f"(raw entries {np.max(err[sig] / raw[sig]):.4f}), "
          f"{vf.rays.sum() / tv / 1e6:.2f} M rays/s, adjustment {vf.adjustment_sigma:.2f} sigma")
    engine = EmbreePlain(g)
    t0 = time.perf_counter()
    F, sd, rays = plain_to_target(engine, TARGET, pilot, seed=2)
    te = time.perf_counter() - t0
    psig = F[:, :-1] >= SIGNIFICANCE
    print(f"embree plain MC: {te:.2f} s ({engine.trace_time:.2f} s tracing), "
          f"{rays.sum() / 1e6:.2f} M rays, worst relative error "
          f"{np.max(sd[:, :-1][psig] / F[:, :-1][psig]):.4f}, "
          f"{rays.sum() / engine.trace_time / 1e6:.2f} M rays/s tracing")
    both = d_sig & psig            # delivered values against the independent estimate
    diff = np.abs(val - F[:, :-1])[both]
    comb = np.hypot(d_err[both], sd[:, :-1][both])
    exact = comb == 0                  # entries of exactly 1 (a node that sees only space)
    print(f"agreement of the two estimates on significant entries: max |diff| = "
          f"{np.max(diff[~exact] / comb[~exact]):.2f} combined sigma over {(~exact).sum()} "
          f"entries; {exact.sum()} entries exactly equal to 1 in both: "
          f"{bool(np.all(diff[exact] == 0))}")
    print(f"rays ratio (embree / vfactor) {rays.sum() / vf.rays.sum():.2f}; "
          f"time ratio with Embree tracing time only {engine.trace_time / tv:.2f}")
    return te / tv


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, default=8)
    ap.add_argument("--pilot", type=int, default=100_000)
    ap.add_argument("--rays", type=int, default=None,
                    help="starting rays per node on the demo (default: the model's)")
    ap.add_argument("--quick", action="store_true", help="fewer ray counts in the catalog")
    args = ap.parse_args()
    print(f"numba threads: {numba.get_num_threads()}")
    counts = [16_000, 64_000, 256_000] if args.quick else [16_000, 64_000, 256_000, 1_024_000,
                                                           4_096_000]
    catalog(args.seeds, counts)
    ratio = demo(args.pilot, args.rays)
    print(f"time to 0.5% vs embree plain MC: ratio {ratio:.2f}")


if __name__ == "__main__":
    main()
