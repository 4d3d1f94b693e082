"""Errors raised by the kernels when their inputs (weather files, geometry) are bad.

They inherit :class:`ValueError`; ``sweep`` maps them to exit status 2.
"""

from __future__ import annotations


class InputError(ValueError):
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
