"""Every ray-tracing stage on a dask cluster of real worker processes.

Determinism is a contract (ARCHITECTURE section 3): the view-factor rounds, the traced
Gebhart rounds and the heating steps are independent jobs whose results are combined in
job order, so the results file has the same bits whether the jobs ran in this process or
were pickled and shipped to 1, 2 or 3 worker processes, and whether the run was killed
(SIGKILL, no chance to clean up) in any stage and resumed from its checkpoint with another
number of workers.

The model is an open box with a specular wall coating (so the infrared Gebhart factors are
traced, not solved) and a short orbit (so the heating stage runs); invented test case.
"""

from __future__ import annotations

import signal
import subprocess
import sys
import textwrap

import h5py
import numpy as np
import pytest

from test_pipeline import BOX, ORBIT
from vfactor import pipeline
from vfactor.checkpoint import checkpoint_path

distributed = pytest.importorskip("distributed")

SHINY = """
[coatings.shiny]
solar_absorptivity = 0.3
ir_emissivity = 0.6
ir_specular = 0.5
"""

# test_pipeline's open box and orbit; the walls' outside specular, fewer rays
MODEL = SHINY + (BOX.replace('front = { coating = "w", nodes = "per-face" }',
                             'front = { coating = "shiny", nodes = "per-face" }')
                 .replace("rays_per_node = 4000\nseed = 11",
                          "rays_per_node = 1600\nseed = 5\nsun_rays_per_facet = 4\n"
                          "planet_rays_per_facet = 64")) + ORBIT

def _contents(path) -> dict:
    """Every dataset of a results file by path (root attributes are provenance)."""
    out = {}
    with h5py.File(path, "r") as h:
        h.visititems(lambda name, obj: out.__setitem__(name, obj[()])
                     if isinstance(obj, h5py.Dataset) else None)
    return out


def _assert_same_bits(a, b):
    assert a.keys() == b.keys()
    for name in a:
        x, y = np.asarray(a[name]), np.asarray(b[name])
        assert x.dtype == y.dtype and x.shape == y.shape, name
        if x.dtype == object:  # strings: compare the values, not the pointers
            assert x.tolist() == y.tolist(), name
        else:
            assert x.tobytes() == y.tobytes(), name


@pytest.fixture(scope="module")
def model(tmp_path_factory):
    from conftest import COATING_W

    path = tmp_path_factory.mktemp("distributed") / "shiny_box.toml"
    path.write_text(COATING_W + MODEL)
    assert MODEL.count("shiny") == 2 and "rays_per_node = 1600" in MODEL
    return path


@pytest.fixture(scope="module")
def in_process(model, tmp_path_factory):
    res = pipeline.run(model, tmp_path_factory.mktemp("one") / "one.h5")
    assert res.exchange is not None and res.heating is not None
    return _contents(res.output)


def _cluster(n_workers):
    return distributed.LocalCluster(n_workers=n_workers, threads_per_worker=1,
                                    processes=True, dashboard_address=":0")


@pytest.mark.parametrize("n_workers", [1, 2, 3])
def test_worker_processes_give_the_same_bits(model, in_process, tmp_path, n_workers):
    with _cluster(n_workers) as cluster:
        res = pipeline.run(model, tmp_path / "dask.h5", scheduler=cluster.scheduler_address)
    _assert_same_bits(in_process, _contents(res.output))


# A child ``vfactor run --resume --scheduler`` that saves its checkpoint after every job
# and kills itself with SIGKILL at the first save made in the middle of the chosen stage.
_KILLED_CHILD = textwrap.dedent("""
    import os, signal, sys
    from vfactor import checkpoint, cli

    stage, n_steps = sys.argv[1], int(sys.argv[2])
    checkpoint.CHECKPOINT_EVERY_S = 0.0
    checkpoint._SAVE_SHARE = 1.0
    real_save = checkpoint.Checkpoint.save

    def in_stage(counts):
        if stage == "view":
            return counts.get("view", 0) > 0 and "gebhart_ir" not in counts
        if stage == "gebhart":
            return counts.get("gebhart_ir", 0) > 0 and "heating" not in counts
        return 0 < counts.get("heating", 0) < n_steps

    def save_then_die(self):
        real_save(self)
        if in_stage(self.counts()):
            os.kill(os.getpid(), signal.SIGKILL)

    checkpoint.Checkpoint.save = save_then_die
    sys.exit(cli.main(["run", sys.argv[3], "-o", sys.argv[4], "--resume",
                       "--scheduler", sys.argv[5]]))
""")


@pytest.mark.parametrize("stage, first, second, section",
                         [("view", 2, 3, "view factors"), ("gebhart", 3, 1, "Gebhart factors"),
                          ("heating", 1, 2, "heating steps")])
def test_sigkill_in_each_stage_resumes_to_the_same_bits(model, in_process, tmp_path,
                                                        stage, first, second, section):
    out = tmp_path / "resumed.h5"
    with _cluster(first) as cluster:
        child = subprocess.run([sys.executable, "-c", _KILLED_CHILD, stage, "6", str(model),
                                str(out), cluster.scheduler_address],
                               capture_output=True, text=True, timeout=300)
    assert child.returncode == -signal.SIGKILL, child.stderr[-2000:]
    assert checkpoint_path(out).is_file() and not out.exists()
    with _cluster(second) as cluster:
        res = pipeline.run(model, out, resume=True, scheduler=cluster.scheduler_address)
    assert res.resumed_by_stage.get(section, 0) > 0, res.resumed_by_stage
    assert not checkpoint_path(out).exists()
    _assert_same_bits(in_process, _contents(out))
