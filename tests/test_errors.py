"""The error hierarchy: every error survives pickling (a batch worker's error reaches the parent intact), and
every error that exits with status 2 is an InputError."""
import inspect
import pickle

import pytest

from optimiser import errors
from optimiser.errors import (
    ConvergenceError,
    DataError,
    InapplicableMethodError,
    InputError,
    MissingConstantError,
    OptimiserError,
    ScenarioError,
    UnknownNameError,
)

ALL_CLASSES = sorted((c for _, c in inspect.getmembers(errors, inspect.isclass) if issubclass(c, OptimiserError)),
                     key=lambda c: c.__name__)

EXAMPLES = [
    OptimiserError("something failed"),
    InputError("bad value 3; allowed: 1 or 2"),
    UnknownNameError("metal", "Xq", ["Mg", "Ca"]),
    ScenarioError("unknown key 'colour'", "s.yaml", 4, 12),
    ScenarioError("no such file", "s.yaml"),
    ScenarioError("a scenario must be a mapping"),
    DataError("unknown key; allowed: id, name", "reagents.yaml", "titrants/EDTA", "colour"),
    DataError("Ca(EDTA): every constant needs a source key"),
    InapplicableMethodError("cyanide masks the analyte itself"),
    MissingConstantError("no log K for Bi-EGTA in the database"),
    ConvergenceError("no convergence at point 3"),
]


def test_every_class_has_an_example():
    assert {type(e) for e in EXAMPLES} == set(ALL_CLASSES)


@pytest.mark.parametrize("exc", EXAMPLES, ids=lambda e: type(e).__name__)
def test_every_error_pickles_with_its_message_and_attributes(exc):
    back = pickle.loads(pickle.dumps(exc))
    assert type(back) is type(exc)
    assert str(back) == str(exc)
    assert back.args == exc.args
    assert vars(back) == vars(exc)
    assert back.exit_status == exc.exit_status


def test_round_trip_keeps_the_located_message():
    back = pickle.loads(pickle.dumps(ScenarioError("unknown key 'colour'", "s.yaml", 4, 12)))
    assert str(back) == "s.yaml:4:12: unknown key 'colour'"
    assert (back.message, back.path, back.line, back.column) == ("unknown key 'colour'", "s.yaml", 4, 12)
    back = pickle.loads(pickle.dumps(UnknownNameError("metal", "Xq", ["Mg", "Ca"])))
    assert str(back) == "unknown metal 'Xq'; known metals: Ca, Mg"
    assert (back.kind, back.name, back.allowed) == ("metal", "Xq", ["Ca", "Mg"])
    back = pickle.loads(pickle.dumps(DataError("unknown key", "reagents.yaml", "titrants/EDTA", "colour")))
    assert str(back) == "reagents.yaml entry 'titrants/EDTA' key 'colour': unknown key"


@pytest.mark.parametrize("cls", ALL_CLASSES, ids=lambda c: c.__name__)
def test_exit_status_two_means_input_error(cls):
    """Status 2 (bad input) for exactly the InputError family; 1 for a run or a data file that failed."""
    assert (cls.exit_status == 2) == issubclass(cls, InputError)


def test_missing_constant_is_input_and_still_a_value_error():
    assert issubclass(MissingConstantError, InputError) and issubclass(MissingConstantError, ValueError)
    assert MissingConstantError("x").exit_status == 2
    assert DataError("x").exit_status == 1 and not isinstance(DataError("x"), InputError)
