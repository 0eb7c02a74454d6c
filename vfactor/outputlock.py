"""One writer per results file: the lock ``OUT.h5.lock`` held for a whole run.

:class:`OutputLock` holds ``OUT.h5.lock`` (PID, host and start time inside) under an
exclusive ``flock(2)``; the kernel releases it when the holder dies, so a lock left by a
killed run is taken over. Without ``fcntl`` (Windows) the lock file is created with
``O_EXCL`` (open(2)) and a lock whose PID is dead is taken over. The files themselves are
written by :mod:`vfactor.atomic`.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import json
import os
import socket
from pathlib import Path

from .atomic import _reason, pid_alive
from .errors import OutputBusyError, OutputError

try:  # POSIX only (Python library reference, fcntl module)
    import fcntl as _fcntl
except ImportError:  # pragma: no cover - Windows
    _fcntl = None

__all__ = ["OutputLock", "lock_path", "LOCK_SUFFIX"]

LOCK_SUFFIX = ".lock"


def lock_path(target) -> Path:
    """The lock file of ``target``: the same name plus ``.lock``."""
    target = Path(target)
    return target.with_name(target.name + LOCK_SUFFIX)


def _holder_text() -> bytes:
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    return (json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "since": now,
                        "program": "vfactor"}) + "\n").encode()


def _read_holder(path: Path) -> dict:
    try:
        with open(path, "rb") as fh:
            value = json.loads(fh.read(4096).decode("utf-8", "replace") or "{}")
        return value if isinstance(value, dict) else {}
    except (OSError, ValueError):
        return {}


class OutputLock:
    """Exclusive right to write one results file (and its checkpoint) for a whole run.

    ``with OutputLock(out):`` creates ``OUT.h5.lock`` holding this process's PID, host
    name and start time. A second run on the same output meets the lock and stops with
    :class:`OutputBusyError` (one line naming the holder). The lock file is removed when
    the block ends, also on an exception or interruption; a lock left by a killed process
    is taken over.

    Notes
    -----
    On POSIX the lock is ``flock(LOCK_EX | LOCK_NB)`` on the lock file (flock(2)): the
    kernel drops it when the holding process dies, however it dies, so stale locks need
    no guessing; after locking, the file is checked to be still the one at the path
    (device and inode), since a finishing holder unlinks it (common practice for lock
    files that are removed). Without ``fcntl`` the file is created with ``O_EXCL``
    (open(2)) and a lock whose recorded PID on this host is dead is taken over.
    """

    def __init__(self, target):
        self.target = Path(target)
        self.path = lock_path(self.target)
        self._fd = None

    def __enter__(self):
        self.acquire()
        return self

    def __exit__(self, *exc):
        self.release()
        return False

    def _busy(self, holder: dict) -> OutputBusyError:
        who = (f"pid {holder.get('pid', '?')} on {holder.get('host', '?')}, since "
               f"{holder.get('since', '?')}") if holder else "holder unknown"
        return OutputBusyError(
            f"{self.target}: {self.path.name}: another vfactor run is writing this results "
            f"file ({who}); wait for it to finish or give another output name", file=self.target)

    def _fail(self, exc: OSError) -> OutputError:
        return OutputError(f"{self.target}: cannot create the lock file {self.path.name}: "
                           f"{_reason(exc)}", file=self.target, errno_=exc.errno)

    def acquire(self) -> "OutputLock":
        if self._fd is not None:
            return self
        if _fcntl is None:
            return self._acquire_exclusive_create()
        for _ in range(20):
            try:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o666)
            except OSError as exc:
                raise self._fail(exc) from None
            try:
                _fcntl.flock(fd, _fcntl.LOCK_EX | _fcntl.LOCK_NB)
            except OSError as exc:
                os.close(fd)
                if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise self._busy(_read_holder(self.path)) from None
                raise self._fail(exc) from None
            try:
                here = os.stat(self.path)
            except FileNotFoundError:
                here = None
            mine = os.fstat(fd)
            if here is None or (here.st_dev, here.st_ino) != (mine.st_dev, mine.st_ino):
                os.close(fd)  # the holder removed it as we opened it: try the new one
                continue
            try:
                os.ftruncate(fd, 0)
                os.write(fd, _holder_text())
                os.fsync(fd)
            except OSError as exc:
                self._fd = fd
                self.release()
                raise self._fail(exc) from None
            self._fd = fd
            return self
        raise OutputBusyError(f"{self.target}: {self.path.name}: the lock file keeps changing; "
                              "another vfactor run is starting on this output", file=self.target)

    def _acquire_exclusive_create(self) -> "OutputLock":
        for _ in range(3):
            try:
                fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            except FileExistsError:
                holder = _read_holder(self.path)
                pid = holder.get("pid")
                stale = (isinstance(pid, int) and holder.get("host") == socket.gethostname()
                         and not pid_alive(pid))
                if not stale:
                    raise self._busy(holder) from None
                with contextlib.suppress(FileNotFoundError):
                    os.unlink(self.path)
                continue
            except OSError as exc:
                raise self._fail(exc) from None
            try:
                os.write(fd, _holder_text())
                os.fsync(fd)
            except OSError as exc:
                os.close(fd)
                with contextlib.suppress(OSError):
                    os.unlink(self.path)
                raise self._fail(exc) from None
            self._fd = fd
            return self
        raise self._busy(_read_holder(self.path))

    def release(self) -> None:
        """Remove the lock file and drop the lock (unlink first, while still holding it)."""
        fd, self._fd = self._fd, None
        if fd is None:
            return
        try:
            here = os.stat(self.path)
            mine = os.fstat(fd)
            if (here.st_dev, here.st_ino) == (mine.st_dev, mine.st_ino):
                os.unlink(self.path)
        except OSError:
            pass
        finally:
            os.close(fd)

    @property
    def held(self) -> bool:
        return self._fd is not None

