"""Records of passed checks: `run` does not repeat the checks of an unchanged model, and
check warnings reach the results file and the summary (vfactor.checkcache, checks,
pipeline, summary).

These are bookkeeping properties of our own (no outside reference applies); each test
changes one input and asserts the record's key, reuse and contents follow.
"""

from __future__ import annotations

import pytest

import vfactor.checks as checks
from vfactor.checkcache import cache_dir, check_key, load_passed
from vfactor.checks import check_model, require_clean
from vfactor.geometry import build_geometry
from vfactor.h5io import read_results
from vfactor.model import load_model
from vfactor.pipeline import run
from vfactor.summary import format_summary, summarize

BOX_WITH_CORE = """
[radiation]
rays_per_node = 2000
[[parts]]
name = "body"
shape = "box"
size = [1, 1, 1]
front = { coating = "w" }
back = { coating = "w" }
[[parts]]
name = "core"
shape = "sphere"
radius = 0.2
front = { coating = "w" }
"""


def _counting(monkeypatch):
    calls = []
    real = checks.check_geometry
    monkeypatch.setattr(checks, "check_geometry",
                        lambda *a, **k: (calls.append(1), real(*a, **k))[1])
    return calls


def test_a_passed_check_is_not_repeated(write_model, monkeypatch):
    path = write_model(BOX_WITH_CORE)
    model = load_model(path)
    geometry = build_geometry(model)
    calls = _counting(monkeypatch)
    first = require_clean(model, geometry)
    second = require_clean(model, geometry)
    assert len(calls) == 1
    assert [p.line() for p in first] == [p.line() for p in second if p.severity == "warning"]
    assert any("passed before and were not repeated" in p.message for p in second)
    assert any("inside the closed part 'body'" in p.message for p in first)


def test_check_command_records_for_run(write_model, monkeypatch):
    path = write_model(BOX_WITH_CORE)
    report = check_model(path)
    assert report.ok
    calls = _counting(monkeypatch)
    model = load_model(path)
    require_clean(model, build_geometry(model))
    assert calls == []


def test_the_key_follows_model_geometry_and_failures_are_not_recorded(write_model):
    path = write_model(BOX_WITH_CORE)
    model = load_model(path)
    key = check_key(model, build_geometry(model))
    moved = write_model(BOX_WITH_CORE.replace("radius = 0.2", "radius = 0.21"), name="b.toml")
    model2 = load_model(moved)
    assert check_key(model2, build_geometry(model2)) != key
    crossing = write_model(BOX_WITH_CORE.replace("radius = 0.2", "radius = 0.7"),
                           name="c.toml")
    assert not check_model(crossing).ok
    model3 = load_model(crossing)
    assert load_passed(check_key(model3, build_geometry(model3))) is None
    with pytest.raises(Exception, match="intersect"):
        require_clean(model3, build_geometry(model3))


def test_an_unwritable_cache_only_means_no_record(write_model, monkeypatch, tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    monkeypatch.setenv("VFACTOR_CACHE_DIR", str(blocker))
    path = write_model(BOX_WITH_CORE)
    model = load_model(path)
    assert require_clean(model, build_geometry(model))      # the warnings, no error
    assert not cache_dir().is_dir()


def test_check_warnings_reach_the_results_file_and_summary(write_model, tmp_path):
    path = write_model(BOX_WITH_CORE)
    out = tmp_path / "r.h5"
    result = run(path, out)
    assert any("inside the closed part" in n for n in result.notes)
    results = read_results(out)
    s = summarize(results)
    assert any(w.startswith("check: part 'core'") and "inside the closed part 'body'" in w
               for w in s["warnings"])
    assert "inside the closed part 'body'" in format_summary(results)
    # the second run reuses the record and still stores the warning
    result = run(path, tmp_path / "r2.h5")
    assert any("not repeated" in n for n in result.notes)
    assert any("inside the closed part" in w
               for w in summarize(read_results(tmp_path / "r2.h5"))["warnings"])
