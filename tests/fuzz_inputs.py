"""Generated hostile and valid scenario files, and a guarded harness that runs them through the loader and the CLI.

Importable (``make_case``, ``generate``, ``Runner``, ``classify_cli``) and runnable::

    python tests/fuzz_inputs.py --cases 10000 --seed 1            # the loader, in a guarded process pool
    python tests/fuzz_inputs.py --cases 10000 --seed 1 --cli 300  # and 300 of the cases through `optimiser check FILE`
    python tests/fuzz_inputs.py --show 1:123 --cases 10000        # print and run case 123 of that run (seed 1)

Each case is built from one of the example scenarios (``scenarios/*.yaml``) by a mutation of one *kind* (see ``KINDS``)
and records what a correct loader must do with it (``expect``: "valid", "invalid" or "either"). Cases are text
(given to ``optimiser.scenario.parse`` with a file name) or bytes (written to a temporary file and given to ``load``).

Every case runs in a worker process with an address-space limit (``resource.setrlimit(RLIMIT_AS)``, 2 GiB by default)
and is timed there; a case that has not answered after ``kill_after`` seconds is killed and counted as over 2 s.
Outcomes: ``accepted``, ``input_error`` (an ``InputError``, the expected way to refuse), ``unexpected`` (any other
exception: type and first line), ``over_2s``, ``memory`` (MemoryError under the limit) and ``killed`` (the worker died).
For every ``input_error`` the message is checked: one line, starting with ``<file>:<line>:<column>: ``, and with no raw
control, ANSI-escape or direction-override characters in it.
"""
from __future__ import annotations

import argparse
import collections
import copy
import json
import math
import multiprocessing
import os
import random
import re
import resource
import signal
import subprocess
import sys
import tempfile
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from multiprocessing.connection import wait
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parent.parent
TIME_LIMIT_S = 2.0
_DUMPER = getattr(yaml, "CSafeDumper", yaml.SafeDumper)
MEMORY_LIMIT_MB = 2048

# ---------------------------------------------------------------------------------------------------------------------
# The cases


@dataclass
class Case:
    """One generated scenario file."""

    index: int
    kind: str
    expect: str  # "valid", "invalid" or "either"
    note: str  # what was done, in a few words
    data: str | bytes  # str: parse(text, filename); bytes: load(a temporary file named filename)
    filename: str = ""

    def __post_init__(self) -> None:
        if not self.filename:
            self.filename = f"case-{self.index:05d}.yaml"

    @property
    def size(self) -> int:
        return len(self.data)

    def preview(self, n: int = 160) -> str:
        text = self.data if isinstance(self.data, str) else self.data.decode("utf-8", "backslashreplace")
        return repr(text[:n]) + ("..." if len(text) > n else "")


def _examples() -> list[tuple[str, str, dict]]:
    """(file name, text, document) of every example scenario; the package's demo when the folder is absent."""
    out = []
    for p in sorted((ROOT / "scenarios").glob("*.yaml")):
        text = p.read_text(encoding="utf-8")
        out.append((p.name, text, yaml.safe_load(text)))
    if not out:
        from optimiser.scenario import demo_text
        text = demo_text()
        out.append(("demo.yaml", text, yaml.safe_load(text)))
    return out


EXAMPLES = _examples()
METALS = ["Mg", "Ca", "Sr", "Ba", "Mn", "Fe(II)", "Fe(III)", "Co", "Ni", "Cu", "Zn", "Cd", "Hg", "Pb", "Al", "Bi"]
TITRANTS = ["EDTA", "EGTA", "CDTA", "DTPA"]
BUFFERS = ["ammonia", "acetate", "hexamine", "NaOH", "nitric_acid"]
MASKING = ["cyanide", "fluoride", "TEA", "thiosulfate", "thiourea", "iodide", "phen", "citrate", "tartrate"]
INDICATORS = ["EBT", "calmagite", "murexide", "calcon_carboxylic", "xylenol_orange", "PAN", "methylthymol_blue"]
OBJECTIVES = ["error", "selectivity", "sharpness", "hazard", "complexity"]

# Every place a value sits in a scenario (metal keys are filled in from the document).
SCALAR_PATHS = [("name",), ("description",), ("sample", "volume"), ("sample", "ionic_strength"),
                ("sample", "temperature"), ("sample", "matrix"), ("analyte", "name"), ("analyte", "report_as"),
                ("titrant", "concentration"), ("titrant", "burette"), ("search", "max_masking_agents"),
                ("search", "max_hazard"), ("targets", "max_error_percent")]
LIST_PATHS = [("search", k) for k in ("pH", "titrants", "buffers", "masking", "indicators", "forbid", "modes",
                                      "back_metals")]
MAPPING_PATHS = [("sample",), ("analyte",), ("analyte", "metals"), ("interferents",), ("titrant",), ("search",),
                 ("targets",), ("targets", "weights"), ("sample", "anions")]
UNIT_PATHS = [("sample", "volume"), ("sample", "ionic_strength"), ("sample", "temperature"),
              ("titrant", "concentration"), ("titrant", "burette")]


def _base(rng: random.Random) -> tuple[str, str, dict]:
    name, text, doc = rng.choice(EXAMPLES)
    return name, text, copy.deepcopy(doc)


def _metal_paths(doc: dict) -> list[tuple]:
    out = [("analyte", "metals", m) for m in (doc.get("analyte", {}).get("metals") or {})]
    out += [("interferents", m) for m in (doc.get("interferents") or {})]
    return out


def _set(doc: dict, path: tuple, value) -> None:
    d = doc
    for k in path[:-1]:
        nxt = d[k] if isinstance(d, list) else d.get(k)
        if not isinstance(nxt, (dict, list)):
            nxt = d[k] = {}
        d = nxt
    d[path[-1]] = value


def _dump(doc, rng: random.Random | None = None, raw: dict[str, str] | None = None) -> str:
    """YAML text of ``doc``; each placeholder string ``__RAW_n__`` is then replaced by raw YAML text (flow style)."""
    text = yaml.dump(doc, Dumper=_DUMPER, sort_keys=False, allow_unicode=True, default_flow_style=False, width=10 ** 9)
    for key, snippet in (raw or {}).items():
        assert key in text, key
        text = text.replace(f"'{key}'", snippet).replace(key, snippet)
    return text


def _with_raw(doc: dict, path: tuple, snippet: str) -> str:
    doc = copy.deepcopy(doc)
    _set(doc, path, "__RAW_0__")
    return _dump(doc, raw={"__RAW_0__": snippet})


def _pathname(path: tuple) -> str:
    return ".".join(map(str, path))


# --- valid ------------------------------------------------------------------------------------------------------------

def k_valid(rng):
    name, text, doc = _base(rng)
    style = rng.choice(["as-is", "block", "flow", "crlf", "bom", "comments", "tabs-in-text", "bytes"])
    if style == "block":
        text = _dump(doc)
    elif style == "flow":
        text = yaml.safe_dump(doc, sort_keys=False, allow_unicode=True, default_flow_style=True)
    elif style == "crlf":
        text = text.replace("\n", "\r\n")
    elif style == "bom":
        return ("valid", f"{name} with a UTF-8 byte-order mark", b"\xef\xbb\xbf" + text.encode())
    elif style == "comments":
        text = "# a comment\n" + text.replace("\n", "   # trailing comment\n", 3)
    elif style == "tabs-in-text":
        doc["description"] = "tab\there and a quote ' and \" and a colon: here"
        text = _dump(doc)
    elif style == "bytes":
        return "valid", f"{name} as a file", text.encode()
    return "valid", f"{name} ({style})", text


def _conc(rng, lo_mM=0.05, hi_mM=5.0) -> str:
    mM = 10 ** rng.uniform(math.log10(lo_mM), math.log10(hi_mM))
    return rng.choice([f"{mM:.3g} mmol/L", f"{mM:.3g} mM", f"{mM / 1000:.3g} mol/L", f"{mM / 1000:.3g} M",
                       f"{mM * 1000:.3g} umol/L", f"{mM * 1000:.3g} µmol/L"])


