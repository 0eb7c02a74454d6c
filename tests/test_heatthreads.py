"""Tests of vfactor.heatthreads: the steps of a heating job on threads give the rows of
running them one at a time, bit for bit (design requirement, ARCHITECTURE section 3:
same bits whatever runs the work), and a failing step fails the job."""

import numba
import numpy as np
import pytest

from heating_helpers import EARTH_R, make_geometry, make_trajectory, rectangle
from vfactor import heatthreads
from vfactor.environment import Environment
from vfactor.geometry import Coating
from vfactor.heating import HeatingSteps
from vfactor.tracing.scene import Scene

ENV = Environment("custom", 1361.0, 0.3, 237.0)


def _box_with_mirror():
    """An open box with a specular lid above it (mirror chains in both bands, partly
    shadowed sides): every per-step path of a rigid step."""
    coats = {"white": Coating("white", 0.2, 0.85, solar_specular=0.3, ir_specular=0.1),
             "foil": Coating("foil", 0.15, 0.05, solar_specular=0.9, ir_specular=0.9)}
    parts = [
        dict(mesh=rectangle((0, 0, -0.5), (1, 0, 0), (0, 1, 0), 1, 1), front=("white", "floor"),
             back=("white", "floor.out")),
        dict(mesh=rectangle((-0.5, 0, 0), (0, 1, 0), (0, 0, 1), 1, 1), front=("foil", "wall"),
             back=None),
        dict(mesh=rectangle((0.3, 0.2, 0.9), (1, 0, 0), (0, 1, 0), 0.8, 0.8),
             front=("foil", "lid.top"), back=("white", "lid.bottom")),
    ]
    return make_geometry(parts, coats)


def _task(geometry, use_cache, steps=7):
    rng = np.random.default_rng(3)
    sun = rng.normal(size=(steps, 3))
    sun[:, 2] = np.abs(sun[:, 2]) + 0.2
    nadir = rng.normal(size=(steps, 3))
    trajectory = make_trajectory(sun, nadir, EARTH_R + 500e3)
    scene = Scene.build(geometry.vertices, geometry.triangles)
    task = HeatingSteps.of(geometry, scene, trajectory, ENV, rays_per_facet=64, sun_samples=16,
                           seed=4, use_cache=use_cache)
    return task, scene


def _threaded(use_cache):
    """(task, scene, prepared state) of the box with a mirror; skipped with one numba
    thread (the steps then always run one after another)."""
    if numba.get_num_threads() < 2:
        pytest.skip("one numba thread: the steps always run one after another")
    geometry = _box_with_mirror()
    task, scene = _task(geometry, use_cache)
    return task, scene, task.prepare(geometry, scene)


class _Bar:
    def __init__(self):
        self.count = 0

    def advance(self, n):
        self.count += n


@pytest.mark.parametrize("use_cache", [True, False])
def test_threads_give_the_rows_of_one_step_at_a_time(use_cache, monkeypatch):
    # the kernels' sums follow side or chunk order, never the thread (module notes): the
    # rows of the threaded job equal those of the steps run one after another, to the bit
    task, scene, state = _threaded(use_cache)
    geometry = _box_with_mirror()
    threads = numba.get_num_threads()
    bar = _Bar()
    threaded = task.run(state, np.arange(task.n_steps), bar)
    assert bar.count == task.n_steps
    assert heatthreads.step_threads(task.n_steps) == threads
    monkeypatch.setattr(heatthreads, "step_threads", lambda count: 1)
    alone = task.run(task.prepare(geometry, scene), np.arange(task.n_steps))
    # a job of steps out of order (as a runner may hand them) fills rows in job order
    job = np.array([5, 0, 3])
    monkeypatch.undo()
    part = task.run(state, job)
    for name, rows in alone.items():
        np.testing.assert_array_equal(threaded[name], rows, err_msg=name)
        np.testing.assert_array_equal(part[name], rows[job], err_msg=name)
    assert np.any(alone["node_albedo"] != 0.0) and np.any(alone["node_planet_ir"] != 0.0)


def test_a_failing_step_fails_the_job(monkeypatch):
    task, _, state = _threaded(True)
    real = heatthreads.one_step

    def one_step(model, bands, step, use_cache, p, out):
        if p == 2:
            raise RuntimeError("step 2 failed")
        real(model, bands, step, use_cache, p, out)

    monkeypatch.setattr(heatthreads, "one_step", one_step)
    with pytest.raises(RuntimeError, match="step 2 failed"):
        task.run(state, np.arange(task.n_steps))


def test_worker_threads_run_numba_kernels_on_one_thread(monkeypatch):
    # numba.set_num_threads is per thread: the workers use one numba thread each, the
    # calling thread keeps its own count
    task, _, state = _threaded(True)
    threads = numba.get_num_threads()
    seen = []
    real = heatthreads.one_step

    def one_step(*args):
        seen.append(numba.get_num_threads())
        real(*args)

    monkeypatch.setattr(heatthreads, "one_step", one_step)
    task.run(state, np.arange(task.n_steps))
    assert seen == [1] * task.n_steps
    assert numba.get_num_threads() == threads
