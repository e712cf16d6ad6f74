"""Running a build's work on an existing Dask cluster: ``sitegen build DATA -o SITE --cluster tcp://HOST:PORT``.

:class:`ClusterExecutor` meets :class:`sitegen.executor.Executor` through a ``distributed`` client: each work
item is submitted as a task and its result yielded as it completes. The items and results are the same plain
picklable data a local worker gets (``sitegen/jobs.py``); the files they write go straight to the output's
build folder, which is why every worker must see the data folder and the output folder's parent at the same
absolute paths as the machine that starts the build, with the same sitegen and library versions installed.

- **The start check** (:func:`connect`): before any item is sent, every worker is asked (``Client.run``)
  whether it can read the data folder (and sees one of its CSV files at the size this machine sees), write
  into the output folder's parent, read the theme's folders, and which versions it runs. A worker that
  cannot stops the build with a :class:`~sitegen.errors.ClusterError` (exit 2, nothing written) naming the
  worker and the path. A worker that joins later checks itself before its first item (:func:`_on_worker`).
- **Bounds**: a bounded item (a dataset's fit) does not run in the worker's own process, which serves other
  tasks from other threads: each worker thread keeps one child process of its own
  (:class:`~sitegen.executor.WorkerExecutor`, started afresh with spawn: a Dask worker runs threads, and a
  forked copy could wait for ever on a lock one of them held), and the item runs there under the same
  ``RLIMIT_AS``/``RLIMIT_CPU`` caps and clock bound as on this machine. An item past a bound is reported
  back, and the build writes its error report as it does for a local worker.
- **Lost workers**: Dask itself moves the tasks of a worker that ends to the others; a task whose workers
  kept ending (``KilledWorker``) or whose connection broke is, for a fit, given the ``"lost"`` report
  (:func:`sitegen.jobs.fit_overrun`), which the build tries again and never keeps as the dataset's state;
  any other item is submitted again (:data:`LOST_TRIES` in all), then the build stops (nothing published).
- A cluster with no worker left for :data:`NO_WORKER_GRACE` seconds stops the build the same way.

``distributed`` is an optional dependency (``pip install 'sitegen[cluster]'``); this module imports it only
in the functions that talk to the cluster, so a worker imports no more than the items it runs need.
"""

from __future__ import annotations

import contextlib
import os
import threading
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType
from typing import TYPE_CHECKING, Any, Self, TypeVar

from sitegen.errors import ClusterError

if TYPE_CHECKING:
    from sitegen.discover import DatasetSource
    from sitegen.executor import Bounded, Overrun, WorkerExecutor
    from sitegen.report.theme import Theme

T = TypeVar("T")
R = TypeVar("R")

#: Seconds to wait for the scheduler to answer, and for a first worker to be there.
CONNECT_SECONDS = 20.0
#: How often an unbounded item (a page) is submitted in all when the workers running it are lost.
LOST_TRIES = 3
#: Seconds a build waits with no worker in the cluster before it stops.
NO_WORKER_GRACE = 60.0
_POLL_SECONDS = 2.0
_HINT = (
    "every worker needs the data folder and the output folder's parent at the same absolute paths as this "
    "machine, and the same sitegen and library versions (README, 'Building on a cluster')"
)


@dataclass(frozen=True, slots=True)
class Sight:
    """What every worker must see and run, as this machine sees it (plain strings: it travels to workers)."""

    data_dir: str
    out_parent: str
    probe: tuple[str, int] | None  # a CSV file of the data folder and its size in bytes
    theme_dirs: tuple[str, ...]
    versions: tuple[tuple[str, str], ...]  # sitegen's and the libraries' versions


def sight_of(data_dir: Path, out_dir: Path, sources: Sequence[DatasetSource], theme: Theme) -> Sight:
    """The :class:`Sight` of a build (``data_dir`` and ``out_dir`` absolute)."""
    from sitegen.build import LIBRARIES, RENDER_LIBRARIES  # noqa: PLC0415

    probe = None
    for src in sources[:1]:
        with contextlib.suppress(OSError):
            probe = (str(src.csv_path), src.csv_path.stat().st_size)
    dirs = tuple(str(d) for d in (*theme.template_dirs, *theme.static_dirs))
    return Sight(str(data_dir), str(out_dir.parent), probe, dirs, _versions(LIBRARIES + RENDER_LIBRARIES))


