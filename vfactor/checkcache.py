"""Remembering passed checks, so that ``run`` does not repeat the checks of the same model.

The geometric checks of a 10^6-facet model take seconds; ``vfactor run`` would repeat them
on every run of an unchanged model. A check that found no error is recorded in a small
JSON file named by a key over everything its outcome depends on:

* the model file's SHA-256 (settings, sides, coatings);
* the built geometry: vertices, triangles, parts, groups, node and coating of every side
  (so an edited mesh file, or another version of a mesh reader, gives another key);
* the source code of the checks themselves (``checks.py``, ``geomchecks.py``,
  ``topology.py``, the contact kernel ``tracing/contacts.py``) and the vfactor version.

The record keeps the warnings found, which ``run`` shows and stores as before. The
folder is ``VFACTOR_CACHE_DIR`` when set, else ``$XDG_CACHE_HOME/vfactor`` or
``~/.cache/vfactor``; a folder that cannot be written only means no record is kept.
Records are written through :mod:`vfactor.atomic` (temporary file, rename), so a killed
process never leaves a half-written one; an unreadable record is ignored and rewritten.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np

from vfactor.atomic import write_bytes
from vfactor.errors import OutputError, Problem

__all__ = ["cache_dir", "check_key", "load_passed", "store_passed"]

_SOURCES = ("checks.py", "geomchecks.py", "topology.py",
            os.path.join("tracing", "contacts.py"))
_HERE = Path(__file__).resolve().parent


def cache_dir() -> Path:
    """Folder of the check records (see the module docstring)."""
    if os.environ.get("VFACTOR_CACHE_DIR"):
        return Path(os.environ["VFACTOR_CACHE_DIR"]) / "checks"
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"),
                                                              ".cache")
    return Path(base) / "vfactor" / "checks"


def _sources_digest() -> bytes:
    from vfactor import __version__

    digest = hashlib.sha256(str(__version__).encode())
    for name in _SOURCES:
        path = _HERE / name
        digest.update(name.encode())
        digest.update(path.read_bytes() if path.is_file() else b"")
    return digest.digest()


def check_key(model, geometry) -> str:
    """Hex key of a model's checks (see the module docstring)."""
    digest = hashlib.sha256(_sources_digest())
    digest.update(str(model.sha256).encode())
    g = geometry
    for array in (g.vertices, g.triangles, g.part, g.group, g.front_node, g.back_node,
                  g.front_coating, g.back_coating):
        a = np.ascontiguousarray(array)
        digest.update(str((a.dtype.str, a.shape)).encode())
        digest.update(a.tobytes())
    digest.update(json.dumps([list(g.part_names), list(g.group_names),
                              list(g.nodes.names), list(g.part_closed)]).encode())
    return digest.hexdigest()


def load_passed(key: str) -> list | None:
    """The warnings of a passed check recorded under ``key``, or None when there is none."""
    path = cache_dir() / f"{key}.json"
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
        return [Problem(p["severity"], p["file"], p["where"], p["message"])
                for p in record["problems"]]
    except (OSError, ValueError, KeyError, TypeError):
        return None


def store_passed(key: str, problems) -> bool:
    """Record a passed check (its warnings and notes); False when it cannot be written."""
    folder = cache_dir()
    record = {"problems": [{"severity": p.severity, "file": p.file, "where": p.where,
                            "message": p.message} for p in problems]}
    try:
        folder.mkdir(parents=True, exist_ok=True)
        write_bytes(folder / f"{key}.json", json.dumps(record).encode("utf-8"),
                    "a record of a passed check")
    except (OSError, OutputError):
        return False
    return True
