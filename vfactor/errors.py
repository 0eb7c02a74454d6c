"""Exception types of vfactor.

Every error that the user can cause (a bad model file, a bad mesh, a bad argument, a
results file that is not ours) is raised as a subclass of :class:`VfactorError`. The
command line turns these into one line on standard error and exit code 2; anything else
is a bug and exits with code 1.

The classes carry data (file, location, offending value) so that callers and tests can
inspect them without parsing the message.
"""

from __future__ import annotations

from dataclasses import dataclass, field

__all__ = [
    "VfactorError",
    "ModelError",
    "MeshError",
    "GeometryError",
    "ResultsFileError",
    "ArgumentError",
    "OutputError",
    "OutputBusyError",
    "Problem",
]


class VfactorError(Exception):
    """Base class of every error caused by user input."""

    exit_code = 2


class ModelError(VfactorError):
    """A model file (TOML) that cannot be used as it is.

    Parameters
    ----------
    message : str
        What is wrong and, where possible, how to fix it. Should contain the bad value.
    file : str, optional
        The model file (or the file that was read on its behalf).
    where : str, optional
        Location inside the file: ``"part 'wing'"``, ``"[coatings.white] ir_emissivity"``,
        ``"[orbit] altitude_km"``.
    """

    def __init__(self, message: str, file: str | None = None, where: str | None = None):
        self.message = message
        self.file = file
        self.where = where
        super().__init__(self._format())

    def _format(self) -> str:
        parts = [p for p in (self.file, self.where) if p]
        prefix = ": ".join(parts)
        return f"{prefix}: {self.message}" if prefix else self.message

    def with_file(self, file: str) -> "ModelError":
        """Return a copy of this error that names ``file`` (if it named none)."""
        if self.file:
            return self
        err = type(self)(self.message, file=file, where=self.where)
        err.__dict__.update({k: v for k, v in self.__dict__.items() if k not in ("file",)})
        err.file = file
        err.args = (err._format(),)
        return err


class MeshError(ModelError):
    """A mesh file that is missing, unreadable, empty or not made of triangles."""


class GeometryError(ModelError):
    """Geometry that is invalid as a whole (for example non-finite coordinates).

    ``facets`` holds the offending facet indices where there are any.
    """

    def __init__(self, message: str, file: str | None = None, where: str | None = None,
                 facets=None):
        self.facets = facets
        super().__init__(message, file=file, where=where)


class ResultsFileError(VfactorError):
    """A results file that does not exist, is not HDF5 or lacks a required group."""


class ArgumentError(VfactorError):
    """A command-line argument that cannot be used (for example a negative ray count)."""


class OutputError(VfactorError):
    """A file that cannot be written: full disk, read-only folder, an input in the way.

    Attributes
    ----------
    file : str — the file that was to be written (never the temporary)
    errno : int or None — the operating system's error number, when there was one
    """

    def __init__(self, message: str, file=None, errno_=None):
        self.file = None if file is None else str(file)
        self.errno = errno_
        super().__init__(message)


class OutputBusyError(OutputError):
    """Another live process is writing the same results file (it holds its lock)."""


@dataclass(frozen=True)
class Problem:
    """One finding of ``vfactor check``.

    Attributes
    ----------
    severity : str
        ``"error"`` (the model cannot be run; exit code 2), ``"warning"`` (suspicious only)
        or ``"note"`` (information, e.g. the unit a mesh file was read in).
    file : str
        Model file the finding belongs to.
    where : str
        Part, coating, node or key, e.g. ``"part 'wing'"``.
    message : str
        What was found, with the offending value.
    facets : tuple of int
        Facet indices involved, if any (may be empty).
    """

    severity: str
    file: str
    where: str
    message: str
    facets: tuple = field(default_factory=tuple)

    def line(self) -> str:
        """The finding as the single line printed by ``vfactor check``, in the form of every
        other command's messages: ``vfactor: error: FILE: WHERE: WHAT``."""
        loc = ": ".join(p for p in (self.file, self.where) if p)
        return f"vfactor: {self.severity}: {loc}: {self.message}"
