"""On-disk cache of compiled kernels, keyed on all the tracing sources together.

numba's ``cache=True`` stamps a cached kernel with the content of the one file that defines
it. Our fused kernels inline device functions from other files of this package
(``traverse.py``, ``bvh.py``, ``sampling.py``, ``rng.py``), so after an edit or an upgrade of
one of those a kernel could be loaded with stale machine code inlined — wrong numbers or a
crash. This module registers a cache locator for functions defined in
``vfactor/tracing/`` whose source stamp is a hash of *every* ``.py`` file here, so any change
of any tracing source invalidates every tracing kernel at once.

The locator uses numba's cache-locator extension point (``numba.core.caching.CacheImpl.
_locator_classes``, the list numba walks to find where a function's cache lives); the
cache stays where numba puts it (``__pycache__`` beside the sources, or
``NUMBA_CACHE_DIR`` when the user sets one). Registration is idempotent and happens when
:mod:`vfactor.tracing.config` is imported, before any kernel is decorated.
"""

from __future__ import annotations

import hashlib
import os

from numba.core import caching

__all__ = ["sources_stamp", "register"]

_HERE = os.path.dirname(os.path.abspath(__file__))


def sources_stamp(directory: str = _HERE) -> str:
    """SHA-256 over the names and contents of every ``.py`` file in ``directory``."""
    digest = hashlib.sha256()
    for name in sorted(os.listdir(directory)):
        if name.endswith(".py"):
            digest.update(name.encode())
            with open(os.path.join(directory, name), "rb") as f:
                digest.update(f.read())
    return digest.hexdigest()


_STAMP = sources_stamp()


def _is_tracing_source(py_file: str) -> bool:
    return os.path.dirname(os.path.abspath(py_file)) == _HERE


class _TracingInTreeLocator(caching.InTreeCacheLocator):
    """``__pycache__`` beside the sources, stamped with :func:`sources_stamp`."""

    def get_source_stamp(self):
        return _STAMP

    @classmethod
    def from_function(cls, py_func, py_file):
        if not _is_tracing_source(py_file) or caching.config.CACHE_DIR:
            return None
        return super().from_function(py_func, py_file)


class _TracingUserDirLocator(caching.UserProvidedCacheLocator):
    """``NUMBA_CACHE_DIR`` when the user set one, stamped with :func:`sources_stamp`."""

    def get_source_stamp(self):
        return _STAMP

    @classmethod
    def from_function(cls, py_func, py_file):
        if not _is_tracing_source(py_file):
            return None
        return super().from_function(py_func, py_file)


def register() -> None:
    """Put the two tracing locators first in numba's locator list (once)."""
    classes = caching.CacheImpl._locator_classes
    for locator in (_TracingInTreeLocator, _TracingUserDirLocator):
        if locator not in classes:
            classes.insert(0, locator)
