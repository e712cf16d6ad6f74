"""The one seam through which work runs: in this process, or in worker processes of our own.

Work items and results are plain picklable data, so another engine (for example a
Dask client's ``submit``/``as_completed``) can stand in by implementing
:class:`Executor`. ``run`` starts the items at once and returns an iterator of
(index, result) in completion order, so the caller can do other work while the
items run. One set of workers serves a whole build (workers keep what they imported).

Work that must stay within bounds (fitting a dataset from an untrusted folder) is
run with a :class:`Bounded`: each item then runs in a worker process — never in
this one, even when it is the only item — whose address space is capped at what it
already uses plus ``megabytes`` while the item runs, and which ends when the item has
used ``seconds`` of processor time (or, by the clock, :func:`_clock_bound` of it).
An item past a bound gets the result ``Bounded.fallback`` makes for it (in this process), the worker is replaced, and
the other items go on. The standard library's ``ProcessPoolExecutor`` cannot end
one overdue task without breaking the whole pool, which is why the workers here
are our own: each is a ``multiprocessing`` process fed through a pipe.
"""

from __future__ import annotations

import contextlib
import math
import os
import signal
import sys
import time
from collections import deque
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from types import TracebackType
from typing import TYPE_CHECKING, Any, Generic, Literal, Protocol, Self, TypeVar

if TYPE_CHECKING:
    from multiprocessing.connection import Connection
    from multiprocessing.process import BaseProcess

T = TypeVar("T")
R = TypeVar("R")

#: Which bound an item went past: its time, its memory, or its worker ended for another reason (a crash,
#: the system's out-of-memory killer); "lost": a cluster's worker was lost with the item, again and again
#: (``sitegen/cluster.py``; the cluster, not the input, is to blame).
Overrun = Literal["time", "memory", "ended", "lost"]

#: ``-j`` is capped at this many workers per core (a larger number only adds memory and start-up).
JOBS_PER_CORE = 2
#: A bounded item is stopped after ``seconds`` of processor time, or by the clock after this many times
#: ``seconds`` and at least :data:`CLOCK_GRACE` seconds more (an item waiting on something uses no processor
#: time; a busy machine shares it out).
CLOCK_FACTOR = 3
CLOCK_GRACE = 30.0


def _clock_bound(seconds: float) -> float:
    return max(CLOCK_FACTOR * seconds, seconds + CLOCK_GRACE)


def _deadline(bounded: Bounded[Any, Any] | None) -> float:
    """When, by the monotonic clock, an item starting now is past its bound (inf without one)."""
    return time.monotonic() + _clock_bound(bounded.seconds) if bounded else float("inf")


@dataclass(frozen=True, slots=True)
class Bounded(Generic[T, R]):
    """Bounds for each item of a run, and the result an item past one gets instead of its own."""

    seconds: float
    megabytes: float
    fallback: Callable[[T, Overrun], R]


class Executor(Protocol):
    """Runs a function over work items; yields (index, result) as each finishes."""

    def run(
        self, fn: Callable[[T], R], items: list[T], bounded: Bounded[T, R] | None = None
    ) -> Iterator[tuple[int, R]]: ...

    def __enter__(self) -> Self: ...

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None: ...


class InlineExecutor:
    """Runs every item in this process, in order, when its result is asked for (no bounds: for tests and
    for work that is trusted)."""

    def run(
        self, fn: Callable[[T], R], items: list[T], bounded: Bounded[T, R] | None = None
    ) -> Iterator[tuple[int, R]]:
        del bounded
        return ((i, fn(item)) for i, item in enumerate(items))

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        return None


@dataclass(slots=True)
class _Worker:
    process: BaseProcess
    conn: Connection


@dataclass(slots=True)
class _Run(Generic[T, R]):
    """One call of :meth:`WorkerExecutor.run`: its work, the items not yet started, and the workers busy with it."""

    fn: Callable[[T], R]
    items: list[T]
    bounded: Bounded[T, R] | None
    queue: deque[tuple[int, T]]
    busy: dict[Connection, _Busy]


