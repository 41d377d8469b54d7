"""One error hierarchy for the whole package.

Every message says what is wrong and what is allowed, so that the command line can print it as one line
and exit with status 2 (bad input) or 1 (a run that failed). Every exit-2 error is an :class:`InputError`.

Every error pickles and unpickles with the same message and attributes (``__reduce__`` passes the
constructor's own arguments), so that an error raised in a batch worker reaches the parent intact.
"""
from __future__ import annotations

from collections.abc import Iterable


class OptimiserError(Exception):
    """Root of every error the package raises on purpose."""

    exit_status = 1


class InputError(OptimiserError, ValueError):
    """The user's input is wrong (unknown name, bad value, bad unit, bad file, a constant the method needs)."""

    exit_status = 2


class UnknownNameError(InputError, KeyError):
    """A metal, reagent or indicator name that the database does not hold.

    Attributes
    ----------
    kind : str
        What was looked up (``"metal"``, ``"titrant"``, ...).
    name : str
        The name as given.
    allowed : list of str
        The names that are known, sorted.
    """

    def __init__(self, kind: str, name: str, allowed: Iterable[str]):
        self.kind, self.name, self.allowed = kind, name, sorted(allowed)
        super().__init__(f"unknown {kind} {name!r}; known {kind}s: {', '.join(self.allowed)}")

    def __str__(self) -> str:  # KeyError would otherwise quote the message
        return self.args[0]

    def __reduce__(self):
        return (type(self), (self.kind, self.name, self.allowed), self.__dict__)


class ScenarioError(InputError):
    """A scenario file that cannot be read or does not validate; names file, line and column.

    Attributes
    ----------
    message : str
        What is wrong, without the location.
    path : str or None
        The file (or ``"<scenario>"`` for text given directly).
    line, column : int or None
        1-based position of the offending key or value.
    """

    def __init__(self, message: str, path: str | None = None, line: int | None = None, column: int | None = None):
        self.message, self.path, self.line, self.column = message, path, line, column
        where = ""
        if path is not None:
            where = f"{path}"
            if line is not None:
                where += f":{line}" + (f":{column}" if column is not None else "")
            where += ": "
        super().__init__(where + message)

    def __reduce__(self):
        return (type(self), (self.message, self.path, self.line, self.column), self.__dict__)


class DataError(OptimiserError):
    """The constants database itself is inconsistent (a bug in a data file, not in the user's input).

    Attributes
    ----------
    file : str or None
        The data file, e.g. ``"indicators.yaml"``.
    entry : str or None
        The entry (its id, or a line number for a table row).
    key : str or None
        The key or column at fault.
    """

    def __init__(self, message: str, file: str | None = None, entry: str | None = None, key: str | None = None):
        self.message, self.file, self.entry, self.key = message, file, entry, key
        where = ""
        if file is not None:
            where = file + (f" entry {entry!r}" if entry is not None else "") + (f" key {key!r}" if key is not None else "") + ": "
        super().__init__(where + message)

    def __reduce__(self):
        return (type(self), (self.message, self.file, self.entry, self.key), self.__dict__)


class InapplicableMethodError(InputError):
    """A method that cannot determine the analyte at all (for example, its masking agent masks the analyte itself)."""


class MissingConstantError(InputError):
    """A constant needed for a calculation is not in the database (never silently taken as zero)."""


class ConvergenceError(OptimiserError):
    """The equilibrium solver did not reach its tolerance; names the point."""