def _versions(libraries: Sequence[str]) -> tuple[tuple[str, str], ...]:
    from sitegen import __version__  # noqa: PLC0415
    from sitegen.versions import library_versions  # noqa: PLC0415

    return (("sitegen", __version__), *sorted(library_versions(libraries).items()))


def look(sight: Sight) -> list[str]:
    """Worker: what this worker cannot see or runs differently (empty: all is well)."""
    problems: list[str] = []
    if not Path(sight.data_dir).is_dir() or not os.access(sight.data_dir, os.R_OK | os.X_OK):
        problems.append(f"cannot see (or read) the data folder {sight.data_dir}")
    elif sight.probe is not None:
        path, size = sight.probe
        try:
            seen = Path(path).stat().st_size
        except OSError:
            seen = -1
        if seen != size:
            problems.append(
                f"sees another data folder at {sight.data_dir}: its file {path} is "
                + ("missing" if seen < 0 else f"{seen} bytes, not {size}")
            )
    if not Path(sight.out_parent).is_dir() or not os.access(sight.out_parent, os.W_OK | os.X_OK):
        problems.append(f"cannot write into {sight.out_parent}, the output folder's parent")
    problems += [f"cannot see the theme folder {d}" for d in sight.theme_dirs if not Path(d).is_dir()]
    names = [name for name, _ in sight.versions if name != "sitegen"]
    theirs = dict(_versions(names))
    for name, version in sight.versions:
        if theirs.get(name) != version:
            problems.append(f"runs {name} {theirs.get(name)}, where this build runs {version}")
    return problems


class _Blind(Exception):  # noqa: N818 - a worker's answer, raised to the build as a ClusterError
    """A worker that joined after the start check cannot see or run what the build needs."""


_seen: set[Sight] = set()  # the sights this worker process has checked
_local = threading.local()  # per worker thread: the child process bounded items run in


@dataclass(frozen=True, slots=True)
class _Overran:
    kind: Overrun


def _on_worker(fn: Callable[[T], R], item: T, bounds: tuple[float, float] | None, sight: Sight) -> tuple[str, Any]:
    """Worker: run one item (a bounded one in this thread's child process); ("done", result) or ("over", kind)."""
    if sight not in _seen:
        problems = look(sight)
        if problems:
            raise _Blind("; ".join(problems))
        _seen.add(sight)
    if bounds is None:
        return "done", fn(item)
    from sitegen.executor import Bounded  # noqa: PLC0415

    seconds, megabytes = bounds
    marker: Bounded[T, Any] = Bounded(seconds, megabytes, _overran)
    (_, value), *_ = list(_child().run(fn, [item], marker))
    return ("over", value.kind) if isinstance(value, _Overran) else ("done", value)


def _overran(item: object, kind: Overrun) -> _Overran:
    del item
    return _Overran(kind)


def _child() -> WorkerExecutor:
    pool: WorkerExecutor | None = getattr(_local, "pool", None)
    if pool is None:
        import multiprocessing  # noqa: PLC0415

        from sitegen.executor import WorkerExecutor  # noqa: PLC0415

        # A worker under a Dask nanny is a "daemonic" multiprocessing process, which multiprocessing forbids
        # to start children; ours end with this worker anyway (PR_SET_PDEATHSIG, executor._die_with_parent).
        multiprocessing.current_process()._config["daemon"] = False  # type: ignore[attr-defined]
        pool = WorkerExecutor(1, inline_single=False, spawn=True)
        _local.pool = pool
    return pool


