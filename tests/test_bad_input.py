"""Bad and odd model files through the command line: one line, exit 2, never a traceback.

Each reproducer of the bad-input sweep (issue 11) is run through ``vfactor.cli.main`` in
this process. An error must end as exactly one stderr line ``vfactor: error: FILE: WHERE:
WHAT`` with exit code 2; a legal but probably wrong value is a warning of ``check`` (exit
0) that names the key and the fix; a run that would not fit in memory is refused by
``check`` and by ``run`` before anything is allocated. A property test substitutes random
numbers and strings into the keys of a small model: ``check`` never fails internally.
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from vfactor import cli, resources

BASE = {
    "model": {"name": "fuzz box"},
    "coatings": {"w": {"solar_absorptivity": 0.2, "ir_emissivity": 0.8}},
    "parts": [{"name": "body", "shape": "box", "size": [1.0, 1.0, 1.0],
               "front": {"coating": "w", "nodes": "per-face"}}],
    "radiation": {"rays_per_node": 20000},
    "orbit": {"altitude_km": 550.0, "inclination_deg": 97.6,
              "epoch": "2027-03-21T00:00:00Z"},
    "attitude": {"mode": "nadir"},
    "environment": {"case": "nominal"},
}
"""A demo-like minimal model: one box with a node per face, an orbit, nadir pointing."""


def _model(tmp_path, name="model.toml", **changes):
    """Write BASE with ``changes``: ``section={key: value}`` merges into a table (value
    None removes the key); ``part={...}`` into the one part."""
    doc = {k: (dict(v) if isinstance(v, dict) else [dict(p) for p in v])
           for k, v in BASE.items()}
    for section, values in changes.items():
        table = doc["parts"][0] if section == "part" else doc.setdefault(section, {})
        for key, value in values.items():
            if value is None:
                table.pop(key, None)
            else:
                table[key] = value
    path = tmp_path / name
    path.write_text(tomli_w.dumps(doc))
    return path


def _cli(capsys, *argv):
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _one_error_line(err: str, path, where: str) -> str:
    """The single stderr line of a bad input; it names the file and the location."""
    assert err.count("\n") == 1 and err.endswith("\n"), err
    assert "Traceback" not in err and "internal error" not in err
    assert err.startswith(f"vfactor: error: {path}: {where}: "), err
    return err


# --------------------------------------------------------------------------------------
# errors: one line, exit 2, in check and in run
# --------------------------------------------------------------------------------------
ERRORS = [
    # (changes, where, words the message must hold)
    (dict(attitude={"nadir_axis": ""}), "[attitude] nadir_axis", ["''", "'+x'"]),
    (dict(orbit={"epoch": "0001-01-01T00:00:00+01:00"}), "[orbit] epoch",
     ["out of range"]),
    (dict(orbit={"epoch": "0001-03-21T00:00:00Z"}), "[orbit] epoch",
     ["0001-03-21", "ephemeris"]),
    (dict(orbit={"epoch": "9999-12-31T23:59:59Z"}), "[orbit] epoch",
     ["9999-12-31", "ephemeris"]),
    (dict(orbit={"step_s": 1e15}), "[orbit] step_s", ["<= 1e+10 s"]),
    (dict(orbit={"step_s": 1e-320}), "[orbit] step_s", ["infinitely many", "2000000"]),
    (dict(orbit={"orbits": 1e308}), "[orbit] orbits", ["<= 2e+06"]),
    (dict(orbit={"altitude_km": 0.0}), "[orbit] altitude_km", ["> 0 km"]),
    (dict(orbit={"altitude_km": 5.5e8}), "[orbit] altitude_km", ["metres", "km"]),
    (dict(part={"front": None}), "[[parts]]", ["no part has a front or back"]),
    (dict(radiation={"rays_per_node": 10 ** 12}), "[radiation] rays_per_node",
     ["32-bit ray index", "34359738360"]),
    (dict(radiation={"rays_per_node": 4 * 10 ** 9}), "[radiation] rays_per_node",
     ["64-bit sums"]),
    (dict(attitude={"mode": "spin", "rate_rpm": 0}), "[attitude] rate_rpm",
     ["no spin", "inertial"]),
    (dict(attitude={"mode": "spin", "rate_rpm": 1e6}), "[attitude] rate_rpm",
     ["<= 1000 rpm"]),
    (dict(part={"size": [1e300, 1.0, 1.0]}), "part 'body' size", ["10 km", "1e+300"]),
    (dict(part={"front": {"coating": "w", "node": "a\nb"}}), "part 'body' front node",
     ["'a\\nb'", "printable"]),
    (dict(part={"front": {"coating": "w", "node": "x\x1b[31m"}}),
     "part 'body' front node", ["'\\x1b'"]),
    (dict(part={"name": " body"}), "part #1 name", ["spaces"]),
    (dict(environment={"solar_constant": 1e9}), "[environment] solar_constant",
     ["<= 1e+08 W m-2"]),
    (dict(environment={"albedo": 30}), "[environment] albedo", ["fraction"]),
    (dict(radiation={"planet_ray_factor": {"body.+q": 4}}), "[radiation] planet_ray_factor",
     ["no node 'body.+q'", "did you mean 'body.+"]),
    (dict(radiation={"planet_ray_factor": {"body.+x": 17}}),
     "[radiation] planet_ray_factor body.+x", ["<= 16", "17"]),
    (dict(radiation={"planet_ray_factor": {"body.+x": 0}}),
     "[radiation] planet_ray_factor body.+x", [">= 1"]),
    (dict(radiation={"planet_ray_factor": 4}), "[radiation] planet_ray_factor",
     ["must be a table"]),
]


@pytest.mark.parametrize("changes, where, words", ERRORS,
                         ids=[e[1] + " " + repr(e[0])[:40] for e in ERRORS])
def test_bad_input_is_one_line_exit_2_in_check_and_run(capsys, tmp_path, changes, where,
                                                       words):
    path = _model(tmp_path, **changes)
    code, out, err = _cli(capsys, "check", path)
    assert code == 2
    line = _one_error_line(err, path, where)
    for word in words:
        assert word in line, line
    assert "FAILED: 1 error(s)" in out
    # run stops at the same error, before writing anything
    target = tmp_path / "out.h5"
    code, out, err = _cli(capsys, "run", path, "-o", target)
    assert code == 2 and out == ""
    assert _one_error_line(err, path, where) == line
    assert not target.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["model.toml"]


# a two-line element set of an invented vehicle (51.6 deg, 15.5 rev/day), checksums made
# by the format's modulo-10 rule (CelesTrak, "NORAD Two-Line Element Set Format")
TLE1 = "1 99999U 27001A   27080.50000000  .00000000  00000-0  00000-0 0  9997"
TLE2 = "2 99999  51.6000 120.0000 0000100   0.0000   0.0000 15.50000000    15"


def test_tle_checksums_are_checked(capsys, tmp_path):
    from vfactor.orbittable import tle_checksum

    # the rule by hand for line 1: digits summed, '-' counts 1 (two minus signs)
    digits = sum(int(c) for c in TLE1[:68] if c.isdigit())
    assert tle_checksum(TLE1) == (digits + TLE1[:68].count("-")) % 10 == int(TLE1[-1])
    assert tle_checksum(TLE2) == int(TLE2[-1])
    good = _model(tmp_path, orbit={"altitude_km": None, "inclination_deg": None,
                                   "epoch": None, "tle": f"{TLE1}\n{TLE2}"})
    code, _, err = _cli(capsys, "check", good)
    assert code == 0 and err == ""
    # one digit changed in line 2 (inclination 51.6 -> 52.6): the checksum no longer fits
    bad_line = TLE2.replace("51.6000", "52.6000")
    bad = _model(tmp_path, orbit={"altitude_km": None, "inclination_deg": None,
                                  "epoch": None, "tle": f"{TLE1}\n{bad_line}"})
    code, _, err = _cli(capsys, "check", bad)
    assert code == 2
    line = _one_error_line(err, bad, "[orbit] tle")
    expected = (int(TLE2[-1]) + 1) % 10
    assert "element line 2" in line and f"give {expected}" in line and "'5'" in line
    # a line cut short loses its checksum column
    short = _model(tmp_path, orbit={"altitude_km": None, "inclination_deg": None,
                                    "epoch": None, "tle": f"{TLE1[:60]}\n{TLE2}"})
    code, _, err = _cli(capsys, "check", short)
    assert code == 2 and "element line 1 has 60 characters" in err


# --------------------------------------------------------------------------------------
# warnings: legal but probably wrong, in check (exit 0) and in run's notes
# --------------------------------------------------------------------------------------
WARNINGS = [
    (dict(environment={"solar_constant": 1.361}), "[environment] solar_constant",
     ["kW m-2", "write 1361"]),
    (dict(orbit={"altitude_km": 0.001}), "[orbit] altitude_km", ["Karman line", "100 km"]),
    (dict(orbit={"step_s": 0.01}), "[orbit] step_s", ["seconds"]),
    (dict(orbit={"step_s": 1e6}), "[orbit] step_s", ["one instant"]),
    (dict(orbit={"raan_deg": 400.0}), "[orbit] raan_deg", ["full turn"]),
    (dict(environment={"planet_ir": 2370.0}), "[environment] planet_ir", ["150-350"]),
    # 10 rpm = one turn in 6 s; the default 72 steps of a 95.6-min orbit are 79.7 s long:
    # 13.3 turns per step, far beyond the 1/8 turn a step may cover
    (dict(attitude={"mode": "spin", "rate_rpm": 10.0}), "[attitude] rate_rpm",
     ["13.3 turns", "aliases", "step_s <= 0.75 s", "Nyquist"]),
    (dict(attitude={"mode": "spin", "rate_rpm": 500.0}), "[attitude] rate_rpm",
     ["unusual"]),
    # 500 rpm over 10 orbits: 8 steps a turn would be 3.8 million steps, more than a run
    # may take
    (dict(attitude={"mode": "spin", "rate_rpm": 500.0}, orbit={"orbits": 10}),
     "[attitude] rate_rpm", ["aliases", "cannot be followed within 2000000 steps"]),
]


@pytest.mark.parametrize("changes, where, words", WARNINGS,
                         ids=[w[1] + " " + repr(w[0])[:40] for w in WARNINGS])
def test_probably_wrong_values_are_warnings_with_the_fix(capsys, tmp_path, changes, where,
                                                         words):
    path = _model(tmp_path, **changes)
    code, out, err = _cli(capsys, "check", path)
    assert code == 0 and err == ""
    lines = [x for x in out.splitlines() if x.startswith(f"vfactor: warning: {path}: {where}: ")
             and words[0] in x]
    assert len(lines) == 1, out
    for word in words:
        assert word in lines[0], lines[0]


def test_spin_sampled_finely_enough_draws_no_warning(capsys, tmp_path):
    # 0.1 rpm: a 600 s turn; 1000 steps of a 95.6-min orbit are 5.7 s < 600 s / 8
    path = _model(tmp_path, attitude={"mode": "spin", "rate_rpm": 0.1},
                  orbit={"steps_per_orbit": 1000})
    code, out, _ = _cli(capsys, "check", path)
    assert code == 0 and "aliases" not in out and "OK: no errors, 0 warning(s)" in out


def test_run_notes_carry_the_check_warnings(capsys, tmp_path):
    path = _model(tmp_path, environment={"solar_constant": 1.361},
                  radiation={"rays_per_node": 800}, orbit={"steps_per_orbit": 4})
    code, out, err = _cli(capsys, "run", path, "-o", tmp_path / "o.h5")
    assert code == 0 and err == ""
    assert "warning: [environment] solar_constant: 1.361 W m-2 is below" in out


# --------------------------------------------------------------------------------------
# argument errors and --verbose
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("argv, words", [
    (["run", "m.toml"], ["required", "-o/--output", "see vfactor run --help"]),
    (["run", "m.toml", "-o", "x.h5", "--rays", "-5"], ["--rays", "at least 1"]),
    (["export", "x.h5", "--format", "xls", "-o", "y"], ["invalid choice", "'xls'",
                                                       "see vfactor export --help"]),
    (["frobnicate"], ["invalid choice", "see vfactor --help"]),
    ([], ["no command", "see vfactor --help"]),
])
def test_argument_errors_are_one_line(capsys, argv, words):
    code, out, err = _cli(capsys, *argv)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and err.startswith("vfactor: error: ")
    assert "usage:" not in err
    for word in words:
        assert word in err, err


def test_verbose_shows_no_traceback_for_bad_input(capsys, tmp_path):
    path = _model(tmp_path, attitude={"nadir_axis": ""})
    for command in (["check", path, "--verbose"], ["run", path, "-o", tmp_path / "o.h5",
                                                   "--verbose"]):
        code, _, err = _cli(capsys, *command)
        assert code == 2 and "Traceback" not in err
        assert [x for x in err.splitlines() if x.startswith("vfactor: error: ")] == \
            [f"vfactor: error: {path}: [attitude] nadir_axis: axis must be '+x', '-x', "
             f"'+y', '-y', '+z', '-z' or [x, y, z], got ''"]


# --------------------------------------------------------------------------------------
# resources
# --------------------------------------------------------------------------------------
def _per_facet_demo(tmp_path, max_edge):
    """The demo model with a node per facet of the body at the given max_edge."""
    from conftest import DEMO_MODEL

    text = DEMO_MODEL.read_text()
    text = text.replace('max_edge = 0.06\nfront = { coating = "hull_white", nodes = "per-face" }',
                        f'max_edge = {max_edge}\nfront = {{ coating = "hull_white", '
                        f'nodes = "per-facet" }}')
    assert "per-facet" in text
    # the body's nodes are renamed: drop the [network] section and the planet ray factors,
    # which name them
    text = text[:text.index("[network]")] if "[network]" in text else text
    text = "\n".join(line for line in text.splitlines()
                     if not line.startswith("planet_ray_factor")) + "\n"
    (tmp_path / "camera.stl").write_bytes((DEMO_MODEL.parent / "camera.stl").read_bytes())
    path = tmp_path / "demo.toml"
    path.write_text(text)
    return path


def test_resource_estimate_counts_dense_matrices_and_per_step_arrays(tmp_path):
    from vfactor.geometry import build_geometry
    from vfactor.model import load_model

    model = load_model(_per_facet_demo(tmp_path, 0.1))
    geometry = build_geometry(model)
    est = resources.estimate_resources(model, geometry, cores=2)
    n, f = geometry.n_nodes, geometry.n_facets
    # our own formulas (resources.estimate_resources Notes), recomputed here by hand
    assert est.parts["node couplings"] == resources.COUPLING_COPIES * 8.0 * n * min(
        n + 2, resources.COUPLED_PER_ROW, model.radiation.rays_per_node)
    assert est.parts["per-step results"] == 8.0 * 72 * (3 * f + 11 * n + 35)
    assert est.steps == 72 and est.cores == 2
    # the view-factor rays: n nodes x 100000, four times for the traced Gebhart factors
    # (the demo has infrared specular shares)
    sides = int((geometry.front_node >= 0).sum() + (geometry.back_node >= 0).sum())
    assert est.rays == 4 * n * 100_000 + sides * 256
    # more rays per node: the time grows, the memory does not
    more = resources.estimate_resources(model, geometry, rays=10 ** 6, cores=2)
    assert more.seconds > est.seconds and more.memory_bytes == est.memory_bytes


@pytest.mark.parametrize("changes, largest", [
    (dict(radiation={"sun_rays_per_facet": 10 ** 12}), "sun samples of a step"),
    (dict(radiation={"planet_rays_per_facet": 10 ** 9}), "heating ray cache"),
    (dict(orbit={"steps_per_orbit": 2_000_000}), "per-step results"),
])
def test_check_refuses_what_exceeds_the_machine(capsys, tmp_path, monkeypatch, changes,
                                                largest):
    monkeypatch.setattr(resources, "machine_memory_bytes", lambda: 2.0 ** 30)   # 1 GiB
    path = _model(tmp_path, **changes)
    code, out, err = _cli(capsys, "check", path)
    assert code == 2
    line = _one_error_line(err, path, "resources")
    assert f"({largest}: " in line and "more than this machine's 1 GiB" in line
    assert f"vfactor: note: {path}: resources: estimated peak memory" in out


def test_per_facet_nodes_on_the_demo_are_refused(capsys, tmp_path):
    # max_edge 0.004 m on the body makes ~600 000 nodes: their sparse couplings alone
    # (up to 1000 per row) need ~100 GB, more than any machine these tests run on
    path = _per_facet_demo(tmp_path, 0.004)
    code, out, err = _cli(capsys, "check", path)
    assert code == 2
    line = _one_error_line(err, path, "resources")
    assert "node couplings" in line and "per-facet" in line


def test_many_steps_warn_of_the_time(capsys, tmp_path):
    # 2 000 000 steps of a 6-facet box: at 6 ms a step (resources.SECONDS_PER_STEP, measured)
    # over 3 hours, far beyond the hour above which check warns
    path = _model(tmp_path, orbit={"steps_per_orbit": 2_000_000})
    code, out, err = _cli(capsys, "check", path)
    assert code == 0 and err == ""
    (line,) = [x for x in out.splitlines() if x.startswith(f"vfactor: warning: {path}: "
                                                          f"resources: a run would take")]
    assert "2000000 heating steps" in line
    est_h = 2_000_000 * resources.SECONDS_PER_STEP / 3600.0
    assert est_h > 3.0 and " h on " in line


def test_memory_warning_above_half_the_machine(capsys, tmp_path, monkeypatch):
    path = _model(tmp_path, orbit={"steps_per_orbit": 100_000})
    from vfactor.geometry import build_geometry
    from vfactor.model import load_model

    model = load_model(path)
    need = resources.estimate_resources(model, build_geometry(model)).memory_bytes
    monkeypatch.setattr(resources, "machine_memory_bytes", lambda: 1.5 * need)
    code, out, err = _cli(capsys, "check", path)
    assert code == 0 and err == ""
    assert "more than 50 % of this machine's" in out
    monkeypatch.setattr(resources, "machine_memory_bytes", lambda: 3.0 * need)
    code, out, _ = _cli(capsys, "check", path)
    assert code == 0 and "of this machine's" not in out


def test_run_refuses_even_when_the_check_passed_before(capsys, tmp_path, monkeypatch):
    # check passes and leaves its record; run on a machine too small for the model must
    # still refuse, in one line, before writing anything (the record does not skip it)
    path = _model(tmp_path, radiation={"rays_per_node": 800})
    code, _, _ = _cli(capsys, "check", path)
    assert code == 0
    monkeypatch.setattr(resources, "machine_memory_bytes", lambda: 1e8)   # 100 MB
    target = tmp_path / "o.h5"
    code, out, err = _cli(capsys, "run", path, "-o", target)
    assert code == 2 and out == ""
    assert "more than this machine's" in _one_error_line(err, path, "resources")
    assert not target.exists()


def test_machine_memory_is_positive_and_below_a_petabyte():
    memory = resources.machine_memory_bytes()
    assert memory is not None and 1e8 < memory < 1e15


# --------------------------------------------------------------------------------------
# files a mesh file refers to
# --------------------------------------------------------------------------------------
def _xdmf(folder, name, h5_reference):
    """An XDMF file of a tetrahedron whose points and triangles live in HDF5 datasets."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_text(
        '<Xdmf Version="3.0"><Domain><Grid Name="Grid"><Geometry GeometryType="XYZ">'
        f'<DataItem DataType="Float" Dimensions="4 3" Format="HDF" Precision="8">'
        f'{h5_reference}:/points</DataItem></Geometry>'
        '<Topology TopologyType="Triangle" NumberOfElements="4" NodesPerElement="3">'
        f'<DataItem DataType="Int" Dimensions="4 3" Format="HDF" Precision="8">'
        f'{h5_reference}:/triangles</DataItem></Topology></Grid></Domain></Xdmf>')


