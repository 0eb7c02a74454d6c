"""Shared pytest fixtures (other modules may append their own below)."""

from __future__ import annotations

from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
DEMO_MODEL = REPO / "meshes" / "demo.toml"

COATING_W = """
[coatings.w]
solar_absorptivity = 0.2
ir_emissivity = 0.8
"""
"""A minimal coatings block: one coating named ``w``."""


@pytest.fixture
def demo_model_path() -> Path:
    """Path of the invented demo satellite model (meshes/demo.toml)."""
    return DEMO_MODEL


@pytest.fixture
def write_model(tmp_path):
    """Factory: ``write_model(text, name="model.toml", coatings=True) -> Path``.

    Writes a model file into the test's temporary directory. With ``coatings=True`` the
    block :data:`COATING_W` (one coating ``w``) is prepended.
    """

    def _write(text: str, name: str = "model.toml", coatings: bool = True) -> Path:
        path = tmp_path / name
        path.write_text((COATING_W if coatings else "") + text)
        return path

    return _write


@pytest.fixture(autouse=True)
def _private_check_records(tmp_path_factory, monkeypatch):
    """Every test keeps its records of passed checks (vfactor.checkcache) in a folder of
    its own, never in the user's cache."""
    monkeypatch.setenv("VFACTOR_CACHE_DIR", str(tmp_path_factory.mktemp("vfactor-cache")))