def connect(
    address: str, data_dir: Path, out_dir: Path, sources: Sequence[DatasetSource], theme: Theme
) -> ClusterExecutor:
    """A client of the cluster at ``address`` whose every worker passed the start check; raises
    :class:`~sitegen.errors.ClusterError` otherwise (nothing has been sent)."""
    try:
        from distributed import Client  # noqa: PLC0415
    except ImportError as exc:
        raise ClusterError(
            "--cluster needs the Dask 'distributed' library, which is not installed",
            hint="install it with: pip install 'sitegen[cluster]'",
        ) from exc
    try:
        client = Client(address, timeout=CONNECT_SECONDS, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise ClusterError(f"cannot reach the cluster at {address}: {exc}", hint="is its scheduler running?") from exc
    try:
        try:
            client.wait_for_workers(1, timeout=CONNECT_SECONDS)
        except TimeoutError as exc:
            raise ClusterError(f"the cluster at {address} has no workers", hint="start some workers") from exc
        sight = sight_of(data_dir, out_dir, sources, theme)
        answers: dict[str, list[str]] = client.run(look, sight)
        blind = [f"worker {worker} {p}" for worker, problems in sorted(answers.items()) for p in problems]
        if blind:
            raise ClusterError(f"the cluster at {address} cannot build this site: " + "; ".join(blind), hint=_HINT)
    except BaseException:
        client.close()
        raise
    return ClusterExecutor(client, address, sight)


class ClusterExecutor:
    """Runs items as tasks on a Dask cluster (see the module's docstring); made by :func:`connect`."""

    def __init__(self, client: Any, address: str, sight: Sight) -> None:
        self.client = client
        self.address = address
        self.sight = sight
        self._pending: list[Any] = []

    def run(
        self, fn: Callable[[T], R], items: list[T], bounded: Bounded[T, R] | None = None
    ) -> Iterator[tuple[int, R]]:
        if not items:
            return iter(())
        bounds = (bounded.seconds, bounded.megabytes) if bounded else None
        futures = {self._submit(fn, item, bounds): i for i, item in enumerate(items)}
        return self._results(fn, items, bounded, futures)

    def _submit(self, fn: Callable[[T], R], item: T, bounds: tuple[float, float] | None) -> Any:
        future = self.client.submit(_on_worker, fn, item, bounds, self.sight, pure=False)
        self._pending.append(future)
        return future

    def _results(
        self, fn: Callable[[T], R], items: list[T], bounded: Bounded[T, R] | None, futures: dict[Any, int]
    ) -> Iterator[tuple[int, R]]:
        from distributed import wait  # noqa: PLC0415

        lost = _lost_errors()
        tries = dict.fromkeys(range(len(items)), 1)
        idle = 0.0
        while futures:
            try:
                with self.client.as_current():  # the client is nobody's default (set_as_default=False)
                    done, _ = wait(list(futures), timeout=_POLL_SECONDS, return_when="FIRST_COMPLETED")
            except TimeoutError:
                idle = 0.0 if self._has_workers() else idle + _POLL_SECONDS
                if idle >= NO_WORKER_GRACE:
                    raise ClusterError(
                        f"the cluster at {self.address} has had no workers for {NO_WORKER_GRACE:g} s; "
                        "the published site is unchanged",
                        hint="start workers and build again",
                    ) from None
                continue
            idle = 0.0
            for future in done:
                i = futures.pop(future)
                with contextlib.suppress(ValueError):
                    self._pending.remove(future)
                try:
                    kind, value = future.result()
                except _Blind as exc:
                    raise ClusterError(
                        f"a worker of the cluster at {self.address} {exc}; the published site is unchanged",
                        hint=_HINT,
                    ) from None
                except lost:
                    if bounded is not None:
                        yield i, bounded.fallback(items[i], "lost")
                    elif tries[i] < LOST_TRIES:
                        tries[i] += 1
                        futures[self._submit(fn, items[i], None)] = i
                    else:
                        raise ClusterError(
                            f"the cluster at {self.address} kept losing the workers given the build's work; "
                            "the published site is unchanged",
                            hint="look at the workers' logs, or build without --cluster",
                        ) from None
                    continue
                if kind == "over" and bounded is not None:
                    yield i, bounded.fallback(items[i], value)
                else:
                    yield i, value

    def _has_workers(self) -> bool:
        try:
            return bool(self.client.scheduler_info().get("workers"))
        except (OSError, TimeoutError):
            return False

    def close(self) -> None:
        with contextlib.suppress(Exception):  # a cluster gone already has nothing to cancel
            if self._pending:
                self.client.cancel(self._pending)
        self._pending = []
        with contextlib.suppress(Exception):
            self.client.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None:
        self.close()


def _lost_errors() -> tuple[type[BaseException], ...]:
    """The exceptions that say a task's worker was lost (not that the item itself failed)."""
    import asyncio  # noqa: PLC0415
    import concurrent.futures  # noqa: PLC0415

    from distributed.comm import CommClosedError  # noqa: PLC0415
    from distributed.scheduler import KilledWorker  # noqa: PLC0415

    found: list[type[BaseException]] = [
        KilledWorker,
        CommClosedError,
        concurrent.futures.CancelledError,
        asyncio.CancelledError,
    ]
    with contextlib.suppress(ImportError):
        from distributed.client import FutureCancelledError  # noqa: PLC0415

        found.append(FutureCancelledError)
    return tuple(found)
