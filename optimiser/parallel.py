"""Work split over forked processes: a function applied to chunks of a list, one chunk per process.

The search's large batches of candidates (the survey, the refinement's scans) and the report's figures are
independent pieces of work; on a machine with several cores each chunk runs in a child process forked from this one,
so that it starts with everything already loaded (the compiled solver, the data, the caches), and sends its results
back pickled through a pipe. The first chunk runs here meanwhile. Nothing the children learn (a cache they fill)
comes back: only the results. A result never depends on how the work was split (each candidate and each figure is
computed on its own; ``tests/test_parallel.py`` compares the split and the whole).

A piece of work whose libraries take long to load (the report's figures: matplotlib) can have a process forked for it
ahead of time, a :class:`Standby`, which loads them while this process goes on with the search, then takes the work
when it comes and hands it to :func:`fork_map` there.

Only on Linux (where forking a process that holds numpy, numba and matplotlib is the usual practice; macOS makes
spawning the default because some of its system libraries do not survive a fork), and where one process is asked for,
the chunks run here one after the other.
"""
from __future__ import annotations

import importlib
import os
import pickle
import signal
import sys
from collections.abc import Callable, Sequence
from typing import NoReturn, TypeVar

T = TypeVar("T")
R = TypeVar("R")

WORKERS_MAX = 4  # processes at most by default (our rule: beyond it the batches split thin and the pickling grows)
_workers: int | None = None  # set_workers(); None: the default


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def can_fork() -> bool:
    """True where chunks may run in forked processes (Linux)."""
    return hasattr(os, "fork") and sys.platform.startswith("linux")


def workers() -> int:
    """Processes a split uses: what :func:`set_workers` set, else the available cores up to :data:`WORKERS_MAX`;
    1 where the system cannot fork (:func:`can_fork`)."""
    if not can_fork():
        return 1
    return _workers if _workers is not None else max(1, min(available_cores(), WORKERS_MAX))


def set_workers(n: int | None) -> None:
    """Use ``n`` processes for each split from now on (1: none forked; None: the default). A batch that runs
    several scenarios at once gives each its share of the cores."""
    global _workers
    if n is not None and (not isinstance(n, int) or n < 1):
        raise ValueError(f"workers must be a whole number of 1 or more, or None; got {n!r}")
    _workers = n


def split(items: Sequence[T], n: int) -> list[list[T]]:
    """``items`` dealt into ``n`` chunks in turn (item k to chunk k mod n), so that neighbours, which tend to cost
    alike, are shared out evenly; :func:`join` puts results back in order."""
    return [list(items[i::n]) for i in range(n)]


def join(parts: Sequence[Sequence[R]]) -> list[R]:
    """The inverse of :func:`split`: results in the order of the items."""
    out: list = [None] * sum(len(p) for p in parts)
    for i, p in enumerate(parts):
        out[i::len(parts)] = p
    return out


def fork_map(fn: Callable[[T], R], chunks: Sequence[T]) -> list[R]:
    """``[fn(c) for c in chunks]``, the first chunk here and each other in a forked child process.

    Within a split nothing splits further (a chunk that asks for :func:`workers` gets 1). An exception raised in a
    child is raised here (after every child has ended); one raised by the first chunk stops the children first. Where
    a child cannot be forked, its chunk runs here.
    """
    if len(chunks) <= 1 or workers() <= 1:
        return [fn(c) for c in chunks]
    sys.stdout.flush()
    sys.stderr.flush()
    children: list[tuple[int, int] | None] = []
    for c in chunks[1:]:
        r, w = os.pipe()
        try:
            pid = os.fork()
        except OSError:  # no process to be had: this chunk runs here
            os.close(r)
            os.close(w)
            children.append(None)
            continue
        if pid == 0:  # the child: compute (splitting nothing further), send, and leave without running anything of
            def outcome(chunk=c, read_end=r) -> bytes:  # the parent's
                set_workers(1)
                os.close(read_end)
                try:
                    return pickle.dumps((True, fn(chunk)), protocol=pickle.HIGHEST_PROTOCOL)
                except BaseException as exc:  # sent to the parent, which raises it
                    try:
                        return pickle.dumps((False, exc), protocol=pickle.HIGHEST_PROTOCOL)
                    except Exception:
                        return pickle.dumps((False, RuntimeError(f"{type(exc).__name__}: {exc}")))
            _reply_and_exit(w, outcome)
        os.close(w)
        children.append((pid, r))
    before = _workers
    set_workers(1)  # the cores are taken: this chunk, too, splits nothing further
    try:
        results: list = [fn(chunks[0])]
    except BaseException:  # the children's results are not wanted: they are stopped and reaped, not left behind
        for child in children:
            if child is not None:
                os.kill(child[0], signal.SIGKILL)
                os.close(child[1])
                os.waitpid(child[0], 0)
        raise
    finally:
        set_workers(before)
    failure: BaseException | None = None
    for c, child in zip(chunks[1:], children):
        if child is None:
            results.append(fn(c))
            continue
        pid, r = child
        with os.fdopen(r, "rb") as f:
            data = f.read()
        os.waitpid(pid, 0)
        if not data:
            failure = failure or RuntimeError("a worker process ended without sending its results")
            results.append(None)
            continue
        ok, value = pickle.loads(data)
        if not ok:
            failure = failure or value
        results.append(value)
    if failure is not None:
        raise failure
    return results