def _tetrahedron_h5(path):
    import h5py

    with h5py.File(path, "w") as f:
        f["points"] = np.array([[0, 0, 0], [0.3, 0, 0], [0, 0.3, 0], [0, 0, 0.3]], float)
        f["triangles"] = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]], np.int64)


def _mesh_model(folder, mesh, extra=""):
    path = folder / "sat.toml"
    path.write_text(extra + '[coatings.w]\nsolar_absorptivity = 0.2\nir_emissivity = 0.8\n'
                    f'[[parts]]\nname = "tet"\nshape = "mesh"\nfile = "{mesh}"\n'
                    'front = { coating = "w" }\n')
    return path


def test_xdmf_may_read_only_files_in_the_model_folder(capsys, tmp_path):
    model_dir, outside = tmp_path / "model", tmp_path / "elsewhere"
    outside.mkdir()
    _tetrahedron_h5(outside / "secret.h5")
    _xdmf(model_dir, "abs.xdmf", outside / "secret.h5")
    path = _mesh_model(model_dir, "abs.xdmf")
    code, _, err = _cli(capsys, "check", path)
    assert code == 2
    line = _one_error_line(err, path, "part 'tet' file")
    assert f"refers to '{outside / 'secret.h5'}'" in line and "XDMF DataItem (HDF)" in line
    assert "allow_outside_files = true" in line
    code, _, err = _cli(capsys, "run", path, "-o", model_dir / "o.h5")
    assert code == 2 and "secret.h5" in err and not (model_dir / "o.h5").exists()
    # allowed explicitly: read, 4 facets
    allowed = _mesh_model(model_dir, "abs.xdmf", "[model]\nallow_outside_files = true\n")
    code, out, err = _cli(capsys, "check", allowed)
    assert code == 0 and err == "" and "1 parts, 4 facets" in out
    # a relative name through '..' is outside too
    _xdmf(model_dir, "up.xdmf", "../elsewhere/secret.h5")
    code, _, err = _cli(capsys, "check", _mesh_model(model_dir, "up.xdmf"))
    assert code == 2 and str(outside / "secret.h5") in err