def k_valid_variant(rng):
    """Legal values drawn at random (units, ranges, choices the README allows)."""
    metals = rng.sample(METALS, rng.randint(1, 4))
    n_an = rng.randint(1, min(2, len(metals)))
    doc: dict = {"name": f"variant-{rng.randint(0, 10 ** 6)}", "description": "generated"}
    doc["sample"] = {"volume": rng.choice(["50 mL", "25 mL", "0.1 L", "10 mL", 50])}
    if rng.random() < 0.5:
        doc["sample"]["ionic_strength"] = rng.choice(["0.1 M", "0.05 M", "10 mM", 0.2])
    if rng.random() < 0.5:
        doc["sample"]["temperature"] = rng.choice(["25 degC", "20 °C", "298.15 K", 30])
    if rng.random() < 0.3:  # the sample's anions (README: names and units)
        doc["sample"]["anions"] = dict(rng.sample([
            ("alkalinity", rng.choice(["250 mg/L as CaCO3", "3 mmol/L"])), ("sulphate", "40 mg/L"),
            ("phosphate", "0.5 mg/L as P"), ("chloride", "1 mmol/L")], rng.randint(1, 3)))
    doc["analyte"] = {"metals": {m: _conc(rng) for m in metals[:n_an]}}
    if rng.random() < 0.3:
        doc["analyte"]["metals"][metals[0]] = f"{rng.uniform(5, 200):.3g} " + rng.choice(["mg/L", "ppm"])
    if rng.random() < 0.3:
        doc["analyte"]["report_as"] = rng.choice(["CaCO3", "ZnO", "MgO"])
    if len(metals) > n_an:
        doc["interferents"] = {m: _conc(rng, 0.001, 2) for m in metals[n_an:]}
    doc["titrant"] = {"concentration": rng.choice(["0.01 M", "0.02 M", "0.05 mol/L", "10 mM"]),
                      "burette": rng.choice(["25 mL", "50 mL", "10 mL"])}
    s: dict = {}
    if rng.random() < 0.6:
        lo = round(rng.uniform(1, 10), 1)
        s["pH"] = [lo, round(rng.uniform(lo + 0.5, 14), 1)]
    for key, pool in (("titrants", TITRANTS), ("buffers", BUFFERS), ("masking", MASKING), ("indicators", INDICATORS)):
        if rng.random() < 0.3:
            s[key] = rng.sample(pool, rng.randint(1, len(pool)))
    if rng.random() < 0.3:
        s["forbid"] = rng.sample(MASKING, rng.randint(1, 3))
    if rng.random() < 0.5:
        s["max_masking_agents"] = rng.randint(0, 2)
    if rng.random() < 0.3:
        s["max_hazard"] = rng.choice(["none", "low", "moderate", "high", "severe", 0, 2, 4])
    if rng.random() < 0.3:
        s["modes"] = rng.sample(["direct", "back"], rng.randint(1, 2))
    if rng.random() < 0.3:
        s["back_metals"] = rng.sample(["Zn", "Mg"], rng.randint(1, 2))
    if s:
        doc["search"] = s
    if rng.random() < 0.5:
        w = {k: rng.choice([0, 0.5, 1, 2]) for k in rng.sample(OBJECTIVES, rng.randint(1, 5))}
        w[rng.choice(list(w))] = 1
        doc["targets"] = {"max_error_percent": rng.choice([0.1, 0.5, 1, 2.5]), "weights": w}
    return "valid", "random legal values", _dump(doc)


# --- YAML structure attacks -------------------------------------------------------------------------------------------

def _any_path(rng, doc):
    return rng.choice(SCALAR_PATHS + LIST_PATHS + MAPPING_PATHS + _metal_paths(doc) + [("x_extra",)])


def k_alias_self(rng):
    _, _, doc = _base(rng)
    snippet = rng.choice(["&a [*a]", "&a {k: *a}", "&a [1, [2, *a]]", "&a [[[*a]]]", "&a {a: [*a, *a]}",
                          "&a [*a, *a, *a]"])
    path = _any_path(rng, doc)
    return "invalid", f"{_pathname(path)}: {snippet}", _with_raw(doc, path, snippet)


def bomb(width: int, depth: int, leaf: str = "lol") -> str:
    """A flow value whose alias expansion has width ** depth leaves, in about 4 * width * depth bytes."""
    s = f"&a0 [{', '.join([leaf] * width)}]"
    for k in range(1, depth + 1):
        s = f"&a{k} [{s}" + f", *a{k - 1}" * (width - 1) + "]"
    return s


def k_alias_bomb(rng):
    _, _, doc = _base(rng)
    width, depth = rng.randint(2, 10), rng.randint(3, 12)
    classic = rng.random() < 0.5  # one anchor per top-level key, each a list of the previous alias

    def snippet(d):
        if classic:
            lines = [f"l0: &a0 [{', '.join(['lol'] * width)}]"]
            lines += [f"l{k}: &a{k} [{', '.join([f'*a{k - 1}'] * width)}]" for k in range(1, d + 1)]
            return "\n".join(lines) + "\n"
        return bomb(width, d)
    while len(snippet(depth)) > 400 and depth > 2:
        depth -= 1
    bomb_text = snippet(depth)
    if classic:
        text, where = bomb_text + _dump(doc), "top-level keys"
    else:
        path = _any_path(rng, doc)
        text, where = _with_raw(doc, path, bomb_text), _pathname(path)
    leaves = width ** (depth + 1)
    expect = "invalid" if leaves >= 10 ** 5 or classic or where == "x_extra" else "either"
    return expect, f"{width}**{depth + 1} = {leaves:.3g} leaves in {len(bomb_text)} bytes at {where}", text