def map_split(fn: Callable[[Sequence[T]], Sequence[R]], items: Sequence[T], minimum: int) -> list[R]:
    """``fn(items)`` computed in :func:`workers` pieces (:func:`split`) in parallel when there are at least
    ``minimum`` items (below it the forking costs more than it saves), the results in the order of the items.
    ``fn`` maps a list of items to a list of results, one each."""
    n = min(workers(), len(items) // max(minimum, 1)) if minimum > 0 else workers()
    if n <= 1:
        return list(fn(items))
    return join(fork_map(fn, split(items, n)))


class Standby:
    """A process forked ahead of its work: it imports a module and runs its warm-up while this process goes on, then
    takes one piece of work (:meth:`map`), sends back the results and ends.

    Made by :func:`stand_by`; taken by :func:`take`; :func:`dismiss` stops those never taken.
    """

    def __init__(self, pid: int, request: int, reply: int):
        self.pid, self._request, self._reply = pid, request, reply
        self._open = True

    def map(self, fn: Callable[[T], R], chunks: Sequence[T]) -> list[R] | None:
        """``fork_map(fn, chunks)`` run by the standing process (split over :func:`workers` processes there): the
        results, or None where that process could not do it (it is gone, or its preparation or the work failed:
        the caller then does the work itself, which raises any error of its own with its whole traceback). ``fn``
        must be picklable (a function of a module, taken by reference)."""
        if not self._open:
            return None
        self._open = False
        data = b""
        request, reply = os.fdopen(self._request, "wb"), os.fdopen(self._reply, "rb")
        try:
            with request:
                pickle.dump((fn, list(chunks), workers()), request, protocol=pickle.HIGHEST_PROTOCOL)
            with reply:
                data = reply.read()
        except (OSError, pickle.PicklingError):
            data = b""
        finally:
            request.close()
            reply.close()
            _reap(self.pid, kill=not data)
        if not data:
            return None
        ok, value = pickle.loads(data)
        return value if ok else None

    def dismiss(self) -> None:
        """Stop the process (its work never came) and reap it."""
        if self._open:
            self._open = False
            _close(self._request, self._reply)
            _reap(self.pid, kill=True)


_standing: dict[str, Standby] = {}


def stand_by(key: str, module: str, warm_up: str | None = None) -> Standby | None:
    """Fork a :class:`Standby` for a later piece of work named ``key``: it imports ``module`` and calls its
    function ``warm_up`` (if given), then waits. None (and nothing forked) where :func:`workers` is 1: with one core
    the loading would only take turns with this process."""
    if workers() <= 1 or key in _standing:
        return _standing.get(key)
    sys.stdout.flush()
    sys.stderr.flush()
    req_r, req_w = os.pipe()
    rep_r, rep_w = os.pipe()
    try:
        pid = os.fork()
    except OSError:
        _close(req_r, req_w, rep_r, rep_w)
        return None
    if pid == 0:  # the standing process: load, wait for the work, do it, send, end without running the parent's code
        def outcome() -> bytes:
            _close(req_w, rep_r)
            _standing.clear()
            try:
                mod = importlib.import_module(module)
                if warm_up:
                    getattr(mod, warm_up)()
                with os.fdopen(req_r, "rb") as f:
                    fn, chunks, n = pickle.load(f)
            except EOFError:  # the parent ended, or dismissed it, before the work came
                os._exit(0)
            try:
                set_workers(n)
                return pickle.dumps((True, fork_map(fn, chunks)), protocol=pickle.HIGHEST_PROTOCOL)
            except BaseException:  # the parent does the work itself and meets the error there
                return pickle.dumps((False, None))
        _reply_and_exit(rep_w, outcome)
    _close(req_r, rep_w)
    _standing[key] = Standby(pid, req_w, rep_r)
    return _standing[key]


def take(key: str) -> Standby | None:
    """The :class:`Standby` made for ``key`` (None where there is none); it is taken: no one else gets it."""
    return _standing.pop(key, None)


def dismiss() -> None:
    """Stop every :class:`Standby` not taken (a command that ends, or fails, before their work)."""
    while _standing:
        _standing.popitem()[1].dismiss()


def _reply_and_exit(fd: int, outcome: Callable[[], bytes]) -> NoReturn:
    """In a forked child: write ``outcome()`` to ``fd`` and leave at once, running nothing more of the parent's code
    (exit status 1 where that failed: the parent then finds no reply)."""
    status = 0
    try:
        data = outcome()
        with os.fdopen(fd, "wb") as f:
            f.write(data)
    except BaseException:
        status = 1
    finally:
        os._exit(status)


def _close(*fds: int) -> None:
    for fd in fds:
        try:
            os.close(fd)
        except OSError:  # closed already (by the file object that wrapped it)
            pass


def _reap(pid: int, kill: bool) -> None:
    if kill:
        try:
            os.kill(pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    try:
        os.waitpid(pid, 0)
    except ChildProcessError:
        pass
