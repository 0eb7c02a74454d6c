"""vfactor: Monte Carlo radiative couplings and orbital heat loads for spacecraft thermal analysis.

From a triangulated spacecraft model (a TOML file naming coatings, parts and, optionally,
an orbit, an attitude and an environment) vfactor computes view factors, Gebhart factors
and exchange areas between surface nodes and to space, and the absorbed solar, albedo and
planet-infrared heat loads per node and facet along the orbit; it writes them to one
self-describing HDF5 file for a thermal network solver.

The public names below are imported on first use, so ``import vfactor`` stays light::

    import vfactor
    result = vfactor.run("sat.toml", "sat.h5")          # the whole pipeline
    res = vfactor.read_results("sat.h5")                 # read a results file back
    print(res.exchange.area)                             # exchange areas [m2]
"""

from __future__ import annotations

from importlib import import_module
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("vfactor")
except PackageNotFoundError:  # pragma: no cover - running from an uninstalled tree
    __version__ = "0+unknown"

_PUBLIC = {
    # pipeline and files
    "run": "vfactor.pipeline",
    "RunResult": "vfactor.pipeline",
    "read_results": "vfactor.h5io",
    "write_results": "vfactor.h5io",
    "Results": "vfactor.h5io",
    # model and geometry
    "load_model": "vfactor.model",
    "Model": "vfactor.model",
    "build_geometry": "vfactor.geometry",
    "Geometry": "vfactor.geometry",
    "check_model": "vfactor.checks",
    # result records
    "ViewFactors": "vfactor.radiation",
    "Exchange": "vfactor.radiation",
    "Trajectory": "vfactor.trajectory",
    "Heating": "vfactor.heating",
    # outputs
    "summarize": "vfactor.summary",
    "format_summary": "vfactor.summary",
    "plot_all": "vfactor.plots",
    # errors
    "VfactorError": "vfactor.errors",
    "ModelError": "vfactor.errors",
    "MeshError": "vfactor.errors",
    "GeometryError": "vfactor.errors",
    "ResultsFileError": "vfactor.errors",
    "ArgumentError": "vfactor.errors",
}

__all__ = ["__version__"] + sorted(_PUBLIC)


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'vfactor' has no attribute {name!r}")
    value = getattr(import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
