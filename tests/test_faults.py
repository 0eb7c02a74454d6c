"""Faults: nothing lost, nothing half-written, every failure one line (README, "What is
guaranteed on faults").

Each test drives the real command (``vfactor.cli.main`` in this process, or a real
``vfactor`` process killed with a real signal) and checks the exit code, the single line on
standard error, and that no file changed or was left behind. A full disk is simulated
without root by making the low-level writes of our temporaries fail with ENOSPC
(``os.write`` for our own descriptors, ``open`` for writers that open the file by name);
where this process may mount file systems, a real 64 kB tmpfs is filled as well.
"""

from __future__ import annotations

import builtins
import errno
import hashlib
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from vfactor import atomic, cli, h5io, outputlock, pipeline

from conftest import DEMO_MODEL, REPO
from results_sample import sample_results
from test_pipeline import BOX

VFACTOR = [sys.executable, "-m", "vfactor"]


# ---------------------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------------------
def _cli(capsys, *argv):
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def _one_error_line(err: str) -> str:
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("vfactor: error: "), err
    return lines[0]


def _tree(folder: Path) -> dict:
    """Every file below ``folder`` -> SHA-256 of its bytes (hidden files included)."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _temporaries(folder: Path) -> list:
    return [p.name for p in folder.rglob("*") if atomic.is_ours(p.name)]


@pytest.fixture
def results(tmp_path):
    return h5io.write_results(tmp_path / "res.h5", **sample_results())


@pytest.fixture
def box(write_model):
    return write_model(BOX.replace("rays_per_node = 4000", "rays_per_node = 800"),
                       name="box.toml")


def test_a_zombie_is_not_alive():
    p = subprocess.Popen([sys.executable, "-c", "pass"])
    try:
        deadline = time.monotonic() + 10
        while atomic.pid_alive(p.pid) and time.monotonic() < deadline:
            time.sleep(0.02)  # exited but not reaped: a zombie until wait()
        assert not atomic.pid_alive(p.pid)
        assert atomic.pid_alive(os.getpid())
    finally:
        p.wait()


def _dead_pid() -> int:
    """The PID of a process that has ended (reaped, so it is no zombie either)."""
    p = subprocess.Popen([sys.executable, "-c", "pass"])
    p.wait()
    assert not atomic.pid_alive(p.pid)
    return p.pid


# ---------------------------------------------------------------------------------------
# Inputs are never overwritten
# ---------------------------------------------------------------------------------------
ONTO_INPUT = {  # name of the results file, command line after it (INPUT = the results file)
    "vtk onto the input": ("res.vtu", ["export", "INPUT", "--format", "vtk", "-o", "res.vtu"]),
    "vtk bare name onto the input": ("res.vtu", ["export", "INPUT", "--format", "vtk",
                                                 "-o", "res"]),
    "gltf onto the input": ("res.glb", ["export", "INPUT", "--format", "gltf", "-o", "res.glb"]),
    "csv folder holding the input": ("tables/nodes.csv",
                                     ["export", "INPUT", "--format", "csv", "-o", "tables"]),
    "plot folder holding the input": ("figures/couplings.png", ["plot", "INPUT", "-o", "figures"]),
}


@pytest.mark.parametrize("case", sorted(ONTO_INPUT))
def test_export_and_plot_refuse_to_replace_their_input(tmp_path, capsys, monkeypatch, case):
    name, argv = ONTO_INPUT[case]
    work = tmp_path / "work"
    (work / name).parent.mkdir(parents=True)
    h5io.write_results(work / name, **sample_results())
    before = _tree(work)
    monkeypatch.chdir(work)
    code, _, err = _cli(capsys, *[name if a == "INPUT" else a for a in argv])
    line = _one_error_line(err)
    assert code == 2 and "would overwrite an input" in line and name in line
    assert _tree(work) == before  # the input is unchanged and nothing was added


def test_a_hard_link_to_the_input_is_the_input(results, tmp_path, capsys):
    link = tmp_path / "same.glb"
    os.link(results, link)
    before = _tree(tmp_path)
    code, _, err = _cli(capsys, "export", link, "--format", "gltf", "-o", link)
    assert code == 2 and "would overwrite an input" in _one_error_line(err)
    code, _, err = _cli(capsys, "export", results, "--format", "gltf", "-o", link)
    assert code == 2 and "would overwrite an input" in _one_error_line(err)
    assert _tree(tmp_path) == before


# ---------------------------------------------------------------------------------------
# Full disk, read-only folder (simulated at the lowest write of our temporaries)
# ---------------------------------------------------------------------------------------
class _FailingFile:
    """A file object opened by name by another library: its writes fail after ``budget``
    bytes with ``code`` (so a partial temporary exists when the failure comes)."""

    def __init__(self, fh, code, budget):
        self._fh, self._code, self._left = fh, code, budget

    def write(self, data):
        if len(data) > self._left:
            raise OSError(self._code, os.strerror(self._code))
        self._left -= len(data)
        return self._fh.write(data)

    def __getattr__(self, name):
        return getattr(self._fh, name)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self._fh.close()
        return False


@pytest.fixture
def failing_disk(monkeypatch):
    """``failing_disk(code)``: from now on writes to vfactor temporaries fail with ``code``
    after 256 bytes (ENOSPC: full disk) or at creation (EROFS, EACCES: read-only folder)."""

    def install(code, budget=256):
        real_open, real_write, real_builtin_open = os.open, os.write, builtins.open
        ours, left = set(), {}

        def fake_open(path, flags, mode=0o777, *args, **kwargs):
            if atomic.is_ours(os.path.basename(os.fspath(path))) and flags & os.O_CREAT:
                if code != errno.ENOSPC:
                    raise OSError(code, os.strerror(code), os.fspath(path))
                fd = real_open(path, flags, mode, *args, **kwargs)
                ours.add(fd)
                left[fd] = budget
                return fd
            return real_open(path, flags, mode, *args, **kwargs)

        def fake_write(fd, data):
            if fd in ours:
                if len(data) > left[fd]:
                    raise OSError(code, os.strerror(code))
                left[fd] -= len(data)
            return real_write(fd, data)

        def fake_builtin_open(file, mode="r", *args, **kwargs):
            fh = real_builtin_open(file, mode, *args, **kwargs)
            if (isinstance(file, (str, os.PathLike)) and any(c in mode for c in "wax+")
                    and atomic.is_ours(os.path.basename(os.fspath(file)))):
                return _FailingFile(fh, code, budget)
            return fh

        monkeypatch.setattr(os, "open", fake_open)
        monkeypatch.setattr(os, "write", fake_write)
        monkeypatch.setattr(builtins, "open", fake_builtin_open)

    return install


FULL_DISK = {  # command after the results file -> the target it names
    "export csv": (["export", "RES", "--format", "csv", "-o", "out/tables"], "nodes.csv"),
    "export vtk": (["export", "RES", "--format", "vtk", "-o", "out/mesh.vtu"], "mesh.vtu"),
    "export gltf": (["export", "RES", "--format", "gltf", "-o", "out/mesh.glb"], "mesh.glb"),
    "plot": (["plot", "RES", "-o", "out/figures"], ".png"),
    "run": (["run", "MODEL", "-o", "out/run.h5"], "run.h5"),
}


@pytest.mark.parametrize("case", sorted(FULL_DISK))
def test_full_disk_is_one_line_and_leaves_nothing(results, box, tmp_path, capsys,
                                                  failing_disk, case):
    argv, target = FULL_DISK[case]
    out = tmp_path / "out"
    out.mkdir()
    (out / "keep.txt").write_text("a file of the user's\n")
    before = _tree(out)
    failing_disk(errno.ENOSPC)
    code, _, err = _cli(capsys, *[results if a == "RES" else box if a == "MODEL" else
                                  tmp_path / a if a.startswith("out/") else a for a in argv])
    line = _one_error_line(err)
    assert code == 2
    assert target in line and "no space left on device" in line
    assert _tree(out) == before  # no partial file, no temporary, no empty folder, no lock


def test_full_disk_keeps_the_previous_export(results, tmp_path, capsys, failing_disk):
    tables = tmp_path / "tables"
    assert _cli(capsys, "export", results, "--format", "csv", "-o", tables)[0] == 0
    before = _tree(tables)
    failing_disk(errno.ENOSPC, budget=1000)  # nodes.csv (721 B) fits, heat_loads.csv does not
    code, _, err = _cli(capsys, "export", results, "--format", "csv", "-o", tables,
                        "--threshold", "0")
    assert code == 2 and "no space left on device" in _one_error_line(err)
    assert _tree(tables) == before  # all three tables are the old ones, or none would be


@pytest.mark.parametrize("code, words", [(errno.EROFS, "read-only file system"),
                                         (errno.EACCES, "permission denied")])
@pytest.mark.parametrize("command", ["plot", "export csv"])
def test_read_only_folder_simulated(results, tmp_path, capsys, failing_disk, code, words,
                                    command):
    out = tmp_path / "ro"
    out.mkdir()
    failing_disk(code)
    argv = (["plot", results, "-o", out] if command == "plot"
            else ["export", results, "--format", "csv", "-o", out])
    status, _, err = _cli(capsys, *argv)
    assert status == 2 and words in _one_error_line(err)
    assert list(out.iterdir()) == []


@pytest.mark.parametrize("command", ["plot", "export csv"])
def test_read_only_folder_for_real(results, tmp_path, capsys, command):
    out = tmp_path / "ro"
    out.mkdir()
    out.chmod(0o555)
    try:
        if os.access(out, os.W_OK):
            pytest.skip("this user writes into read-only folders (root): chmod does not bind")
        argv = (["plot", results, "-o", out / "figs"] if command == "plot"
                else ["export", results, "--format", "csv", "-o", out])
        status, _, err = _cli(capsys, *argv)
        assert status == 2 and "permission denied" in _one_error_line(err)
        assert list(out.iterdir()) == []
    finally:
        out.chmod(0o755)


@pytest.fixture
def small_tmpfs(tmp_path):
    """A real 64 kB file system (tmpfs), where this process may mount one (root in a
    container that allows it; mount(8)); skipped elsewhere."""
    if not hasattr(os, "geteuid") or os.geteuid() != 0 or shutil.which("mount") is None:
        pytest.skip("mounting a small file system needs root")
    mnt = tmp_path / "small"
    mnt.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(mnt)],
                          capture_output=True)
    if done.returncode != 0:
        pytest.skip(f"mount not permitted here: {done.stderr.decode().strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", str(mnt)], check=False)


SPHERE = """
[model]
name = "sphere (invented test case)"