def k_deep_nesting(rng):
    _, _, doc = _base(rng)
    depth = rng.choice([50, 100, 300, 500, 1000, 3000, 10000])
    style = rng.choice(["list", "map", "mixed", "block"])
    if style == "list":
        snippet = "[" * depth + "]" * depth
    elif style == "map":
        snippet = "{a: " * depth + "1" + "}" * depth
    elif style == "mixed":
        snippet = "[{a: " * (depth // 2) + "1" + "}]" * (depth // 2)
    else:
        depth = min(depth, 1000)
        text = _dump(doc) + "".join(f"{' ' * i}a{i}:\n" for i in range(depth)) + " " * depth + "x: 1\n"
        return "invalid", f"block mapping {depth} deep at the top level", text
    path = rng.choice(LIST_PATHS + MAPPING_PATHS + [("name",), ("sample", "volume")])
    return "invalid", f"flow {style} {depth} deep at {_pathname(path)}", _with_raw(doc, path, snippet)


def k_complex_key(rng):
    _, _, doc = _base(rng)
    key = rng.choice(["[a, b]", "{a: 1}", "[Ca, Mg]", "[]", "{}", "[[x]]"])
    where = rng.choice(["top", "top-block"] + [_pathname(p) for p in MAPPING_PATHS])
    if where == "top":
        return "invalid", f"top-level key {key}", _dump(doc) + f"{key}: 1\n" if not key.startswith("[") else \
            _dump(doc) + f"? {key}\n: 1\n"
    if where == "top-block":
        return "invalid", f"top-level ? {key}", f"? {key}\n: 1\n" + _dump(doc)
    path = tuple(where.split("."))
    return "invalid", f"key {key} in {where}", _with_raw(doc, path, f"{{? {key} : 1}}")


def k_scalar_key(rng):
    """Keys that YAML reads as numbers, booleans, null or dates."""
    _, _, doc = _base(rng)
    key = rng.choice(["1", "1.5", "true", "null", "~", "2024-01-01", "0x10", ".inf", "yes", "on"])
    path = rng.choice([(), ("sample",), ("analyte", "metals"), ("interferents",), ("targets", "weights"),
                       ("search",)])
    if not path:
        return "invalid", f"top-level key {key}", _dump(doc) + f"{key}: 1\n"
    return "invalid", f"key {key} in {_pathname(path)}", _with_raw(doc, path, f"{{{key}: 1 mM}}")


def k_duplicate_key(rng):
    _, _, doc = _base(rng)
    choice = rng.randint(0, 5)
    if choice == 0:
        return "invalid", "top-level name twice", _dump(doc) + "name: again\n"
    if choice == 1:
        return "invalid", "sample.volume twice", _with_raw(doc, ("sample",), "{volume: 50 mL, volume: 25 mL}")
    if choice == 2:
        return "invalid", "metal twice", _with_raw(doc, ("analyte", "metals"), "{Ca: 1 mM, Ca: 2 mM}")
    if choice == 3:
        return "invalid", "metal twice by two spellings", _with_raw(doc, ("interferents",),
                                                                     "{Fe(III): 1 mM, Fe3+: 2 mM}")
    if choice == 4:
        return "invalid", "weight twice", _with_raw(doc, ("targets", "weights"), "{error: 1, error: 0}")
    return "invalid", "a section twice", _dump(doc) + _dump({"search": {"pH": [2, 3]}})


def k_merge_key(rng):
    _, _, doc = _base(rng)
    text = _dump(doc).replace("sample:\n", "sample: &s\n", 1)
    text += rng.choice(["x_copy:\n  <<: *s\n", "targets2:\n  <<: *s\n"])
    return "invalid", "YAML merge key under an unknown key", text


def k_yaml_tags(rng):
    _, _, doc = _base(rng)
    tag, expect = rng.choice([("!!python/object/apply:os.system ['true']", "invalid"),
                              ("!!python/name:os.system", "invalid"), ("!!python/tuple [1, 2]", "invalid"),
                              ("!foo bar", "invalid"), ("!!binary aGVsbG8=", "invalid"), ("!!set {a, b}", "invalid"),
                              ("!!omap [{a: 1}]", "invalid"), ("!!timestamp 2001-12-14", "invalid"),
                              ("!!int 12", "either"), ("!!float 1e400", "either"), ("!<tag:x,2000:y> z", "invalid")])
    path = rng.choice(SCALAR_PATHS + LIST_PATHS + _metal_paths(doc))
    if "str" in tag:
        expect = "either"
    return expect, f"{_pathname(path)}: {tag}", _with_raw(doc, path, tag)


def k_structure(rng):
    _, text, _doc = _base(rng)
    variants = [("", "invalid", "empty file"), ("# only a comment\n", "invalid", "only a comment"),
                ("~\n", "invalid", "null document"), ("[]\n", "invalid", "a list"), ("5\n", "invalid", "a number"),
                ("- name: x\n", "invalid", "a list of mappings"), ("'just text'\n", "invalid", "a string"),
                (text + "---\n" + text, "invalid", "two documents"), ("---\n" + text + "...\n", "valid", "--- and ..."),
                ("%YAML 1.1\n---\n" + text, "valid", "%YAML directive"), ("%YAML 9.9\n---\n" + text, "either",
                                                                          "%YAML 9.9"),
                ("%TAG ! tag:x,2000:\n---\n" + text, "either", "%TAG directive"),
                (text.replace("sample:", "sample: !!map", 1), "valid", "explicit !!map"),
                ("{" + text, "invalid", "unclosed flow"), (text + "\t- tab\n", "invalid", "tab indentation"),
                (text.replace("\n", "\n ", 1), "invalid", "shifted indentation"), ("&a\n" + text, "either",
                                                                                   "anchor on the document")]
    data, expect, note = rng.choice(variants)
    return expect, note, data


def k_truncated(rng):
    _, text, _ = _base(rng)
    how = rng.choice(["truncate", "flip", "drop-line", "swap-lines", "dup-line"])
    lines = text.splitlines(keepends=True)
    if how == "truncate":
        cut = rng.randint(0, len(text))
        return "either", f"cut at {cut}", text[:cut]
    if how == "flip":
        chars = list(text)
        for _ in range(rng.randint(1, 5)):
            i = rng.randrange(len(chars))
            chars[i] = chr(rng.randint(32, 126))
        return "either", "printable characters changed", "".join(chars)
    i = rng.randrange(len(lines))
    if how == "drop-line":
        return "either", f"line {i + 1} dropped", "".join(lines[:i] + lines[i + 1:])
    if how == "dup-line":
        return "either", f"line {i + 1} doubled", "".join(lines[:i + 1] + lines[i:])
    j = rng.randrange(len(lines))
    lines[i], lines[j] = lines[j], lines[i]
    return "either", f"lines {i + 1} and {j + 1} swapped", "".join(lines)


# --- values -----------------------------------------------------------------------------------------------------------

EMPTY_EXPECT = {("search", "pH"): "either", ("search", "titrants"): "either", ("search", "buffers"): "either",
                ("search", "masking"): "either", ("search", "indicators"): "either", ("search", "forbid"): "either",
                ("search", "max_masking_agents"): "either", ("search", "modes"): "either",
                ("search", "back_metals"): "either", ("search", "max_hazard"): "either",
                ("targets", "weights"): "either", ("targets", "max_error_percent"): "either",
                ("targets",): "either", ("search",): "either", ("interferents",): "either",
                ("description",): "either", ("sample", "matrix"): "either", ("analyte", "name"): "either",
                ("analyte", "report_as"): "either", ("sample", "ionic_strength"): "either",
                ("sample", "temperature"): "either", ("titrant", "burette"): "either",
                ("name",): "invalid", ("sample",): "invalid", ("sample", "volume"): "invalid",
                ("analyte",): "invalid", ("analyte", "metals"): "invalid", ("titrant",): "invalid",
                ("titrant", "concentration"): "invalid"}


def k_empty_value(rng):
    _, _, doc = _base(rng)
    path = rng.choice(list(EMPTY_EXPECT) + _metal_paths(doc))
    empty = rng.choice(["", "~", "null", "[]", "{}", "''"])
    expect = EMPTY_EXPECT.get(path, "invalid")
    if empty in ("[]", "{}", "''") and expect == "either" and path not in (("interferents",), ("search",),
                                                                          ("targets",), ("description",)):
        expect = "either"
    return expect, f"{_pathname(path)}: {empty or '(nothing)'}", _with_raw(doc, path, empty)


BROKEN_UNITS = ["5 mol/L/0", "5 (mol/L", "5 mol/L)", "5 mg/L as ()", "5 mg/L as (", "5 mg/L as )(", "5 mg/L as",
                "5 mL/0", "5 1/0", "5 mol/(L*0)", "5 mol/L**1e9", "5 mol/L**", "5 **", "5 mol/L^", "5 mol/L^-",
                "5 mol/L + 3", "5 mol/L - mol/L", "5 [mol]", "5 mol/L#", "5 __class__", "5 mol/L.real", "5 e",
                "5 mg/L as Xx9", "5 mg/L as 0", "5 mg/L as (((Ca", "5 mg/L as CaCO3 as CaCO3",
                "5 mg/L as H1000000000000", "5 mg/L as C" + "(" * 50, "5 mL mL mL mL", "5 mL/L/L/L/L/L/L",
                "5 mol/L*1e999", "5 mol/L/1e-999", "5 mol/L,", "5 mol/L=", "5 mol/L;", "5 ()", "5 ( )",
                "5 mol/L/L*0", "5 mol/0L", "5 0", "5 0/0", "5 inf", "5 nan", "5 mol/L/", "5 /L",
                "5 mol/L as CaCO3", "5 degC/L", "5 molar/0", "5 1e999", "5 mL**-1**-1", "1e999 mL", "nan mL",
                "5 ".ljust(2000, "("), "5 mg/L as " + "Q" * 5000]


ODD_BUT_READABLE = {"5 mg/L as H1000000000000"}  # a formula of absurd mass, but a formula: either answer is fair


def k_unit_break(rng):
    _, _, doc = _base(rng)
    path = rng.choice(UNIT_PATHS + _metal_paths(doc))
    value = rng.choice(BROKEN_UNITS)
    return "either" if value in ODD_BUT_READABLE else "invalid", f"{_pathname(path)}: {value[:40]!r}", _with_raw(doc, path, json.dumps(value, ensure_ascii=False))


# (path, raw YAML value, expectation): values out of range, non-finite, or of the right type but meaningless.
RANGE_VALUES = [
    (("titrant", "burette"), "1e-320 mL", "invalid"), (("titrant", "burette"), "5e10 mL", "invalid"),
    (("titrant", "burette"), "0 mL", "invalid"), (("titrant", "burette"), "-25 mL", "invalid"),
    (("titrant", "burette"), ".nan", "invalid"), (("titrant", "burette"), ".inf", "invalid"),
    (("titrant", "burette"), "1e-300", "invalid"),
    (("sample", "volume"), "1e-300 mL", "invalid"), (("sample", "volume"), "1e-320", "invalid"),
    (("sample", "volume"), "1e300 L", "invalid"), (("sample", "volume"), "5e10 mL", "invalid"),
    (("sample", "volume"), ".inf", "invalid"), (("sample", "volume"), "-.inf", "invalid"),
    (("sample", "volume"), "0", "invalid"),
    (("titrant", "concentration"), "1e300 M", "invalid"), (("titrant", "concentration"), ".nan", "invalid"),
    (("sample", "ionic_strength"), "1e300 M", "invalid"), (("sample", "ionic_strength"), ".nan", "invalid"),
    (("sample", "ionic_strength"), "-0.1 M", "invalid"),
    (("sample", "temperature"), "1e300", "invalid"), (("sample", "temperature"), ".nan", "invalid"),
    (("sample", "temperature"), "-300 K", "invalid"), (("sample", "temperature"), "nan degC", "invalid"),
    (("sample", "temperature"), "-.inf", "invalid"),
    (("analyte", "metals", "*"), "1e300 M", "invalid"), (("analyte", "metals", "*"), "1e300 mol/L", "invalid"),
    (("analyte", "metals", "*"), "1e308 mg/L", "invalid"), (("analyte", "metals", "*"), "0 M", "invalid"),
    (("interferents", "*"), "1e300 M", "invalid"), (("interferents", "*"), "1e200 mmol/L", "invalid"),
    (("targets", "weights", "error"), ".nan", "invalid"), (("targets", "weights", "error"), ".inf", "invalid"),
    (("targets", "weights", "hazard"), "1e309", "invalid"), (("targets", "weights", "sharpness"), "-.inf", "invalid"),
    (("targets", "weights", "error"), "1" + "0" * 400, "invalid"),
    (("targets", "max_error_percent"), ".nan", "invalid"), (("targets", "max_error_percent"), ".inf", "invalid"),
    (("targets", "max_error_percent"), "1e309", "invalid"), (("targets", "max_error_percent"), "1" + "0" * 400,
                                                             "invalid"),
    (("targets", "max_error_percent"), "1e-320", "invalid"),
    (("search", "max_masking_agents"), "true", "invalid"), (("search", "max_masking_agents"), "false", "invalid"),
    (("search", "max_masking_agents"), "3", "invalid"), (("search", "max_masking_agents"), "-1", "invalid"),
    (("search", "max_masking_agents"), "1.5", "invalid"), (("search", "max_masking_agents"), "1" + "0" * 400,
                                                            "invalid"),
    (("search", "back_metals"), "[]", "invalid"), (("search", "modes"), "[]", "invalid"),
    (("search", "titrants"), "[]", "invalid"), (("search", "indicators"), "[]", "invalid"),
    (("search", "back_metals"), "[Cu]", "invalid"), (("search", "modes"), "[sideways]", "invalid"),
    (("search", "pH"), "[.nan, 14]", "invalid"), (("search", "pH"), "[0, .inf]", "invalid"),
    (("search", "pH"), "[1, " + "1" + "0" * 400 + "]", "invalid"), (("search", "pH"), "[7]", "invalid"),
    (("search", "pH"), "[1, 2, 3]", "invalid"), (("search", "pH"), "[-1, 7]", "invalid"),
    (("search", "pH"), "[true, 7]", "invalid"), (("search", "pH"), "['7', '9']", "invalid"),
    (("search", "max_hazard"), "5", "invalid"), (("search", "max_hazard"), "-1", "invalid"),
    (("search", "max_hazard"), "extreme", "invalid"), (("search", "max_hazard"), ".nan", "invalid"),
    (("analyte", "report_as"), "not a formula", "invalid"), (("analyte", "report_as"), "'CaCO3)'", "invalid"),
    (("analyte", "report_as"), "Xx", "invalid"), (("analyte", "report_as"), "'(('", "invalid"),
    (("analyte", "report_as"), "'mg/L'", "invalid"), (("analyte", "report_as"), "'H-2'", "invalid"),
    (("analyte", "report_as"), "'CaCO3; rm -rf /'", "invalid"),
]


def k_bad_number(rng):
    _, _, doc = _base(rng)
    path, raw, expect = rng.choice(RANGE_VALUES)
    if path[-1] == "*":
        candidates = [p for p in _metal_paths(doc) if p[:-1] == path[:-1]]
        if not candidates:  # an example without interferents: add one
            candidates = [path[:-1] + (rng.choice(["Cu", "Pb", "Cd"]),)]
        path = rng.choice(candidates)
    return expect, f"{_pathname(path)}: {raw[:40]}", _with_raw(doc, path, raw)


def k_yaml_numbers(rng):
    """YAML 1.1 number forms: sexagesimal, hex, octal, underscores."""
    _, _, doc = _base(rng)
    path, raw, expect = rng.choice([
        (("search", "pH"), "[1:30, 14]", "invalid"), (("search", "pH"), "[0x2, 0xC]", "either"),
        (("search", "pH"), "[0o7, 1_2]", "either"), (("search", "max_masking_agents"), "0x1", "either"),
        (("search", "max_masking_agents"), "01", "either"), (("targets", "max_error_percent"), "1_0.5", "either"),
        (("targets", "max_error_percent"), "1:00", "either"), (("sample", "volume"), "0b110010", "either"),
        (("targets", "weights", "error"), "0x_ff", "either"), (("search", "max_hazard"), "1:1", "invalid"),
        (("targets", "max_error_percent"), "-.5", "invalid"), (("search", "max_hazard"), "1.0", "either")])
    return expect, f"{_pathname(path)}: {raw}", _with_raw(doc, path, raw)


# Replacement values by what the schema expects there; each with whether a correct loader must refuse it.
WRONG_FOR_SCALAR = [("[1, 2]", "invalid"), ("{a: 1}", "invalid"), ("true", "invalid"), ("2024-01-01", "invalid"),
                    ("[]", "invalid"), ("{}", "invalid"), ("[50 mL]", "invalid")]
WRONG_FOR_LIST = [("5", "invalid"), ("EDTA", "invalid"), ("{a: 1}", "invalid"), ("true", "invalid"),
                  ("[[EDTA]]", "invalid"), ("[1, 2, 3]", "invalid"), ("[{a: 1}]", "invalid"), ("[null]", "invalid"),
                  ("2024-01-01", "invalid")]
WRONG_FOR_MAPPING = [("5", "invalid"), ("text", "invalid"), ("[a, b]", "invalid"), ("true", "invalid"),
                     ("[{a: 1}]", "invalid")]
WRONG_FOR_TEXT = [("5", "invalid"), ("[a]", "invalid"), ("{a: 1}", "invalid"), ("true", "invalid"),
                  ("2024-01-01", "invalid"), ("1.5", "invalid")]
NUMBER_OK = {("sample", "volume"), ("sample", "ionic_strength"), ("sample", "temperature"), ("titrant", "burette"),
             ("titrant", "concentration"), ("targets", "max_error_percent"), ("search", "max_masking_agents"),
             ("search", "max_hazard"), ("targets", "weights", "error")}  # a weight is a bare number (README)


def k_wrong_type(rng):
    _, _, doc = _base(rng)
    path = rng.choice(SCALAR_PATHS + LIST_PATHS + MAPPING_PATHS + _metal_paths(doc)
                      + [("targets", "weights", "error"), ("search", "titrants", 0), ("search", "modes", 0)])
    if path in LIST_PATHS:
        raw, expect = rng.choice(WRONG_FOR_LIST)
    elif path in MAPPING_PATHS:
        raw, expect = rng.choice(WRONG_FOR_MAPPING)
    elif path in (("name",), ("description",), ("sample", "matrix"), ("analyte", "name"), ("analyte", "report_as")):
        raw, expect = rng.choice(WRONG_FOR_TEXT)
    elif path[-1] == 0:
        raw, expect = rng.choice(WRONG_FOR_SCALAR + [("5", "invalid")])
        if path[:2] == ("search", "titrants"):
            doc["search"] = dict(doc.get("search") or {}, titrants=["EDTA"])
        else:
            doc["search"] = dict(doc.get("search") or {}, modes=["direct"])
    else:
        raw, expect = rng.choice(WRONG_FOR_SCALAR + [("5", "either"), ("'5'", "either"), ("-5", "invalid")])
        if raw in ("5", "'5'") and path not in NUMBER_OK:
            expect = "invalid"  # a metal concentration needs a unit (README)
    return expect, f"{_pathname(path)}: {raw}", _with_raw(doc, path, raw)


def k_unknown_key(rng):
    _, _, doc = _base(rng)
    key = rng.choice(["colour", "burrette", "Ph", "pH", "Name", "volume_mL", "métaux", "x" * 300, "__proto__",
                      "constructor", "0", "'\"'", "'a b'", "search ", "sample.volume"])
    path = rng.choice([(), ("sample",), ("analyte",), ("titrant",), ("search",), ("targets",), ("targets", "weights")])
    if path == ("search",) and key == "pH":
        key = "ph"
    d = doc
    for k in path:
        d = d.setdefault(k, {})
    d[yaml.safe_load(key) if key.startswith("'") else key] = 1
    return "invalid", f"unknown key {key[:20]!r} in {_pathname(path) or 'top level'}", _dump(doc)


# --- characters and sizes ---------------------------------------------------------------------------------------------

def k_control_chars(rng):
    _, text, doc = _base(rng)
    ch = rng.choice(["\x00", "\x01", "\x07", "\x08", "\x0b", "\x0c", "\x1b", "\x7f", "\x80", "\x9b", "\ufffe",
                     "\uffff", "\x85", "\u2028"])
    if rng.random() < 0.5:
        i = rng.randrange(len(text))
        return "either", f"U+{ord(ch):04X} raw at offset {i}", text[:i] + ch + text[i:]
    # escaped in a double-quoted string, so YAML accepts it and the value carries it
    path = rng.choice([("name",), ("description",), ("analyte", "name"), ("sample", "matrix")] + _metal_paths(doc)[:1])
    esc = f"\\u{ord(ch):04x}" if ord(ch) > 0xff else f"\\x{ord(ch):02x}"
    if path[0] in ("analyte",) and path[1] == "metals" or path[0] == "interferents":
        expect = "either" if ch.isspace() else "invalid"  # "Ca\f" may fairly be read as Ca
        doc2 = copy.deepcopy(doc)
        block = doc2[path[0]] if path[0] == "interferents" else doc2["analyte"]["metals"]
        value = block.pop(path[-1])
        text = _dump(doc2)
        marker = "interferents:\n" if path[0] == "interferents" else "  metals:\n"
        indent = "  " if path[0] == "interferents" else "    "
        text = text.replace(marker, f'{marker}{indent}"{path[-1]}{esc}": {value}\n', 1)
        return expect, f"metal name with U+{ord(ch):04X}", text
    return "either", f"{_pathname(path)} with U+{ord(ch):04X} (escaped)", _with_raw(doc, path, f'"x{esc}y"')


NASTY_NAMES = ["\\e[31mred\\e[0m", "\\e[2J\\e[Hcleared", "\\e]0;title\\a", "\\u202eevil.exe\\u202c", "\\u2066iso\\u2069",
               "\\u200bzero-width", "\\e[8mhidden", "a\\rb", "line1\\nline2", "\\u061c arabic mark",
               "\\ud800 lone surrogate"]


def k_bidi_ansi(rng):
    _, _, doc = _base(rng)
    nasty = rng.choice(NASTY_NAMES)
    where = rng.choice(["name", "description", "analyte.name", "sample.matrix", "metal", "unknown-key", "titrant",
                        "report_as"])
    quoted = f'"{nasty}"'
    if where == "metal":
        return "invalid", f"metal {nasty!r}", _with_raw(doc, ("interferents",), f"{{{quoted}: 1 mM}}")
    if where == "unknown-key":
        return "invalid", f"key {nasty!r}", _with_raw(doc, ("sample",), f"{{{quoted}: 1, volume: 50 mL}}")
    if where == "titrant":
        return "invalid", f"titrant {nasty!r}", _with_raw(doc, ("search", "titrants"), f"[{quoted}]")
    if where == "report_as":
        return "invalid", f"report_as {nasty!r}", _with_raw(doc, ("analyte", "report_as"), quoted)
    expect = "either"
    if where == "name" and ("\\n" in nasty or "\\ud800" in nasty):
        expect = "either"
    return expect, f"{where} = {nasty!r}", _with_raw(doc, tuple(where.split(".")), quoted)


def k_non_utf8(rng):
    _, text, doc = _base(rng)
    how = rng.choice(["latin1-micro", "latin1-degree", "random-bytes", "overlong", "surrogate", "utf16", "utf16-bom",
                      "cp1252-quotes", "truncated-utf8", "utf32"])
    if how == "latin1-micro":
        doc["titrant"]["concentration"] = "10 µmol/L"
        return "invalid", "µ in Latin-1", _dump(doc).encode("latin-1")
    if how == "latin1-degree":
        doc["sample"]["temperature"] = "25 °C"
        return "invalid", "° in Latin-1", _dump(doc).encode("latin-1")
    if how == "cp1252-quotes":
        doc["description"] = "“quoted” – dash"
        return "invalid", "cp1252 quotes", _dump(doc).encode("cp1252")
    raw = text.encode()
    i = rng.randrange(len(raw))
    if how == "random-bytes":
        junk = bytes(rng.randint(0x80, 0xff) for _ in range(rng.randint(1, 8)))
        try:  # high bytes can happen to form valid UTF-8: make sure they do not
            junk.decode("utf-8")
            junk = b"\xff" + junk
        except UnicodeDecodeError:
            pass
        return "invalid", f"bytes {junk.hex()} at {i}", raw[:i] + junk + raw[i:]
    if how == "overlong":
        return "invalid", "overlong '/' (c0 af)", raw[:i] + b"\xc0\xaf" + raw[i:]
    if how == "surrogate":
        return "invalid", "encoded surrogate (ed a0 80)", raw[:i] + b"\xed\xa0\x80" + raw[i:]
    if how == "truncated-utf8":
        return "invalid", "a cut multi-byte character at the end", raw + "µ".encode()[:1]
    if how == "utf16":
        return "invalid", "UTF-16-LE without BOM", text.encode("utf-16-le")
    if how == "utf32":
        return "either", "UTF-32 with BOM", text.encode("utf-32")
    return "either", "UTF-16 with BOM", text.encode("utf-16")


def k_long_names(rng):
    _, _, doc = _base(rng)
    how = rng.choice(["cjk-80", "cjk-10000", "name-100k", "description-1M", "metal-100k", "unknown-key-100k",
                      "titrant-100k", "emoji", "combining"])
    if how == "cjk-80":
        doc["name"] = "".join(chr(rng.randint(0x4E00, 0x9FFF)) for _ in range(80))
        return "either", "80 CJK characters in name", _dump(doc)
    if how == "cjk-10000":
        doc["name"] = "漢" * 10000
        return "either", "10,000 CJK characters in name", _dump(doc)
    if how == "name-100k":
        doc["name"] = "n" * 100_000
        return "either", "100,000-character name", _dump(doc)
    if how == "description-1M":
        doc["description"] = "word " * 200_000
        return "either", "1 MB description", _dump(doc)
    if how == "metal-100k":
        doc["interferents"] = {"Cu" * 50_000: "1 mM"}
        return "invalid", "100,000-character metal name", _dump(doc)
    if how == "unknown-key-100k":
        doc["k" * 100_000] = 1
        return "invalid", "100,000-character unknown key", _dump(doc)
    if how == "titrant-100k":
        doc.setdefault("search", {})["titrants"] = ["EDTA" * 25_000]
        return "invalid", "100,000-character titrant name", _dump(doc)
    if how == "emoji":
        doc["name"] = "🧪" * 80 + "\U000E0041"
        return "either", "emoji and a tag character in name", _dump(doc)
    doc["name"] = "a" + "\u0301" * 5000
    return "either", "5,000 combining accents in name", _dump(doc)


def k_large(rng):
    """Files of megabytes (kept to a few per run: each takes seconds on a slow loader)."""
    _, _, doc = _base(rng)
    how = rng.choice(["400k-top-keys", "400k-interferents", "400k-titrants", "6MB-comment", "400k-weights"])
    n = 400_000
    if how == "400k-top-keys":
        return "invalid", "400,000 unknown top-level keys", _dump(doc) + "".join(f"k{i}: {i}\n" for i in range(n))
    if how == "400k-interferents":
        return "invalid", "400,000 keys under interferents", _dump(doc).replace(
            "interferents:\n", "interferents:\n" + "".join(f"  X{i}: 1 mM\n" for i in range(n)), 1) \
            if "interferents:\n" in _dump(doc) else _dump(doc) + "interferents:\n" + \
            "".join(f"  X{i}: 1 mM\n" for i in range(n))
    if how == "400k-titrants":
        doc.setdefault("search", {})["titrants"] = ["EDTA"] * n
        return "either", "400,000 entries in search.titrants", _dump(doc)
    if how == "400k-weights":
        return "invalid", "400,000 keys under targets.weights", _with_raw(
            doc, ("targets", "weights"), "{" + ", ".join(f"w{i}: 1" for i in range(n)) + "}")
    return "either", "6 MB of comments", _dump(doc) + "# " + "c" * 78 + "\n" * 1 + ("# " + "c" * 78 + "\n") * 75_000


KINDS = {
    "valid": (k_valid, 8), "valid_variant": (k_valid_variant, 8),
    "alias_self": (k_alias_self, 4), "alias_bomb": (k_alias_bomb, 2), "deep_nesting": (k_deep_nesting, 3),
    "complex_key": (k_complex_key, 4), "scalar_key": (k_scalar_key, 3), "duplicate_key": (k_duplicate_key, 4),
    "merge_key": (k_merge_key, 1), "yaml_tags": (k_yaml_tags, 3), "structure": (k_structure, 3),
    "truncated": (k_truncated, 5), "empty_value": (k_empty_value, 6), "unit_break": (k_unit_break, 6),
    "bad_number": (k_bad_number, 8), "yaml_numbers": (k_yaml_numbers, 3), "wrong_type": (k_wrong_type, 7),
    "unknown_key": (k_unknown_key, 4), "control_chars": (k_control_chars, 5), "bidi_ansi": (k_bidi_ansi, 5),
    "non_utf8": (k_non_utf8, 4), "long_names": (k_long_names, 2),
}
LARGE_KIND = "large"
ALL_KINDS = [*KINDS, LARGE_KIND]


def make_case(kind: str, seed: int, index: int = 0) -> Case:
    """Case ``index`` of the given kind, the same for the same (kind, seed, index)."""
    rng = random.Random(f"{kind}:{seed}:{index}")
    fn = k_large if kind == LARGE_KIND else KINDS[kind][0]
    expect, note, data = fn(rng)
    if isinstance(data, str) and kind not in ("non_utf8",) and rng.random() < 0.1:
        data = data.encode("utf-8", "surrogatepass")  # some text cases go through load() on a real file
    return Case(index=index, kind=kind, expect=expect, note=note, data=data)


def generate(n: int, seed: int = 1, large: int | None = None):
    """``n`` cases: kinds drawn by weight, ``large`` of them (default: 3 per 10,000, at least 1 from 1,000) large files."""
    rng = random.Random(seed)
    names = list(KINDS)
    weights = [KINDS[k][1] for k in names]
    if large is None:
        large = 0 if n < 1000 else max(1, round(3 * n / 10_000))
    large_at = set(rng.sample(range(n), min(large, n)))
    for i in range(n):
        kind = LARGE_KIND if i in large_at else rng.choices(names, weights)[0]
        yield make_case(kind, seed, i)


def case_by_id(seed: int, index: int, n: int = 10_000, large: int | None = None) -> Case:
    """Case ``index`` of the run ``generate(n, seed, large)`` (the kinds drawn depend on ``n``)."""
    for c in generate(n, seed, large):
        if c.index == index:
            return c
    raise IndexError(index)


# ---------------------------------------------------------------------------------------------------------------------
# Running the loader on a case, guarded

OUTCOMES = ("accepted", "input_error", "unexpected", "over_2s", "memory", "killed")
_CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u200e\u200f\u202a-\u202e\u2066-\u2069\u061c]")


