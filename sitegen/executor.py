"""The one seam through which fitting work runs: in this process, or a local process pool.

Work items and results are plain picklable data, so another engine (for example a
Dask client's ``map``) can stand in by implementing :class:`Executor`.
"""

from __future__ import annotations

import multiprocessing
import os
import sys
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Protocol, TypeVar

T = TypeVar("T")
R = TypeVar("R")


class Executor(Protocol):
    """Runs a function over work items and yields (index, result) as each finishes."""

    def run(self, fn: Callable[[T], R], items: list[T]) -> Iterator[tuple[int, R]]: ...


class InlineExecutor:
    """Runs every item in this process, in order."""

    def run(self, fn: Callable[[T], R], items: list[T]) -> Iterator[tuple[int, R]]:
        for i, item in enumerate(items):
            yield i, fn(item)


class PoolExecutor:
    """A local process pool (``fork`` on Linux, so workers start with the parent's imports)."""

    def __init__(self, jobs: int) -> None:
        self.jobs = max(1, jobs)

    def run(self, fn: Callable[[T], R], items: list[T]) -> Iterator[tuple[int, R]]:
        if self.jobs == 1 or len(items) <= 1:
            yield from InlineExecutor().run(fn, items)
            return
        method = "fork" if sys.platform.startswith("linux") else None
        ctx = multiprocessing.get_context(method)
        workers = min(self.jobs, len(items))
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx) as pool:
            futures = {pool.submit(fn, item): i for i, item in enumerate(items)}
            for fut in as_completed(futures):
                yield futures[fut], fut.result()


def default_jobs() -> int:
    """All cores this process may use."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


def make_executor(jobs: int | None) -> Executor:
    """The executor for ``--jobs``: None means all cores."""
    n = default_jobs() if jobs is None else jobs
    return InlineExecutor() if n <= 1 else PoolExecutor(n)


def consume(iterable: Iterable[object]) -> None:
    """Exhaust an iterator (helper for callers that only want side effects)."""
    for _ in iterable:
        pass
