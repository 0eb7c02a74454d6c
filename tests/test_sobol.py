"""Tests of vfactor.tracing.sobol: the Owen-scrambled Sobol' points of the coupling rays.

References: scipy.stats.qmc.Sobol (unscrambled points with the Joe & Kuo 2008 direction
numbers), the definition of a nested (Owen 1995) scramble, and the net property of the
Sobol' sequence (each dimension a (0,1)-sequence in base 2: Sobol' 1967; Niederreiter
1992, ch. 4).
"""

from __future__ import annotations

import numpy as np
from scipy import stats
from scipy.stats import qmc

from vfactor.tracing import sobol as S


def _words(scramble, js, d):
    return np.array([S.scrambled_word(scramble, d, S.sobol_reversed(d, j))
                     for j in js], dtype=np.uint64)


def _reverse(x):
    return int(f"{int(x):032b}"[::-1], 2)


def _scramble(seed, replicate=0):
    out = np.empty(2 * S.DIMENSIONS, np.uint64)
    S.draw_scramble(np.uint64(seed), np.uint64(9), np.uint64(replicate), out)
    return out


def test_unscrambled_points_are_scipys_sobol_points():
    n = 1 << 12
    ours = np.array([[_reverse(S.sobol_reversed(d, j)) for d in range(5)]
                     for j in range(n)], dtype=np.uint64)
    ref = (qmc.Sobol(5, scramble=False, bits=32).random(n) * 2.0 ** 32).astype(np.uint64)
    gray = np.arange(n) ^ (np.arange(n) >> 1)       # scipy lists points in Gray-code order
    np.testing.assert_array_equal(ours[gray], ref)
    table = S.chunk_table(256)
    blk = 3 * 256                                   # point(B + k) = point(B) ^ point(k)
    for d in range(5):
        for k in (0, 1, 77, 255):
            assert S.sobol_reversed(d, blk + k) == (
                S.sobol_reversed(d, blk) ^ table[k, d])


def test_scramble_is_nested_and_keeps_every_block_stratified():
    # Nested (Owen 1995): the first k output digits depend on the first k input digits only
    # and are a bijection of them; so an aligned block of 2**k points keeps one point in
    # every interval of width 2**-k, in every dimension.
    sc = _scramble(3)
    for d in range(5):
        for k in (1, 4, 9):
            x = np.array([(p << (32 - k)) | ((p * 2654435761) & ((1 << (32 - k)) - 1))
                          for p in range(1 << k)], dtype=np.uint64)     # distinct prefixes
            y = np.array([S.scrambled_word(sc, d, np.uint64(_reverse(v))) for v in x],
                         dtype=np.uint64)
            assert len(set((y >> np.uint64(32 - k)).tolist())) == 1 << k
            x2 = x ^ np.uint64(0x5A5A5A5A & ((1 << (32 - k)) - 1))      # same prefixes
            y2 = np.array([S.scrambled_word(sc, d, np.uint64(_reverse(v))) for v in x2],
                          dtype=np.uint64)
            np.testing.assert_array_equal(y >> np.uint64(32 - k), y2 >> np.uint64(32 - k))
        for blk, k in ((0, 10), (5 << 10, 10), (3 << 6, 6)):
            w = _words(sc, range(blk, blk + (1 << k)), d)
            assert len(set((w >> np.uint64(32 - k)).tolist())) == 1 << k


def test_each_point_is_uniform_over_scrambles():
    # Unbiasedness: for a fixed index, the scrambled point over independent scrambles is
    # uniform in each coordinate (Kolmogorov-Smirnov against U(0, 1), scipy.stats) and the
    # coordinates are uncorrelated.
    reps = 3000
    for j in (0, 1, 12345):
        u = np.array([[S.scrambled_point(_scramble(11, r), d, S.sobol_reversed(d, j))
                       for d in range(5)] for r in range(reps)])
        assert u.min() > 0.0 and u.max() < 1.0
        for d in range(5):
            assert stats.kstest(u[:, d], "uniform").pvalue > 1e-3
        c = np.corrcoef(u.T)
        assert np.max(np.abs(c - np.eye(5))) < 4.0 / np.sqrt(reps)


def test_scrambled_points_beat_independent_ones_on_a_smooth_integral():
    # Randomised QMC on the smooth 5-D integrand prod_d 3 x_d^2 (exact integral 1): over 64
    # scrambles of 1024 points the variance must be far below that of 1024 independent
    # points (Owen 1997: O(n^-3 (log n)^(s-1)) for smooth integrands); unbiased within 4
    # sigma.
    n, reps = 1024, 64
    est = []
    for r in range(reps):
        sc = _scramble(21, r)
        x = np.array([[S.scrambled_point(sc, d, S.sobol_reversed(d, j))
                       for d in range(5)] for j in range(n)])
        est.append(np.prod(3 * x ** 2, axis=1).mean())
    est = np.array(est)
    var_mc = (1.8 ** 5 - 1) / n            # Var(3 x^2) = 9/5 - 1 -> prod: 1.8^5 - 1
    assert abs(est.mean() - 1.0) < 4 * est.std(ddof=1) / np.sqrt(reps) + 1e-12
    assert est.var(ddof=1) < 0.05 * var_mc


def test_chunk_table_needs_a_power_of_two():
    import pytest

    with pytest.raises(ValueError, match="power of two"):
        S.chunk_table(1000)
