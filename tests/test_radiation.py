"""Tests of vfactor.radiation: statistics, smoothing, Gebhart factors, Monte Carlo couplings.

References used below (each check names its own):
- [I&D] Incropera, DeWitt, Bergman, Lavine, "Fundamentals of Heat and Mass Transfer",
  6th ed. (2007), Table 13.2 (view factors of three-dimensional geometries) and section
  13.3.4, eq. (13.23) (two-surface enclosure).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import minimize

from vfactor import radiation
from vfactor.radiation import (TallySums, gebhart_matrix, exchange_from_gebhart,
                               smooth_view_factors, tally_statistics)


# --------------------------------------------------------------------------------------
# Published closed forms
# --------------------------------------------------------------------------------------
def f_parallel_rectangles(a, b, distance):
    """Aligned parallel rectangles a x b at ``distance`` ([I&D] Table 13.2)."""
    X, Y = a / distance, b / distance
    return 2.0 / (np.pi * X * Y) * (
        np.log(np.sqrt((1 + X * X) * (1 + Y * Y) / (1 + X * X + Y * Y)))
        + X * np.sqrt(1 + Y * Y) * np.arctan(X / np.sqrt(1 + Y * Y))
        + Y * np.sqrt(1 + X * X) * np.arctan(Y / np.sqrt(1 + X * X))
        - X * np.arctan(X) - Y * np.arctan(Y))


def f_perpendicular_rectangles(x, y, z):
    """Perpendicular rectangles with a common edge of length x; from the y-wide one to the
    z-high one ([I&D] Table 13.2, H = Z/X, W = Y/X)."""
    H, W = z / x, y / x
    q = H * H + W * W
    t = ((1 + W * W) * (1 + H * H) / (1 + W * W + H * H)
         * (W * W * (1 + W * W + H * H) / ((1 + W * W) * q)) ** (W * W)
         * (H * H * (1 + H * H + W * W) / ((1 + H * H) * q)) ** (H * H))
    return 1.0 / (np.pi * W) * (W * np.arctan(1 / W) + H * np.arctan(1 / H)
                                - np.sqrt(q) * np.arctan(1 / np.sqrt(q)) + 0.25 * np.log(t))


def f_coaxial_disks(ri, rj, distance):
    """Coaxial parallel disks, from radius ri to radius rj ([I&D] Table 13.2)."""
    Ri, Rj = ri / distance, rj / distance
    S = 1 + (1 + Rj * Rj) / (Ri * Ri)
    return 0.5 * (S - np.sqrt(S * S - 4 * (rj / ri) ** 2))


def test_closed_forms_reproduce_tabulated_values():
    # [I&D] 6th ed., Fig. 13.4 / 13.6 read as 0.1998 (unit squares at unit distance) and
    # 0.2000 (adjacent faces of a cube); a cube's 5 views sum to one (summation rule).
    assert abs(f_parallel_rectangles(1, 1, 1) - 0.19982) < 1e-5
    assert abs(f_perpendicular_rectangles(1, 1, 1) - 0.20004) < 1e-5
    assert abs(f_parallel_rectangles(1, 1, 1) + 4 * f_perpendicular_rectangles(1, 1, 1)
               - 1.0) < 1e-12
    # disks: equal radii at distance -> 0 approach 1 (summation), reciprocity
    assert f_coaxial_disks(1, 1, 1e-4) > 0.9998
    assert abs(np.pi * f_coaxial_disks(1, 2, 1) - 4 * np.pi * f_coaxial_disks(2, 1, 1)) < 1e-12


def box_view_factors(sx, sy, sz):
    """Exact face-to-face view factors inside a box, faces (-x, +x, -y, +y, -z, +z), from
    the [I&D] Table 13.2 closed forms (parallel opposed and perpendicular with common edge).
    """
    dims = {"x": sx, "y": sy, "z": sz}
    faces = [("x", -1), ("x", 1), ("y", -1), ("y", 1), ("z", -1), ("z", 1)]
    F = np.zeros((6, 6))
    area = np.zeros(6)
    for i, (ai, _) in enumerate(faces):
        others = [k for k in "xyz" if k != ai]
        area[i] = dims[others[0]] * dims[others[1]]
        for j, (aj, _) in enumerate(faces):
            if i == j:
                continue
            if ai == aj:
                F[i, j] = f_parallel_rectangles(dims[others[0]], dims[others[1]], dims[ai])
            else:
                common = [k for k in "xyz" if k not in (ai, aj)][0]
                # from face i (extent along aj = its width y) to face j (extent along ai = z)
                F[i, j] = f_perpendicular_rectangles(dims[common], dims[aj], dims[ai])
    return F, area


# --------------------------------------------------------------------------------------
# Tally statistics
# --------------------------------------------------------------------------------------
def test_tally_statistics_is_the_replicate_standard_error():
    rng = np.random.default_rng(3)
    m, K, n = 1000, 8, 3
    rounds = [rng.multinomial(m, [0.2, 0.3, 0.1, 0.35, 0.05], size=n) for _ in range(K)]
    sums = TallySums.empty(n, m)
    for t in rounds[::-1]:                        # any order
        sums.add(np.arange(n), t)
    stats = tally_statistics(sums)
    p = np.array(rounds) / m                      # (K, n, n + 2)
    np.testing.assert_allclose(stats.mean, p.mean(axis=0), rtol=1e-14, atol=1e-15)
    np.testing.assert_allclose(stats.stderr, p.std(axis=0, ddof=1) / np.sqrt(K),
                               rtol=1e-10, atol=1e-15)
    assert np.all(stats.rays == K * m)


def test_tally_statistics_single_round_is_binomial():
    sums = TallySums.empty(1, 400)
    sums.add([0], np.array([[100, 0, 300]]))
    stats = tally_statistics(sums)
    np.testing.assert_allclose(stats.stderr[0], np.sqrt([0.25 * 0.75 / 400, 0,
                                                         0.75 * 0.25 / 400]))


def test_tally_sums_reject_bad_rows():
    sums = TallySums.empty(2, 10)
    with pytest.raises(ValueError, match="rays_per_round"):
        sums.add([0], np.array([[1, 2, 3, 3]]))
    with pytest.raises(ValueError, match="shape"):
        sums.add([0], np.array([[10, 0, 0]]))


# --------------------------------------------------------------------------------------
# Smoothing
# --------------------------------------------------------------------------------------
def _open_box_case(seed=0, scale=0.02):
    """Open box (top face missing -> space): exact factors plus a perturbation."""
    F6, A6 = box_view_factors(1.0, 0.8, 0.6)
    keep = [0, 1, 2, 3, 4]                      # +z face is the opening
    F = F6[np.ix_(keep, keep)]
    space = F6[keep, 5]
    A = A6[keep]
    rng = np.random.default_rng(seed)
    var = (scale * np.maximum(F, 0.01)) ** 2 * rng.uniform(0.3, 3.0, F.shape)
    np.fill_diagonal(var, 1e-6)
    var_s = (scale * space) ** 2
    var_l = np.full(len(A), 1e-6)
    raw = F + rng.normal(size=F.shape) * np.sqrt(var)
    np.fill_diagonal(raw, 0.0)
    raw_s = space + rng.normal(size=space.shape) * np.sqrt(var_s)
    total = raw.sum(axis=1) + raw_s             # rows of tallies sum to one
    raw /= total[:, None]
    raw_s /= total
    return raw, raw_s, np.zeros(len(A)), var, var_s, var_l, A, F, space


def _kkt_oracle(raw, raw_s, raw_l, var, var_s, var_l, A):
    """Equality-constrained weighted least squares over all n(n+2) entries, solved as one
    dense KKT system (direct, obviously correct; no bounds)."""
    n = len(A)
    x_hat = np.concatenate([raw.ravel(), raw_s, raw_l])
    w = 1.0 / np.concatenate([var.ravel(), var_s, var_l])
    nv = x_hat.size
    rows, rhs = [], []
    fixed = np.concatenate([((raw == 0) & (raw.T == 0)).ravel(), raw_s == 0, raw_l == 0])
    for i in range(n):
        for j in range(i + 1, n):
            if fixed[i * n + j] and fixed[j * n + i]:
                continue                      # both fixed at zero: reciprocity holds
            r = np.zeros(nv)
            r[i * n + j] = A[i]
            r[j * n + i] = -A[j]
            rows.append(r)
            rhs.append(0.0)
        r = np.zeros(nv)
        r[i * n:(i + 1) * n] = 1.0
        r[n * n + i] = 1.0
        r[n * n + n + i] = 1.0
        rows.append(r)
        rhs.append(1.0)
    for k in np.flatnonzero(fixed):
        r = np.zeros(nv)
        r[k] = 1.0
        rows.append(r)
        rhs.append(0.0)
    C = np.array(rows)
    K = np.block([[np.diag(2 * w), C.T], [C, np.zeros((len(C), len(C)))]])
    sol = np.linalg.solve(K, np.concatenate([2 * w * x_hat, rhs]))
    x = sol[:nv]
    return x[:n * n].reshape(n, n), x[n * n:n * n + n], x[n * n + n:]


def test_smoothing_leaves_consistent_factors_unchanged():
    # Exact box factors ([I&D] Table 13.2) already obey reciprocity and closure.
    F, A = box_view_factors(1.0, 0.8, 0.6)
    var = np.full(F.shape, 1e-4)
    out = smooth_view_factors(F, np.zeros(6), np.zeros(6), var, np.full(6, 1e-4),
                              np.full(6, 1e-4), A)
    np.testing.assert_allclose(out.matrix, F, atol=1e-14)
    assert np.all(out.space == 0) and np.all(out.inert == 0)


def test_smoothing_equals_kkt_oracle_and_obeys_constraints():
    raw, raw_s, raw_l, var, var_s, var_l, A, F, space = _open_box_case()
    out = smooth_view_factors(raw, raw_s, raw_l, var, var_s, var_l, A)
    ref = _kkt_oracle(raw, raw_s, raw_l, var, var_s, var_l, A)
    np.testing.assert_allclose(out.matrix, ref[0], atol=1e-12)
    np.testing.assert_allclose(out.space, ref[1], atol=1e-12)
    AF = A[:, None] * out.matrix
    np.testing.assert_allclose(AF, AF.T, atol=1e-14)
    np.testing.assert_allclose(out.matrix.sum(axis=1) + out.space + out.inert, 1.0,
                               atol=1e-14)
    # smoothing moves the estimate toward the truth on average (it uses exact constraints)
    assert np.abs(out.matrix - F).sum() < np.abs(raw - F).sum()


def test_smoothing_moves_well_sampled_entries_least():
    raw, raw_s, raw_l, var, var_s, var_l, A, F, space = _open_box_case(seed=1)
    var = var.copy()
    var[0, 1] *= 1e-4                  # entry (0, 1) sampled 100x more precisely
    out = smooth_view_factors(raw, raw_s, raw_l, var, var_s, var_l, A)
    move = np.abs(out.matrix - raw) / np.sqrt(var)
    assert abs(out.matrix[0, 1] - raw[0, 1]) < 0.01 * abs(out.matrix[1, 0] - raw[1, 0]) * A[1] / A[0] + 1e-15
    assert move[0, 1] < 1.0


def test_smoothing_keeps_entries_non_negative_like_a_general_solver():
    # Three nodes; raw entry (0, 2) is tiny and poorly known while (2, 0) is zero and well
    # known, so the equality-only solution would make (0, 2) negative.
    A = np.array([1.0, 1.0, 0.5])
    raw = np.array([[0.0, 0.5, 0.002], [0.5, 0.0, 0.3], [0.0, 0.7, 0.0]])
    raw_s = 1.0 - raw.sum(axis=1)
    var = np.array([[1e-6, 1e-4, 1e-4], [1e-4, 1e-6, 1e-4], [1e-8, 1e-4, 1e-6]])
    var_s = np.full(3, 1e-4)
    var_l = np.full(3, 1e-6)
    raw_l = np.zeros(3)
    out = smooth_view_factors(raw, raw_s, raw_l, var, var_s, var_l, A)
    assert np.all(out.matrix >= 0) and np.all(out.space >= 0)

    # Oracle: scipy SLSQP on all entries with bounds x >= 0 (independent general solver).
    n = 3
    x_hat = np.concatenate([raw.ravel(), raw_s])
    w = 1.0 / np.concatenate([var.ravel(), var_s])
    free = np.concatenate([((raw > 0) | (raw.T > 0)).ravel(), raw_s > 0])
    cons = []
    for i in range(n):
        for j in range(i + 1, n):
            cons.append({"type": "eq", "fun": lambda x, i=i, j=j: A[i] * x[i * n + j]
                         - A[j] * x[j * n + i]})
        cons.append({"type": "eq", "fun": lambda x, i=i: x[i * n:(i + 1) * n].sum()
                     + x[n * n + i] - 1.0})
    bounds = [(0, None) if f else (0, 0) for f in free]
    scale = 1e4                                  # objective of order one for SLSQP
    res = minimize(lambda x: scale * np.sum(w * (x - x_hat) ** 2) * 1e-4, np.clip(x_hat, 0, 1),
                   jac=lambda x: scale * 2 * w * (x - x_hat) * 1e-4, bounds=bounds,
                   constraints=cons, method="SLSQP", options={"ftol": 1e-15, "maxiter": 500})
    assert res.success
    np.testing.assert_allclose(out.matrix.ravel(), res.x[:9], atol=1e-6)
    np.testing.assert_allclose(out.space, res.x[9:], atol=1e-6)


def test_smoothing_rejects_bad_input():
    with pytest.raises(ValueError, match="areas"):
        smooth_view_factors(np.zeros((1, 1)), [1.0], [0.0], np.ones((1, 1)), [1.0], [1.0],
                            [0.0])
    with pytest.raises(ValueError, match="variance_space"):
        smooth_view_factors(np.zeros((1, 1)), [1.0], [0.0], np.ones((1, 1)), [0.0], [1.0],
                            [1.0])


# --------------------------------------------------------------------------------------
# Gebhart factors (matrix route)
# --------------------------------------------------------------------------------------
def test_gebhart_two_surface_enclosure_matches_closed_form():
    # Concentric spheres r1 = 1, r2 = 2: F12 = 1, F21 = A1/A2, F22 = 1 - A1/A2. The net
    # exchange of a two-surface grey diffuse enclosure ([I&D] 6th ed., eq. 13.23):
    # q = sigma (T1^4 - T2^4) / ((1-e1)/(e1 A1) + 1/(A1 F12) + (1-e2)/(e2 A2)).
    A = np.array([4 * np.pi, 16 * np.pi])
    F = np.array([[0.0, 1.0], [0.25, 0.75]])
    eps = np.array([0.3, 0.6])
    B, Bs = gebhart_matrix(F, np.zeros(2), np.zeros(2), eps)
    ex = exchange_from_gebhart(B, Bs, eps, A)
    expected = 1.0 / ((1 - eps[0]) / (eps[0] * A[0]) + 1.0 / A[0] + (1 - eps[1]) / (eps[1] * A[1]))
    assert abs(ex.area[0, 1] - expected) < 1e-12 * expected
    assert abs(ex.area[1, 0] - expected) < 1e-12 * expected
    np.testing.assert_allclose(B.sum(axis=1), 1.0, atol=1e-14)      # closed: all absorbed
    np.testing.assert_allclose(Bs, 0.0, atol=1e-15)


def test_gebhart_rows_and_reciprocity_open_box():
    F6, A6 = box_view_factors(1.0, 0.8, 0.6)
    keep = [0, 1, 2, 3, 4]
    F = F6[np.ix_(keep, keep)]
    space = F6[keep, 5]
    eps = np.array([0.1, 0.5, 0.9, 0.3, 1.0])
    B, Bs = gebhart_matrix(F, space, np.zeros(5), eps)
    np.testing.assert_allclose(B.sum(axis=1) + Bs, 1.0, atol=1e-14)
    E = (eps * A6[keep])[:, None] * B
    np.testing.assert_allclose(E, E.T, atol=1e-14)
    assert np.all(B >= 0) and np.all(Bs > 0)


def test_gebhart_inert_share_is_lost():
    # Two facing plates, a third "inert" share in each row: rows of B plus space are short
    # of one by exactly the share absorbed on inert sides, found by the same solve.
    F = np.array([[0.0, 0.5], [0.5, 0.0]])
    space = np.array([0.3, 0.2])
    inert = np.array([0.2, 0.3])
    eps = np.array([0.5, 0.8])
    B, Bs = gebhart_matrix(F, space, inert, eps)
    lost = np.linalg.solve(np.eye(2) - F * (1 - eps), inert)
    np.testing.assert_allclose(B.sum(axis=1) + Bs + lost, 1.0, atol=1e-14)
    assert np.all(lost > 0.2)


def test_gebhart_rejects_bad_emissivity():
    with pytest.raises(ValueError, match=r"node 1 has 1\.2"):
        gebhart_matrix(np.zeros((2, 2)), np.ones(2), np.zeros(2), [0.5, 1.2])
    with pytest.raises(ValueError, match="singular"):
        gebhart_matrix(np.array([[0.0, 1.0], [1.0, 0.0]]), np.zeros(2), np.zeros(2),
                       [0.0, 0.0])
