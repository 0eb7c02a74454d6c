"""The atomic-write helper on its own: names, batches, interruption, inputs, lock."""

from __future__ import annotations

import os
import stat

import pytest

from vfactor import atomic, outputlock


def test_temporary_names_are_hidden_ours_and_short_enough(tmp_path):
    name = atomic.temporary_name(tmp_path / "out.h5")
    assert name.startswith(".out.h5.vfactor-") and name.endswith(".tmp")
    assert atomic.is_ours(name) and f"-{os.getpid()}-" in name
    assert not atomic.is_ours(".out.h5.k3j4h5.tmp")  # mkstemp-style names are not ours
    long = atomic.temporary_name(tmp_path / ("é" * 120 + ".csv"))
    assert len(long.encode()) <= 255 and atomic.is_ours(long)  # NAME_MAX of Linux file systems


def test_batch_replaces_all_targets_or_none(tmp_path):
    a, b = tmp_path / "a.txt", tmp_path / "b.txt"
    a.write_text("old a")
    b.write_text("old b")
    with pytest.raises(KeyboardInterrupt):
        with atomic.Batch() as batch:
            with batch.open(a, "file a", text=True) as fh:
                fh.write("new a")
            with batch.open(b, "file b", text=True) as fh:
                fh.write("half of b")
                raise KeyboardInterrupt  # Ctrl-C in the middle of the second file
    assert (a.read_text(), b.read_text()) == ("old a", "old b")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt", "b.txt"]
    with atomic.Batch() as batch:
        for target in (a, b):
            with batch.open(target, "file", text=True) as fh:
                fh.write("new")
    assert (a.read_text(), b.read_text()) == ("new", "new")
    mask = os.umask(0o022)
    os.umask(mask)
    assert stat.S_IMODE(a.stat().st_mode) == 0o666 & ~mask  # an ordinary new file


def test_failed_batch_removes_only_the_folders_it_made(tmp_path):
    existing = tmp_path / "kept"
    existing.mkdir()
    with pytest.raises(RuntimeError):
        with atomic.Batch() as batch:
            batch.folder(existing / "new" / "deeper")
            with batch.open(existing / "new" / "deeper" / "x.bin", "x") as fh:
                fh.write(b"123")
                raise RuntimeError("simulated failure")
    assert existing.is_dir() and list(existing.iterdir()) == []


def test_inputs_are_refused_by_path_symlink_and_hard_link(tmp_path):
    src = tmp_path / "in.h5"
    src.write_bytes(b"input")
    (tmp_path / "sym.h5").symlink_to(src)
    os.link(src, tmp_path / "hard.h5")
    for target in (src, tmp_path / "sym.h5", tmp_path / "hard.h5",
                   tmp_path / "sub" / ".." / "in.h5"):
        (tmp_path / "sub").mkdir(exist_ok=True)
        with pytest.raises(atomic.OutputError, match="would overwrite an input"):
            atomic.write_bytes(target, b"new", "x", inputs=[src])
    assert src.read_bytes() == b"input"
    atomic.write_bytes(tmp_path / "other.h5", b"new", "x", inputs=[src])  # others are fine


def test_lock_is_exclusive_within_a_process_too(tmp_path):
    out = tmp_path / "r.h5"
    with outputlock.OutputLock(out) as lock:
        assert lock.held and outputlock.lock_path(out).exists()
        with pytest.raises(atomic.OutputBusyError, match=f"pid {os.getpid()}") as err:
            outputlock.OutputLock(out).acquire()  # flock: a second open file description
        assert "\n" not in str(err.value)
    assert not outputlock.lock_path(out).exists()
