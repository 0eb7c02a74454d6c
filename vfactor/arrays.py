"""Validated array arguments of the numerical functions (shape, finiteness)."""

from __future__ import annotations

import numpy as np

__all__ = ["finite_array"]


def finite_array(value, name, ndim=None, shape=None) -> np.ndarray:
    """``value`` as a C-contiguous float64 array, checked.

    Raises
    ------
    ValueError
        Wrong number of dimensions or shape, or non-finite values (naming ``name``).
    """
    arr = np.ascontiguousarray(value, dtype=np.float64)
    if ndim is not None and arr.ndim != ndim:
        raise ValueError(f"{name} must be {ndim}-D, got shape {arr.shape}")
    if shape is not None and arr.shape != shape:
        raise ValueError(f"{name} must have shape {shape}, got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} has non-finite values")
    return arr