def test_xdmf_relative_paths_resolve_against_the_xdmf_folder(capsys, tmp_path):
    # the HDF5 file beside the XDMF file, in a subfolder of the model's folder: read from
    # there (trimesh's route resolved it against a temporary folder instead)
    sub = tmp_path / "meshes"
    _xdmf(sub, "tet.xdmf", "tet.h5")
    _tetrahedron_h5(sub / "tet.h5")
    code, out, err = _cli(capsys, "check", _mesh_model(tmp_path, "meshes/tet.xdmf"))
    assert code == 0 and err == "" and "1 parts, 4 facets" in out


def test_hdf5_external_link_out_of_the_folder_is_refused(capsys, tmp_path):
    import h5py

    model_dir, outside = tmp_path / "model", tmp_path / "elsewhere"
    outside.mkdir()
    _tetrahedron_h5(outside / "secret.h5")
    model_dir.mkdir()
    with h5py.File(model_dir / "inside.h5", "w") as f:
        f["triangles"] = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]], np.int64)
        f["points"] = h5py.ExternalLink(str(outside / "secret.h5"), "/points")
    _xdmf(model_dir, "linked.xdmf", "inside.h5")
    path = _mesh_model(model_dir, "linked.xdmf")
    code, _, err = _cli(capsys, "check", path)
    assert code == 2
    line = _one_error_line(err, path, "part 'tet' file")
    assert "through 'inside.h5'" in line and "HDF5 external link" in line
    assert str(outside / "secret.h5") in line