def message_problems(message: str, path: str | None) -> list[str]:
    """What is wrong with a refusal's message: not one line, not located as ``path:line:column: ``, raw control chars."""
    problems = []
    if len(message.splitlines()) != 1 or message != message.strip("\r\n"):
        problems.append("not one line")
    if path is not None and not re.match(re.escape(path) + r":\d+:\d+: \S", message):
        problems.append("not located (file:line:column)")
    if _CONTROL.search(message.replace("\n", "")):
        problems.append("raw control/escape characters")
    return problems


@dataclass
class Result:
    case: Case
    outcome: str
    error_type: str | None = None
    message: str = ""
    elapsed_s: float = 0.0
    problems: list[str] = field(default_factory=list)
    under: str | None = None  # for over_2s: what the loader did in the end ("accepted", "killed at 5 s", ...)

    @property
    def wrongly_accepted(self) -> bool:
        return self.outcome == "accepted" and self.case.expect == "invalid"

    @property
    def wrongly_refused(self) -> bool:
        return self.outcome == "input_error" and self.case.expect == "valid"


def run_inline(case: Case, tmpdir: str) -> dict:
    """Run one case in this process: parse the text, or write the bytes to a file and load it."""
    from optimiser.errors import InputError
    from optimiser.scenario import load, parse
    path = case.filename
    t0 = time.perf_counter()
    try:
        if isinstance(case.data, bytes):
            path = os.path.join(tmpdir, case.filename)
            with open(path, "wb") as f:
                f.write(case.data)
            try:
                load(path)
            finally:
                os.unlink(path)
        else:
            parse(case.data, path)
        out = {"outcome": "accepted"}
    except MemoryError:
        out = {"outcome": "memory", "error_type": "MemoryError"}
    except InputError as exc:
        msg = str(exc)
        out = {"outcome": "input_error", "error_type": type(exc).__name__, "message": msg[:2000],
               "problems": message_problems(msg, path)}
    except Exception as exc:  # noqa: BLE001 - classifying is the point
        first = (str(exc).splitlines() or [""])[0]
        out = {"outcome": "unexpected", "error_type": type(exc).__name__, "message": first[:300]}
    out["elapsed_s"] = time.perf_counter() - t0
    return out


