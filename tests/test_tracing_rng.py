"""Tests of vfactor.tracing.rng (Philox-4x32-10)."""

import numpy as np
import pytest
from scipy import stats

from vfactor.tracing import rng

# Known-answer vectors of Random123 (Salmon et al. 2011), file kat_vectors, lines
# "philox4x32 10": counter (4 words), key (2 words) -> output (4 words).
KAT = [
    ((0x00000000, 0x00000000, 0x00000000, 0x00000000), (0x00000000, 0x00000000),
     (0x6627E8D5, 0xE169C58D, 0xBC57AC4C, 0x9B00DBD8)),
    ((0xFFFFFFFF, 0xFFFFFFFF, 0xFFFFFFFF, 0xFFFFFFFF), (0xFFFFFFFF, 0xFFFFFFFF),
     (0x408F276D, 0x41C83B0E, 0xA20BC7C6, 0x6D5451FD)),
    ((0x243F6A88, 0x85A308D3, 0x13198A2E, 0x03707344), (0xA4093822, 0x299F31D0),
     (0xD16CFE09, 0x94FDCCEB, 0x5001E420, 0x24126EA1)),
]


@pytest.mark.parametrize("ctr,key,expected", KAT)
def test_philox_known_answers(ctr, key, expected):
    out = rng.philox4x32_10(*ctr, *key)
    assert tuple(int(x) for x in out) == expected


def test_uniform4_word_mapping():
    # Documented mapping: key = (seed_lo, seed_hi), ctr = (counter_lo, counter_hi,
    # stream_lo, stream_hi); float = word * 2**-32.
    seed = 0x299F31D0A4093822
    stream = 0x0370734413198A2E
    counter = 0x85A308D3243F6A88
    u = rng.uniform4(seed, stream, counter)
    expected = np.array(KAT[2][2], dtype=np.float64) * 2.0 ** -32
    assert np.array_equal(np.array(u), expected)


def test_array_wrapper_matches_scalar_and_range():
    counters = np.arange(20000, dtype=np.int64) * 7919
    out = rng.uniform4_array(12345, 678, counters)
    assert out.shape == (20000, 4)
    for i in (0, 1, 17, 19999):
        assert tuple(out[i]) == rng.uniform4(12345, 678, int(counters[i]))
    assert out.min() >= 0.0 and out.max() < 1.0
    # Uniformity of all 80000 numbers: Kolmogorov-Smirnov at significance 1e-3 (fixed seed).
    assert stats.kstest(out.ravel(), "uniform").pvalue > 1e-3
    # Distinct streams and seeds give different numbers.
    other = rng.uniform4_array(12345, 679, counters[:100])
    assert not np.array_equal(other, out[:100])


def test_array_wrapper_rejects_bad_input():
    with pytest.raises(ValueError, match="seed"):
        rng.uniform4_array(-1, 0, np.arange(3))
    with pytest.raises(ValueError, match="counters"):
        rng.uniform4_array(1, 0, np.array([-1, 2]))
