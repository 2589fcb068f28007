"""One exception tree for hydroatlas.

Every error raised on purpose derives from :class:`HydroatlasError`, and each
subclass also derives the builtin that fits, so callers that do not know
hydroatlas can still catch ``ValueError`` or ``LookupError``. The command line
turns any :class:`HydroatlasError` into a one-line message and exit code 2.
"""

from __future__ import annotations


class HydroatlasError(Exception):
    """Root of every error hydroatlas raises on purpose."""


class ParameterError(HydroatlasError, ValueError):
    """A function or command argument is out of its allowed range or shape."""


class UnitError(HydroatlasError, ValueError):
    """An unknown or unsupported physical unit label."""


class StoreError(HydroatlasError, OSError):
    """The store cannot be opened, created or written."""


class NotAStoreError(StoreError):
    """The path or URL exists but is not a hydroatlas store."""


class InsufficientDataError(HydroatlasError, ValueError):
    """Too few values for the requested computation."""


class NotFittedError(HydroatlasError, RuntimeError):
    """``predict`` was called before ``fit``."""


class ImportDataError(HydroatlasError, ValueError):
    """An input file is refused; nothing of it was written to the store.

    Parameters
    ----------
    message : str
        What is wrong and what to fix.
    file : str, optional
        The input file name.
    row : int, optional
        1-based data row (the header is row 0; the file line is ``row + 1``).
    column : str, optional
        The offending column name.
    """

    def __init__(self, message: str, *, file: str | None = None,
                 row: int | None = None, column: str | None = None):
        self.file = file
        self.row = row
        self.column = column
        self.detail = message
        super().__init__(self._format())

    def _format(self) -> str:
        where = []
        if self.file is not None:
            where.append(str(self.file))
        if self.row == 0:
            where.append("header (line 1)")
        elif self.row is not None:
            where.append(f"row {self.row} (line {self.row + 1})")
        if self.column is not None:
            where.append(f"column '{self.column}'")
        return (", ".join(where) + ": " if where else "") + self.detail