def address_space_limit(mem_bytes: int) -> int:
    """``mem_bytes`` of address space; or, in a process already larger than half of that (a worker forked from a big
    test process), what it has plus ``mem_bytes``."""
    try:
        with open("/proc/self/status") as f:
            size = next(int(line.split()[1]) * 1024 for line in f if line.startswith("VmSize:"))
    except (OSError, StopIteration):
        return mem_bytes
    return mem_bytes if size < mem_bytes // 2 else size + mem_bytes


def _worker(conn, mem_bytes: int, tmpdir: str) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if mem_bytes:
        limit = address_space_limit(mem_bytes)
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    sys.setrecursionlimit(max(sys.getrecursionlimit(), 1000))
    while True:
        try:
            case = conn.recv()
        except EOFError:
            return
        if case is None:
            return
        conn.send(run_inline(case, tmpdir))


def _warm() -> None:
    """Import the loader and fill its caches once, before the workers fork."""
    from optimiser.constants import database
    from optimiser.reagents import catalogue
    from optimiser.scenario import parse  # noqa: F401
    from optimiser.units import registry
    database(), catalogue(), registry()


class Runner:
    """A pool of worker processes, each with an address-space limit; cases that outrun ``kill_after`` are killed."""

    def __init__(self, workers: int | None = None, kill_after: float = 5.0, mem_mb: int = MEMORY_LIMIT_MB,
                 time_limit: float = TIME_LIMIT_S):
        self.workers = workers or os.cpu_count() or 1
        self.kill_after, self.mem_bytes, self.time_limit = kill_after, mem_mb * 2 ** 20, time_limit
        methods = multiprocessing.get_all_start_methods()
        self.ctx = multiprocessing.get_context("fork" if "fork" in methods else "spawn")
        self.tmp = tempfile.TemporaryDirectory(prefix="fuzz-inputs-")
        if self.ctx.get_start_method() == "fork":
            _warm()
        self.procs: list = []

    def _spawn(self):
        parent, child = self.ctx.Pipe()
        p = self.ctx.Process(target=_worker, args=(child, self.mem_bytes, self.tmp.name), daemon=True)
        p.start()
        child.close()
        return p, parent

    def close(self) -> None:
        for _p, conn in self.procs:
            try:
                conn.send(None)
            except (OSError, ValueError):
                pass
        for p, conn in self.procs:
            p.join(1)
            if p.is_alive():
                p.kill()
                p.join()
            conn.close()
        self.procs = []
        self.tmp.cleanup()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _result(self, case: Case, raw: dict) -> Result:
        r = Result(case, raw["outcome"], raw.get("error_type"), raw.get("message", ""), raw["elapsed_s"],
                   raw.get("problems", []))
        if r.elapsed_s > self.time_limit and r.outcome not in ("memory", "killed"):
            r.under, r.outcome = r.outcome, "over_2s"
        return r

    def run(self, cases, on_result=None) -> list[Result]:
        """Every case, in the pool; results in the order of the cases."""
        cases = list(cases)
        while len(self.procs) < self.workers:
            self.procs.append(self._spawn())
        results: list[Result | None] = [None] * len(cases)
        todo = collections.deque(range(len(cases)))
        busy: dict = {}  # conn -> (slot, case position, start time)
        free = list(range(len(self.procs)))
        while todo or busy:
            while todo and free:
                slot = free.pop()
                i = todo.popleft()
                p, conn = self.procs[slot]
                try:
                    conn.send(cases[i])
                except (BrokenPipeError, OSError):
                    self.procs[slot] = self._spawn()
                    p, conn = self.procs[slot]
                    conn.send(cases[i])
                busy[conn] = (slot, i, time.perf_counter())
            if not busy:
                continue
            deadline = min(t for _, _, t in busy.values()) + self.kill_after
            ready = wait(list(busy), timeout=max(0.0, deadline - time.perf_counter()))
            for conn in ready:
                slot, i, t0 = busy.pop(conn)
                try:
                    raw = conn.recv()
                    results[i] = self._result(cases[i], raw)
                    if raw["outcome"] == "memory":  # the worker's heap may be in a bad way: start afresh
                        self._replace(slot)
                except (EOFError, OSError):
                    p = self.procs[slot][0]
                    p.join(1)
                    code = p.exitcode
                    results[i] = Result(cases[i], "killed", f"exit {code}", f"worker died ({_signal_name(code)})",
                                        time.perf_counter() - t0)
                    self._replace(slot)
                free.append(slot)
                if on_result:
                    on_result(results[i])
            now = time.perf_counter()
            for conn, (slot, i, t0) in list(busy.items()):
                if now - t0 >= self.kill_after:
                    busy.pop(conn)
                    self._replace(slot, kill=True)
                    results[i] = Result(cases[i], "over_2s", None, f"no answer after {self.kill_after:g} s; killed",
                                        now - t0, under=f"killed at {self.kill_after:g} s")
                    free.append(slot)
                    if on_result:
                        on_result(results[i])
        return results  # type: ignore[return-value]

    def _replace(self, slot: int, kill: bool = False) -> None:
        p, conn = self.procs[slot]
        if kill or p.is_alive():
            p.kill()
        p.join()
        conn.close()
        self.procs[slot] = self._spawn()


