"""The one place where numba compilation flags live.

Every ``@njit`` in :mod:`vfactor.tracing` (and in any other vfactor module that compiles
with numba) takes its flags from here, so that caching, the GIL and the floating-point
error model are the same everywhere.

- ``cache=True``: compiled machine code is written next to the sources (``__pycache__``),
  so a second process loads it instead of compiling again.
- ``nogil=True``: compiled functions release the GIL, so Python threads can run queries
  side by side.
- ``error_model="numpy"``: division by zero gives inf/NaN like numpy instead of raising;
  the ray kernels are written so that neither appears in a result.
- No ``fastmath``: the watertight ray-triangle test and the conservative box test depend on
  IEEE-754 semantics (NaN, infinity, no reassociation).
"""

from __future__ import annotations

__all__ = ["JIT", "JIT_PARALLEL", "RAY_CHUNK", "EMITTER_CHUNK"]

#: Flags of every serial (device or kernel) function.
JIT = dict(cache=True, nogil=True, error_model="numpy")

#: Flags of kernels that loop over rays or emitters with ``numba.prange``.
JIT_PARALLEL = dict(JIT, parallel=True)

#: Iterations handed to a thread at a time in ``prange`` loops over rays, set by the
#: wrappers with ``numba.parallel_chunksize(RAY_CHUNK)``. Dynamic chunks keep both cores
#: busy when rays cost unequal time or a core is shared; results do not depend on it
#: (every iteration writes only its own outputs).
RAY_CHUNK = 2048

#: Same for ``prange`` loops over emitting facets (a facet holds many rays).
EMITTER_CHUNK = 4
