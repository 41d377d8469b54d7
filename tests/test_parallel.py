"""Work split over forked processes (optimiser.parallel): the results never depend on how the work was split."""
import os

import pytest

from optimiser import parallel
from optimiser.evaluation import Evaluator
from optimiser.scenario import demo
from optimiser.structures import enumerate_structures
from optimiser.survey import Survey

needs_fork = pytest.mark.skipif(not parallel.can_fork(), reason="no forking here (Linux only): every split runs in turn")


@pytest.fixture
def two_workers():
    parallel.set_workers(2)
    yield
    parallel.set_workers(None)


def test_split_and_join_are_inverse():
    items = list(range(11))
    parts = parallel.split(items, 3)
    assert parts == [[0, 3, 6, 9], [1, 4, 7, 10], [2, 5, 8]]
    assert parallel.join(parts) == items


@needs_fork
def test_fork_map_gives_each_chunk_its_own_result_in_order(two_workers):
    assert parallel.fork_map(lambda c: [x * x for x in c], [[1, 2], [3], [4, 5, 6]]) == [[1, 4], [9], [16, 25, 36]]
    children = parallel.fork_map(lambda c: os.getpid(), [0, 1])
    assert children[0] == os.getpid() and children[1] != os.getpid()  # the second chunk ran in another process


@needs_fork
def test_nothing_splits_further_within_a_split(two_workers):
    assert parallel.fork_map(lambda c: parallel.workers(), [0, 1]) == [1, 1]
    assert parallel.workers() == 2  # and the setting is back afterwards


@needs_fork
def test_an_exception_in_a_child_is_raised_here(two_workers):
    def fails_in_second(c):
        if c == 1:
            raise ValueError("chunk 1 failed")
        return c
    with pytest.raises(ValueError, match="chunk 1 failed"):
        parallel.fork_map(fails_in_second, [0, 1])


@needs_fork
def test_a_failing_first_chunk_stops_and_reaps_the_children(two_workers, tmp_path):
    import time
    pid_file = tmp_path / "child.pid"

    def first_fails(c):
        if c == 1:  # the child: says who it is, then would run long after the failure
            pid_file.write_text(str(os.getpid()))
            time.sleep(60)
            return c
        for _ in range(600):  # here: fail once the child is running
            if pid_file.exists() and pid_file.read_text():
                break
            time.sleep(0.05)
        raise KeyError("chunk 0 failed")
    with pytest.raises(KeyError, match="chunk 0 failed"):
        parallel.fork_map(first_fails, [0, 1])
    with pytest.raises(ProcessLookupError):  # the child was stopped and reaped, not left running
        os.kill(int(pid_file.read_text()), 0)


def test_one_worker_runs_every_chunk_here():
    parallel.set_workers(1)
    try:
        assert parallel.fork_map(lambda c: os.getpid(), [0, 1, 2]) == [os.getpid()] * 3
    finally:
        parallel.set_workers(None)


def test_set_workers_refuses_what_is_not_a_count():
    for bad in (0, -1, 1.5, "2"):
        with pytest.raises(ValueError, match="whole number of 1 or more"):
            parallel.set_workers(bad)


@needs_fork
def test_the_survey_split_over_processes_scores_every_candidate_as_in_one(two_workers):
    """The candidates of a survey, evaluated in one process and split over two: identical objectives,
    constraints, findings and end points (each candidate is simulated on its own; the batching only groups the
    solves)."""
    sc = demo()
    structures, _, _ = enumerate_structures(sc)
    survey = Survey(sc)
    candidates = [survey.candidate(s) for s in structures][:40]
    assert len(candidates) >= 2 * 8  # enough that the batch is split (evaluation.PARALLEL_MIN per process)
    split = Evaluator(sc).evaluate(candidates)
    parallel.set_workers(1)
    whole = Evaluator(sc).evaluate(candidates)
    assert [e.F for e in split] == [e.F for e in whole]
    assert [e.G for e in split] == [e.G for e in whole]
    assert [e.violations for e in split] == [e.violations for e in whole]
    assert [e.titration.endpoint_mL if e.titration else None for e in split] == \
        [e.titration.endpoint_mL if e.titration else None for e in whole]


# A process standing by (parallel.stand_by): forked ahead of its work, it loads a module meanwhile, then does the work.
def _pid_and_squares(chunk):  # a function of this module: a standby takes its work pickled, by reference
    return os.getpid(), [x * x for x in chunk]


def _reaped(pid: int) -> bool:
    try:
        os.waitpid(pid, os.WNOHANG)
    except ChildProcessError:
        return True
    return False


@needs_fork
def test_a_standby_does_its_work_in_processes_of_its_own_and_is_reaped(two_workers):
    sb = parallel.stand_by("test", "json")
    assert parallel.take("test") is sb and parallel.take("test") is None  # taken once
    out = sb.map(_pid_and_squares, [[1, 2], [3]])
    assert [sq for _, sq in out] == [[1, 4], [9]]
    pids = {pid for pid, _ in out}
    assert os.getpid() not in pids and sb.pid in pids and len(pids) == 2  # the standby and a child of its own
    assert _reaped(sb.pid)
    assert sb.map(_pid_and_squares, [[1]]) is None  # one piece of work only


@needs_fork
def test_a_standby_that_cannot_prepare_leaves_the_work_here(two_workers):
    sb = parallel.stand_by("test", "optimiser._no_such_module")
    assert parallel.take("test").map(_pid_and_squares, [[2]]) is None
    assert _reaped(sb.pid)


@needs_fork
def test_a_standby_never_taken_is_stopped_and_reaped(two_workers):
    sb = parallel.stand_by("test", "json")
    parallel.dismiss()
    assert _reaped(sb.pid) and parallel.take("test") is None


def test_one_worker_stands_nothing_by():
    parallel.set_workers(1)
    try:
        assert parallel.stand_by("test", "json") is None and parallel.take("test") is None
    finally:
        parallel.set_workers(None)


@needs_fork
def test_the_figures_a_standby_draws_are_those_drawn_here(two_workers):
    from optimiser.analysis import analyse
    from optimiser.report import html
    from optimiser.search import run_search
    from optimiser.scenario import parse

    from conftest import TINY_SCENARIO
    analysis = analyse(run_search(parse(TINY_SCENARIO, "tiny.yaml"), seed=1, n_gen=0))
    here = html._figures(analysis)
    html.prepare()
    sb = parallel._standing[html.STANDBY]  # where _figures takes it
    there = html._figures(analysis)
    assert _reaped(sb.pid) and not sb._open  # the standby did the work (and ended)
    assert there == here and set(here) == set(html.FIGURES_ALWAYS + html.FIGURES_OF_A_METHOD)
