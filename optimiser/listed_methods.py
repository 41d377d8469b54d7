"""The methods a scenario lists for comparison (its ``methods:`` key): a standard's recipe, the lab's current method.

Each entry is read into a frozen :class:`ListedMethod`, every value checked as the rest of the scenario is (names
resolved through the catalogue, with a "did you mean" for a misspelling; concentrations with their units; errors
located by file, line and column). :mod:`optimiser.comparison` evaluates them beside the search's answer.

An entry::

    - name: ISO 6059 total hardness     # required, one line (at most 200 characters), unique in the list
      source: ISO 6059:1984             # optional: where the method comes from (one line, at most 500 characters)
      pH: 10.0                          # required, 0-14
      titrant: EDTA                     # required: any titrant of the catalogue (the scenario's concentration)
      buffer: ammonia                   # required: any buffer of the catalogue
      buffer_total: 0.2 M               # optional: the buffer ligand's total in the aliquot (default: the buffer's own)
      indicator: EBT                    # required
      masking: {TEA: 30 mM}             # optional: masking agent -> its concentration in the aliquot
      mode: direct                      # optional: a strategy (default direct)
      back_metal: Zn                    # optional, with a strategy that uses a standard (default: the first standard)
"""
from __future__ import annotations

import math
import unicodedata
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from .errors import InputError, did_you_mean, quoted
from .reagents import catalogue
from .strategies import strategy, strategy_ids
from .units import reagent_M

if TYPE_CHECKING:  # pragma: no cover
    from .candidate import Candidate

KEYS = ("name", "source", "pH", "titrant", "buffer", "buffer_total", "indicator", "masking", "mode", "back_metal")
REQUIRED = ("name", "pH", "titrant", "buffer", "indicator")
MAX_METHODS = 20  # each is simulated and scanned for robustness: a bound on the work a scenario can ask for
NAME_LIMIT, SOURCE_LIMIT = 200, 500  # characters


@dataclass(frozen=True)
class ListedMethod:
    """One method a scenario lists for comparison, validated; names are the catalogue's ids.

    Attributes
    ----------
    name, source : str
        What the user calls it and where it comes from ("" where not said).
    pH : float
    titrant, buffer, indicator : str
    buffer_total_M : float
        The buffer ligand's total in the aliquot [mol/L] (0 for a buffer without a ligand).
    masking : tuple of (agent, conc_M)
        Masking agents and their concentrations in the aliquot [mol/L], in the order given.
    mode : str
        The strategy's id.
    back_metal : str
        The standard, read by a strategy that uses one.
    """

    name: str
    source: str
    pH: float
    titrant: str
    buffer: str
    buffer_total_M: float
    indicator: str
    masking: tuple[tuple[str, float], ...]
    mode: str
    back_metal: str

    def candidate(self) -> Candidate:
        """The method as the search encodes a candidate (so that it is evaluated exactly as the search's are)."""
        from .candidate import Candidate
        log_buffer = math.log10(self.buffer_total_M) if self.buffer_total_M > 0 else -1.0
        return Candidate(pH=self.pH, buffer=self.buffer, log_buffer=log_buffer, titrant=self.titrant,
                         masking=tuple(sorted(self.masking)), indicator=self.indicator, mode=self.mode,
                         back_metal=self.back_metal)


def _text(value: Any, limit: int) -> str:
    """One line of printable text, at most ``limit`` characters."""
    if not isinstance(value, str) or not value.strip():
        got = quoted(value) if isinstance(value, str) else "nothing (null)" if value is None else type(value).__name__
        raise InputError(f"must be non-empty text; got {got}")
    v = value.strip()
    if len(v) > limit:
        raise InputError(f"is {len(v):,} characters long; allowed: at most {limit:,}")
    for ch in v:
        if not (ch.isprintable() or unicodedata.category(ch) == "Zs"):
            raise InputError(f"holds U+{ord(ch):04X}, a control or invisible character; allowed: one line of printable text")
    return v


def _number(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"must be a number from 0 to 14; got {quoted(value) if isinstance(value, str) else repr(value)}")
    return float(value)


def _name_of(value: Any, lookup) -> str:
    if not isinstance(value, str):
        raise InputError(f"must be a name; got {value!r}")
    return lookup(value).id


def _mode(value: Any) -> str:
    modes = strategy_ids()
    if not isinstance(value, str) or value not in modes:
        close = did_you_mean(value, modes) if isinstance(value, str) else []
        hint = f"did you mean {' or '.join(close)}? " if close else ""
        raise InputError(f"{quoted(value)} is not a mode; {hint}allowed: {', '.join(modes)}")
    return value


def _standard(value: Any) -> str:
    if not isinstance(value, str):
        raise InputError(f"must be the name of a standard; got {value!r}")
    return catalogue().standard(value).id


