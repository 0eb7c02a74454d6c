"""The compiled-kernel cache is keyed on every tracing source together.

Reason (numba documentation, "Cache invalidation": a cached function is invalidated when
its own source file changes, not when a function it calls from another file changes):
our fused kernels inline device functions from other files of vfactor/tracing, so a
stamp over all of them is needed to never load stale machine code.
"""

from __future__ import annotations

import shutil

import numba

from vfactor.tracing import (albedo_kernels, beam, cache, chain_kernels, heat_kernels, heat_sums,
                             motion_kernels, planet_kernels, scene, side_rays, streams,
                             traverse, vf_kernels)


def _dispatchers(module):
    return [f for f in vars(module).values()
            if isinstance(f, numba.core.registry.CPUDispatcher) and f._cache is not None
            and hasattr(f._cache, "_impl")]


def test_every_cached_tracing_kernel_uses_the_package_stamp():
    modules = (traverse, scene, vf_kernels, heat_kernels, planet_kernels, chain_kernels, beam,
               heat_sums, side_rays, motion_kernels, albedo_kernels, streams)
    kernels = [k for m in modules for k in _dispatchers(m)]
    assert kernels
    for k in kernels:
        locator = k._cache._impl.locator
        assert isinstance(locator, (cache._TracingInTreeLocator, cache._TracingUserDirLocator))
        assert locator.get_source_stamp() == cache.sources_stamp()


def test_stamp_changes_when_any_tracing_source_changes(tmp_path):
    src = tmp_path / "tracing"
    shutil.copytree(cache._HERE, src, ignore=shutil.ignore_patterns("__pycache__"))
    before = cache.sources_stamp(str(src))
    assert before == cache.sources_stamp(str(src))  # a pure function of the contents
    with open(src / "traverse.py", "a") as f:
        f.write("\n# edited\n")
    assert cache.sources_stamp(str(src)) != before
