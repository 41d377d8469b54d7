"""One error hierarchy for the whole package.

Every message says what is wrong and what is allowed, so that the command line can print it as one line
and exit with status 2 (bad input) or 1 (a run that failed). Every exit-2 error is an :class:`InputError`.

Every error pickles and unpickles with the same message and attributes (``__reduce__`` passes the
constructor's own arguments), so that an error raised in a batch worker reaches the parent intact.
"""
from __future__ import annotations

import difflib
import re
import unicodedata
from collections.abc import Iterable, Mapping

# Characters a terminal or a browser would act on rather than show: C0 and C1 controls (ANSI escapes start with
# ESC), line and paragraph separators, and the bidirectional embeddings, overrides, isolates and marks (an RLO can
# make "exe.txt" read as "txt.exe").
_UNSAFE = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028-\u202e\u2066-\u2069\ufeff\ufff9-\ufffb]")


def _escape(ch: str) -> str:
    o = ord(ch)
    return f"\\x{o:02x}" if o < 0x100 else f"\\u{o:04x}"


def printable(text: str, limit: int | None = None) -> str:
    r"""``text`` safe to print on a terminal or in a page: every control, separator or direction-override character
    (and every other invisible format character or lone surrogate) written as an escape (``\x1b``, ``\u202e``);
    longer than ``limit`` characters, cut with "...".

    >>> print(printable("tiny\x1b[2Jred\u202e"))
    tiny\x1b[2Jred\u202e
    """
    if limit is not None and len(text) > limit:
        text = text[:limit] + "..."
    if text.isprintable():  # the common case: nothing to escape
        return text
    return "".join(_escape(ch) if _UNSAFE.match(ch) or unicodedata.category(ch) in ("Cf", "Cs", "Co", "Cn")
                   else ch for ch in text)


def quoted(name: object, limit: int = 60) -> str:
    """A name as a message quotes it: in quotes, escaped by :func:`printable`, cut after ``limit`` characters."""
    return "'" + printable(str(name), limit) + "'"


def did_you_mean(name: str, allowed: Iterable[str], n: int = 3) -> list[str]:
    """The allowed names a mistyped ``name`` most likely meant: those it begins (``Fe`` -> ``Fe(II)``, ``Fe(III)``),
    or else the close matches by :mod:`difflib`; case ignored.

    >>> did_you_mean("Fe", ["Fe(II)", "Fe(III)", "Ca"])
    ['Fe(II)', 'Fe(III)']
    >>> did_you_mean("EDTX", ["EDTA", "EGTA", "CDTA", "DTPA"])
    ['EDTA']
    """
    key = str(name).strip().lower()
    if not key or len(key) > 40:
        return []
    by_lower: dict[str, str] = {}
    for a in allowed:
        by_lower.setdefault(str(a).lower(), str(a))
    hits = [a for low, a in by_lower.items() if low.startswith(key) and low != key]
    if not hits:
        hits = [by_lower[m] for m in difflib.get_close_matches(key, list(by_lower), n=n, cutoff=0.6)]
    return list(dict.fromkeys(hits))[:n]


def _or(names: list[str]) -> str:
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " or " + names[-1]


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
    spellings : dict or None
        Other spellings of the known names (spelling -> name), for the "did you mean" hint.
    """

    def __init__(self, kind: str, name: str, allowed: Iterable[str], spellings: Mapping[str, str] | None = None):
        self.kind, self.name, self.allowed = kind, name, sorted(allowed)
        self.spellings = dict(spellings) if spellings else None
        by_spelling = {**{a: a for a in self.allowed}, **(self.spellings or {})}
        close = list(dict.fromkeys(by_spelling[s] for s in did_you_mean(name, by_spelling, n=6)))[:3]
        hint = f"; did you mean {_or(close)}?" if close else ";"
        super().__init__(f"unknown {kind} {quoted(name)}{hint} known {kind}s: {', '.join(self.allowed)}")

    def __str__(self) -> str:  # KeyError would otherwise quote the message
        return self.args[0]

    def __reduce__(self):
        return (type(self), (self.kind, self.name, self.allowed, self.spellings), self.__dict__)


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
        super().__init__(printable(where + message))

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
    """The equilibrium solver did not reach its tolerance; names the point and, where the point lies outside the
    model's domain (an ionic strength beyond the Davies equation's range), says so (``outside_domain``)."""

    def __init__(self, message: str, outside_domain: bool = False):
        self.outside_domain = outside_domain
        super().__init__(message)

    def __reduce__(self):
        return (type(self), (self.args[0], self.outside_domain))