# --------------------------------------------------------------------------------------
# property test: random numbers and strings in the keys of a small model
# --------------------------------------------------------------------------------------
_numbers = st.one_of(
    st.integers(min_value=-(2 ** 63), max_value=2 ** 63 - 1),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0, 1, -1, 0.0, 1e-320, 1e300, -1e300, 1e15, 0.001, 1.361, 10 ** 12]),
)
_strings = st.one_of(
    st.text(max_size=12),
    st.sampled_from(["", " ", "+x", "-z", "z", "+q", "a\nb", "\x1b[2J", "sun", "north",
                     "hot", "custom", "nadir", "spin", "2027-03-21T00:00:00Z",
                     "0001-01-01T00:00:00+01:00", "9999-12-31T23:59:59-01:00", "10:30",
                     "25:61", "per-facet", "mm", "w"]),
)
_values = st.one_of(
    _numbers, _strings, st.booleans(),
    st.lists(st.one_of(st.floats(allow_nan=True, allow_infinity=True),
                       st.integers(min_value=-10, max_value=10)), max_size=4),
    st.datetimes(min_value=dt.datetime(1, 1, 1), max_value=dt.datetime(9999, 12, 31),
                 timezones=st.sampled_from([dt.timezone.utc,
                                            dt.timezone(dt.timedelta(hours=1)),
                                            dt.timezone(dt.timedelta(hours=-1))])),
)
# keys whose values are fuzzed; max_edge only from values that keep the box small (a fine
# max_edge is legal and merely slow to check)
_KEYS = [("orbit", k) for k in ("altitude_km", "inclination_deg", "epoch", "orbits",
                                 "steps_per_orbit", "step_s", "raan_deg", "ltan",
                                 "argument_of_latitude_deg", "sun_synchronous", "shadow",
                                 "type")] + \
        [("attitude", k) for k in ("mode", "nadir_axis", "velocity_axis", "yaw_deg",
                                    "rate_rpm", "spin_axis", "spin_direction")] + \
        [("environment", k) for k in ("case", "solar_constant", "albedo", "planet_ir")] + \
        [("radiation", k) for k in ("rays_per_node", "seed", "sun_rays_per_facet",
                                     "planet_rays_per_facet", "target_error")] + \
        [("part", k) for k in ("size", "center", "name", "z_axis")] + \
        [("model", k) for k in ("name", "length_unit", "allow_outside_files")] + \
        [("coating", k) for k in ("solar_absorptivity", "ir_emissivity")]