def _check_entry_keys(r, entry: Any, key: tuple) -> None:
    if not isinstance(entry, Mapping):
        raise r.error(f"methods.{key[-1]} must be a mapping with keys {', '.join(KEYS)}", key)
    for k in entry:
        if k not in KEYS:
            close = did_you_mean(str(k), KEYS)
            hint = f"did you mean {' or '.join(close)}? " if close else ""
            raise r.error(f"unknown key {quoted(k)} in methods.{key[-1]}; {hint}allowed: {', '.join(KEYS)}",
                          key + (k, "<key>"))
    missing = [k for k in REQUIRED if k not in entry]
    if missing:
        raise r.error(f"methods.{key[-1]} lacks {', '.join(missing)}; a method needs {', '.join(REQUIRED)}", key)


def _masking(r, entry: Mapping, key: tuple) -> tuple[tuple[str, float], ...]:
    block = entry.get("masking")
    if block is None:
        return ()
    if not isinstance(block, Mapping):
        raise r.error(f"methods.{key[-1]}.masking must be a mapping of masking agent: concentration, e.g. {{TEA: 30 mM}}",
                      key + ("masking",))
    cat, out = catalogue(), []
    for a in block:
        try:
            agent = cat.masking_agent(str(a))
        except InputError as exc:
            raise r.error(f"methods.{key[-1]}.masking: {exc}", key + ("masking", a, "<key>")) from None
        if agent.id in (x for x, _ in out):
            raise r.error(f"methods.{key[-1]}.masking: {agent.id} is given twice; allowed: each agent once",
                          key + ("masking", a, "<key>"))
        out.append((agent.id, r.value(key + ("masking", a), reagent_M, f"the dose of {agent.id}")))
    return tuple(out)


def _entry(r, entry: Mapping, key: tuple, titrant_conc_M: float) -> ListedMethod:
    cat = catalogue()
    name = r.value(key + ("name",), _text, NAME_LIMIT)
    source = r.value(key + ("source",), _text, SOURCE_LIMIT) if entry.get("source") is not None else ""
    pH = r.ranged(key + ("pH",), _number, 0.0, 14.0, "")
    titrant = r.value(key + ("titrant",), _name_of, cat.titrant)
    buf = cat.buffer(r.value(key + ("buffer",), _name_of, cat.buffer))
    total = 0.0
    if buf.ligand:
        total = buf.default_total_M
        if "buffer_total" in entry:
            total = r.value(key + ("buffer_total",), reagent_M, f"the total of {buf.id}")
    elif "buffer_total" in entry:
        raise r.error(f"methods.{key[-1]}.buffer_total: buffer {buf.id} adds no complexing ligand, so it takes no "
                      "buffer_total", key + ("buffer_total",))
    indicator = r.value(key + ("indicator",), _name_of, cat.indicator)
    masking = _masking(r, entry, key)
    mode = r.value(key + ("mode",), _mode) if "mode" in entry else "direct"
    back_metal = next(iter(cat.standards))
    if "back_metal" in entry:
        if not strategy(mode).uses_standard:
            raise r.error(f"methods.{key[-1]}.back_metal is read only with a mode that uses a standard; this method's "
                          f"mode is {mode}",
                          key + ("back_metal",))
        back_metal = r.value(key + ("back_metal",), _standard)
    listed = ListedMethod(name=name, source=source, pH=pH, titrant=titrant, buffer=buf.id, buffer_total_M=total,
                          indicator=indicator, masking=masking, mode=mode, back_metal=back_metal)
    from .method import Method  # the method as a whole: what its strategy checks
    r.value(key, lambda _: Method(pH=pH, buffer=buf.id, buffer_total_M=total, titrant=titrant,
                                  titrant_conc_M=titrant_conc_M, indicator=indicator, masking=masking, mode=mode,
                                  back_metal=back_metal))
    return listed


def read(r, titrant_conc_M: float) -> tuple[ListedMethod, ...]:
    """The ``methods`` list of a scenario document (``r``: the scenario's reader), each entry validated; () when
    absent."""
    if "methods" not in r.doc:
        return ()
    entries = r.list_(r.doc, ("methods",), non_empty="method (name, pH, titrant, buffer, indicator)")
    if len(entries) > MAX_METHODS:
        raise r.error(f"methods lists {len(entries)} methods; allowed: at most {MAX_METHODS}", ("methods",))
    out: list[ListedMethod] = []
    for i, entry in enumerate(entries):
        key = ("methods", i)
        _check_entry_keys(r, entry, key)
        m = _entry(r, entry, key, titrant_conc_M)
        if m.name in (x.name for x in out):
            raise r.error(f"methods.{i}.name: two methods are named {quoted(m.name)}; allowed: a different name for each",
                          key + ("name",))
        out.append(m)
    return tuple(out)
