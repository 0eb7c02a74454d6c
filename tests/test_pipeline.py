"""Pipeline: the file it writes, and bit-identical results for any workers / resume point.

Determinism is a contract (ARCHITECTURE section 3): view factors are sums of integer
tallies of independent (node, round) units, so the same seed must give the same bits in
one process, in two processes, over a dask cluster and after an interrupted run resumed
from its checkpoint.
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from vfactor import pipeline, radiation
from vfactor.atomic import OutputError
from vfactor.checkpoint import Checkpoint
from vfactor.errors import ArgumentError, VfactorError

# An open box of four walls (per-face nodes) over a floor plate: six nodes that see each
# other and space. Invented test geometry; diffuse coatings (matrix Gebhart route).
BOX = """
[model]
name = "open box (invented test case)"

[[parts]]
name = "walls"
shape = "cylinder"
radius = 0.5
length = 0.6
segments = 4
caps = false
front = { coating = "w", nodes = "per-face" }
back = { coating = "w", node = "inside" }

[[parts]]
name = "floor"
shape = "rectangle"
size = [0.6, 0.6]
center = [0.0, 0.0, -0.3]
front = { coating = "w", node = "floor" }

[radiation]
rays_per_node = 4000
seed = 11
"""

ORBIT = """
[orbit]
type = "circular"
altitude_km = 600.0
inclination_deg = 51.6
raan_deg = 0.0
epoch = "2027-06-21T00:00:00Z"
orbits = 1
steps_per_orbit = 6
"""

VF_DATASETS = ("view_factors/matrix", "view_factors/space", "view_factors/stderr",
               "view_factors/raw_matrix", "view_factors/rays", "exchange/gebhart",
               "exchange/area")


def _datasets(path, names=VF_DATASETS):
    from vfactor.h5read import read_coupling_matrix

    with h5py.File(path, "r") as h:
        return {k: read_coupling_matrix(h[k]).toarray() if isinstance(h[k], h5py.Group)
                else h[k][()] for k in names}


def _same_bits(a, b):
    for k in a:
        assert a[k].dtype == b[k].dtype and a[k].shape == b[k].shape, k
        assert a[k].tobytes() == b[k].tobytes(), k


@pytest.fixture
def box(write_model):
    return write_model(BOX, name="box.toml")


@pytest.fixture
def box_converging(write_model):
    # a target error that the first rounds miss: the convergence rounds are exercised too
    return write_model(BOX.replace("seed = 11", "seed = 11\ntarget_error = 0.04\n"
                                   "max_rays_per_node = 16000"), name="box_target.toml")


def test_run_writes_couplings(box, tmp_path):
    res = pipeline.run(box, tmp_path / "out.h5")
    assert res.output.is_file() and res.heating is None
    assert res.seed == 11 and res.rays_per_node == 4000
    with h5py.File(res.output, "r") as h:
        assert h.attrs["seed"] == 11 and h.attrs["rays_per_node"] == 4000
        assert h.attrs["model_sha256"] == res.model.sha256
        assert "heating" not in h and "orbit" not in h
        n = h["nodes/name"].shape[0]
        # every raw row of view factors closes: nodes + space + inert = 1 (counts sum up)
        rows = _datasets(res.output, ["view_factors/raw_matrix"])["view_factors/raw_matrix"
                                                                  ].sum(axis=1) \
            + h["view_factors/raw_space"][()] \
            + h["view_factors/raw_inert"][()]
        np.testing.assert_allclose(rows, np.ones(n), rtol=0, atol=1e-12)  # rounding only
    assert "couplings only" in res.describe()


def test_rays_and_seed_override(box, tmp_path):
    res = pipeline.run(box, tmp_path / "o.h5", rays=800, seed=4)
    assert res.rays_per_node == 800 and res.seed == 4
    assert np.all(res.view_factors.rays == 800)  # 8 rounds of 100 rays


def test_two_workers_bit_identical(box_converging, tmp_path):
    one = pipeline.run(box_converging, tmp_path / "one.h5")
    two = pipeline.run(box_converging, tmp_path / "two.h5", workers=2)
    assert two.workers == 2
    # the convergence rounds ran (some rows got more than the 8 first rounds)
    assert one.view_factors.rays.max() > 4000
    _same_bits(_datasets(one.output), _datasets(two.output))


def test_resume_after_interruption_bit_identical(box_converging, tmp_path, monkeypatch):
    fresh = pipeline.run(box_converging, tmp_path / "fresh.h5")
    out = tmp_path / "resumed.h5"
    real = radiation.trace_pairs
    calls = {"n": 0}

    def flaky(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 4:
            raise KeyboardInterrupt  # as if the user pressed Ctrl-C mid-way
        return real(*args, **kwargs)

    monkeypatch.setattr(radiation, "trace_pairs", flaky)
    with pytest.raises(KeyboardInterrupt):
        pipeline.run(box_converging, out, resume=True)
    ckpt = pipeline.checkpoint_path(out)
    assert ckpt.is_file() and not out.exists()
    # a checkpoint of the same model but another seed is refused, in one line
    with pytest.raises(VfactorError, match="another computation") as err:
        pipeline.run(box_converging, out, resume=True, seed=12)
    assert "\n" not in str(err.value)
    monkeypatch.setattr(radiation, "trace_pairs", real)
    resumed = pipeline.run(box_converging, out, resume=True)
    assert resumed.resumed_jobs > 0
    assert not ckpt.exists()  # removed once the results file is complete
    _same_bits(_datasets(fresh.output), _datasets(resumed.output))


def test_dask_local_cluster_bit_identical(box, tmp_path):
    distributed = pytest.importorskip("distributed")
    one = pipeline.run(box, tmp_path / "one.h5")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False,
                                  dashboard_address=":0") as cluster:
        dask = pipeline.run(box, tmp_path / "dask.h5", scheduler=cluster.scheduler_address)
    assert dask.workers == 0
    _same_bits(_datasets(one.output), _datasets(dask.output))


def test_bad_arguments(box, tmp_path):
    with pytest.raises(ArgumentError, match="workers"):
        pipeline.run(box, tmp_path / "o.h5", workers=0)
    with pytest.raises(ArgumentError, match="not both"):
        pipeline.run(box, tmp_path / "o.h5", workers=2, scheduler="tcp://127.0.0.1:1")
    with pytest.raises(ArgumentError, match="is a folder"):
        pipeline.run(box, tmp_path)
    with pytest.raises(ArgumentError, match="rays"):
        pipeline.run(box, tmp_path / "o.h5", rays=0)


def test_run_with_orbit_writes_heating(write_model, tmp_path):
    model = write_model(BOX.replace("rays_per_node = 4000", "rays_per_node = 800") + ORBIT,
                        name="orbit.toml")
    res = pipeline.run(model, tmp_path / "orbit.h5")
    assert res.trajectory is not None and res.heating is not None
    with h5py.File(res.output, "r") as h:
        assert h["orbit/time"].shape == (6,)
        n = h["nodes/name"].shape[0]
        f = h["facets/triangles"].shape[0]
        assert h["heating/solar"].shape == (6, n)
        assert h["heating/facet/planet_ir"].shape == (6, f)
        # node power is what the heating stage computed, stored unchanged
        np.testing.assert_array_equal(h["heating/planet_ir"][()], res.heating.node_planet_ir)


def test_scheduler_without_dask_is_one_line(box, tmp_path, monkeypatch):
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)  # as if not installed
    with pytest.raises(ArgumentError, match=r"pip install 'vfactor\[dask\]'") as err:
        pipeline.run(box, tmp_path / "o.h5", scheduler="tcp://127.0.0.1:8786")
    assert "\n" not in str(err.value)
    assert not (tmp_path / "o.h5").exists()


def test_smoothing_false_keeps_raw_tallies(write_model, tmp_path):
    # `[radiation] smoothing = false`: the stored factors are the raw tallies themselves
    # (same rays, same seed), and reciprocity is then only as good as the statistics.
    raw = pipeline.run(write_model(BOX.replace("seed = 11", "seed = 11\nsmoothing = false"),
                                   name="raw.toml"), tmp_path / "raw.h5")
    smoothed = pipeline.run(write_model(BOX, name="sm.toml"), tmp_path / "sm.h5")
    vr, vs = raw.view_factors, smoothed.view_factors
    assert vr.method == radiation.NO_SMOOTHING and vr.adjustment_sigma == 0.0
    assert vr.matrix.toarray().tobytes() == vr.raw_matrix.toarray().tobytes()
    assert vr.raw_matrix.toarray().tobytes() == vs.raw_matrix.toarray().tobytes()
    assert not np.array_equal(vs.matrix.toarray(), vs.raw_matrix.toarray())  # smoothing moved


def test_run_refuses_a_model_that_check_rejects(write_model, tmp_path):
    # Two boxes that interpenetrate: the first hit of a ray is meaningless there, so the run
    # stops with the checker's line (exit 2 on the command line) and writes nothing.
    text = """