_changes = st.dictionaries(st.sampled_from(_KEYS), _values, min_size=1, max_size=4)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(_changes)
def test_random_values_never_make_an_internal_error(capsys, tmp_path, changes):
    grouped: dict = {}
    for (section, key), value in changes.items():
        if section == "part" and key == "size" and isinstance(value, list):
            value = [v for v in value if not (isinstance(v, float) and math.isfinite(v)
                                              and 0 < abs(v) < 0.05)]
        grouped.setdefault(section, {})[key] = value
    coating = grouped.pop("coating", None)
    path = _model(tmp_path, name="fuzz.toml", **grouped)
    if coating:
        text = path.read_text().replace("[coatings.w]", "[coatings.w]\n" + tomli_w.dumps(
            coating), 1)
        doc_ok = True
        try:
            import tomllib

            tomllib.loads(text)
        except Exception:  # noqa: BLE001 - a duplicate key: keep the file without it
            doc_ok = False
        if doc_ok:
            path.write_text(text)
    code, out, err = _cli(capsys, "check", path)
    assert code in (0, 2), err
    assert "Traceback" not in err and "internal error" not in err, err
    assert "Warning" not in err, err          # no numpy or Python warnings printed
    lines = err.splitlines()
    if code == 2:
        assert lines and all(x.startswith("vfactor: error: ") for x in lines), err
        assert all(x.isprintable() for x in lines)
    else:
        assert err == ""
