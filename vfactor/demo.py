"""``vfactor demo [DIR]``: copy the invented demo satellite and run the whole chain on it.

Where the demo model comes from
-------------------------------
The demo model lives in the source tree as ``meshes/demo.toml`` with its mesh files
(``meshes/camera.stl``). :func:`demo_source` looks for it, in this order:

1. ``vfactor/data/demo/`` inside the installed package: in the source tree this is a
   symbolic link to ``../../meshes``, so a wheel built from it carries the files as package
   data (``[tool.setuptools.package-data] vfactor = ["data/*", "data/**/*"]``);
2. ``meshes/`` beside the ``vfactor`` package folder, i.e. the source tree of an editable
   install (``pip install -e .``, what ``make demo`` does), also used when a checkout has
   no symbolic links.

The copy goes to ``DIR`` (default ``vfactor-demo``); a ``demo.toml`` already in ``DIR`` that
differs from the shipped one is kept (it is the user's), and said so.
"""

from __future__ import annotations

import filecmp
import shutil
import sys
import time
import tomllib
from pathlib import Path

from .errors import VfactorError

__all__ = ["DEMO_MODEL", "demo_source", "copy_demo", "run_demo"]

DEMO_MODEL = "demo.toml"


def demo_source() -> Path:
    """Folder holding ``demo.toml`` and its mesh files (see the module notes)."""
    here = Path(__file__).resolve().parent
    for folder in (here / "data" / "demo", here.parent / "meshes"):
        if (folder / DEMO_MODEL).is_file():
            return folder
    raise VfactorError(f"the demo model {DEMO_MODEL} is not installed (looked in "
                       f"{here / 'data' / 'demo'} and {here.parent / 'meshes'})")


def _mesh_files(model_file: Path) -> list:
    doc = tomllib.loads(model_file.read_text(encoding="utf-8"))
    return [p["file"] for p in doc.get("parts", []) if isinstance(p, dict) and "file" in p]


def copy_demo(folder) -> tuple:
    """Copy the demo model and its meshes into ``folder``.

    Returns
    -------
    (pathlib.Path, list of str)
        The model file in ``folder`` and notes for the user (files kept as they were).
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise VfactorError(f"{folder}: exists and is not a folder; give another DIR")
    folder.mkdir(parents=True, exist_ok=True)
    src = demo_source()
    notes = []
    for name in [DEMO_MODEL] + _mesh_files(src / DEMO_MODEL):
        s, d = src / name, folder / name
        d.parent.mkdir(parents=True, exist_ok=True)
        if d.exists() and not filecmp.cmp(s, d, shallow=False):
            notes.append(f"kept your own {d} (differs from the shipped demo file)")
            continue
        if not d.exists():
            shutil.copyfile(s, d)
    return folder / DEMO_MODEL, notes


def run_demo(folder, *, rays=None, workers=1, quiet=False, verbose=False) -> int:
    """Copy the demo model into ``folder`` and run check, run, summary, plot, export, a
    short beta sweep and solve (quick-look temperatures).

    Returns the exit code (0, or 2 when the check finds errors).
    """
    from .casecompare import summary_of_file
    from .caseplots import plot_file
    from .checks import check_model, format_check_report
    from .export import export_cases
    from .pipeline import run
    from .progress import make_reporter
    from .solve import format_temperatures, solve_file
    from .sweep import format_sweep_table, model_beta_list, run_sweep
    from .tempout import write_outputs

    def say(text=""):
        if not quiet:
            print(text, flush=True)

    folder = Path(folder)
    start = time.perf_counter()
    model_file, notes = copy_demo(folder)
    say(f"== vfactor demo: the invented satellite 'Orrelwyn-2' in {folder}/")
    for n in notes:
        say(f"   note: {n}")
    say(f"\n== 1/7 check {model_file}")
    report = check_model(model_file)
    say(format_check_report(report).rstrip("\n"))
    if not report.ok:
        print(format_check_report(report).rstrip("\n") if quiet else "", end="", file=sys.stderr)
        return 2
    out = folder / "demo.h5"
    say(f"\n== 2/7 run {model_file} -o {out}")
    reporter = make_reporter(quiet=quiet, verbose=verbose)
    result = run(model_file, out, rays=rays, workers=workers, reporter=reporter)
    say(result.describe())
    say(f"\n== 3/7 summary {out}")
    say(summary_of_file(out).rstrip("\n"))
    say(f"\n== 4/7 plot {out} -o {folder / 'figures'}")
    figures = plot_file(out, folder / "figures")
    for f in figures:
        say(f"wrote {f}")
    say(f"\n== 5/7 export {out} (csv, vtk, gltf)")
    exported = export_cases(out, "csv", folder / "tables")
    exported += export_cases(out, "vtk", folder / "demo.vtu")
    exported += export_cases(out, "gltf", folder / "demo.glb")
    for where, count in _by_folder(exported):
        say(f"wrote {count} file(s) in {where}/")
    betas = model_beta_list(model_file)
    say(f"\n== 6/7 sweep {model_file} -o {folder / 'sweep'}  (beta "
        f"{', '.join(f'{b:g}' for b in betas)} deg)")
    swept = run_sweep(model_file, betas, folder / "sweep", rays=rays, reporter=reporter)
    say(format_sweep_table(swept.sweep).rstrip("\n"))
    for f in swept.files:
        say(f"wrote {f}")
    say(f"\n== 7/7 solve {out} -o {folder / 'temperatures'}  (quick-look temperatures)")
    solved = solve_file(out, reporter=reporter)
    say(format_temperatures(solved).rstrip("\n"))
    temperature_files = write_outputs(solved, folder / "temperatures", inputs=[out])
    for where, count in _by_folder(temperature_files):
        say(f"wrote {count} file(s) in {where}/")
    say(f"\n== done in {time.perf_counter() - start:.0f} s. Outputs in {folder}/:")
    say(f"   model       {model_file}  (edit it and rerun: vfactor run {model_file} -o {out})")
    say(f"   results     {out}  (HDF5; `vfactor summary {out}`)")
    say(f"   figures     {folder / 'figures'}/  "
        f"({', '.join(sorted({str(f.relative_to(folder / 'figures')) for f in figures}))})")
    tables = sorted({f.name for f in exported if f.suffix == ".csv"
                     and f.is_relative_to(folder / "tables")})
    say(f"   CSV tables  {folder / 'tables'}/  ({', '.join(tables)})")
    meshes = [f.name for f in exported if f.suffix in (".vtu", ".glb", ".pvd")
              and f.parent == folder]
    say(f"   meshes      {', '.join(meshes)} in {folder}/ (ParaView: the .pvd plays the "
        f"orbit; glTF viewers: .glb)")
    say(f"   temperatures {folder / 'temperatures'}/  (per case: temperatures.csv, "
        f"temperature_nodes.csv, temperatures.png; quick-look, not a verified model)")
    say(f"   sweep       {folder / 'sweep'}/  (sweep.csv, sweep.png: loads against beta)")
    return 0


def _by_folder(files) -> list:
    """(folder, number of files) in the order first written."""
    counts = {}
    for f in files:
        counts[f.parent] = counts.get(f.parent, 0) + 1
    return list(counts.items())