@dataclass(slots=True)
class _Busy:
    worker: _Worker
    index: int
    deadline: float  # monotonic seconds; inf without a time bound
    # An item sent ahead, waiting in the worker's pipe: it starts as soon as the worker has sent this one's result
    # (with several workers), instead of after the round trip to this process.
    ahead: tuple[int, Any] | None = None


class WorkerExecutor:
    """Worker processes of our own (``fork`` on Linux, so workers start with the parent's imports).

    Unbounded work runs in this process when it is a lone item (``inline_single``) or ``jobs`` is 1; bounded
    work always runs in a worker. No run starts more workers than it has items, nor more than ``jobs``.
    """

    def __init__(self, jobs: int, *, inline_single: bool = True, spawn: bool = False) -> None:
        self.jobs = max(1, jobs)
        self.inline_single = inline_single  # a lone unbounded item runs here rather than starting a worker
        self.spawn = spawn  # start workers afresh even where forking is possible (a process that runs threads)
        self._workers: list[_Worker] = []
        self._frozen = False

    @property
    def workers(self) -> int:
        """How many worker processes are running (for tests)."""
        return len(self._workers)

    def run(
        self, fn: Callable[[T], R], items: list[T], bounded: Bounded[T, R] | None = None
    ) -> Iterator[tuple[int, R]]:
        if not items:
            return iter(())
        if bounded is None and (self.jobs == 1 or (len(items) == 1 and not self._workers and self.inline_single)):
            return InlineExecutor().run(fn, items)
        self._grow(min(self.jobs, len(items)))
        work = _Run(fn, items, bounded, deque(enumerate(items)), {})
        self._feed(work)  # start at once: the caller may do other work meanwhile
        return self._results(work)

    def _feed(self, work: _Run[T, R]) -> None:
        fn, queue, busy, bounded = work.fn, work.queue, work.busy, work.bounded
        taken = {b.worker.conn for b in busy.values()}
        bounds = (bounded.seconds, bounded.megabytes) if bounded else None
        for at in range(len(self._workers)):
            if not queue:
                return
            if self._workers[at].conn in taken:
                continue
            i, item = queue.popleft()
            message = (fn, item, bounds)
            try:
                self._workers[at].conn.send(message)
            except OSError:  # the worker ended while idle (the system's out-of-memory killer): start another
                self._replace(self._workers[at])
                self._workers[at].conn.send(message)
            busy[self._workers[at].conn] = _Busy(self._workers[at], i, _deadline(bounded))
        if len(self._workers) < 2:
            return  # one worker: each item starts once the last one's result was handled (see _results)
        for job in busy.values():  # every worker busy: each gets its next item ahead
            if not queue:
                return
            if job.ahead is None:
                i, item = queue.popleft()
                try:
                    job.worker.conn.send((fn, item, bounds))
                except OSError:  # the worker ended: its item's result says so; this one waits for another worker
                    queue.appendleft((i, item))
                    return
                job.ahead = (i, item)

    def _results(self, work: _Run[T, R]) -> Iterator[tuple[int, R]]:
        from multiprocessing.connection import wait  # noqa: PLC0415

        items, busy, bounded = work.items, work.busy, work.bounded

        while busy:
            soonest = min(b.deadline for b in busy.values())
            timeout = None if soonest == float("inf") else max(0.0, soonest - time.monotonic())
            outcomes = [self._outcome(work, conn) for conn in wait(list(busy), timeout)]
            now = time.monotonic()
            for conn, job in list(busy.items()):
                if job.deadline <= now:
                    del busy[conn]
                    self._replace(job.worker)
                    if job.ahead is not None:
                        work.queue.appendleft(job.ahead)
                    outcomes.append((job.index, "time", None))
            # With one worker the next item starts once the caller has taken these results: items run in order,
            # one after the other's result was handled (as they would in this process). With several, the freed
            # workers start their next items at once, rather than wait while the caller handles these results.
            several = len(self._workers) > 1
            if several:
                self._feed(work)
            for index, overrun, value in outcomes:
                if overrun is not None:
                    if bounded is None:
                        raise RuntimeError(f"a worker process ended unexpectedly ({overrun})")
                    yield index, bounded.fallback(items[index], overrun)
                elif isinstance(value, _Raised):
                    raise value.exc
                else:
                    yield index, value
            if not several:
                self._feed(work)

    def _outcome(self, work: _Run[T, R], conn: Any) -> tuple[int, Overrun | None, Any]:
        """The result (or the bound overrun) a worker with something to say sends for its current item."""
        job = work.busy.pop(conn)
        try:
            kind, value = job.worker.conn.recv()
        except (EOFError, OSError):
            job.worker.process.join(timeout=5)
            out_of_time = job.worker.process.exitcode == -_SIGXCPU
            kind, value = ("time" if out_of_time else "ended"), None
        if kind in ("time", "memory", "ended"):
            self._replace(job.worker)
            if job.ahead is not None:  # lost with the worker, never started: it goes first again
                work.queue.appendleft(job.ahead)
        elif job.ahead is not None:  # the worker has started the item sent ahead
            work.busy[conn] = _Busy(job.worker, job.ahead[0], _deadline(work.bounded))
        if kind in ("done", "raised"):
            return job.index, None, value
        return job.index, kind, None

    def _grow(self, target: int) -> None:
        while len(self._workers) < target:
            self._workers.append(self._start())

    def _start(self) -> _Worker:
        import multiprocessing  # noqa: PLC0415 - a build with nothing to fit starts no worker

        # Forking copies only the calling thread: a library that runs threads of its own (the chart
        # converter's JavaScript engine, once loaded here) would leave a forked worker waiting for ever
        # on a lock one of those threads held. Then the workers start afresh instead.
        threaded = any(name in sys.modules for name in _THREADED_LIBRARIES)
        method = "fork" if sys.platform.startswith("linux") and not threaded and not self.spawn else "spawn"
        if method == "fork" and not self._frozen:
            import gc  # noqa: PLC0415

            # Forked workers share the parent's objects; frozen, the workers' collector leaves them alone
            # (no scans of the whole inherited heap, fewer copy-on-write pages). Undone when the run ends.
            gc.freeze()
            self._frozen = True
        ctx = multiprocessing.get_context("fork") if method == "fork" else multiprocessing.get_context("spawn")
        ours, theirs = ctx.Pipe()
        process = ctx.Process(target=_serve, args=(theirs, os.getpid()), daemon=True)
        process.start()
        theirs.close()
        return _Worker(process, ours)

    def _replace(self, worker: _Worker) -> None:
        """End a worker (overdue, or left in doubt by a memory error) and start another in its place."""
        _end(worker, kill=True)
        at = self._workers.index(worker)
        self._workers[at] = self._start()

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        for worker in self._workers:
            _end(worker, kill=exc_type is not None)
        self._workers = []
        if self._frozen:
            import gc  # noqa: PLC0415

            gc.unfreeze()  # a long-running watch must not keep each build's objects for ever
            self._frozen = False


