"""Command line: help of every command, exit codes 0 / 1 / 2, one-line errors, --version."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from vfactor import cli, h5io

from results_sample import sample_results

COMMANDS = ("check", "run", "summary", "plot", "export", "demo")


@pytest.fixture
def results_file(tmp_path):
    return h5io.write_results(tmp_path / "out.h5", **sample_results())


def _run(capsys, *argv):
    code = cli.main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.mark.parametrize("command", COMMANDS)
def test_help_of_every_command(capsys, command):
    code, out, err = _run(capsys, command, "--help")
    assert code == 0 and err == ""
    assert out.startswith(f"usage: vfactor {command}")
    assert "examples:" in out


def test_top_level_help_and_version(capsys):
    code, out, _ = _run(capsys, "--help")
    assert code == 0
    for command in COMMANDS:
        assert command in out
    code, out, _ = _run(capsys, "--version")
    assert code == 0 and out.strip() == f"vfactor {cli._version()}"


def test_no_command_and_bad_arguments_exit_2(capsys):
    assert _run(capsys, )[0] == 2
    code, _, err = _run(capsys, "run", "model.toml")  # -o missing
    assert code == 2 and "-o/--output" in err
    code, _, err = _run(capsys, "run", "model.toml", "-o", "x.h5", "--rays", "-5")
    assert code == 2 and "--rays" in err
    code, _, err = _run(capsys, "run", "m.toml", "-o", "x.h5", "--workers", "2",
                        "--scheduler", "tcp://127.0.0.1:1")
    assert code == 2 and "not allowed with" in err
    code, _, err = _run(capsys, "export", "x.h5", "--format", "xls", "-o", "y")
    assert code == 2 and "invalid choice" in err


def test_summary_plot_export_succeed(capsys, results_file, tmp_path):
    code, out, err = _run(capsys, "summary", str(results_file))
    assert code == 0 and "Strongest couplings" in out and "Cautions" in out
    code, out, _ = _run(capsys, "summary", str(results_file), "--json")
    assert code == 0 and json.loads(out)["provenance"]["seed"] == 3
    code, out, _ = _run(capsys, "plot", str(results_file), "-o", str(tmp_path / "fig"))
    assert code == 0 and (tmp_path / "fig" / "heat_loads.png").is_file()
    for fmt, target in (("csv", "tables"), ("vtk", "m.vtu"), ("gltf", "m.glb")):
        code, out, _ = _run(capsys, "export", str(results_file), "--format", fmt, "-o",
                            str(tmp_path / target))
        assert code == 0 and "wrote" in out
    assert (tmp_path / "tables" / "couplings.csv").is_file()
    code, out, err = _run(capsys, "--quiet", "plot", str(results_file), "-o", str(tmp_path / "q"))
    assert code == 0 and out == "" and err == ""


def test_bad_results_file_is_one_line_exit_2(capsys, tmp_path):
    bad = tmp_path / "bad.h5"
    bad.write_text("hello")
    for argv in (("summary", str(bad)), ("plot", str(bad), "-o", str(tmp_path / "f")),
                 ("export", str(tmp_path / "missing.h5"), "--format", "csv", "-o", "t")):
        code, out, err = _run(capsys, *argv)
        assert code == 2, argv
        assert err.startswith("vfactor: error: ") and err.count("\n") == 1, err
        assert "Traceback" not in err


def test_check_demo_and_bad_model(capsys, demo_model_path, write_model):
    code, out, _ = _run(capsys, "check", str(demo_model_path))
    assert code == 0 and "OK" in out
    bad = write_model('[[parts]]\nname = "p"\nshape = "rectangle"\nsize = [1.0, -2.0]\n'
                      'front = { coating = "w" }\n')
    code, out, err = _run(capsys, "check", str(bad))
    # the error on standard error, one line like every command's bad input; the report
    # (table and verdict) on standard output
    assert code == 2 and err.count("\n") == 1
    assert err.startswith(f"vfactor: error: {bad}: part 'p' size: ") and "-2.0" in err
    assert "FAILED: 1 error(s)" in out and "vfactor: error" not in out


def test_run_with_bad_model_is_one_line_exit_2(capsys, write_model, tmp_path):
    bad = write_model('[[parts]]\nname = "p"\nshape = "hexagon"\nfront = { coating = "w" }\n')
    code, out, err = _run(capsys, "run", str(bad), "-o", str(tmp_path / "o.h5"))
    assert code == 2
    assert err.startswith("vfactor: error: ") and err.count("\n") == 1 and "hexagon" in err
    assert "Traceback" not in err
    assert not (tmp_path / "o.h5").exists()
    code, _, err = _run(capsys, "run", str(tmp_path / "none.toml"), "-o", str(tmp_path / "o.h5"))
    assert code == 2 and err.count("\n") == 1 and "none.toml" in err
    code, _, err = _run(capsys, "run", str(bad), "-o", str(tmp_path / "no" / "o.h5"))
    assert code == 2 and "does not exist" in err


def test_internal_error_exit_1_traceback_only_when_verbose(capsys, results_file, monkeypatch):
    def broken(path, **kw):
        raise RuntimeError("simulated bug")

    from vfactor import casecompare

    monkeypatch.setattr(casecompare, "read_results", broken)
    code, _, err = _run(capsys, "summary", str(results_file))
    assert code == 1 and "internal error" in err and "simulated bug" in err
    assert "Traceback" not in err and err.count("\n") == 1
    code, _, err = _run(capsys, "summary", str(results_file), "--verbose")
    assert code == 1 and "Traceback" in err


def test_python_dash_m_and_console_script_agree(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "vfactor", "--version"], capture_output=True,
                          text=True, timeout=120, check=False)
    assert proc.returncode == 0 and proc.stdout.strip() == f"vfactor {cli._version()}"


def test_run_good_model_exit_0(capsys, write_model, tmp_path):
    from test_pipeline import BOX

    model = write_model(BOX.replace("rays_per_node = 4000", "rays_per_node = 800"))
    out = tmp_path / "ok.h5"
    code, text, err = _run(capsys, "run", str(model), "-o", str(out), "--seed", "3")
    assert code == 0 and out.is_file()
    assert f"wrote {out}" in text and "seed 3" in text
    assert err == ""  # not a terminal: no progress bar
    code, text, err = _run(capsys, "run", str(model), "-o", str(out), "--quiet")
    assert code == 0 and text == "" and err == ""
    code, text, err = _run(capsys, "run", str(model), "-o", str(out), "--verbose")
    assert code == 0 and "view factors: done" in err  # stage lines when verbose


def test_demo_copy_keeps_user_edits(tmp_path):
    from vfactor import demo

    model, notes = demo.copy_demo(tmp_path / "d")
    assert model.read_text() == (demo.demo_source() / "demo.toml").read_text()
    assert (tmp_path / "d" / "camera.stl").is_file() and notes == []
    model.write_text(model.read_text() + "\n# my edit\n")
    _, notes = demo.copy_demo(tmp_path / "d")
    assert len(notes) == 1 and "kept your own" in notes[0]
    assert model.read_text().endswith("# my edit\n")


def test_reader_closing_the_pipe_is_not_an_internal_error(results_file, monkeypatch, capfd):
    # `vfactor summary OUT.h5 --json | head -1`: the reader goes away; the command must end
    # quietly (exit 1 as Python's note on SIGPIPE recommends), not report an internal error
    import io
    import os

    read_end, write_end = os.pipe()
    os.close(read_end)
    stream = io.TextIOWrapper(os.fdopen(write_end, "wb", buffering=0), write_through=True)
    monkeypatch.setattr(sys, "stdout", stream)
    code = cli.main(["summary", str(results_file), "--json"])
    monkeypatch.undo()
    stream.close()
    _, err = capfd.readouterr()
    assert code == 1
    assert "internal error" not in err and "Broken pipe" not in err
