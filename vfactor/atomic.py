"""Every file vfactor writes goes through here: all or nothing, never over an input.

One helper for the results file, the checkpoint, the CSV tables, the meshes and the figures:

* **Atomic replacement.** Each file is written under a temporary name in its own folder
  (``.NAME.vfactor-HOST-PID-XXXX.tmp``), flushed and ``fsync``-ed, and renamed over the
  target with :func:`os.replace`, then the folder is ``fsync``-ed. A reader sees the old
  file or the complete new one, never a part (rename(2): "If newpath already exists, it
  will be atomically replaced"; fsync(2): the directory entry needs an fsync of the
  directory as well). Several files written by one command (the three CSV tables, the
  figures) form one :class:`Batch`: all temporaries are complete before the first rename,
  so a failure leaves every target as it was.
* **Failures are one line.** Any :class:`OSError` on the way (full disk, read-only folder,
  quota) removes the temporaries and becomes an :class:`OutputError` naming the target
  and the cause (``no space left on device``); an interruption (Ctrl-C, SIGTERM turned
  into an exception by the pipeline) removes them too and goes on.
* **Inputs are never overwritten.** A target that is, by resolved path or by
  :func:`os.path.samefile` (hard links, symbolic links), one of the command's inputs is
  refused before anything is written (:func:`refuse_inputs`).
* **Stale temporaries are cleaned.** A process killed with SIGKILL cannot remove its
  temporary. The next write into that folder removes the temporaries of ours whose writing
  process (the PID in the name, on this host) is gone, and only those (:func:`clean_stale`).
* **One writer per results file** (:mod:`vfactor.outputlock`): ``OUT.h5.lock`` is held
  for the whole run, so a second run on the same output stops in one line.

Every byte of our own writes goes through :func:`os.write` on a descriptor opened here
(``_FdWriter``); writers of other libraries that need a file name (meshio) get the
temporary's path from :meth:`Batch.path`.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import io
import os
import re
import secrets
import socket
from pathlib import Path

from .errors import OutputBusyError, OutputError, VfactorError

__all__ = ["OutputError", "OutputBusyError", "Batch", "open_atomic", "write_bytes",
           "refuse_inputs", "ensure_folder", "clean_stale", "temporary_name", "is_ours",
           "pid_alive"]

_MARK = ".vfactor-"
_TEMP = re.compile(r"^\.(?P<name>.*)\.vfactor-(?P<host>[0-9a-f]{8})-(?P<pid>[0-9]+)-"
                   r"(?P<token>[0-9a-f]+)\.tmp$")
_MAX_NAME = 150  # bytes of the target name kept in a temporary's name (NAME_MAX is 255)


# ---------------------------------------------------------------------------------------
# Names of temporaries, and whose they are
# ---------------------------------------------------------------------------------------
def _host_tag() -> str:
    """Eight hex digits naming this machine (a hash of its host name)."""
    return hashlib.blake2s(socket.gethostname().encode("utf-8", "replace"),
                           digest_size=4).hexdigest()


def temporary_name(target) -> str:
    """File name of a new temporary for ``target``: ``.NAME.vfactor-HOST-PID-TOKEN.tmp``.

    Hidden (leading dot), in the target's folder, recognisable as ours and carrying the
    PID of the writing process, so that :func:`clean_stale` knows when its writer is gone.
    """
    name = Path(target).name
    if len(name.encode()) > _MAX_NAME:
        name = name.encode()[:_MAX_NAME].decode("utf-8", "ignore")
    return f".{name}{_MARK}{_host_tag()}-{os.getpid()}-{secrets.token_hex(4)}.tmp"


def is_ours(name: str) -> bool:
    """True when ``name`` is the name of a vfactor temporary (of any process)."""
    return _TEMP.match(name) is not None


def pid_alive(pid: int) -> bool:
    """True when a process with this PID runs on this machine (a zombie counts as dead).

    ``kill(pid, 0)`` checks existence without sending anything (kill(2): "If sig is 0, then
    no signal is sent, but existence and permission checks are still performed"); EPERM
    means it exists under another user. On Windows, where ``os.kill`` would terminate the
    process, the answer is True (never clean what may be in use) unless psutil is there.
    """
    if pid <= 0:
        return False
    if os.name == "nt":  # pragma: no cover - Windows
        try:
            import psutil
        except ImportError:
            return True
        return psutil.pid_exists(pid)
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    state = _proc_stat(pid)
    return not (state is not None and state[0] == "Z")


def _proc_stat(pid: int):
    """(state, start time in clock ticks after boot) from /proc/PID/stat (proc(5)), or None
    where there is no /proc."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as fh:
            text = fh.read().decode("ascii", "replace")
    except OSError:
        return None
    fields = text[text.rfind(")") + 2:].split()  # the command name may hold spaces
    try:
        return fields[0], int(fields[19])       # field 3 (state) and field 22 (starttime)
    except (IndexError, ValueError):
        return None


def _started_after(pid: int, when: float) -> bool:
    """True when process ``pid`` started after the time ``when`` (seconds since the epoch):
    its PID was then reused and the file stamped ``when`` cannot be its own. False when
    unknown (no /proc)."""
    stat = _proc_stat(pid)
    if stat is None:
        return False
    try:
        with open("/proc/stat", "rb") as fh:
            boot = next(int(line.split()[1]) for line in fh if line.startswith(b"btime "))
        ticks = os.sysconf("SC_CLK_TCK")
    except (OSError, StopIteration, ValueError):
        return False
    return boot + stat[1] / ticks > when + 1.0  # 1 s: start time is known to the tick only


def clean_stale(folder) -> list:
    """Remove the vfactor temporaries in ``folder`` whose writing process is gone.

    Only files named by :func:`temporary_name` on this host count; one is stale when its
    PID is not this process and is not alive, or was reused by a process started after the
    file was last written. Temporaries of live writers, of other hosts and every other
    file are left alone. Returns the paths removed; errors while cleaning are ignored
    (cleaning must never stop a write).
    """
    folder = Path(folder)
    removed = []
    host, me = _host_tag(), os.getpid()
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        m = _TEMP.match(entry.name)
        if m is None or m.group("host") != host:
            continue
        pid = int(m.group("pid"))
        if pid == me:
            continue
        try:
            if not entry.is_file(follow_symlinks=False):
                continue
            mtime = entry.stat(follow_symlinks=False).st_mtime
            if pid_alive(pid) and not _started_after(pid, mtime):
                continue
            os.unlink(entry.path)
            removed.append(Path(entry.path))
        except OSError:
            continue
    return removed


# ---------------------------------------------------------------------------------------
# Errors, inputs, folders
# ---------------------------------------------------------------------------------------
_REASONS = {
    errno.ENOSPC: "no space left on device",
    errno.EDQUOT: "disk quota exceeded",
    errno.EROFS: "read-only file system",
    errno.EACCES: "permission denied (the folder is not writable for this user)",
    errno.EPERM: "operation not permitted",
    errno.EFBIG: "file too large for the file system",
    errno.EIO: "input/output error of the device",
    errno.ENAMETOOLONG: "file name too long",
    errno.ENOENT: "the folder does not exist",
    errno.ENOTDIR: "a part of the path is not a folder",
    errno.EISDIR: "is a folder",
}


def _reason(exc: OSError) -> str:
    if exc.errno in _REASONS:
        return _REASONS[exc.errno]
    if exc.errno:
        return os.strerror(exc.errno).lower()
    return " ".join(str(exc).split()) or type(exc).__name__


def _error(target, what: str, exc: OSError) -> OutputError:
    return OutputError(f"{target}: cannot write {what}: {_reason(exc)}; nothing was written "
                       "under this name", file=target, errno_=exc.errno)


def _same_file(a: Path, b: Path) -> bool:
    try:
        if a.resolve() == b.resolve():
            return True
    except (OSError, RuntimeError):  # RuntimeError: a symbolic-link loop (pathlib)
        pass
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def refuse_inputs(targets, inputs, *, hint: str = "") -> None:
    """Raise :class:`OutputError` when any target is one of the command's inputs.

    Parameters
    ----------
    targets : path or iterable of paths — files about to be written
    inputs : iterable of paths — files the command reads (results file, model, meshes)
    hint : str — how to fix it, appended to the message

    Notes
    -----
    Same resolved path, or the same file by :func:`os.path.samefile` (device and inode:
    hard links and symbolic links). A target that does not exist is no input.
    """
    if isinstance(targets, (str, os.PathLike)):
        targets = [targets]
    inputs = [Path(p) for p in inputs if p]
    for target in targets:
        target = Path(target)
        for src in inputs:
            if _same_file(target, src):
                raise OutputError(f"{target}: would overwrite an input of this command "
                                  f"({src}); nothing was written" + (f"; {hint}" if hint else ""),
                                  file=target)


def ensure_folder(folder, what: str = "the output folder") -> list:
    """Create ``folder`` (and its parents) if missing; a failure is an :class:`OutputError`.

    Returns the folders created, innermost last (empty when ``folder`` existed).
    """
    folder = Path(folder)
    missing = []
    parent = folder
    while not parent.exists() and parent != parent.parent:
        missing.append(parent)
        parent = parent.parent
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise OutputError(f"{folder}: cannot create {what}: a file of that name is in the "
                          "way", file=folder) from None
    except OSError as exc:
        raise OutputError(f"{folder}: cannot create {what}: {_reason(exc)}", file=folder,
                          errno_=exc.errno) from None
    return missing[::-1]


def _fsync_folder(folder: Path) -> None:
    """fsync(2) the folder so the rename itself is durable; skipped where folders cannot be
    opened (Windows) or synced (some network file systems answer EINVAL)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


# ---------------------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------------------
class _FdWriter(io.RawIOBase):
    """Raw binary stream over a descriptor: every write is one :func:`os.write` call
    (partial writes are handled by the buffered layer above)."""

    def __init__(self, fd: int):
        super().__init__()
        self._fd = fd

    def writable(self):
        return True

    def seekable(self):
        return True

    def write(self, data):
        return os.write(self._fd, data)

    def seek(self, offset, whence=os.SEEK_SET):
        return os.lseek(self._fd, offset, whence)

    def tell(self):
        return os.lseek(self._fd, 0, os.SEEK_CUR)

    def fileno(self):
        return self._fd

    def close(self):
        if not self.closed:
            fd, self._fd = self._fd, -1
            super().close()
            os.close(fd)


class _Entry:
    __slots__ = ("target", "tmp", "what", "done")

    def __init__(self, target: Path, tmp: Path, what: str):
        self.target, self.tmp, self.what, self.done = target, tmp, what, False


class Batch:
    """Files written together: all temporaries complete before any target is replaced.

    Parameters
    ----------
    inputs : iterable of paths
        Files the command reads; a target that is one of them is refused
        (:func:`refuse_inputs`) before its temporary is made.
    hint : str
        How to fix a refused target (appended to the message).

    Use as a context manager: targets added with :meth:`open` or :meth:`path` are renamed
    into place when the block ends without an exception (:meth:`commit`); otherwise every
    temporary is removed (:meth:`abort`) and an :class:`OSError` becomes an
    :class:`OutputError` naming the target.
    """

    def __init__(self, inputs=(), *, hint: str = ""):
        self.inputs = [Path(p) for p in inputs if p]
        self.hint = hint
        self._entries: list = []
        self._created: list = []
        self._cleaned: set = set()
        self._current: _Entry | None = None

    # -- context manager ------------------------------------------------------------------
    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            try:
                self.commit()
            except OSError as err:
                self.abort()
                raise self._as_error(err) from None
            return False
        self.abort()
        if isinstance(exc, OSError) and not isinstance(exc, VfactorError):
            raise self._as_error(exc) from None
        return False

    def _as_error(self, exc: OSError) -> OutputError:
        entry = self._current or (self._entries[-1] if self._entries else None)
        if entry is None:
            return _error(getattr(exc, "filename", "?"), "the output", exc)
        return _error(entry.target, entry.what, exc)

    # -- adding files -----------------------------------------------------------------------
    def folder(self, folder, what: str = "the output folder") -> Path:
        """Create ``folder`` if missing (:func:`ensure_folder`); folders created here are
        removed again by :meth:`abort` when still empty."""
        self._created += ensure_folder(folder, what)
        return Path(folder)

    def _new(self, target, what: str) -> tuple:
        """Check ``target``, clean its folder once, create its temporary: (entry, fd)."""
        target = Path(target)
        refuse_inputs(target, self.inputs, hint=self.hint)
        if target.is_dir():
            raise OutputError(f"{target}: cannot write {what}: is a folder", file=target)
        folder = target.parent if str(target.parent) else Path(".")
        if not folder.is_dir():
            raise OutputError(f"{target}: cannot write {what}: folder {folder} does not exist",
                              file=target)
        if folder not in self._cleaned:
            clean_stale(folder)
            self._cleaned.add(folder)
        entry = _Entry(target, folder / temporary_name(target), what)
        self._current = entry
        # O_EXCL: never write into a file someone else made (open(2)); mode 0666 less the
        # umask, the permissions of any ordinary new file
        fd = os.open(entry.tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL
                     | getattr(os, "O_BINARY", 0), 0o666)
        self._entries.append(entry)
        return entry, fd

    @contextlib.contextmanager
    def open(self, target, what: str, *, text: bool = False, encoding: str = "utf-8",
             newline: str | None = None):
        """Yield a file object writing the temporary of ``target`` (binary, or text with
        ``text=True``); it is flushed, fsync-ed and closed when the block ends."""
        entry, fd = self._new(target, what)
        raw = _FdWriter(fd)
        stream = io.BufferedWriter(raw, buffer_size=1 << 20)
        fh = io.TextIOWrapper(stream, encoding=encoding, newline=newline) if text else stream
        try:
            yield fh
            fh.flush()
            os.fsync(fd)
        finally:
            with contextlib.suppress(OSError, ValueError):
                fh.close()  # after a failed write the buffer may fail to flush once more
            if not raw.closed:
                raw.close()
        entry.done = True
        self._current = None

    @contextlib.contextmanager
    def path(self, target, what: str):
        """Yield the path of an empty temporary of ``target`` for a writer that needs a file
        name (give it the format explicitly: the name ends in ``.tmp``); fsync-ed after."""
        entry, fd = self._new(target, what)
        os.close(fd)
        yield entry.tmp
        fd = os.open(entry.tmp, os.O_RDONLY | getattr(os, "O_BINARY", 0))
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
        entry.done = True
        self._current = None

    # -- the end ----------------------------------------------------------------------------
    def commit(self) -> list:
        """Rename every complete temporary over its target; return the targets."""
        folders = []
        for entry in self._entries:
            if not entry.done:
                raise RuntimeError(f"{entry.target}: temporary not complete at commit")
        for entry in self._entries:
            self._current = entry
            os.replace(entry.tmp, entry.target)
            entry.tmp = None
            folder = entry.target.parent
            if folder not in folders:
                folders.append(folder)
        self._current = None
        for folder in folders:
            _fsync_folder(folder)
        targets = [e.target for e in self._entries]
        self._entries = []
        self._created = []
        return targets

    def abort(self) -> None:
        """Remove every temporary of this batch that still exists."""
        for entry in self._entries:
            if entry.tmp is not None:
                with contextlib.suppress(OSError):
                    os.unlink(entry.tmp)
                entry.tmp = None
        self._entries = []
        for folder in reversed(self._created):
            with contextlib.suppress(OSError):
                folder.rmdir()  # only succeeds when empty: nothing of anyone else is lost
        self._created = []


@contextlib.contextmanager
def open_atomic(target, what: str, *, inputs=(), text: bool = False,
                encoding: str = "utf-8", newline: str | None = None, hint: str = ""):
    """One file written atomically: ``with open_atomic(path, "the table") as fh: ...``.

    See :class:`Batch` for what happens on failure and which targets are refused.
    """
    with Batch(inputs, hint=hint) as batch:
        with batch.open(target, what, text=text, encoding=encoding, newline=newline) as fh:
            yield fh


def write_bytes(target, data, what: str, *, inputs=(), hint: str = "") -> Path:
    """Write ``data`` (bytes or a buffer) to ``target`` atomically; return the target."""
    view = memoryview(data).cast("B")
    with open_atomic(target, what, inputs=inputs, hint=hint) as fh:
        step = 1 << 24
        for start in range(0, len(view), step):
            fh.write(view[start:start + step])
    return Path(target)
