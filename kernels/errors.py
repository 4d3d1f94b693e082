"""The root of luxsweep's errors, and the kernels' input errors.

:class:`LuxsweepError` is the base of every error luxsweep defines, in the
kernels and in ``sweep`` (``sweep.errors`` re-exports it; it lives here because
the kernels may not import ``sweep``). Each subclass also inherits the builtin
that callers caught before (:class:`InputError` is a :class:`ValueError`), so
``except LuxsweepError`` and ``except ValueError`` both work.

The kernels raise :class:`InputError` subclasses when their inputs (weather
files, geometry) are bad; ``sweep`` maps them to exit status 2.

Chaining rule (the whole project): a ``raise`` inside an ``except`` block always
names the caught exception as its cause, ``raise NewError(...) from exc`` —
never ``from None`` and never an implicit context. The message says what is
wrong for the user; the cause stays for ``--debug`` tracebacks and for callers
that inspect ``__cause__``. A test scans the sources for it.
"""

from __future__ import annotations

__all__ = ["GeometryError", "InputError", "LuxsweepError", "WeatherFileError"]


class LuxsweepError(Exception):
    """Base class of every error luxsweep defines."""


class InputError(LuxsweepError, ValueError):
    """Bad user input found by a kernel.

    Parameters
    ----------
    message : str
        What is wrong and how to fix it.
    file : str, optional
        The file that holds the mistake.
    line : int, optional
        1-based line number in that file.
    field : str, optional
        Column, key or item name.
    """

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        line: int | None = None,
        field: str | None = None,
    ) -> None:
        self.message = message
        self.file = file
        self.line = line
        self.field = field
        super().__init__(self.__str__())

    def __str__(self) -> str:
        where = []
        if self.file:
            where.append(str(self.file))
        if self.line is not None:
            where.append(f"line {self.line}")
        if self.field:
            where.append(f"field '{self.field}'")
        prefix = ", ".join(where)
        return f"{prefix}: {self.message}" if prefix else self.message


class WeatherFileError(InputError):
    """A weather file (EPW, TMY3 CSV) is malformed or holds impossible values."""


class GeometryError(InputError):
    """A room, mesh, window or sensor definition is impossible."""
