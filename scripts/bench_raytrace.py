"""Benchmark of the ray-tracing core against Embree (embreex) and trimesh's intersector.

Scenes are spacecraft-like (an invented vehicle: box body, two thin wings, a paraboloid
dish) at about 1e4, 1e5 and 1e6 triangles, each also as a "cavity" (the vehicle inside a
closed, inward-facing shroud, so every ray hits). Rays: 1e6 incoherent cosine-weighted
rays from area-weighted points on the facets (the view-factor workload). The same rays
go to every engine; Embree is called from 2 Python threads with half of the rays each
(one call is single-threaded), vfactor runs on numba's threads (2 on this machine).

Printed per scene: build time [s] of vfactor and Embree and their ratio (Embree / vfactor;
>= 0.5 means vfactor builds no slower than 2x Embree), throughput [Mrays/s] of vfactor's
batch query (``Scene.closest_hit``, the same rays as the others), of the fused kernel
(``count_cosine_hits``: sampling included), of Embree and of trimesh's intersector, and
the ratio vfactor batch / Embree. "hit/miss agree" is the share of rays on which Embree
and vfactor agree about hitting anything (differences: grazing rays, float32 in Embree).
The last line is ``throughput vs embree: min ratio R`` (smallest vfactor/Embree ratio).

Usage: ``python scripts/bench_raytrace.py [--rays N] [--sizes 1e4,1e5,1e6] [--repeat K]``
"""

from __future__ import annotations

import argparse
import threading
import time

import numba
import numpy as np

from benchtools import best_time

from vfactor.tracing.scene import Scene, cosine_rays, count_cosine_hits, rays_by_area


def grid_box(extents, counts, center=(0.0, 0.0, 0.0), inward=False):
    """Closed box with its faces split into a conforming grid of triangles (numpy).

    extents : (3,) [m]; counts : (3,) cells along x, y, z; triangles 4 (nx ny + ny nz + nz nx).
    Returns vertices (v, 3), faces (f, 3) with outward normals (inward if asked).
    """
    ex = np.asarray(extents, float) / 2
    c = np.asarray(center, float)
    verts = []
    faces = []
    base = 0
    for axis in range(3):
        u, w = (axis + 1) % 3, (axis + 2) % 3
        nu, nw = counts[u], counts[w]
        a, b = np.meshgrid(np.linspace(-ex[u], ex[u], nu + 1),
                           np.linspace(-ex[w], ex[w], nw + 1), indexing="ij")
        for sign in (1.0, -1.0):
            p = np.zeros((a.size, 3))
            p[:, axis] = sign * ex[axis]
            p[:, u] = a.ravel()
            p[:, w] = b.ravel()
            idx = base + np.arange(a.size).reshape(nu + 1, nw + 1)
            q0, q1, q2, q3 = idx[:-1, :-1], idx[1:, :-1], idx[1:, 1:], idx[:-1, 1:]
            # (u, w, axis) is right-handed: u x w = +axis, so (q0, q1, q2) faces +axis.
            t = np.vstack([np.column_stack([q0.ravel(), q1.ravel(), q2.ravel()]),
                           np.column_stack([q0.ravel(), q2.ravel(), q3.ravel()])])
            if (sign < 0) != inward:
                t = t[:, ::-1]
            verts.append(p + c)
            faces.append(t)
            base += a.size
    return np.vstack(verts), np.vstack(faces)


def dish(radius, depth, n_rings, n_sectors, center):
    """Open paraboloid z = depth (r / radius)^2, concave side up (front normal +z)."""
    r = np.linspace(0, radius, n_rings + 1)[1:]
    t = np.linspace(0, 2 * np.pi, n_sectors, endpoint=False)
    rr, tt = np.meshgrid(r, t, indexing="ij")
    pts = np.column_stack([rr.ravel() * np.cos(tt.ravel()), rr.ravel() * np.sin(tt.ravel()),
                           depth * (rr.ravel() / radius) ** 2])
    v = np.vstack([[0.0, 0.0, 0.0], pts]) + center
    idx = 1 + np.arange(n_rings * n_sectors).reshape(n_rings, n_sectors)
    nxt = np.roll(idx, -1, axis=1)
    f = [np.column_stack([np.zeros(n_sectors, int), idx[0], nxt[0]]),
         np.column_stack([idx[:-1].ravel(), idx[1:].ravel(), nxt[1:].ravel()]),
         np.column_stack([idx[:-1].ravel(), nxt[1:].ravel(), nxt[:-1].ravel()])]
    return v, np.vstack(f)


def spacecraft(n_target, cavity=False):
    """Invented vehicle of about n_target triangles (body 40 %, wings 2 x 20 %, dish 20 %)."""
    parts = []
    k = np.sqrt(0.4 * n_target / (4 * 3.0))          # body: 3 faces pairs of k x k cells
    nb = max(1, int(round(k)))
    parts.append(grid_box([1.0, 1.0, 1.2], [nb, nb, nb], (0, 0, 0)))
    kw = np.sqrt(0.2 * n_target / 4 / (0.8 * 2.0)) # wing: 0.8 x 2.0 m, one cell thick
    nx, ny = max(1, int(round(0.8 * kw))), max(1, int(round(2.0 * kw)))
    for y in (1.6, -1.6):
        parts.append(grid_box([0.8, 2.0, 0.02], [nx, ny, 1], (0, y, 0)))
    nd = max(2, int(round(np.sqrt(0.2 * n_target / 2 / 4))))
    parts.append(dish(0.45, 0.15, nd, 4 * nd, (0, 0, 0.75)))
    if cavity:
        ns = max(1, int(round(np.sqrt(0.1 * n_target / 12))))
        parts.append(grid_box([6.0, 6.0, 6.0], [ns, ns, ns], (0, 0, 0), inward=True))
    verts, faces, base = [], [], 0
    for v, f in parts:
        verts.append(v)
        faces.append(f + base)
        base += len(v)
    return np.vstack(verts), np.vstack(faces).astype(np.int64)


