"""The one seam through which work runs: in this process, or a local process pool.

Work items and results are plain picklable data, so another engine (for example a
Dask client's ``submit``/``as_completed``) can stand in by implementing
:class:`Executor`. ``run`` submits every item at once and returns an iterator of
(index, result) in completion order, so the caller can do other work while the
items run. One pool serves a whole build (workers keep what they imported).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable, Iterator
from types import TracebackType
from typing import TYPE_CHECKING, Protocol, Self, TypeVar

if TYPE_CHECKING:
    from concurrent.futures import Future, ProcessPoolExecutor

T = TypeVar("T")
R = TypeVar("R")


class Executor(Protocol):
    """Runs a function over work items; yields (index, result) as each finishes."""

    def run(self, fn: Callable[[T], R], items: list[T]) -> Iterator[tuple[int, R]]: ...

    def __enter__(self) -> Self: ...

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None: ...


class InlineExecutor:
    """Runs every item in this process, in order, when its result is asked for."""

    def run(self, fn: Callable[[T], R], items: list[T]) -> Iterator[tuple[int, R]]:
        return ((i, fn(item)) for i, item in enumerate(items))

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        return None


class PoolExecutor:
    """A local process pool (``fork`` on Linux, so workers start with the parent's imports)."""

    def __init__(self, jobs: int, *, inline_single: bool = True) -> None:
        self.jobs = max(1, jobs)
        self.inline_single = inline_single  # a lone item runs here rather than starting a pool for it
        self._pool: ProcessPoolExecutor | None = None

    def _ensure(self) -> ProcessPoolExecutor:
        import multiprocessing  # noqa: PLC0415 - a build with one item to fit never starts a pool
        from concurrent.futures import ProcessPoolExecutor  # noqa: PLC0415

        if self._pool is None:
            # Forking copies only the calling thread: a library that runs threads of its own (the chart
            # converter's JavaScript engine, once loaded here) would leave a forked worker waiting for ever
            # on a lock one of those threads held. Then the workers start afresh instead.
            threaded = any(name in sys.modules for name in _THREADED_LIBRARIES)
            method = "fork" if sys.platform.startswith("linux") and not threaded else "spawn"
            import gc  # noqa: PLC0415

            # Forked workers share the parent's objects; frozen, the workers' collector leaves them alone
            # (no scans of the whole inherited heap, fewer copy-on-write pages). Undone when the pool ends.
            gc.freeze()
            self._pool = ProcessPoolExecutor(
                max_workers=self.jobs,
                mp_context=multiprocessing.get_context(method),
                initializer=_die_with_parent,
                initargs=(os.getpid(),),
            )
        return self._pool

    def run(self, fn: Callable[[T], R], items: list[T]) -> Iterator[tuple[int, R]]:
        if not items:
            return iter(())
        if len(items) == 1 and self._pool is None and self.inline_single:
            return InlineExecutor().run(fn, items)
        from concurrent.futures import as_completed  # noqa: PLC0415

        pool = self._ensure()
        futures: dict[Future[R], int] = {pool.submit(fn, item): i for i, item in enumerate(items)}
        return ((futures[f], f.result()) for f in as_completed(futures))

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=exc_type is None, cancel_futures=exc_type is not None)
            self._pool = None
            import gc  # noqa: PLC0415

            gc.unfreeze()  # a long-running watch must not keep each build's objects for ever


#: Native libraries that start threads of their own when used (see :meth:`PoolExecutor._ensure`).
_THREADED_LIBRARIES = ("vl_convert",)


def _die_with_parent(parent: int) -> None:
    """Worker start-up: end this worker if the build that started it is killed (Linux ``PR_SET_PDEATHSIG``)."""
    if not sys.platform.startswith("linux"):
        return
    import ctypes  # noqa: PLC0415
    import signal  # noqa: PLC0415

    try:
        # The running program's own symbols include the C library's (ctypes.util.find_library would cost
        # every worker ~10 ms of imports and a look at the linker cache).
        prctl = ctypes.CDLL(None, use_errno=True).prctl
        prctl(1, signal.SIGKILL, 0, 0, 0)  # PR_SET_PDEATHSIG = 1
    except (OSError, AttributeError):
        return
    if os.getppid() != parent:  # the parent died before the signal was set up
        os._exit(1)


def default_jobs() -> int:
    """All cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


def make_executor(jobs: int | None, *, inline_single: bool = True) -> InlineExecutor | PoolExecutor:
    """The executor for ``--jobs``: None means all cores. ``inline_single=False`` sends even a lone item to
    a worker process (for work that must not run in this one)."""
    n = default_jobs() if jobs is None else jobs
    return InlineExecutor() if n <= 1 else PoolExecutor(n, inline_single=inline_single)