def _end(worker: _Worker, *, kill: bool) -> None:
    if not kill:
        try:
            worker.conn.send(None)  # the worker's signal to finish
        except OSError:
            kill = True
    if kill and worker.process.is_alive():
        worker.process.kill()
    worker.process.join(timeout=None if kill else 5)
    if worker.process.is_alive():
        worker.process.kill()
        worker.process.join()
    worker.conn.close()


@dataclass(frozen=True, slots=True)
class _Raised:
    """An exception a work function raised in a worker, to be raised again where its result is asked for."""

    exc: BaseException


#: Native libraries that start threads of their own when used (see :meth:`WorkerExecutor._start`).
_THREADED_LIBRARIES = ("vl_convert",)


def _serve(conn: Connection, parent: int) -> None:
    """A worker's life: run (function, item, bounds) messages until told to stop."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl+C is the build's to handle; it ends the workers
    _die_with_parent(parent)
    with contextlib.suppress(ImportError, OSError, ValueError):
        import resource  # noqa: PLC0415

        resource.setrlimit(resource.RLIMIT_CORE, (0, resource.getrlimit(resource.RLIMIT_CORE)[1]))  # no core files
    while True:
        try:
            message = conn.recv()
        except (EOFError, OSError):
            return
        if message is None:
            return
        fn, item, bounds = message
        try:
            with _held_to(bounds):
                reply: tuple[str, Any] = ("done", fn(item))
        except MemoryError:
            reply = ("memory", None)
        except Exception as exc:  # raised again in the parent, where the result is asked for
            reply = ("raised", _Raised(exc))
        try:
            conn.send(reply)
        except Exception as exc:  # e.g. a result or exception that cannot be pickled
            conn.send(("raised", _Raised(RuntimeError(f"a worker's result could not be sent back: {exc!r}"))))
        if reply[0] == "memory":
            return  # after a memory error, start afresh


_SIGXCPU = getattr(signal, "SIGXCPU", -1)  # the kernel's word that a process ran past its processor time


class _held_to:  # noqa: N801 - used as a context manager, named like one
    """Cap this process's address space at what it uses now plus ``megabytes``, and its processor time at
    what it has used plus ``seconds`` (the kernel ends it with SIGXCPU past that); None: no caps."""

    def __init__(self, bounds: tuple[float, float] | None) -> None:
        self.bounds = bounds
        self.saved: list[tuple[int, tuple[int, int]]] = []

    def __enter__(self) -> None:
        if self.bounds is None:
            return
        seconds, megabytes = self.bounds
        try:
            import resource  # noqa: PLC0415
            from pathlib import Path  # noqa: PLC0415

            used = int(Path("/proc/self/statm").read_text("ascii").split()[0]) * os.sysconf("SC_PAGE_SIZE")
            usage = resource.getrusage(resource.RUSAGE_SELF)
            spent = usage.ru_utime + usage.ru_stime
            for which, cap in (
                (resource.RLIMIT_AS, used + int(megabytes * 1024 * 1024)),
                (resource.RLIMIT_CPU, math.ceil(spent + seconds)),
            ):
                soft, hard = resource.getrlimit(which)
                self.saved.append((which, (soft, hard)))
                resource.setrlimit(which, (cap if hard == resource.RLIM_INFINITY else min(cap, hard), hard))
        except (ImportError, OSError, ValueError):  # pragma: no cover - not Linux: the clock bound still holds
            self.__exit__()

    def __exit__(self, *exc: object) -> None:
        import resource  # noqa: PLC0415

        for which, limits in reversed(self.saved):
            resource.setrlimit(which, limits)
        self.saved = []


def _die_with_parent(parent: int) -> None:
    """Worker start-up: end this worker if the build that started it is killed (Linux ``PR_SET_PDEATHSIG``)."""
    if not sys.platform.startswith("linux"):
        return
    from sitegen.clib import c_function  # noqa: PLC0415

    prctl = c_function("prctl")
    if prctl is None:
        return
    prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG = 1
    if os.getppid() != parent:  # the parent died before the signal was set up
        os._exit(1)


def default_jobs() -> int:
    """All cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


def max_jobs() -> int:
    """The most workers ``-j`` may start: :data:`JOBS_PER_CORE` per core."""
    return JOBS_PER_CORE * default_jobs()


def make_executor(jobs: int | None, *, inline_single: bool = True) -> WorkerExecutor:
    """The executor for ``--jobs``: None means all cores; capped at :func:`max_jobs`. ``inline_single=False``
    sends even a lone item to a worker process (for work that must not run in this one)."""
    n = default_jobs() if jobs is None else jobs
    return WorkerExecutor(min(max(1, n), max_jobs()), inline_single=inline_single)
