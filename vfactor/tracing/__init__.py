"""Numba ray-tracing core: counter-based random numbers, sampling, BVH, ray queries.

See :mod:`vfactor.tracing.scene` for the batch API and the pattern of fused kernels.
"""

from .scene import Hits, Scene

__all__ = ["Scene", "Hits"]
