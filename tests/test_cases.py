"""Design cases: several named variants of one model computed into one results file.

Checks (sources beside each):
- two cases that differ only in the environment constants give heat loads that scale
  exactly with them (direct solar and albedo are linear in the solar constant, albedo
  linear in the albedo, planet IR linear in the outgoing flux: the load definitions of
  ARCHITECTURE section 7, common practice) and identical couplings;
- a case with another solar absorptivity keeps the infrared couplings of the model
  (they do not depend on it) and its directly absorbed solar load is the incident load
  times the new absorptivity (definition of absorptivity, common practice);
- the escaping directions are traced once for all cases, the file holds every case, the
  command line selects, compares and refuses bad case tables in one line.
"""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from vfactor import heatstep, pipeline
from vfactor.casecompare import compare_cases, read_cases
from vfactor.cli import main
from vfactor.errors import ModelError
from vfactor.h5read import read_results
from vfactor.model import load_model_text

# An invented test vehicle: a box with one plate beside it, per-face nodes.
VEHICLE = """
[model]
name = "case test box (invented)"

[coatings.paint]
solar_absorptivity = 0.3
ir_emissivity = 0.8

[coatings.dark]
solar_absorptivity = 0.9
ir_emissivity = 0.9

[[parts]]
name = "box"
shape = "box"
size = [0.4, 0.4, 0.4]
front = { coating = "paint", nodes = "per-face" }

[[parts]]
name = "plate"
shape = "rectangle"
size = [0.4, 0.4]
center = [0.0, 0.5, 0.0]
z_axis = [0, -1, 0]
front = { coating = "dark", node = "plate.front" }
back = { coating = "paint", node = "plate.back" }

[radiation]
rays_per_node = 3000
seed = 5
planet_rays_per_facet = 32
sun_rays_per_facet = 8

[orbit]
type = "circular"
altitude_km = 500.0
inclination_deg = 45.0
raan_deg = 30.0
epoch = "2027-06-21T00:00:00Z"
orbits = 1
steps_per_orbit = 8
"""

CASES = """
[[cases]]
name = "low"
description = "invented: small constants"
[cases.environment]
case = "custom"
solar_constant = 1300.0
albedo = 0.2
planet_ir = 200.0

[[cases]]
name = "high"
description = "invented: large constants"
[cases.environment]
case = "custom"
solar_constant = 1430.0
albedo = 0.35
planet_ir = 260.0
"""

COATED = """
[[cases]]
name = "new"
[cases.environment]
case = "hot"

[[cases]]
name = "aged"
[cases.environment]
case = "hot"
[cases.coatings.paint]
solar_absorptivity = 0.6
"""