[[parts]]
name = "a"
shape = "box"
size = [1, 1, 1]
front = { coating = "w", node = "a" }

[[parts]]
name = "b"
shape = "box"
size = [1, 1, 1]
center = [0.5, 0.3, 0.2]
front = { coating = "w", node = "b" }
"""
    out = tmp_path / "x.h5"
    with pytest.raises(VfactorError, match="intersect"):
        pipeline.run(write_model(text, name="clash.toml"), out)
    assert not out.exists()


def test_results_file_named_like_an_input_is_refused(box, write_model, tmp_path):
    # `vfactor run sat.toml -o sat.toml` used to replace the model file by the results;
    # the same for a mesh file the model reads. Refused in one line, inputs untouched.
    text = box.read_bytes()
    with pytest.raises(OutputError, match="box.toml.*input"):
        pipeline.run(box, box)
    assert box.read_bytes() == text
    (tmp_path / "tri.obj").write_text("v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n")
    mesh_model = write_model("""
[[parts]]
name = "tri"
shape = "mesh"
file = "tri.obj"
front = { coating = "w" }

[radiation]
rays_per_node = 800
""", name="mesh.toml")
    before = (tmp_path / "tri.obj").read_bytes()
    with pytest.raises(OutputError, match="tri.obj.*input"):
        pipeline.run(mesh_model, tmp_path / "tri.obj")
    assert (tmp_path / "tri.obj").read_bytes() == before


def test_large_share_to_inert_sides_is_noted(write_model, tmp_path):
    # A plate 1 cm in front of an inert-backed panel: nearly all its emission ends on the
    # inert side (parallel plates, F ~ 1 for a gap much smaller than the size; Incropera &
    # DeWitt, Table 13.2), and the run says so.
    text = """
