"""Benchmark of the contact search (vfactor.tracing.contacts) against the numpy sweep.

Scenes (invented, built with trimesh.creation) at about 2.5e5, 8e5 and 2e6 triangles:
a layer of icospheres (subdivision 5, 20480 triangles each) on a jittered lattice closer
than their diameter, so that neighbours interpenetrate; a flat grid cutting through the
layer; and pairs of subdivided boxes stacked face to face (coincident facets with
opposite normals), one pair also with a duplicated box (coincident, same way). Like a
real model it has a few parts of many facets each: the spheres in two parts
(checkerboard, so that neighbours belong to different parts), the grid, the lower boxes,
the upper boxes, the duplicate. The tolerance is that of ``vfactor check``: 1e-6 of the
model's bounding-box diagonal.

Printed per scene: triangles, parts, time [s] of :func:`find_contacts` (warm: compiled in
a small run first; best of ``--repeat``), the pairs it finds by kind (all pairs, those
within one part included), time of the peer in the same run, the numpy sweep of the
former check (``tests/oracles.py::contact_pairs_reference``, pairs between parts only),
the ratio numpy / kernel, and whether the two agree on the pairs between parts. The
numpy sweep is run only where its time, predicted from the previous size as t ~ n^2
(it compares each facet with every facet of another part that starts before it ends
along x: quadratic for parts spread over the same region, as here), stays below
``--numpy-limit`` seconds. A size of 1e5 comes first so that the sweep runs at two
sizes. The last line is
``contact check 2M triangles: T s; speedup vs numpy sweep: min ratio R``
(time of the kernel at the largest size; smallest ratio over the sizes where both ran).

Usage: ``python scripts/bench_contacts.py [--sizes 1e5,2.5e5,8e5,2e6] [--repeat K]
[--numpy-limit S]``
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numba
import numpy as np
import trimesh

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from benchtools import best_time  # noqa: E402
from oracles import contact_pairs_reference  # noqa: E402

from vfactor.tracing.contacts import (COINCIDENT_OPPOSITE, COINCIDENT_SAME,  # noqa: E402
                                      CROSSING, find_contacts)

SPHERE = trimesh.creation.icosphere(subdivisions=5, radius=0.5)    # 20480 triangles
BOX = trimesh.creation.box(extents=[0.6, 0.6, 0.6])
for _ in range(5):
    BOX = BOX.subdivide()                                          # 12288 triangles


def scene(n_target, seed=7):
    """Vertices, triangles, part index per facet of a scene of about ``n_target`` facets."""
    g = np.random.default_rng(seed)
    pieces, piece_part = [], []
    n_spheres = max(2, round(0.7 * n_target / len(SPHERE.faces)))
    cols = int(np.ceil(np.sqrt(n_spheres)))
    spacing = 0.8                                   # < diameter 1.0: neighbours overlap
    for k in range(n_spheres):
        c = np.array([k % cols, k // cols, 0.0]) * spacing + g.uniform(-0.05, 0.05, 3)
        pieces.append((np.asarray(SPHERE.vertices) + c, np.asarray(SPHERE.faces)))
        piece_part.append((k % cols + k // cols) % 2)  # checkerboard: neighbours differ
    # a flat grid at z = 0.2 across the layer (it cuts every sphere)
    n_cells = max(1, round(np.sqrt(0.15 * n_target / 2)))
    size = cols * spacing
    x = np.linspace(-0.5, size, n_cells + 1)
    gx, gy = np.meshgrid(x, x, indexing="ij")
    gv = np.column_stack([gx.ravel(), gy.ravel(), np.full(gx.size, 0.2)])
    idx = np.arange(gx.size).reshape(n_cells + 1, n_cells + 1)
    q0, q1, q2, q3 = idx[:-1, :-1], idx[1:, :-1], idx[1:, 1:], idx[:-1, 1:]
    gf = np.vstack([np.column_stack([q0.ravel(), q1.ravel(), q2.ravel()]),
                    np.column_stack([q0.ravel(), q2.ravel(), q3.ravel()])])
    pieces.append((gv, gf))
    piece_part.append(2)
    # box pairs stacked face to face beside the layer; the first pair has a duplicate box
    n_pairs = max(1, round(0.15 * n_target / (2 * len(BOX.faces))))
    for k in range(n_pairs):
        c = np.array([size + 1.0 + 0.8 * k, 0.0, 0.0])
        for dz, p in ((0.0, 3), (0.6, 4)):
            pieces.append((np.asarray(BOX.vertices) + c + [0, 0, dz], np.asarray(BOX.faces)))
            piece_part.append(p)
        if k == 0:
            pieces.append((np.asarray(BOX.vertices) + c, np.asarray(BOX.faces)))
            piece_part.append(5)
    verts, faces, part, base = [], [], [], 0
    for (v, f), p in zip(pieces, piece_part):
        verts.append(v)
        faces.append(f + base)
        part.append(np.full(len(f), p, np.int32))
        base += len(v)
    return np.vstack(verts), np.vstack(faces).astype(np.int64), np.concatenate(part)


def facet_normals(v, f):
    n = np.cross(v[f[:, 1]] - v[f[:, 0]], v[f[:, 2]] - v[f[:, 0]])
    return n / np.linalg.norm(n, axis=1)[:, None]


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1e5,2.5e5,8e5,2e6")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--numpy-limit", type=float, default=60.0,
                    help="skip the numpy sweep where its predicted time exceeds this [s]")
    args = ap.parse_args()
    sizes = [int(float(s)) for s in args.sizes.split(",")]

    v, f, part = scene(2000)                            # compile (or load) outside timings
    find_contacts(v, f, facet_normals(v, f), np.ones(len(f), bool), 1e-6)
    print(f"numba threads: {numba.get_num_threads()}")
    print(f"{'tris':>9} {'parts':>5} | {'kernel s':>8} {'cross':>7} {'same':>6} "
          f"{'opp':>6} | {'numpy s':>8} {'ratio':>7} {'agree':>5}")
    ratios = []
    last_n, last_t = None, None
    prev = None                                         # (n, numpy seconds) of the last run
    for n in sizes:
        v, f, part = scene(n)
        normals = facet_normals(v, f)
        usable = np.ones(len(f), bool)
        tol = 1e-6 * float(np.linalg.norm(v.max(0) - v.min(0)))   # vfactor check's rule
        tk, c = best_time(lambda v=v, f=f, n=normals, u=usable, t=tol:
                          find_contacts(v, f, n, u, t), args.repeat)
        counts = [int((c.kind == k).sum()) for k in (CROSSING, COINCIDENT_SAME,
                                                     COINCIDENT_OPPOSITE)]
        predicted = prev[1] * (len(f) / prev[0]) ** 2 if prev else 0.0
        line = (f"{len(f):>9} {int(part.max()) + 1:>5} | {tk:>8.3f} {counts[0]:>7} "
                f"{counts[1]:>6} {counts[2]:>6} | ")
        if predicted <= args.numpy_limit:
            t0 = time.perf_counter()
            ra, rb, rk = contact_pairs_reference(v, f, normals, usable, tol, part)
            tn = time.perf_counter() - t0
            prev = (len(f), tn)
            between = part[c.a] != part[c.b]
            agree = (np.array_equal(c.a[between], ra) and np.array_equal(c.b[between], rb)
                     and np.array_equal(c.kind[between], rk))
            ratios.append(tn / tk)
            line += f"{tn:>8.2f} {tn / tk:>7.1f} {agree!s:>5}"
        else:
            line += (f"{'skipped':>8}   (numpy sweep predicted ~{predicted:.0f} s > "
                     f"{args.numpy_limit:.0f} s)")
        print(line, flush=True)
        last_n, last_t = len(f), tk
    ratio = f"{min(ratios):.1f}" if ratios else "n/a"
    print(f"contact check {last_n / 1e6:.2g}M triangles: {last_t:.2f} s; "
          f"speedup vs numpy sweep: min ratio {ratio}")


if __name__ == "__main__":
    main()
