"""Benchmark of how a run grows with the number of nodes (generated, invented vehicle).

Models: a 1 m box body and two 1 x 0.5 m panels (front and back of the panels), cut into
patches of several facets each (``nodes = "per-patch"``, ``--facets-per-node``, default 5,
as in a detailed radiation model) or one node per facet (``--facets-per-node 1``), refined
to about the requested node count; a short orbit (12 steps) so that the heating stage stays
small.
Each size runs ``vfactor run`` in a process of its own and prints: nodes, facets,
non-zero view factors, wall time per stage, peak resident memory of that process, size of
the results file, and the growth exponents between consecutive sizes (log of the ratio
of two measures over log of the ratio of node counts: 1 = linear, 2 = quadratic) of
memory, file size and time, against the same exponent of the non-zeros — the peer of
this benchmark: memory and file size should grow like the non-zeros, not like n^2.

Last line: ``scale: N nodes, peak X.X GB, file Y MB, Z s`` for the largest size run.

Run: ``.venv/bin/python scripts/bench_scale.py [--sizes 1000,5000,20000] [--rays 2000]
[--facets-per-node 5]``.
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

MODEL = """
[model]
name = "scale-test (invented)"
[coatings.white]
solar_absorptivity = 0.2
ir_emissivity = 0.85
[coatings.cells]
solar_absorptivity = 0.9
ir_emissivity = 0.8
[radiation]
rays_per_node = {rays}
[[parts]]
name = "body"
shape = "box"
size = [1.0, 1.0, 1.0]
max_edge = {edge:.6g}
front = {{ coating = "white", {nodes} }}
[[parts]]
name = "wing_a"
shape = "rectangle"
size = [1.0, 0.5]
center = [0.0, 1.3, 0.0]
z_axis = [1.0, 0.0, 0.0]
max_edge = {edge:.6g}
front = {{ coating = "cells", {nodes} }}
back = {{ coating = "white", {nodes} }}
[[parts]]
name = "wing_b"
shape = "rectangle"
size = [1.0, 0.5]
center = [0.0, -1.3, 0.0]
z_axis = [1.0, 0.0, 0.0]
max_edge = {edge:.6g}
front = {{ coating = "cells", {nodes} }}
back = {{ coating = "white", {nodes} }}
[orbit]
type = "circular"
altitude_km = 500.0
inclination_deg = 97.4
ltan = "10:30"
epoch = "2027-03-21T00:00:00Z"
steps_per_orbit = 12
"""

CHILD = r"""
import json, resource, sys, time
import numpy as np
from vfactor.pipeline import run
model, out = sys.argv[1], sys.argv[2]
r = run(model, out)
vf = r.view_factors
print(json.dumps({
    "nodes": r.geometry.n_nodes, "facets": r.geometry.n_facets,
    "nonzeros": int(vf.raw_matrix.nnz),
    "elapsed": r.elapsed_s,
    "peak_gb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024 ** 2}))
"""


# node-carrying area: box 6 m2 + two panels of 0.5 m2 with two sides each; facet area:
# box 6 m2 + panels 1 m2 (a facet of a panel carries a front and a back node)
_SIDE_AREA, _FACET_AREA = 6.0 + 2.0 * 0.5 * 2.0, 6.0 + 2.0 * 0.5


def mesh_for(nodes: int, facets_per_node: int) -> tuple:
    """(max_edge, node setting) giving about ``nodes`` nodes of ``facets_per_node`` facets:
    the shapes are refined to about 4 / h^2 facets per m2 (measured with this script)."""
    if facets_per_node <= 1:
        return math.sqrt(4.0 * _SIDE_AREA / nodes), 'nodes = "per-facet"'
    patch = math.sqrt(_SIDE_AREA / nodes)
    facets = facets_per_node * nodes * _FACET_AREA / _SIDE_AREA
    return (math.sqrt(4.0 * _FACET_AREA / facets),
            f'nodes = "per-patch", patch_size = {patch:.6g}')


def one(nodes: int, rays: int, facets_per_node: int, folder: Path) -> dict:
    model = folder / f"scale{nodes}.toml"
    edge, setting = mesh_for(nodes, facets_per_node)
    model.write_text(MODEL.format(rays=rays, edge=edge, nodes=setting))
    out = folder / f"scale{nodes}.h5"
    done = subprocess.run([sys.executable, "-c", CHILD, str(model), str(out)],
                          capture_output=True, text=True, cwd=ROOT)
    if done.returncode != 0:
        return {"requested": nodes, "failed": (done.stderr.strip().splitlines() or ["?"])[-1]}
    row = json.loads(done.stdout.strip().splitlines()[-1])
    row["requested"] = nodes
    row["file_mb"] = out.stat().st_size / 1e6
    out.unlink()
    return row


def exponent(a, b, na, nb) -> float:
    return math.log(b / a) / math.log(nb / na) if a > 0 and b > 0 and nb != na else math.nan


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="1000,5000,20000",
                    help="node counts, comma-separated (default 1000,5000,20000)")
    ap.add_argument("--rays", type=int, default=2000, help="rays per node (default 2000)")
    ap.add_argument("--facets-per-node", type=int, default=5,
                    help="facets per node (default 5; 1: one node per facet)")
    args = ap.parse_args()
    sizes = [int(s) for s in args.sizes.split(",")]
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in sizes:
            row = one(n, args.rays, args.facets_per_node, Path(tmp))
            rows.append(row)
            if "failed" in row:
                print(f"{n:>7} nodes: failed: {row['failed']}")
                continue
            el = row["elapsed"]
            stages = ", ".join(f"{k} {v:.1f}" for k, v in el.items() if k != "total")
            print(f"{row['nodes']:>7} nodes {row['facets']:>7} facets {row['nonzeros']:>10} "
                  f"non-zeros | total {el['total']:6.1f} s ({stages}) | peak "
                  f"{row['peak_gb']:5.2f} GB | file {row['file_mb']:8.1f} MB", flush=True)
    ok = [r for r in rows if "failed" not in r]
    for a, b in zip(ok, ok[1:]):
        na, nb = a["nodes"], b["nodes"]
        print(f"growth {na} -> {nb} nodes (exponent in n): non-zeros "
              f"{exponent(a['nonzeros'], b['nonzeros'], na, nb):.2f}, peak memory "
              f"{exponent(a['peak_gb'], b['peak_gb'], na, nb):.2f}, file "
              f"{exponent(a['file_mb'], b['file_mb'], na, nb):.2f}, time "
              f"{exponent(a['elapsed']['total'], b['elapsed']['total'], na, nb):.2f}")
    if not ok:
        print("scale: no size ran")
        return
    last = ok[-1]
    print(f"scale: {last['nodes']} nodes, peak {last['peak_gb']:.1f} GB, file "
          f"{last['file_mb']:.0f} MB, {last['elapsed']['total']:.0f} s")


if __name__ == "__main__":
    main()
