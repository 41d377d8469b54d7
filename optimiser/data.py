"""Load the constants tables in ``optimiser/data`` once, through importlib.resources.

The tables are plain CSV and YAML (see ``data/README.md``); this module only reads them into plain
Python structures and checks that each row has the fields it needs. Interpretation (charges, Davies,
van 't Hoff) lives in :mod:`optimiser.constants`.
"""
from __future__ import annotations

import csv
import io
from functools import lru_cache
from importlib import resources
from typing import Any

import yaml

from .errors import DataError

_REQUIRED = {
    "protonation.csv": ("ligand", "h", "log_beta", "temperature_C", "ionic_strength_M", "source"),
    "complexes.csv": ("metal", "ligand", "n", "h", "log_beta", "temperature_C", "ionic_strength_M", "source"),
    "hydrolysis.csv": ("metal", "n", "log_beta", "temperature_C", "ionic_strength_M", "source"),
    "solids.csv": ("solid", "metal", "ligand", "n", "log_Ksp", "temperature_C", "ionic_strength_M", "source"),
    "water.csv": ("reaction", "log_K", "temperature_C", "ionic_strength_M", "source"),
    "references.csv": ("key", "citation"),
}


def _text(name: str) -> str:
    return resources.files("optimiser").joinpath("data", name).read_text(encoding="utf-8")


@lru_cache(maxsize=None)
def table(name: str) -> tuple[dict[str, str], ...]:
    """Rows of a CSV table as dicts of strings; required fields checked non-empty.

    Parameters
    ----------
    name : str
        File name inside ``optimiser/data``, e.g. ``"complexes.csv"``.
    """
    rows = tuple(csv.DictReader(io.StringIO(_text(name))))
    for i, row in enumerate(rows, start=2):
        for field in _REQUIRED.get(name, ()):
            if not (row.get(field) or "").strip():
                raise DataError(f"{name} line {i}: field {field!r} is empty")
    return rows


@lru_cache(maxsize=None)
def document(name: str) -> Any:
    """A YAML document from ``optimiser/data`` (safe loading)."""
    return yaml.safe_load(_text(name))


@lru_cache(maxsize=None)
def references() -> dict[str, dict[str, str]]:
    """Reference key -> row of ``references.csv``."""
    return {row["key"]: row for row in table("references.csv")}