def _write(tmp_path, text, name="m.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_cases_scale_exactly_with_the_environment_constants(tmp_path):
    out = tmp_path / "r.h5"
    pipeline.run(_write(tmp_path, VEHICLE + CASES), out)
    low, high = read_cases(out)
    assert (low.case, high.case) == ("low", "high") and low.case_names == ("low", "high")
    # one geometry, one set of couplings: the same view factors and Gebhart factors
    assert low.view_factors.matrix.toarray().tobytes() == \
        high.view_factors.matrix.toarray().tobytes()
    assert low.exchange.gebhart.toarray().tobytes() == high.exchange.gebhart.toarray().tobytes()
    for src, ratio in (("solar", 1430.0 / 1300.0), ("planet_ir", 260.0 / 200.0),
                       ("albedo", 1430.0 * 0.35 / (1300.0 * 0.2))):
        a = getattr(low.heating, f"node_{src}")
        b = getattr(high.heating, f"node_{src}")
        assert a.max() > 0
        np.testing.assert_allclose(b, ratio * a, rtol=1e-12, atol=1e-12 * a.max())


def test_coatings_of_a_case_keep_the_couplings_and_the_traced_directions(tmp_path,
                                                                         monkeypatch):
    calls = []
    real = heatstep.trace_once
    monkeypatch.setattr(heatstep, "trace_once",
                        lambda *a, **k: (calls.append(1), real(*a, **k))[1])
    import vfactor.heating as heating

    monkeypatch.setattr(heating, "trace_once", heatstep.trace_once)
    out = tmp_path / "r.h5"
    pipeline.run(_write(tmp_path, VEHICLE + COATED), out)
    assert len(calls) == 1                      # escaping directions traced once
    new, aged = read_cases(out)
    nodes = list(new.geometry.nodes.names)
    top = nodes.index("box.+z")
    assert new.geometry.nodes.solar_absorptivity[top] == 0.3
    assert aged.geometry.nodes.solar_absorptivity[top] == 0.6
    # the infrared band does not see the solar absorptivity: same Gebhart factors
    assert new.exchange.gebhart.toarray().tobytes() == aged.exchange.gebhart.toarray().tobytes()
    # the same incident light, absorbed with the new value (directly absorbed part of a
    # node without reflections onto it from others is alpha times incident)
    inc_new, inc_aged = new.heating.incident_solar, aged.heating.incident_solar
    np.testing.assert_array_equal(inc_new, inc_aged)
    assert np.all(aged.heating.node_solar[:, top] >= new.heating.node_solar[:, top])
    with h5py.File(out) as h:
        assert list(h["cases/name"].asstr()[()]) == ["new", "aged"]
        assert "heating" not in h and "orbit" not in h      # only under /cases
        assert h["cases/aged"].attrs["description"] == ""


def test_only_the_named_case_runs_and_unknown_names_are_refused(tmp_path, capsys):
    model = _write(tmp_path, VEHICLE + CASES)
    out = tmp_path / "one.h5"
    assert main(["-q", "run", str(model), "-o", str(out), "--case", "high"]) == 0
    assert read_results(out).case_names == ("high",)
    assert main(["-q", "run", str(model), "-o", str(out), "--case", "nope"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "no such case" in err[0] and "low, high" in err[0]


def test_summary_and_plots_compare_the_cases(tmp_path, capsys):
    model = _write(tmp_path, VEHICLE + CASES)
    out = tmp_path / "r.h5"
    assert main(["-q", "run", str(model), "-o", str(out)]) == 0
    capsys.readouterr()
    assert main(["summary", str(out)]) == 0
    text = capsys.readouterr().out
    assert "Design cases" in text and "hottest" in text
    assert text.index("Design cases") < text.index("Cautions")
    cmp = compare_cases(read_cases(out))
    for row in cmp["rows"]:
        if row["cases"]["high"]["avg"] > 0:
            assert row["hottest"] == "high" and row["coldest"] == "low"
    assert main(["summary", str(out), "--case", "low"]) == 0
    assert "design case low" in capsys.readouterr().out
    figures = tmp_path / "fig"
    assert main(["-q", "plot", str(out), "-o", str(figures)]) == 0
    assert (figures / "cases.png").is_file()
    assert (figures / "low" / "heat_loads.png").is_file()
    assert (figures / "high" / "heat_loads.png").is_file()


@pytest.mark.parametrize("table, message", [
    ('[[cases]]\nname = "a"\nwhatever = 1\n', "unknown case key 'whatever'"),
    ('[[cases]]\nname = "a"\n[cases.coatings.nothere]\nir_emissivity = 0.5\n',
     "no coating called 'nothere'"),
    ('[[cases]]\nname = "a"\n[[cases]]\nname = "a"\n', "two cases are called 'a'"),
    ('[[cases]]\nname = "a"\n[cases.coatings.paint]\nsolar_absorptivity = 1.5\n',
     "solar_absorptivity"),
    ('[[cases]]\nname = "a"\n[cases.orbit]\naltitude_km = -5.0\n', "altitude_km"),
])
def test_bad_case_tables_get_one_line(tmp_path, capsys, table, message):
    model = _write(tmp_path, VEHICLE + table)
    assert main(["run", str(model), "-o", str(tmp_path / "r.h5")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and message in err[0], err
    assert not (tmp_path / "r.h5").exists()
    assert main(["check", str(model)]) == 2
    captured = capsys.readouterr()
    assert message in captured.out + captured.err


def test_case_tables_merge_over_the_model_tables():
    from vfactor.cases import case_model

    model = load_model_text(VEHICLE + """
[environment]
case = "custom"
solar_constant = 1361.0
albedo = 0.3
planet_ir = 230.0

[[cases]]
name = "cold"
[cases.environment]
case = "cold"
[cases.orbit]
ltan = "06:00"
""", "m.toml")
    cold = case_model(model, model.cases[0])
    # naming a case drops the base's explicit constants; an orientation key drops the others
    assert cold.environment_table == {"case": "cold"}
    assert "raan_deg" not in cold.orbit_table and cold.orbit_table["ltan"] == "06:00"
    assert cold.orbit_table["altitude_km"] == 500.0
    bad = load_model_text(VEHICLE + '[[cases]]\nname = "cold"\n[cases.coatings.paint]\n'
                                    'ir_emissivity = 2.0\n', "m.toml")
    with pytest.raises(ModelError, match=r"case cold.*ir_emissivity"):
        case_model(bad, bad.cases[0])


def test_cases_on_worker_processes_and_resumed_give_the_same_bits(tmp_path):
    # worker processes (real, spawned) and a checkpoint with one section per case: the
    # bits of the run in this process (determinism contract, ARCHITECTURE section 3)
    model = _write(tmp_path, VEHICLE + COATED)
    here, there = tmp_path / "here.h5", tmp_path / "there.h5"
    pipeline.run(model, here)
    pipeline.run(model, there, workers=2, resume=True)
    with h5py.File(here) as a, h5py.File(there) as b:
        names = []
        a["cases"].visit(lambda n: names.append(n) if isinstance(a["cases"][n], h5py.Dataset)
                         else None)
        assert any(n.endswith("heating/solar") for n in names)
        for n in names:
            x, y = np.asarray(a["cases"][n][()]), np.asarray(b["cases"][n][()])
            if x.dtype == object:                                   # text
                assert x.tolist() == y.tolist(), n
            else:
                assert x.dtype == y.dtype and x.tobytes() == y.tobytes(), n
