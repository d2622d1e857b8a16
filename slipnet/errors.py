"""The slipnet exception family.

Every error slipnet raises on purpose derives from :class:`SlipnetError`. The input and
parameter errors also derive from :class:`ValueError`, so ``except ValueError`` catches them,
numerical failures derive from :class:`ArithmeticError`, and output failures (a full disk, a
read-only or forbidden folder) derive from :class:`OSError`.

Messages name the value, where it came from (file, line, column or parameter) and what would
be accepted.
"""

from __future__ import annotations

__all__ = [
    "InputFileError",
    "NumericalError",
    "OutputError",
    "ParameterError",
    "SlipnetError",
]


class SlipnetError(Exception):
    """Base class of every error slipnet raises on purpose."""


class ParameterError(SlipnetError, ValueError):
    """A parameter given to a function or on the command line is out of range or malformed."""


class InputFileError(SlipnetError, ValueError):
    """An input file is missing, malformed or inconsistent.

    Parameters
    ----------
    message
        What is wrong and what would be accepted.
    path
        The file, if known.
    line
        1-based line number in a text file, if known.
    column
        Column name, if known.
    """

    def __init__(
        self,
        message: str,
        *,
        path: str | None = None,
        line: int | None = None,
        column: str | None = None,
    ) -> None:
        where = []
        if path is not None:
            where.append(f"file {path!s}")
        if line is not None:
            where.append(f"line {line}")
        if column is not None:
            where.append(f"column {column!r}")
        prefix = ", ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message)
        self.path = path
        self.line = line
        self.column = column


class NumericalError(SlipnetError, ArithmeticError):
    """A computation failed to converge or produced a non-finite result."""


class OutputError(SlipnetError, OSError):
    """An output could not be written: the disk is full, or the folder is read-only or not writable.

    The message names the path and what to do. ``errno`` and ``filename`` carry the operating
    system's error number and the path, as on any :class:`OSError`. A run that meets one leaves
    its output folder as it was before the run (see :class:`slipnet.runs.OutputRun`).

    Parameters
    ----------
    message
        What failed, on which path, and the fix.
    errno
        The operating system's error number, if any.
    filename
        The path that could not be written.
    """

    def __init__(self, message: str, *, errno: int | None = None, filename: str | None = None) -> None:
        super().__init__(message)
        self.errno = errno
        self.filename = filename

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""
