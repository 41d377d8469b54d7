"""One error hierarchy for the whole package.

Every message says what is wrong and what is allowed, so that the command line can print it as one line
and exit with status 2 (bad input) or 1 (a run that failed).
"""
from __future__ import annotations

from collections.abc import Iterable


class OptimiserError(Exception):
    """Root of every error the package raises on purpose."""

    exit_status = 1


class InputError(OptimiserError, ValueError):
    """The user's input is wrong (unknown name, bad value, bad unit, bad file)."""

    exit_status = 2


class UnknownNameError(InputError, KeyError):
    """A metal, reagent or indicator name that the database does not hold."""

    def __init__(self, kind: str, name: str, allowed: Iterable[str]):
        self.kind, self.name, self.allowed = kind, name, sorted(allowed)
        super().__init__(f"unknown {kind} {name!r}; known {kind}s: {', '.join(self.allowed)}")

    def __str__(self) -> str:  # KeyError would otherwise quote the message
        return self.args[0]


class ScenarioError(InputError):
    """A scenario file that cannot be read or does not validate; names file, line and column."""

    def __init__(self, message: str, path: str | None = None, line: int | None = None, column: int | None = None):
        self.path, self.line, self.column = path, line, column
        where = ""
        if path is not None:
            where = f"{path}"
            if line is not None:
                where += f":{line}" + (f":{column}" if column is not None else "")
            where += ": "
        super().__init__(where + message)


class DataError(OptimiserError):
    """The constants database itself is inconsistent (a bug in a data file, not in the user's input)."""


class InapplicableMethodError(InputError):
    """A method that cannot determine the analyte at all (for example, its masking agent masks the analyte itself)."""


class MissingConstantError(OptimiserError):
    """A constant needed for a calculation is not in the database (never silently taken as zero)."""

    exit_status = 2


class ConvergenceError(OptimiserError):
    """The equilibrium solver did not reach its tolerance; names the point."""
