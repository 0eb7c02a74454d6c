"""Counter-based random numbers: Philox-4x32-10.

A random number here is a pure function of three unsigned 64-bit integers,
``(seed, stream, counter)``: there is no state, so every ray can compute its own numbers
from (seed, emitting facet or node plus a purpose offset, ray index) and results are
bit-identical for any thread count, chunking or resume point.

The block function is Philox-4x32 with 10 rounds, from

    J. K. Salmon, M. A. Moraes, R. O. Dror, D. E. Shaw, "Parallel random numbers: as easy
    as 1, 2, 3", Proc. SC'11 (2011), section 4 (Philox), doi:10.1145/2063384.2063405,

checked in the tests against the known-answer vectors of the authors' Random123 library
(``kat_vectors``, lines ``philox4x32 10``).

Mapping of our arguments onto Philox's 128-bit counter and 64-bit key (our choice):
``key = (seed_lo, seed_hi)``, ``ctr = (counter_lo, counter_hi, stream_lo, stream_hi)``.
Each 32-bit output word ``x`` becomes the float64 ``x * 2**-32`` in ``[0, 1)``.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .config import JIT, JIT_PARALLEL

__all__ = ["philox4x32_10", "uniform4", "uniform4_array", "STREAM_STRIDE"]

_M0 = np.uint64(0xD2511F53)
_M1 = np.uint64(0xCD9E8D57)
_W0 = np.uint64(0x9E3779B9)
_W1 = np.uint64(0xBB67AE85)
_MASK = np.uint64(0xFFFFFFFF)
_S32 = np.uint64(32)
_INV32 = 2.0 ** -32

#: Suggested spacing of purpose offsets in the stream number: stream = purpose *
#: STREAM_STRIDE + emitter index keeps streams of different purposes apart for any model
#: with fewer than 2**40 emitters.
STREAM_STRIDE = 1 << 40


@njit(**JIT)
def philox4x32_10(c0, c1, c2, c3, k0, k1):
    """Philox-4x32-10 block function on 32-bit words held in uint64.

    Parameters
    ----------
    c0, c1, c2, c3 : uint64
        Counter words (only the low 32 bits are used).
    k0, k1 : uint64
        Key words (only the low 32 bits are used).

    Returns
    -------
    tuple of 4 uint64
        The four 32-bit output words.

    References
    ----------
    Salmon et al. (2011), SC'11, section 4.2, round function and Weyl key schedule with
    multipliers 0xD2511F53, 0xCD9E8D57 and key increments 0x9E3779B9, 0xBB67AE85.
    """
    c0 = np.uint64(c0) & _MASK
    c1 = np.uint64(c1) & _MASK
    c2 = np.uint64(c2) & _MASK
    c3 = np.uint64(c3) & _MASK
    k0 = np.uint64(k0) & _MASK
    k1 = np.uint64(k1) & _MASK
    for r in range(10):
        if r > 0:
            k0 = (k0 + _W0) & _MASK
            k1 = (k1 + _W1) & _MASK
        p0 = _M0 * c0          # < 2**64: exact in uint64
        p1 = _M1 * c2
        hi0 = p0 >> _S32
        lo0 = p0 & _MASK
        hi1 = p1 >> _S32
        lo1 = p1 & _MASK
        c0 = hi1 ^ c1 ^ k0
        c1 = lo1
        c2 = hi0 ^ c3 ^ k1
        c3 = lo0
    return c0, c1, c2, c3


@njit(**JIT)
def uniform4(seed, stream, counter):
    """Four independent uniform numbers in ``[0, 1)`` from ``(seed, stream, counter)``.

    Parameters
    ----------
    seed, stream, counter : int (cast to uint64)
        User seed; stream (emitter index plus a purpose offset); counter (ray index).

    Returns
    -------
    tuple of 4 float64
        Each in ``[0, 1)`` with a resolution of 2**-32.
    """
    s = np.uint64(seed)
    st = np.uint64(stream)
    c = np.uint64(counter)
    x0, x1, x2, x3 = philox4x32_10(c & _MASK, c >> _S32, st & _MASK, st >> _S32,
                                   s & _MASK, s >> _S32)
    return (np.float64(x0) * _INV32, np.float64(x1) * _INV32,
            np.float64(x2) * _INV32, np.float64(x3) * _INV32)


@njit(**JIT_PARALLEL)
def _uniform4_array_kernel(seed, stream, counters, out):
    for i in prange(counters.shape[0]):
        a, b, c, d = uniform4(seed, stream, counters[i])
        out[i, 0] = a
        out[i, 1] = b
        out[i, 2] = c
        out[i, 3] = d


def uniform4_array(seed, stream, counters):
    """Array form of :func:`uniform4` (for tests and small jobs).

    Parameters
    ----------
    seed, stream : int
        Non-negative, below 2**64.
    counters : (n,) int
        Non-negative counter values.

    Returns
    -------
    (n, 4) float64
        Row ``i`` is ``uniform4(seed, stream, counters[i])``.
    """
    seed = int(seed)
    stream = int(stream)
    for name, value in (("seed", seed), ("stream", stream)):
        if not 0 <= value < 2 ** 64:
            raise ValueError(f"rng.uniform4_array: {name} must be in [0, 2**64), got {value}")
    counters = np.ascontiguousarray(counters)
    if counters.ndim != 1:
        raise ValueError(f"rng.uniform4_array: counters must be 1-D, got shape {counters.shape}")
    if counters.size and (counters.dtype.kind not in "iu" or counters.min() < 0):
        raise ValueError("rng.uniform4_array: counters must be non-negative integers")
    out = np.empty((counters.shape[0], 4))
    _uniform4_array_kernel(np.uint64(seed), np.uint64(stream),
                           counters.astype(np.uint64), out)
    return out