def facet_areas(v, f):
    return 0.5 * np.linalg.norm(np.cross(v[f[:, 1]] - v[f[:, 0]], v[f[:, 2]] - v[f[:, 0]]),
                                axis=1)


def embree_engine(v, f):
    from embreex import rtcore_scene as rtcs
    from embreex.mesh_construction import TriangleMesh

    def build():
        scene = rtcs.EmbreeScene()
        TriangleMesh(scene, v.astype(np.float32), f.astype(np.int32))
        scene.run(np.zeros((1, 3), np.float32), np.ones((1, 3), np.float32))  # commit
        return scene
    return build


def embree_trace(scene, o, d, n_threads=2):
    out = [None] * n_threads
    chunks = np.array_split(np.arange(len(o)), n_threads)

    def work(i):
        c = chunks[i]
        out[i] = scene.run(o[c], d[c])
    threads = [threading.Thread(target=work, args=(i,)) for i in range(n_threads)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    return np.concatenate(out)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rays", type=int, default=1_000_000)
    ap.add_argument("--sizes", default="1e4,1e5,1e6")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--trimesh-rays", type=int, default=20000)
    args = ap.parse_args()
    sizes = [int(float(s)) for s in args.sizes.split(",")]
    try:
        import embreex  # noqa: F401
        have_embree = True
    except ImportError:
        have_embree = False
        print("embreex not installed (pip install -e '.[bench]'): Embree columns skipped")

    # Compile (or load from cache) outside the timings.
    v, f = spacecraft(2000)
    s = Scene.build(v, f)
    c = rays_by_area(facet_areas(v, f), 1000)
    o, d, e = cosine_rays(s, c, seed=0)
    s.closest_hit(o, d, exclude=e)
    count_cosine_hits(s, c, seed=0)
    print(f"numba threads: {numba.get_num_threads()}; rays per scene: {args.rays}")
    header = (f"{'scene':>14} {'tris':>8} | {'build s':>8} {'embree':>8} {'ratio':>6} | "
              f"{'Mray/s':>7} {'fused':>7} {'embree':>7} {'trimesh':>8} | {'ratio':>6}")
    print(header)
    ratios = []
    for n in sizes:
        for cavity in (False, True):
            v, f = spacecraft(n, cavity)
            name = f"{'cavity' if cavity else 'open'}-{n:.0e}"
            tb, scene = best_time(lambda: Scene.build(v, f), args.repeat)
            counts = rays_by_area(facet_areas(v, f), args.rays)
            o, d, e = cosine_rays(scene, counts, seed=1)
            # Embree's build, then all traces interleaved round by round (best of
            # --repeat each), so that load from other processes hits the engines alike.
            o32 = (o + 1e-6 * d).astype(np.float32)   # Embree has no emitter exclusion:
            d32 = d.astype(np.float32)                # origins nudged 1e-6 m along the ray
            eb = er = np.nan
            esc = None
            if have_embree:
                eb, esc = best_time(embree_engine(v, f), args.repeat)
            tt = tf = et = np.inf
            for _ in range(args.repeat):
                t0 = time.perf_counter()
                hits = scene.closest_hit(o, d, exclude=e)
                tt = min(tt, time.perf_counter() - t0)
                t0 = time.perf_counter()
                count_cosine_hits(scene, counts, seed=1)
                tf = min(tf, time.perf_counter() - t0)
                if have_embree:
                    t0 = time.perf_counter()
                    eh = embree_trace(esc, o32, d32)
                    et = min(et, time.perf_counter() - t0)
            rate = len(o) / tt / 1e6
            fused = len(o) / tf / 1e6
            hit_share = (hits.facet >= 0).mean()
            if have_embree:
                er = len(o) / et / 1e6
                agree = (np.asarray(eh) >= 0) == (hits.facet >= 0)
            tr = np.nan
            if args.trimesh_rays > 0:
                import trimesh
                from trimesh.ray.ray_triangle import RayMeshIntersector
                mesh = trimesh.Trimesh(v, f, process=False)
                # trimesh's candidate search holds every triangle whose box a ray's
                # segment crosses: in the large cavity that exhausts 24 GiB at 5000
                # rays, so the largest scenes get far fewer rays (its rate is per ray)
                m = min(args.trimesh_rays, len(o)) if n < 500_000 else min(
                    args.trimesh_rays // (4 if hit_share < 0.5 else 100), len(o))
                rmi = RayMeshIntersector(mesh)
                t0 = time.perf_counter()
                rmi.intersects_first(o[:m] + 1e-6 * d[:m], d[:m])
                tr = m / (time.perf_counter() - t0) / 1e6
            ratio = rate / er if have_embree else np.nan
            ratios.append(ratio)
            print(f"{name:>14} {len(f):>8} | {tb:>8.3f} {eb:>8.3f} {eb / tb:>6.2f} | "
                  f"{rate:>7.2f} {fused:>7.2f} {er:>7.2f} {tr:>8.4f} | {ratio:>6.2f}"
                  f"   hits {hit_share:.3f}"
                  + (f", hit/miss agree {agree.mean():.4f}" if have_embree else ""))
    print(f"throughput vs embree: min ratio {np.nanmin(ratios):.2f}")


if __name__ == "__main__":
    main()
