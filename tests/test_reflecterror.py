"""The view factors' error in the loads absorbed after diffuse reflection
(vfactor.reflecterror), checked against finite differences and sampling of the Gebhart
solve itself (vfactor.gebhart.gebhart_matrix, Gebhart 1961), and end to end against the
scatter over seeds about a reference view factor (pyviewfactor 1.1, semi-analytic contour
integral, as in tests/test_heating.py).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from vfactor.gebhart import gebhart_matrix
from vfactor.reflecterror import band_errors, coupling_variance, transposed_variance


def _enclosure(n, seed):
    """A random enclosure of n nodes: rows of F plus space sum to one, eps in (0.2, 0.9)."""
    rng = np.random.default_rng(seed)
    F = rng.random((n, n)) * (rng.random((n, n)) < 0.7)
    np.fill_diagonal(F, 0.0)
    F *= 0.8 / F.sum(axis=1, keepdims=True)
    space = 1.0 - F.sum(axis=1)
    eps = rng.uniform(0.2, 0.9, n)
    return F, space, eps


def _absorbed(F, space, eps, pool):
    g = gebhart_matrix(F, space, np.zeros(len(eps)), eps, drop_tolerance=0.0)
    return np.asarray(g.gebhart.T @ pool).ravel(), g


def test_first_order_variance_matches_sampling_the_gebhart_solve():
    # Independent normal errors of the view factors (variance S): the sample variance of
    # B(F + dF)^T pool over 4000 draws agrees with the first-order formula (relative
    # sampling error of a variance over 4000 draws: sqrt(2 / 4000) = 2.2 %; 5 % allowed,
    # plus the second-order terms at a 1 % relative perturbation).
    n = 6
    F, space, eps = _enclosure(n, 3)
    pool = np.random.default_rng(4).uniform(1.0, 10.0, n)
    base, g = _absorbed(F, space, eps, pool)
    S = (0.01 * F) ** 2
    errors = band_errors(g.gebhart, g.operator, eps, ((transposed_variance(0.01 * F), 1.0),))
    predicted = coupling_variance(errors, pool)
    rng = np.random.default_rng(5)
    draws = []
    for _ in range(4000):
        dF = rng.normal(size=(n, n)) * np.sqrt(S)
        draws.append(_absorbed(F + dF, space, eps, pool)[0])
    sampled = np.var(np.array(draws), axis=0, ddof=1)
    np.testing.assert_allclose(predicted, sampled, rtol=0.05)
    assert np.all(predicted > 0)


def test_bounds_take_the_smallest_and_no_variance_gives_zero():
    n = 5
    F, space, eps = _enclosure(n, 7)
    pool = np.ones(n)
    _, g = _absorbed(F, space, eps, pool)
    err = 0.02 * F
    one = coupling_variance(band_errors(g.gebhart, g.operator, eps,
                                        ((transposed_variance(err), 1.0),)), pool)
    both = coupling_variance(band_errors(g.gebhart, g.operator, eps,
                                         ((transposed_variance(2.0 * err), 1.0),
                                          (transposed_variance(err), 2.0))), pool)
    np.testing.assert_allclose(both, 2.0 * one, rtol=1e-12)
    assert band_errors(g.gebhart, g.operator, eps, ()) is None
    assert np.all(coupling_variance(None, pool) == 0.0)


@pytest.mark.parametrize("smooth", [False, True])
def test_load_reflected_by_a_plate_carries_the_error_of_its_view_factor(smooth):
    # A diffuse plate (solar absorptivity 0.1) lit by the Sun reflects onto a black target
    # that the Sun does not reach: the target's load is 0.9 S cos(theta) A_M F_MT, with
    # F_MT from pyviewfactor. The heating replicates all see the same view factor, so
    # before this error was added the reported error was ~0; now the load's scatter over
    # seeds about the reference agrees with it as the view factor's own does: with the raw
    # factors the two z-scores are the same per seed (the propagation is exact here), and
    # the mean z^2 stays within the bound for errors estimated from 8 rounds (Student t
    # with 7 degrees of freedom: mean 1.4; 32 seeds: standard error about 0.5). Measured:
    # 0.87 (raw) and 0.71 (smoothed: the bound of twice the independent-entry variance).
    from heating_helpers import make_trajectory
    from test_heating import FAR, S0, SUN_ONLY, _pyviewfactor_plates, _target_facing_mirror, run
    from vfactor.radiation import compute_view_factors
    from vfactor.sparsetools import dense
    from vfactor.tracing.scene import Scene

    f_mt = _pyviewfactor_plates()
    geo = _target_facing_mirror(specular=0.0)
    scene = Scene.build(geo.vertices, geo.triangles)
    sun = np.array([0.1, -0.7, 0.7])
    sun /= np.linalg.norm(sun)
    tr = make_trajectory([sun], [0, 0, -1], FAR)
    m, t = geo.nodes.index("M"), geo.nodes.index("T")
    truth = 0.9 * S0 * sun[2] * 4.0 * f_mt
    z_load, z_vf = [], []
    for s in range(32):
        vf = compute_view_factors(geo, scene, rays_per_node=20000, seed=100 + s,
                                  smooth=smooth)
        h = run(geo, tr, SUN_ONLY, rays_per_facet=64, view_factors=vf, seed=s + 1)
        sigma = h.node_solar_stderr[0, t]
        assert sigma > 0.005 * truth
        z_load.append((h.node_solar[0, t] - truth) / sigma)
        z_vf.append((dense(vf.matrix)[m, t] - f_mt) / dense(vf.smoothed_stderr)[m, t])
    z_load, z_vf = np.array(z_load), np.array(z_vf)
    if not smooth:
        np.testing.assert_allclose(z_load, z_vf, rtol=1e-6)
    assert np.mean(z_load ** 2) < 1.4 + 4 * 0.5
    assert np.mean(z_load ** 2) > 0.3
    assert math.isfinite(float(np.mean(z_load)))