def _signal_name(code) -> str:
    if code is not None and code < 0:
        try:
            return signal.Signals(-code).name
        except ValueError:
            pass
    return f"exit code {code}"


# ---------------------------------------------------------------------------------------------------------------------
# Through the command line: optimiser check FILE

CLI_PREFIX = "optimiser: error: "
CLI_SLOW_S = 5.0  # the 2 s of the loader plus the start-up of a fresh interpreter (about 1 s)


@dataclass
class CliResult:
    case: Case
    code: int | None
    stdout: str
    stderr: str
    elapsed_s: float
    problems: list[str]


def _cli_limits(mem_bytes: int):
    def apply():
        if mem_bytes:
            resource.setrlimit(resource.RLIMIT_AS, (mem_bytes, mem_bytes))
    return apply


def classify_cli(case: Case, code: int | None, stdout: str, stderr: str, path: str,
                 elapsed_s: float | None = None) -> list[str]:
    """What is wrong with ``optimiser check FILE``'s answer: the exit code, and for a refusal the one located line."""
    problems = []
    if code is None:
        return ["no answer in time"]
    if elapsed_s is not None and elapsed_s > CLI_SLOW_S:
        problems.append(f"over {CLI_SLOW_S:g} s (with start-up)")
    if code == 0:
        if case.expect == "invalid":
            problems.append("exit 0 for a file that must be refused")
        if _CONTROL.search(stdout.replace("\n", "")):
            problems.append("raw control/escape characters on stdout")
        return problems
    if code == 1:
        problems.append("exit 1 (internal error)" if "internal error" in stderr else "exit 1")
    elif code != 2:
        problems.append(f"exit {code}")
    if case.expect == "valid":
        problems.append("a valid file refused")
    lines = stderr.splitlines()
    if len(lines) != 1:
        problems.append(f"{len(lines)} lines on stderr")
    first = lines[0] if lines else ""
    body = first.removeprefix(CLI_PREFIX)
    if code == 2 and not re.match(re.escape(path) + r":\d+:\d+: \S", body):
        problems.append("message not located (file:line:column)")
    if _CONTROL.search(stderr.replace("\n", "")):
        problems.append("raw control/escape characters on stderr")
    return problems


