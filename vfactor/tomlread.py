"""Checked reading of TOML values: each bad value becomes one problem line.

This is the one place where numbers and names read from a model file are validated. A
:class:`Reader` either raises :class:`vfactor.errors.ModelError` at the first problem
(strict mode, ``problems=None``) or appends :class:`vfactor.errors.Problem` entries to a
list and raises :class:`Invalid` only to abandon the current item (a coating, a part, a
side), so that the caller carries on with the rest of the file (collecting mode, used by
``vfactor check``). A third mode, ``raise_errors=True`` with a list, raises at the first
error but keeps the warnings in the list: the readers of the ``[orbit]``, ``[attitude]``
and ``[environment]`` tables work so (through :class:`TableReader`), stopping at the first
bad key of their table.

Numbers with a unit are read by :meth:`Reader.quantity`: finite, inside the *legal* range
(an error outside it: the value cannot be used) and inside the *plausible* range (a warning
outside it, with the probable slip and its fix, e.g. kW m-2 written where W m-2 are asked).
Names that reach tables and terminals are read by :meth:`Reader.name`: printable, without
control characters or surrounding spaces.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field

from vfactor.errors import ModelError, Problem

__all__ = ["Invalid", "Reader", "TableReader", "hint", "label", "name_problem", "show"]


class Invalid(Exception):
    """The current item (part, coating, side) cannot be used."""


@dataclass
class Reader:
    """Reads values of one model file into problems (see the module docstring)."""

    file: str
    problems: list | None  # None: strict

    found: list = field(default_factory=list)
    broken_coatings: set = field(default_factory=set)   # defined, but with a bad value
    raise_errors: bool = False   # with a list: errors raise, warnings and notes are kept

    @property
    def strict(self) -> bool:
        """Whether an error raises :class:`ModelError` (rather than being collected)."""
        return self.problems is None or self.raise_errors

    def error(self, where: str, message: str, fatal_for_item: bool = True):
        if self.strict:
            raise ModelError(message, file=self.file or None, where=where)
        self.problems.append(Problem("error", self.file, where, message))
        if fatal_for_item:
            raise Invalid()

    def soft_error(self, where: str, message: str):
        """An error that does not prevent using the rest of the item."""
        if self.strict:
            raise ModelError(message, file=self.file or None, where=where)
        self.problems.append(Problem("error", self.file, where, message))

    def warning(self, where: str, message: str):
        if self.problems is not None:
            self.problems.append(Problem("warning", self.file, where, message))

    def note(self, where: str, message: str):
        """Information that ``check`` shows (not a problem)."""
        if self.problems is not None:
            self.problems.append(Problem("note", self.file, where, message))

    # ---- value helpers ---------------------------------------------------------------
    def table(self, value, where: str) -> dict:
        if not isinstance(value, dict):
            self.error(where, f"must be a table, got {show(value)}")
        return value

    def string(self, value, where: str, nonempty: bool = True) -> str:
        if not isinstance(value, str) or (nonempty and not value.strip()):
            self.error(where, f"must be a non-empty string, got {show(value)}")
        return value

    def number(self, value, where: str) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.error(where, f"must be a number, got {show(value)}")
        x = float(value)
        if not math.isfinite(x):
            self.error(where, f"must be finite, got {show(value)}")
        return x

    def quantity(self, value, where: str, unit: str = "", low: float | None = None,
                 high: float | None = None, *, low_open: bool = False,
                 plausible: tuple | None = None, advice_low: str = "",
                 advice_high: str = "", why: str = "") -> float:
        """A number with a unit: finite, legal, and plausible for what it measures.

        Parameters
        ----------
        value : the raw TOML value
        where : str — location for messages (``[orbit] step_s``)
        unit : str — unit shown after numbers in messages (``"s"``, ``"W m-2"``)
        low, high : float or None — legal range; outside it is an error
        low_open : bool — the legal range excludes ``low`` itself
        plausible : (float or None, float or None), optional — outside it is a warning
        advice_low, advice_high : str — the probable slip and its fix, added to the
            warning below / above the plausible range (and to the error below / above the
            legal range)
        why : str — where the legal range comes from, added to its error

        Returns
        -------
        float

        Raises
        ------
        Invalid, ModelError — as :meth:`error`
        """
        x = self.number(value, where)
        u = f" {unit}" if unit else ""
        reason = f" ({why})" if why else ""
        if low is not None and (x < low or (low_open and x == low)):
            bound = f"> {low:g}" if low_open else f">= {low:g}"
            self.error(where, f"must be {bound}{u}{reason}, got {show(value)}"
                       f"{'; ' + advice_low if advice_low else ''}")
        if high is not None and x > high:
            self.error(where, f"must be <= {high:g}{u}{reason}, got {show(value)}"
                       f"{'; ' + advice_high if advice_high else ''}")
        if plausible is not None:
            p_low, p_high = plausible
            if p_low is not None and x < p_low:
                self.warning(where, f"{show(value)}{u} is below the plausible "
                             f"{_span(p_low, p_high)}{u}"
                             f"{'; ' + advice_low if advice_low else ''}")
            elif p_high is not None and x > p_high:
                self.warning(where, f"{show(value)}{u} is above the plausible "
                             f"{_span(p_low, p_high)}{u}"
                             f"{'; ' + advice_high if advice_high else ''}")
        return x

    def name(self, value, where: str, what: str = "name") -> str:
        """A name that reaches tables, files and terminals: a printable, non-empty string
        without control characters and without leading or trailing spaces."""
        if not isinstance(value, str):
            self.error(where, f"{what} must be a string, got {show(value)}")
        problem = name_problem(value)
        if problem:
            self.error(where, f"{what} {show(value)} {problem}")
        return value

    def positive(self, value, where: str) -> float:
        x = self.number(value, where)
        if x <= 0.0:
            self.error(where, f"must be > 0, got {show(value)}")
        return x

    def fraction(self, value, where: str) -> float:
        x = self.number(value, where)
        if not 0.0 <= x <= 1.0:
            self.error(where, f"must lie in [0, 1], got {show(value)}")
        return x

    def integer(self, value, where: str, minimum: int, maximum: int = 10**12) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            self.error(where, f"must be an integer, got {show(value)}")
        if value < minimum:
            self.error(where, f"must be >= {minimum}, got {value}")
        if value > maximum:
            self.error(where, f"must be <= {maximum}, got {show(value)}")
        return int(value)

    def boolean(self, value, where: str) -> bool:
        if not isinstance(value, bool):
            self.error(where, f"must be true or false, got {show(value)}")
        return value

    def vector(self, value, where: str, n: int) -> tuple:
        if not isinstance(value, list) or len(value) != n:
            self.error(where, f"must be a list of {n} numbers, got {show(value)}")
        return tuple(self.number(v, where) for v in value)

    def unknown_keys(self, table: dict, allowed, where: str, what: str):
        for key in table:
            if key not in allowed:
                close = difflib.get_close_matches(str(key), allowed, n=1)
                hint = f"did you mean {close[0]!r}? " if close else ""
                self.soft_error(f"{where} {label(key)}" if where else label(key),
                                f"unknown {what} key {key!r}; {hint}known keys are "
                                f"{', '.join(allowed)}")


_MISSING = object()


class TableReader:
    """Typed access by key to one settings table (``[orbit]``, ``[attitude]``,
    ``[environment]``), on a :class:`Reader` that raises at the first error.

    Errors are :class:`ModelError` naming the file, ``SECTION KEY`` and the bad value;
    warnings (a value outside its plausible range) go to ``problems`` when a list is
    given (``vfactor check`` and the checks before ``run`` pass one), else nowhere.

    Parameters
    ----------
    table : the raw TOML value of the section
    file : str or None — model file named in messages
    section : str — ``"[orbit]"``
    problems : list, optional — receives :class:`Problem` warnings
    """

    def __init__(self, table, file, section: str, problems: list | None = None):
        self.file = str(file) if file else None
        self.section = section
        self.reader = Reader(self.file or "", problems if problems is not None else [],
                             raise_errors=True)
        if not isinstance(table, dict):
            raise ModelError(f"must be a table, got {show(table)}", file=self.file,
                             where=section)
        self.table = table

    def where(self, key: str | None) -> str:
        return f"{self.section} {label(key)}" if key else self.section

    def error(self, key: str | None, message: str) -> ModelError:
        """The error to raise for ``key`` (``raise reader.error(key, message)``)."""
        return ModelError(message, file=self.file, where=self.where(key))

    def warning(self, key: str | None, message: str) -> None:
        self.reader.warning(self.where(key), message)

    def has(self, key: str) -> bool:
        return key in self.table

    def check_keys(self, allowed, context: str, others: dict | None = None) -> None:
        """Refuse keys outside ``allowed``; suggest a near miss, also among the keys of
        other kinds (``others``: kind -> keys), naming the kind it belongs to."""
        others = others or {}
        pool = sorted(set(allowed).union(*others.values()))
        for key, value in self.table.items():
            if key in allowed:
                continue
            close = difflib.get_close_matches(str(key), pool, n=1)
            exact = [k for k, keys in others.items() if key in keys]
            tip = ""
            if exact:
                tip = f" ({key!r} is a key of type = {exact[0]!r})"
            elif close:
                owner = "" if close[0] in allowed else next(
                    f", a key of type = {k!r}" for k, keys in others.items()
                    if close[0] in keys)
                tip = f" (did you mean {close[0]!r}{owner}?)"
            raise self.error(key, f"unknown key (value {show(value)}) {context}{tip}; "
                             f"known keys: {', '.join(sorted(allowed))}")

    def _get(self, key, default):
        if key not in self.table:
            if default is _MISSING:
                raise self.error(key, "is required")
            return _MISSING
        return self.table[key]

    def quantity(self, key, default=_MISSING, unit: str = "", low=None, high=None, **kw):
        """:meth:`Reader.quantity` of ``key`` (``default`` when absent; required when no
        default is given)."""
        value = self._get(key, default)
        if value is _MISSING:
            return default
        return self.reader.quantity(value, self.where(key), unit, low, high, **kw)

    def number(self, key, default=_MISSING, minimum=None, maximum=None,
               exclusive_minimum=None, unit: str = "", **kw):
        """A number in [minimum, maximum] (or above ``exclusive_minimum``)."""
        if exclusive_minimum is not None:
            return self.quantity(key, default, unit, exclusive_minimum, maximum,
                                 low_open=True, **kw)
        return self.quantity(key, default, unit, minimum, maximum, **kw)

    def integer(self, key, default=_MISSING, minimum=None, maximum=10**12):
        value = self._get(key, default)
        if value is _MISSING:
            return default
        where = self.where(key)
        if isinstance(value, bool) or not isinstance(value, int):
            self.reader.error(where, f"must be a whole number, got {show(value)}")
        if minimum is not None and value < minimum:
            self.reader.error(where, f"must be at least {minimum}, got {show(value)}")
        if maximum is not None and value > maximum:
            self.reader.error(where, f"must be at most {maximum}, got {show(value)}")
        return int(value)

    def boolean(self, key, default=_MISSING):
        value = self._get(key, default)
        if value is _MISSING:
            return default
        if not isinstance(value, bool):
            raise self.error(key, f"must be true or false, got {show(value)}")
        return value

    def string(self, key, default=_MISSING, choices=None):
        value = self._get(key, default)
        if value is _MISSING:
            return default
        if not isinstance(value, str):
            raise self.error(key, f"must be a string, got {show(value)}")
        if choices is not None and value not in choices:
            raise self.error(key, f"must be one of {', '.join(repr(c) for c in choices)}, "
                             f"got {show(value)}{hint(value, choices)}")
        return value

    def vector(self, key, default=_MISSING, length=3, nonzero=True, limit=1e6):
        """A list of ``length`` finite numbers, each of magnitude <= ``limit`` (a
        direction or quaternion has no use for larger ones, and their squares would
        overflow), not all zero when ``nonzero``."""
        import numpy as np

        value = self._get(key, default)
        if value is _MISSING:
            return default
        if (not isinstance(value, (list, tuple)) or len(value) != length
                or any(isinstance(v, bool) or not isinstance(v, (int, float)) for v in value)):
            raise self.error(key, f"must be a list of {length} numbers, got {show(value)}")
        if not all(math.isfinite(float(v)) and abs(float(v)) <= limit for v in value):
            raise self.error(key, f"must hold finite numbers of magnitude <= {limit:g}, got "
                             f"{show(value)}")
        array = np.asarray(value, dtype=np.float64)
        if nonzero and not np.linalg.norm(array) > 0.0:
            raise self.error(key, f"must not be the zero vector, got {show(value)}")
        return array


def label(key) -> str:
    """A key or name as shown in a message's location: as written when it is a plain
    printable name, else quoted with escapes (a key holding a newline stays on one line)."""
    text = str(key)
    return text if text and not name_problem(text) else repr(text)


def name_problem(text: str) -> str:
    """What is wrong with a name (empty when nothing): empty, leading or trailing spaces,
    or characters that are not printable (control characters such as newlines, tabs and
    terminal escapes; Python's :meth:`str.isprintable`)."""
    if not text.isprintable():
        bad = next(c for c in text if not c.isprintable())
        return (f"must be printable: it holds {bad!r}, a control or other non-printable "
                f"character (names end up in tables, files and on terminals)")
    if not text.strip():
        return "must not be empty"
    if text != text.strip():
        return "must not start or end with spaces"
    return ""


def _span(low, high) -> str:
    if low is not None and high is not None:
        return f"range {low:g} to {high:g}"
    return f"minimum {low:g}" if low is not None else f"maximum {high:g}"


def hint(value, choices) -> str:
    """' (did you mean X?)' for a near miss among ``choices``, else ''."""
    close = difflib.get_close_matches(str(value), list(choices), n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def show(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."
