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

from vfactor.tracing.cache import register as _register_cache_locator

__all__ = ["JIT", "JIT_PARALLEL", "TASK_RAYS"]

# cached kernels are stamped with all tracing sources together (see vfactor.tracing.cache)
_register_cache_locator()

#: Flags of every serial (device or kernel) function.
JIT = dict(cache=True, nogil=True, error_model="numpy")

#: Flags of kernels that loop over rays or emitters with ``numba.prange``.
JIT_PARALLEL = dict(JIT, parallel=True)

#: Most rays in one task of a ``prange`` over emitters (see
#: :func:`vfactor.tracing.scene.ray_tasks`): numba gives each thread one contiguous block
#: of iterations, so loops over emitters with unequal ray counts are split into tasks
#: of about equal size. Results do not depend on it.
TASK_RAYS = 256