def run_cli(cases, jobs: int = 2, timeout: float = 30.0, mem_mb: int = MEMORY_LIMIT_MB) -> list[CliResult]:
    """Each case written to a file and checked by ``python -m optimiser check FILE`` in its own process."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    env.pop("OPTIMISER_DEBUG", None)
    tmp = tempfile.TemporaryDirectory(prefix="fuzz-cli-")

    def one(case: Case) -> CliResult:
        path = os.path.join(tmp.name, case.filename)
        with open(path, "wb") as f:
            f.write(case.data if isinstance(case.data, bytes) else case.data.encode("utf-8", "surrogatepass"))
        t0 = time.perf_counter()
        try:
            p = subprocess.run([sys.executable, "-m", "optimiser", "check", path], check=False, capture_output=True,
                               env=env, timeout=timeout, preexec_fn=_cli_limits(mem_mb * 2 ** 20), cwd=tmp.name)
            code, out, err = p.returncode, p.stdout.decode("utf-8", "replace"), p.stderr.decode("utf-8", "replace")
        except subprocess.TimeoutExpired:
            code, out, err = None, "", ""
        r = CliResult(case, code, out, err, time.perf_counter() - t0, [])
        r.problems = classify_cli(case, code, out, err, path, r.elapsed_s)
        return r

    try:
        with ThreadPoolExecutor(jobs) as ex:
            return list(ex.map(one, cases))
    finally:
        tmp.cleanup()


def issue_cases() -> dict[str, Case]:
    """One hand-made case for each class of bad file that was seen to break the loader (built on the first example)."""
    doc = EXAMPLES[0][2]
    if "interferents" not in doc:
        doc = dict(doc, interferents={"Cu": "0.1 mmol/L"})
    text = _dump(doc)

    def raw(kind, path, snippet, expect="invalid"):
        return kind, expect, f"{_pathname(path)}: {snippet[:60]}", _with_raw(doc, path, snippet)
    table = {
        "self-referencing alias": raw("alias_self", ("name",), "&a [*a]"),
        "flow lists 500 deep": raw("deep_nesting", ("search", "pH"), "[" * 500 + "]" * 500),
        "flow mappings 500 deep": raw("deep_nesting", ("sample",), "{a: " * 500 + "1" + "}" * 500),
        "nested aliases (9**7 leaves in 325 bytes)": ("alias_bomb", "invalid", "bomb at description",
                                                      _with_raw(doc, ("description",), bomb(9, 6))),
        "complex key": ("complex_key", "invalid", "? [a, b]", "? [a, b]\n: 1\n" + text),
        "empty search.pH": raw("empty_value", ("search", "pH"), "", "either"),
        "empty search.titrants": raw("empty_value", ("search", "titrants"), "", "either"),
        "empty max_masking_agents": raw("empty_value", ("search", "max_masking_agents"), "", "either"),
        "empty search.modes": raw("empty_value", ("search", "modes"), "", "either"),
        "empty targets.weights": raw("empty_value", ("targets", "weights"), "", "either"),
        "unit 5 mol/L/0": raw("unit_break", ("titrant", "concentration"), '"5 mol/L/0"'),
        "unit 5 (mol/L": raw("unit_break", ("titrant", "concentration"), '"5 (mol/L"'),
        "unit 5 mg/L as ()": raw("unit_break", ("interferents", next(iter(doc["interferents"]))), '"5 mg/L as ()"'),
        "burette 1e-320 mL": raw("bad_number", ("titrant", "burette"), "1e-320 mL"),
        "burette 5e10 mL": raw("bad_number", ("titrant", "burette"), "5e10 mL"),
        "NaN weight": raw("bad_number", ("targets", "weights", "error"), ".nan"),
        "infinite error target": raw("bad_number", ("targets", "max_error_percent"), ".inf"),
        "volume 1e-300 mL": raw("bad_number", ("sample", "volume"), "1e-300 mL"),
        "concentration 1e300 M": raw("bad_number", ("interferents", next(iter(doc["interferents"]))), "1e300 M"),
        "max_masking_agents: true": raw("bad_number", ("search", "max_masking_agents"), "true"),
        "back_metals: []": raw("bad_number", ("search", "back_metals"), "[]"),
        "report_as not a formula": raw("bad_number", ("analyte", "report_as"), "not a formula"),
        "NUL character": ("control_chars", "either", "NUL after the name", text.replace("\n", "\x00\n", 1)),
        "not UTF-8": ("non_utf8", "invalid", "Latin-1 byte", text.encode() + b"matrix2: \xb5\n"),
        "ANSI escape in a metal name": raw("bidi_ansi", ("interferents",), '{"Cu\\e[2J": 1 mM}'),
        "80 CJK characters in the name": raw("long_names", ("name",), "漢" * 80, "either"),
    }
    return {name: Case(index=i, kind=k, expect=e, note=f"{name} ({n})", data=d)
            for i, (name, (k, e, n, d)) in enumerate(table.items())}


def spread(cases: list[Case], n: int, seed: int = 0) -> list[Case]:
    """Up to ``n`` cases taken round-robin over the kinds (so every kind is represented)."""
    by_kind: dict[str, list[Case]] = collections.defaultdict(list)
    for c in cases:
        by_kind[c.kind].append(c)
    out: list[Case] = []
    queues = [collections.deque(v) for _, v in sorted(by_kind.items())]
    while len(out) < n and any(queues):
        for q in queues:
            if q and len(out) < n:
                out.append(q.popleft())
    return out


# ---------------------------------------------------------------------------------------------------------------------
# Printing

def summarise(results: list[Result], examples: int = 3, out=sys.stdout) -> dict:
    by_outcome = collections.Counter(r.outcome for r in results)
    kinds = sorted({r.case.kind for r in results}, key=ALL_KINDS.index)
    table = {k: collections.Counter(r.outcome for r in results if r.case.kind == k) for k in kinds}
    bad_msg = [r for r in results if r.outcome == "input_error" and r.problems]
    problem_counts = collections.Counter(p for r in bad_msg for p in r.problems)
    wrongly_accepted = [r for r in results if r.wrongly_accepted]
    wrongly_refused = [r for r in results if r.wrongly_refused]
    unexpected_types = collections.Counter(f"{r.error_type}" for r in results if r.outcome == "unexpected")
    slow_under = collections.Counter(r.under for r in results if r.outcome == "over_2s")
    w = out.write
    w(f"cases: {len(results)}\n\noutcomes:\n")
    for o in OUTCOMES:
        w(f"  {o:<12} {by_outcome.get(o, 0):>6}\n")
    if unexpected_types:
        w("unexpected exceptions by type: " + ", ".join(f"{t} {n}" for t, n in unexpected_types.most_common()) + "\n")
    if slow_under:
        w("over 2 s, what the loader did: " + ", ".join(f"{t} {n}" for t, n in slow_under.most_common()) + "\n")
    w(f"\nrefusals (input_error) with a bad message: {len(bad_msg)}\n")
    for p, n in problem_counts.most_common():
        w(f"  {p:<34} {n:>6}\n")
    w(f"accepted although the file must be refused: {len(wrongly_accepted)}\n")
    w(f"refused although the file is valid: {len(wrongly_refused)}\n")
    cols = list(OUTCOMES) + ["bad_msg", "wrong_acc"]
    w("\nby kind:\n  " + f"{'kind':<14}" + "".join(f"{c:>12}" for c in cols) + f"{'total':>8}\n")
    for k in kinds:
        row = table[k]
        extra = [sum(1 for r in bad_msg if r.case.kind == k), sum(1 for r in wrongly_accepted if r.case.kind == k)]
        w("  " + f"{k:<14}" + "".join(f"{row.get(o, 0):>12}" for o in OUTCOMES)
          + "".join(f"{x:>12}" for x in extra) + f"{sum(row.values()):>8}\n")

    def show(title, rs):
        if not rs:
            return
        w(f"\nexamples, {title}:\n")
        seen_notes = set()
        for r in rs:
            key = (r.case.kind, r.error_type, r.case.note[:30])
            if key in seen_notes:
                continue
            seen_notes.add(key)
            detail = f"{r.error_type}: {r.message}" if r.error_type else r.message
            w(f"  #{r.case.index} {r.case.kind} [{r.case.note[:70]}] {r.elapsed_s:.2f} s -> {detail[:220]!r}\n")
            if len(seen_notes) >= examples:
                break
    show("unexpected exception", [r for r in results if r.outcome == "unexpected"])
    show("over 2 s", [r for r in results if r.outcome == "over_2s"])
    show("memory error or killed", [r for r in results if r.outcome in ("memory", "killed")])
    for p in problem_counts:
        show(f"message {p}", [r for r in bad_msg if p in r.problems])
    show("accepted although it must be refused", wrongly_accepted)
    show("refused although valid", wrongly_refused)
    return {"outcomes": dict(by_outcome), "by_kind": {k: dict(v) for k, v in table.items()},
            "bad_messages": dict(problem_counts), "wrongly_accepted": len(wrongly_accepted),
            "wrongly_refused": len(wrongly_refused), "unexpected_types": dict(unexpected_types)}


def summarise_cli(results: list[CliResult], examples: int = 3, out=sys.stdout) -> dict:
    w = out.write
    codes = collections.Counter("timeout" if r.code is None else r.code for r in results)
    problems = collections.Counter(p for r in results for p in r.problems)
    w(f"\ncommand line (optimiser check FILE): {len(results)} files\n  exit codes: "
      + ", ".join(f"{c}: {n}" for c, n in sorted(codes.items(), key=str)) + "\n")
    w(f"  files with a problem: {sum(1 for r in results if r.problems)}\n")
    for p, n in problems.most_common():
        w(f"    {p:<44} {n:>5}\n")
    kinds = sorted({r.case.kind for r in results}, key=ALL_KINDS.index)
    w("  by kind (files, with a problem): " + ", ".join(
        f"{k} {sum(1 for r in results if r.case.kind == k)}/{sum(1 for r in results if r.case.kind == k and r.problems)}"
        for k in kinds) + "\n")
    for p in problems:
        w(f"  examples, {p}:\n")
        for r in [r for r in results if p in r.problems][:examples]:
            err = (r.stderr.strip().splitlines() or [""])[0] if r.stderr else r.stdout.strip()[:200]
            w(f"    #{r.case.index} {r.case.kind} [{r.case.note[:60]}] exit {r.code}: {err[:200]!r}\n")
    return {"exit_codes": {str(k): v for k, v in codes.items()}, "problems": dict(problems)}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cases", type=int, default=10_000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--large", type=int, default=None, help="how many large (megabyte) files; default 3 per 10,000")
    ap.add_argument("--workers", type=int, default=None, help="worker processes (default: one per core)")
    ap.add_argument("--kill-after", type=float, default=5.0, help="seconds before a case is killed (counted as over 2 s)")
    ap.add_argument("--mem-mb", type=int, default=MEMORY_LIMIT_MB, help="address-space limit of each worker")
    ap.add_argument("--cli", type=int, default=0, metavar="N", help="also run N cases through `optimiser check FILE`")
    ap.add_argument("--examples", type=int, default=3)
    ap.add_argument("--kind", action="append", choices=ALL_KINDS, help="only these kinds")
    ap.add_argument("--show", metavar="SEED:INDEX", help="print one case and run it, then stop")
    ap.add_argument("--save", metavar="DIR", help="write every failing case to DIR (for reproducing)")
    a = ap.parse_args(argv)

    import optimiser
    sys.stderr.write(f"optimiser from {Path(optimiser.__file__).parent}\n")
    if a.show:
        seed, index = map(int, a.show.split(":"))
        c = case_by_id(seed, index, a.cases, a.large)
        print(f"#{c.index} kind {c.kind}, expect {c.expect}: {c.note} ({c.size} {'bytes' if isinstance(c.data, bytes) else 'characters'})")
        print(c.preview(2000))
        with Runner(1, a.kill_after, a.mem_mb) as runner:
            r = runner.run([c])[0]
        print(f"-> {r.outcome} ({r.under or ''}) {r.elapsed_s:.3f} s {r.error_type or ''}: {r.message[:500]!r} {r.problems}")
        return 0
    t0 = time.perf_counter()
    cases = [c for c in generate(a.cases, a.seed, a.large) if not a.kind or c.kind in a.kind]
    sys.stderr.write(f"generated {len(cases)} cases in {time.perf_counter() - t0:.1f} s\n")
    done = [0]

    def tick(_r):
        done[0] += 1
        if done[0] % 1000 == 0:
            sys.stderr.write(f"  {done[0]}/{len(cases)} in {time.perf_counter() - t1:.0f} s\n")
    t1 = time.perf_counter()
    with Runner(a.workers, a.kill_after, a.mem_mb) as runner:
        results = runner.run(cases, tick)
    print(f"loader: {len(cases)} cases (seed {a.seed}) in {time.perf_counter() - t1:.1f} s, "
          f"{runner.workers} workers, RLIMIT_AS {a.mem_mb} MiB, over 2 s counted, killed after {a.kill_after:g} s\n")
    summarise(results, a.examples)
    failing = [r for r in results if r.outcome not in ("accepted", "input_error") or r.problems or r.wrongly_accepted]
    cli_failing = []
    if a.cli:
        t2 = time.perf_counter()
        cli = run_cli(spread(cases, a.cli), jobs=a.workers or 2, mem_mb=a.mem_mb)
        summarise_cli(cli, a.examples)
        print(f"  ({time.perf_counter() - t2:.1f} s)")
        cli_failing = [r for r in cli if r.problems]
    if a.save:
        d = Path(a.save)
        d.mkdir(parents=True, exist_ok=True)
        for r in failing + cli_failing:
            data = r.case.data if isinstance(r.case.data, bytes) else r.case.data.encode("utf-8", "surrogatepass")
            (d / f"{r.case.kind}-{r.case.filename}").write_bytes(data)
    ok = not failing and not cli_failing
    print("\nall cases behaved" if ok else f"\nfailing cases: loader {len(failing)}, command line {len(cli_failing)}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
