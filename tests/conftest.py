"""Shared fixtures. Figures use the Agg backend (no display)."""
import matplotlib

matplotlib.use("Agg")

import os
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(Path(__file__).resolve().parent))  # the phreeqc bridge and the browser helper
sys.path.insert(0, str(ROOT / "benchmarks"))  # the exhaustive grid the search is checked against


def _record_searched_scenarios(folder: str) -> None:
    """With OPTIMISER_RECORD_SCENARIOS=<folder>, every scenario a test searches is pickled there (once each), for
    ``benchmarks/bench.py seeds <folder>``: the seed independence of every scenario the tests use. Set before the
    test modules import ``run_search``, which they then import wrapped."""
    import hashlib
    import pickle

    import optimiser.search as search
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    original = search.run_search

    def run_search(scenario, *args, **kwargs):
        data = pickle.dumps(scenario)
        (out / f"{hashlib.sha1(data).hexdigest()[:16]}.pkl").write_bytes(data)
        return original(scenario, *args, **kwargs)
    search.run_search = run_search


if os.environ.get("OPTIMISER_RECORD_SCENARIOS"):
    _record_searched_scenarios(os.environ["OPTIMISER_RECORD_SCENARIOS"])


@pytest.fixture(scope="session")
def scenarios_dir() -> Path:
    return ROOT / "scenarios"


TINY_SCENARIO = """
name: tiny-calcium
description: A calcium standard with a little magnesium (test fixture).
sample: {volume: 50 mL, ionic_strength: 0.1 M, temperature: 25 degC}
analyte: {metals: {Ca: 1.0 mmol/L}}
interferents: {Mg: 0.2 mmol/L}
titrant: {concentration: 0.01 M, burette: 25 mL}
search:
  pH: [9.0, 13.0]
  titrants: [EDTA]
  buffers: [ammonia, NaOH]
  indicators: [EBT, calcon_carboxylic]
  max_masking_agents: 0
  modes: [direct]
targets: {max_error_percent: 1.0}
"""


# aluminium by back-titration (slow with EDTA: excess, boil, then a zinc standard); used by several test modules
AL_BACK = """
name: al-back
sample: {volume: 25 mL}
analyte: {metals: {Al: 2 mmol/L}}
titrant: {concentration: 0.02 M}
search:
  pH: [5.0, 6.0]
  titrants: [EDTA]
  buffers: [acetate]
  indicators: [xylenol_orange]
  modes: [back]
  back_metals: [Zn]
"""


@pytest.fixture()
def tiny_scenario_text() -> str:
    return TINY_SCENARIO


_SEARCHES: dict = {}


def example_search(path):
    """``run_search(seed=1)`` of a scenario file (an example, or the built-in demo), with its robustness scan, run
    once per test session: the tests that read the same run share it (the searches are the suite's slowest part)."""
    from optimiser.scenario import load
    from optimiser.search import run_search
    key = Path(path).read_text()  # by content: the built-in demo is the hardness example, word for word
    if key not in _SEARCHES:
        _SEARCHES[key] = run_search(load(path), seed=1)
    return _SEARCHES[key]