[[parts]]
name = "ball"
shape = "sphere"
radius = 0.5
segments = 128
front = { coating = "w" }

[radiation]
rays_per_node = 800
"""


def test_really_full_disk_through_hdf5_and_meshio(write_model, tmp_path, small_tmpfs):
    # A real full disk, in real processes: the HDF5 writer once printed ~60 lines of
    # traces from h5py object deallocation and crashed at exit (status 139). A sphere of
    # some thousand facets makes a results file and a VTU file far above 64 kB.
    model = write_model(SPHERE, name="sphere.toml")
    on_disk = tmp_path / "sphere.h5"
    assert cli.main(["run", str(model), "-o", str(on_disk), "-q"]) == 0
    attempts = {"run": ["run", model, "-o", small_tmpfs / "run.h5"],
                "vtk": ["export", on_disk, "--format", "vtk", "-o", small_tmpfs / "m.vtu"],
                "gltf": ["export", on_disk, "--format", "gltf", "-o", small_tmpfs / "m.glb"]}
    for name, argv in attempts.items():
        done = subprocess.run([*VFACTOR, *[str(a) for a in argv]], capture_output=True,
                              text=True, timeout=120)
        assert done.returncode == 2, (name, done.stderr)
        assert "no space left on device" in _one_error_line(done.stderr), name
        assert list(small_tmpfs.iterdir()) == [], name


# ---------------------------------------------------------------------------------------
# Stale temporaries of a killed writer
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("command", ["export csv", "run"])
def test_stale_temporaries_are_removed_by_the_next_write(results, box, tmp_path, capsys,
                                                         command):
    # A writer killed with SIGKILL during its final write leaves its temporary; it is
    # removed by the next write into that folder. Those of a live writer stay, and so do
    # files that only look similar.
    out = tmp_path / "out"
    out.mkdir()
    host = atomic._host_tag()
    stale = out / f".run.h5.vfactor-{host}-{_dead_pid()}-0badf00d.tmp"
    live_writer = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        live = out / f".run.h5.vfactor-{host}-{live_writer.pid}-0badf00d.tmp"
        other_host = out / f".run.h5.vfactor-{'0' * 8}-{_dead_pid()}-0badf00d.tmp"
        lookalike = out / ".run.h5.abc123.tmp"
        # the live writer's PID on a temporary last written before that process started:
        # the PID was reused, the real writer is gone
        reused = out / f".run.h5.vfactor-{host}-{live_writer.pid}-01df11e0.tmp"
        for p in (stale, live, other_host, lookalike, reused):
            p.write_bytes(b"partial")
        day_ago = time.time() - 86400
        os.utime(reused, (day_ago, day_ago))
        argv = (["export", results, "--format", "csv", "-o", out] if command == "export csv"
                else ["run", box, "-o", out / "run.h5"])
        assert _cli(capsys, *argv)[0] == 0
        assert not stale.exists() and not reused.exists()
        assert live.exists() and other_host.exists() and lookalike.exists()
    finally:
        live_writer.kill()
        live_writer.wait()


# ---------------------------------------------------------------------------------------
# One writer per results file
# ---------------------------------------------------------------------------------------
_HOLD_LOCK = ("import sys, time\nfrom vfactor import outputlock\n"
              "lock = outputlock.OutputLock(sys.argv[1]).acquire()\n"
              "print('held', flush=True)\ntime.sleep(120)\n")


def test_second_run_on_a_locked_output_is_refused(box, tmp_path, capsys):
    out = tmp_path / "run.h5"
    holder = subprocess.Popen([sys.executable, "-c", _HOLD_LOCK, str(out)],
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        lock = outputlock.lock_path(out)
        text = lock.read_bytes()
        code, _, err = _cli(capsys, "run", box, "-o", out)
        line = _one_error_line(err)
        assert code == 2 and "another vfactor run" in line and f"pid {holder.pid}" in line
        assert not out.exists() and lock.read_bytes() == text
    finally:
        holder.kill()  # SIGKILL: the lock file stays behind, its holder dead
        holder.wait()
        holder.stdout.close()
    assert outputlock.lock_path(out).exists()
    code, _, err = _cli(capsys, "run", box, "-o", out)
    assert code == 0 and err == ""  # the stale lock is taken over ...
    assert out.is_file() and not outputlock.lock_path(out).exists()  # ... and removed at the end


def test_lock_without_flock_takes_over_only_dead_holders(tmp_path, monkeypatch):
    # systems without fcntl (Windows): exclusive create, and the PID recorded decides
    monkeypatch.setattr(outputlock, "_fcntl", None)
    out = tmp_path / "x.h5"
    lock = outputlock.lock_path(out)
    import json
    import socket

    lock.write_text(json.dumps({"pid": _dead_pid(), "host": socket.gethostname()}))
    with outputlock.OutputLock(out):
        assert json.loads(lock.read_text())["pid"] == os.getpid()
        with pytest.raises(atomic.OutputBusyError, match=f"pid {os.getpid()}"):
            outputlock.OutputLock(out).acquire()
    assert not lock.exists()


def test_lock_is_removed_on_failure_and_interruption(box, tmp_path, monkeypatch):
    out = tmp_path / "run.h5"

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(pipeline, "_model_inputs", interrupted)
    with pytest.raises(KeyboardInterrupt):
        pipeline.run(box, out)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["box.toml"]


# ---------------------------------------------------------------------------------------
# Worker processes die with their parent
# ---------------------------------------------------------------------------------------
def _children_of(pid: int) -> set:
    """PIDs of every descendant of ``pid`` (from the parent PIDs in /proc/*/stat, proc(5))."""
    parents = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                text = (entry / "stat").read_text()
            except OSError:
                continue
            parents[int(entry.name)] = int(text[text.rfind(")") + 2:].split()[1])
    found, todo = set(), [pid]
    while todo:
        p = todo.pop()
        kids = {c for c, pp in parents.items() if pp == p}
        todo.extend(kids - found)
        found |= kids
    return found


def _running(pids) -> set:
    return {p for p in pids if atomic.pid_alive(p)}


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc (Linux)")
@pytest.mark.parametrize("how", ["SIGTERM", "SIGINT", "SIGKILL"])
def test_workers_die_with_their_parent(tmp_path, capsys, how):
    out = tmp_path / "run.h5"
    parent = subprocess.Popen([*VFACTOR, "run", str(DEMO_MODEL), "-o", str(out),
                               "--rays", "4000000", "--workers", "2"], cwd=REPO,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 60
        workers = set()
        while len(workers) < 2 and time.monotonic() < deadline:
            assert parent.poll() is None, parent.communicate()
            time.sleep(0.2)
            workers = {p for p in _children_of(parent.pid)
                       if b"spawn_main" in Path(f"/proc/{p}/cmdline").read_bytes()}
        assert len(workers) == 2, "the workers did not start"
        everyone = _children_of(parent.pid)  # workers and multiprocessing's tracker
        if how == "SIGTERM":
            # a second run on the same output meanwhile: refused in one line
            code, _, err = _cli(capsys, "run", DEMO_MODEL, "-o", out)
            assert code == 2 and "another vfactor run" in _one_error_line(err)
        t0 = time.monotonic()
        parent.send_signal(getattr(signal, how))
        while _running(everyone) and time.monotonic() - t0 < 10:
            time.sleep(0.05)
        gone_after = time.monotonic() - t0
        # within the 10 s of the loop above: measured ~0.1 s (SIGKILL) and ~1 s (SIGTERM,
        # SIGINT) on a quiet machine, 5.4 s for SIGTERM on a 2-core machine at load 6
        assert _running(everyone) == set(), f"still running {gone_after:.1f} s after {how}"
        _, err = parent.communicate(timeout=30)
    finally:
        if parent.poll() is None:
            parent.kill()
            parent.wait()
    left = sorted(p.name for p in tmp_path.iterdir())
    if how == "SIGKILL":
        assert parent.returncode == -signal.SIGKILL
        assert left == ["run.h5.lock"]  # nobody could remove it: the next run takes it over
        with outputlock.OutputLock(out):
            pass
        assert list(tmp_path.iterdir()) == []
    else:
        # SIGTERM: exit 128 + 15 (POSIX shells' convention for a signal), Ctrl-C: 1
        assert parent.returncode == (128 + signal.SIGTERM if how == "SIGTERM" else 1)
        what = "terminated (SIGTERM)" if how == "SIGTERM" else "interrupted"
        lines = err.splitlines()
        assert lines == [f"vfactor: {what}; with --resume a rerun would continue from "
                         "here"], err
        assert left == []  # no output, no temporary, no lock


def test_a_worker_without_prctl_notices_its_parent_is_gone(tmp_path):
    # the portable watchdog alone (getppid polled in a thread): a middle process forks a
    # child that arms it, then the middle process is killed with SIGKILL
    script = ("import os, sys, time\nfrom vfactor import runners\nparent = os.getpid()\n"
              "child = os.fork()\n"
              "if child == 0:\n"
              "    runners.die_with_parent(parent, kernel_notice=False)\n"
              "    time.sleep(60)\n    os._exit(0)\n"
              "print(child, flush=True)\ntime.sleep(60)\n")
    middle = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE,
                              text=True)
    child = int(middle.stdout.readline())
    try:
        assert atomic.pid_alive(child)
        middle.kill()
        middle.wait()
        t0 = time.monotonic()
        while atomic.pid_alive(child) and time.monotonic() - t0 < 10:
            time.sleep(0.05)
        # polled every runners.PARENT_POLL_S (0.5 s); 3 s leaves room for a busy machine
        assert not atomic.pid_alive(child) and time.monotonic() - t0 < 3.0
    finally:
        middle.stdout.close()
        if atomic.pid_alive(child):
            os.kill(child, signal.SIGKILL)
