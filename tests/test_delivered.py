"""Tests of vfactor.delivered: the one-sigma error of the delivered (smoothed) view factors,
and the target error applied to it (vfactor.roundplan).

References used below (each check names its own):
- [I&D] Incropera, DeWitt, Bergman, Lavine, "Fundamentals of Heat and Mass Transfer",
  6th ed. (2007), Table 13.2: aligned parallel rectangles, perpendicular rectangles with
  a common edge (closed forms in tests/test_radiation.py).
- [chi2] chi-square quantiles from scipy.stats.chi2.ppf: if the reported errors are honest,
  the mean square deviation of k independent estimates from the truth over the mean
  reported variance is about chi2(k) / k (the test of the existing
  tests/test_radiation.py::test_reported_error_is_not_optimistic_across_seeds, with the
  truth known instead of the sample mean).
- [Cochran] W. G. Cochran, "Sampling techniques", 3rd ed. (1977), sec. 5A.6: the
  inverse-variance weighted mean of independent estimates has variance 1 / sum(1 / var),
  never above the smallest input variance.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import chi2

from radiation_shapes import flipped, make_geometry, rectangle
from test_radiation import f_parallel_rectangles, f_perpendicular_rectangles
from vfactor import radiation
from vfactor.delivered import delivered_stderr, pair_precision
from vfactor.sparsetools import dense
from vfactor.tracing.scene import Scene


def _chi2_band(k):
    """0.1 % and 99.9 % points of chi2(k) / k ([chi2])."""
    return chi2.ppf(0.001, k) / k, chi2.ppf(0.999, k) / k


def _squares():
    # [I&D] Table 13.2: unit squares one unit apart, F = 0.199825
    return make_geometry([
        dict(mesh=rectangle([0, 0, 0], [1, 0, 0], [0, 1, 0], 4, 4), front=("lower", "black")),
        dict(mesh=flipped(rectangle([0, 0, 1], [1, 0, 0], [0, 1, 0], 4, 4)),
             front=("upper", "black")),
    ]), f_parallel_rectangles(1, 1, 1)


def _perpendicular():
    # [I&D] Table 13.2, perpendicular rectangles with a common edge X = 1.0: floor Y = 0.7,
    # wall Z = 0.4; F(floor -> wall) from the closed form, F(wall -> floor) by reciprocity
    X, Y, Z = 1.0, 0.7, 0.4
    g = make_geometry([
        dict(mesh=rectangle([0, 0, 0], [X, 0, 0], [0, Y, 0], 3, 3), front=("floor", "black")),
        dict(mesh=rectangle([0, 0, 0], [0, 0, Z], [X, 0, 0], 2, 3), front=("wall", "black")),
    ])
    return g, f_perpendicular_rectangles(X, Y, Z)


def test_delivered_error_is_the_inverse_variance_combination_and_never_above_raw():
    g, _ = _perpendicular()
    vf = radiation.compute_view_factors(g, Scene.build(g.vertices, g.triangles),
                                        rays_per_node=40_000, seed=5)
    A = np.asarray(g.nodes.area)
    e01, e10 = vf.stderr[0, 1], vf.stderr[1, 0]
    # [Cochran] sec. 5A.6: var(g) = 1 / (1 / (A0 e01)^2 + 1 / (A1 e10)^2), g = A0 F01,
    # times Meier's (1953, Biometrics 9, 59-73; from memory) first-order factor for
    # estimated weights, 1 + 4 h (1 - h) (1 / nu_0 + 1 / nu_1), nu = 8 rounds - 1
    a, b = 1.0 / (A[0] * e01) ** 2, 1.0 / (A[1] * e10) ** 2
    h = a / (a + b)
    var_g = (1.0 + 4.0 * h * (1.0 - h) * (2.0 / 7.0)) / (a + b)
    assert np.all(vf.rays == 40_000) and var_g < min(1 / a, 1 / b)
    np.testing.assert_allclose(vf.smoothed_stderr[0, 1], np.sqrt(var_g) / A[0], rtol=1e-12)
    np.testing.assert_allclose(vf.smoothed_stderr[1, 0], np.sqrt(var_g) / A[1], rtol=1e-12)
    # [Cochran]: never above either raw error, elementwise on the raw pattern
    raw_err, sm_err = dense(vf.stderr), dense(vf.smoothed_stderr)
    hit = dense(vf.raw_matrix) > 0
    assert np.all(sm_err[hit] <= raw_err[hit])
    assert sm_err[0, 1] < raw_err[0, 1] and sm_err[1, 0] < raw_err[1, 0]
    # the summary's figure: largest delivered relative error over entries >= 1 %, sparse or
    # dense records alike (the quotient of the two fields above, by hand)
    val = np.r_[dense(vf.matrix).ravel(), vf.space]
    err = np.r_[sm_err.ravel(), vf.smoothed_stderr_space]
    big = val >= 0.01
    expect = float(np.max(err[big] / val[big]))
    assert vf.largest_delivered_relative_error(0.01) == pytest.approx(expect, rel=1e-12)
    import dataclasses

    as_dense = dataclasses.replace(vf, matrix=dense(vf.matrix), smoothed_stderr=sm_err)
    assert as_dense.largest_delivered_relative_error(0.01) == pytest.approx(expect, rel=1e-12)
    # space has no reciprocal: its raw error is the delivered one (common practice)
    np.testing.assert_array_equal(vf.smoothed_stderr_space, vf.stderr_space)
    # smoothing off: the raw values are delivered, and so are their errors
    off = radiation.compute_view_factors(g, Scene.build(g.vertices, g.triangles),
                                         rays_per_node=40_000, seed=5, smooth=False)
    np.testing.assert_array_equal(dense(off.smoothed_stderr), dense(off.stderr))
    np.testing.assert_array_equal(off.smoothed_stderr_space, off.stderr_space)
    np.testing.assert_array_equal(dense(off.stderr), raw_err)


def test_pair_precision_of_a_direction_never_hit_and_of_an_exact_one():
    # Hand-built rows, checked against [Cochran] sec. 5A.6 (an estimate with no
    # information has weight 0; one with zero variance is exact and takes all the weight)
    import scipy.sparse as sp

    mean = sp.csr_array(np.array([[0.0, 0.5, 0.0, 0.5, 0.0],
                                  [0.0, 0.0, 1.0, 0.0, 0.0],
                                  [0.0, 0.0, 0.0, 1.0, 0.0]]))
    err = sp.csr_array((np.array([0.01, 0.01, 0.0, 0.0]), mean.indices, mean.indptr),
                       shape=mean.shape)
    area = np.array([1.0, 2.0, 4.0])
    pp = pair_precision(mean, err, area)
    assert pp.iu.tolist() == [0, 1] and pp.ju.tolist() == [1, 2]
    # pair (0, 1): F10 never hit -> the raw estimate of row 0 alone
    np.testing.assert_allclose([pp.g[0], pp.var_g[0]], [0.5, 0.01 ** 2])
    # pair (1, 2): F12 = 1 in every round (zero variance, exact); F21 never hit
    assert pp.var_g[1] == 0.0 and pp.g[1] == 2.0
    d = dense(delivered_stderr(mean, err, area))
    np.testing.assert_allclose(d[1, 0], 0.01 * 1.0 / 2.0)     # sqrt(var_g) / A_1
    assert d[0, 1] == pytest.approx(0.01)


@pytest.mark.parametrize("shape", [_squares, _perpendicular])
def test_delivered_error_is_honest_across_seeds(shape):
    # 64 seeds at fixed rays (8 rounds a row): the smoothed pair value about the [I&D]
    # Table 13.2 closed form against the reported smoothed error; one estimate per seed
    # (F01 and F10 smoothed are one value g / A); mean square deviation over mean reported
    # variance inside the [chi2] 0.1 %..99.9 % band of chi2(64)/64. Our measurements: 0.90
    # (squares), 1.41 (perpendicular plates; 1.11
    # over 160 other seeds, where the raw entries gave 1.07 and 1.02); without the
    # inflation for estimated weights of vfactor.delivered.pair_precision the reported
    # variance is ~20 % lower.
    g, F = shape()
    sc = Scene.build(g.vertices, g.triangles)
    dev, var = [], []
    for seed in range(64):
        vf = radiation.compute_view_factors(g, sc, rays_per_node=16_000, seed=300 + seed)
        dev.append(vf.matrix[0, 1] - F)
        var.append(vf.smoothed_stderr[0, 1] ** 2)
        assert vf.smoothed_stderr[0, 1] < vf.stderr[0, 1]
    lo, hi = _chi2_band(64)
    ratio = float(np.mean(np.square(dev)) / np.mean(var))
    assert lo <= ratio <= hi, ratio


@pytest.mark.parametrize("shape", [_squares, _perpendicular])
def test_target_error_applies_to_the_delivered_values_and_is_met_in_the_scatter(shape):
    # 40 seeds with target 0.3 % and smoothing on (the default): every run stops with its
    # delivered error at the target; the scatter of the delivered value about the [I&D]
    # Table 13.2 closed form agrees with the reported error (mean square deviation over
    # mean reported variance in the [chi2] band of chi2(40)/40; stopping on an estimate
    # can favour low ones, which this would catch), and its rms relative error meets the
    # target within the same band. Our measurements: ratio 1.10 (squares) and 1.11
    # (perpendicular plates), rms relative error 0.293 % and 0.302 %, rays per run 172 k
    # and 242 k against 391 k and 459 k under the raw criterion.
    target = 0.003
    g, F = shape()
    sc = Scene.build(g.vertices, g.triangles)
    dev, var, rel, raw_rays = [], [], [], 0
    rays = 0
    for seed in range(40):
        vf = radiation.compute_view_factors(g, sc, rays_per_node=8000, seed=100 + seed,
                                            target_error=target, max_rays_per_node=10 ** 8)
        assert vf.converged
        assert vf.smoothed_stderr[0, 1] <= target * vf.matrix[0, 1] * (1 + 1e-9)
        dev.append(vf.matrix[0, 1] - F)
        var.append(vf.smoothed_stderr[0, 1] ** 2)
        rel.append((vf.matrix[0, 1] - F) / F)
        rays += int(vf.rays.sum())
        if seed < 8:
            raw_rays += int(radiation.compute_view_factors(
                g, sc, rays_per_node=8000, seed=100 + seed, target_error=target,
                max_rays_per_node=10 ** 8, smooth=False).rays.sum())
    lo, hi = _chi2_band(40)
    ratio = float(np.mean(np.square(dev)) / np.mean(var))
    assert lo <= ratio <= hi, ratio
    assert float(np.sqrt(np.mean(np.square(rel)))) <= target * np.sqrt(hi)
    # why: the two rows of a pair share the target, so fewer rays than the raw criterion
    # (which asks each raw entry to reach it alone) on the same seeds
    assert rays / 40 < raw_rays / 8
