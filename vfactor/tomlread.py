"""Checked reading of TOML values: each bad value becomes one problem line.

A :class:`Reader` either raises :class:`vfactor.errors.ModelError` at the first problem
(strict mode, ``problems=None``) or appends :class:`vfactor.errors.Problem` entries to a
list and raises :class:`Invalid` only to abandon the current item (a coating, a part, a
side), so that the caller carries on with the rest of the file (collecting mode, used by
``vfactor check``).
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field

from vfactor.errors import ModelError, Problem

__all__ = ["Invalid", "Reader", "hint", "show"]


class Invalid(Exception):
    """The current item (part, coating, side) cannot be used."""


@dataclass
class Reader:
    """Reads values of one model file into problems (see the module docstring)."""

    file: str
    problems: list | None  # None: strict

    found: list = field(default_factory=list)
    broken_coatings: set = field(default_factory=set)   # defined, but with a bad value

    def error(self, where: str, message: str, fatal_for_item: bool = True):
        if self.problems is None:
            raise ModelError(message, file=self.file, where=where)
        self.problems.append(Problem("error", self.file, where, message))
        if fatal_for_item:
            raise Invalid()

    def soft_error(self, where: str, message: str):
        """An error that does not prevent using the rest of the item."""
        if self.problems is None:
            raise ModelError(message, file=self.file, where=where)
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
                self.soft_error(f"{where} {key}" if where else key,
                                f"unknown {what} key {key!r}; {hint}known keys are "
                                f"{', '.join(allowed)}")


def hint(value, choices) -> str:
    """' (did you mean X?)' for a near miss among ``choices``, else ''."""
    close = difflib.get_close_matches(str(value), list(choices), n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def show(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."
