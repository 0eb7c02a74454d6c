"""Sparse couplings: the reflection series against a dense linear solve, the energy of
dropped entries, sparse tallies against dense ones.

References: the dense solve is numpy.linalg.solve (LAPACK gesv) of Gebhart's equations
(I - F D) B = F diag(eps) (Gebhart 1961); the view factors are the exact box factors of
Incropera & DeWitt, Table 13.2 (via tests/radiation_shapes.box_view_factors).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from test_radiation import box_view_factors  # [I&D] Table 13.2 closed forms
from vfactor.gebhart import DROP_TOLERANCE, gebhart_matrix
from vfactor.sparsetools import dense, values_at
from vfactor.tallystats import PairTallies, TallySums, tally_statistics


def _dense_solve(F, space, eps):
    n = F.shape[0]
    system = np.eye(n) - F * (1.0 - eps)[None, :]
    return np.linalg.solve(system, F * eps[None, :]), np.linalg.solve(system, space)


@pytest.mark.parametrize("eps", [[0.1, 0.5, 0.9, 0.3, 1.0], [0.03, 0.05, 0.04, 0.06, 0.05]])
def test_series_equals_dense_solve_without_drop(eps):
    # open box (5 faces, the sixth open to space), grey diffuse; low emissivities make the
    # series converge slowly (0.97 of the energy reflected per bounce)
    F6, _ = box_view_factors(1.0, 0.8, 0.6)
    keep = [0, 1, 2, 3, 4]
    F, space, eps = F6[np.ix_(keep, keep)], F6[keep, 5], np.asarray(eps)
    geb = gebhart_matrix(sp.csr_array(F), space, np.zeros(5), eps, drop_tolerance=0.0)
    B, Bs = _dense_solve(F, space, eps)
    np.testing.assert_allclose(dense(geb.gebhart), B, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(geb.space, Bs, rtol=1e-12, atol=1e-15)
    assert geb.dropped.max() < 1e-14


def test_dropped_energy_is_accounted_and_rows_close():
    # a chain of 60 plates, each seeing its neighbours only (sparse, banded): far entries
    # of B fall below the tolerance; what they carry is reported, rows still close
    n = 60
    F = sp.diags_array([np.full(n - 1, 0.3), np.full(n - 1, 0.3)], offsets=[-1, 1]).tocsr()
    F = sp.csr_array(F)
    row = np.asarray(F.sum(axis=1)).ravel()
    space = 1.0 - row
    eps = np.full(n, 0.4)
    geb = gebhart_matrix(F, space, np.zeros(n), eps, drop_tolerance=1e-4)
    closure = np.asarray(geb.gebhart.sum(axis=1)).ravel() + geb.space + geb.inert + geb.dropped
    np.testing.assert_allclose(closure, 1.0, rtol=0, atol=1e-12)
    B, Bs = _dense_solve(F.toarray(), space, eps)
    # what was left out is exactly what the kept entries lack, to the drop tolerance
    assert geb.dropped.max() > 0
    np.testing.assert_allclose(B.sum(axis=1) + Bs - np.asarray(geb.gebhart.sum(axis=1)).ravel()
                               - geb.space, geb.dropped, atol=1e-12)
    assert geb.gebhart.nnz < 0.5 * n * n        # sparse: the far entries are gone
    kept = geb.gebhart.tocoo()
    # a kept entry lacks at most what its row dropped (the left-out paths through it)
    short = B[kept.row, kept.col] - kept.data
    assert np.all(short >= -1e-15) and np.all(short <= geb.dropped[kept.row] + 1e-15)
    assert np.all(B[dense(geb.gebhart) == 0] < 1e-4)


def test_default_tolerance_is_documented_and_small():
    assert DROP_TOLERANCE == 1e-6


def test_sparse_tallies_equal_dense_sums_bit_for_bit():
    rng = np.random.default_rng(5)
    n, m, K = 7, 500, 6
    rounds = [rng.multinomial(m, rng.dirichlet(np.full(n + 2, 0.3)), size=n) for _ in range(K)]
    sums = TallySums.empty(n, m)
    for r in (3, 0, 5, 1, 4, 2):                           # any order
        sums.add_pairs(np.arange(n), PairTallies.from_dense(rounds[r]))
    stack = np.array(rounds)
    np.testing.assert_array_equal(sums.counts.toarray(), stack.sum(axis=0))
    np.testing.assert_array_equal(sums.squares.toarray(), (stack ** 2).sum(axis=0))
    stats = tally_statistics(sums)
    # entries never hit are not stored at all
    assert stats.mean.nnz == int((stack.sum(axis=0) > 0).sum())
    # merge of two workers' halves gives the same sums
    a, b = TallySums.empty(n, m), TallySums.empty(n, m)
    for r in range(K):
        (a if r % 2 else b).add(np.arange(n), rounds[r])
    a.merge(b)
    np.testing.assert_array_equal(a.counts.toarray(), sums.counts.toarray())


def test_values_at_reads_stored_and_missing_entries():
    A = sp.csr_array(np.array([[0.0, 2.0, 0.0], [1.0, 0.0, 3.0]]))
    np.testing.assert_array_equal(values_at(A, [0, 1, 1, 0], [1, 2, 1, 0]), [2.0, 3.0, 0, 0])


def test_results_file_records_the_models_drop_tolerance_and_rows_close(write_model, tmp_path):
    # the open box of test_pipeline, no inert side, with a coarse tolerance: the file
    # records the model's tolerance (not the default), and every row of B closes to 1e-12
    # with its escape to space and the share it dropped
    import h5py

    from test_pipeline import BOX
    from vfactor import pipeline
    from vfactor.h5read import read_coupling_matrix

    text = (BOX.replace("seed = 11", "seed = 11\ngebhart_drop_tolerance = 1e-3")
            .replace("rays_per_node = 4000", "rays_per_node = 800")
            .replace('front = { coating = "w", node = "floor" }',
                     'front = { coating = "w", node = "floor" }\n'
                     'back = { coating = "w", node = "under" }'))
    res = pipeline.run(write_model(text), tmp_path / "o.h5")
    with h5py.File(res.output, "r") as h:
        g = h["exchange"]
        assert g.attrs["drop_tolerance"] == 1e-3 and g.attrs["method"] == "matrix"
        assert np.all(h["view_factors/inert"][()] == 0)
        dropped = g["dropped"][()]
        rows = (np.asarray(read_coupling_matrix(g["gebhart"]).sum(axis=1)).ravel()
                + g["gebhart_space"][()] + dropped)
    assert dropped.max() > 0                       # the tolerance did leave entries out
    np.testing.assert_allclose(rows, 1.0, rtol=0, atol=1e-12)