[[parts]]
name = "face"
shape = "rectangle"
size = [0.5, 0.5]
front = { coating = "w", node = "face" }

[[parts]]
name = "panel"
shape = "rectangle"
size = [0.5, 0.5]
center = [0.0, 0.0, 0.01]
front = { coating = "w", node = "panel" }

[radiation]
rays_per_node = 4000
"""
    res = pipeline.run(write_model(text, name="inert.toml"), tmp_path / "i.h5")
    assert res.view_factors.raw_inert[0] > 0.9
    assert any("'face'" in n and "inert" in n for n in res.notes)
    assert not any("'panel'" in n for n in res.notes)


@pytest.mark.parametrize("cut", ["empty", "half", "foreign"])
def test_damaged_checkpoint_is_one_line(box, tmp_path, cut):
    # a checkpoint cut short by a full disk or a copy, or another file under its name:
    # `--resume` stops in one line (np.load raised BadZipFile / EOFError here) and leaves it
    out = tmp_path / "o.h5"
    ckpt = pipeline.checkpoint_path(out)
    real = Checkpoint(ckpt, model_sha256="x", seed=1, n_nodes=2)
    real.pairs("view", rays_per_round=10).add([0, 1], [0, 1], np.arange(8).reshape(2, 4))
    real.save()
    data = ckpt.read_bytes()
    ckpt.write_bytes({"empty": b"", "half": data[: len(data) // 2],
                      "foreign": b"PK\x03\x04" + data[4:100]}[cut])
    before = ckpt.read_bytes()
    with pytest.raises(VfactorError, match="unreadable checkpoint") as err:
        pipeline.run(box, out, resume=True)
    assert "\n" not in str(err.value) and str(err.value).startswith(str(ckpt))
    assert ckpt.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["box.toml", "o.h5.partial"]
