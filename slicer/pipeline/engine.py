"""Where a build runs: dask's local threads or processes, or a dask.distributed cluster.

Work is cut into independent tasks (one per line to reduce, one per output tile to grid), each a
plain module-level function of picklable arguments, so the same graph runs on every engine.
Results come back in order; a progress bar counts finished tasks. Tasks run in a sliding
window of a few per worker (:meth:`Engine.map`).

Engines, as ``--scheduler`` spells them:

``auto`` (default)
    ``threads`` below 300 000 traces, ``processes`` from there on.
``threads``
    a pool of one thread per core on this machine.
``processes``
    a pool of one spawned worker process per core (no GIL contention; arguments and results
    are pickled).
``local:N``
    a ``dask.distributed.LocalCluster`` of N single-threaded worker processes, started for the
    build and closed after it.
``tcp://HOST:PORT``
    an existing dask.distributed scheduler; every worker must see the input files at the same
    paths (shared or object storage).
"""

from __future__ import annotations

import collections
import concurrent.futures
import contextlib
import functools
import itertools
import multiprocessing
import os
from collections.abc import Callable, Iterable, Iterator, Sequence, Sized
from dataclasses import dataclass

from slicer.core.errors import SettingsError
from slicer.core.progress import bar_for


@dataclass(frozen=True)
class EngineSpec:
    """A parsed ``--scheduler`` value.

    Attributes
    ----------
    kind : {"threads", "processes", "local", "remote"}
    workers : int
        Concurrent tasks (local engines); for ``remote`` the cluster decides.
    address : str or None
        Scheduler address of a remote cluster.
    """

    kind: str
    workers: int
    address: str | None = None

    @property
    def label(self) -> str:
        if self.kind == "remote":
            return self.address
        if self.kind == "local":
            return f"local:{self.workers}"
        return f"{self.kind} ({self.workers} workers)"


#: From this many traces ``auto`` uses processes, whose workers (and not the calling process)
#: then write every output (:mod:`slicer.pipeline.worker_outputs`). Measured by benchmarks/scale.py
#: on 2 cores (2026-12-02): threads 9.1 s and processes 10.1 s at 200 k traces (starting and
#: importing in the workers costs 2-3 s), threads 28.8 s and processes 24.4 s at 1 M.
AUTO_PROCESSES_TRACES = 300_000


def parse_scheduler(text: str | None, *, workers: int | None = None,
                    traces: int | None = None) -> EngineSpec:
    """Parse a ``--scheduler`` value (see the module docstring); ``auto`` needs ``traces``."""
    n = workers or os.cpu_count() or 1
    text = (text or "threads").strip()
    if text == "auto":
        text = "processes" if (traces or 0) >= AUTO_PROCESSES_TRACES and n > 1 else "threads"
    if text in ("threads", "processes"):
        return EngineSpec(text, n)
    if text.startswith("local:"):
        try:
            count = int(text.split(":", 1)[1])
        except ValueError:
            count = 0
        if count < 1:
            raise SettingsError(f"expected local:N with N >= 1 workers, got {text!r}",
                                where="--scheduler")
        return EngineSpec("local", count)
    if text.startswith("tcp://") and len(text) > len("tcp://"):
        return EngineSpec("remote", n, address=text)
    raise SettingsError(f"expected threads, processes, local:N or tcp://HOST:PORT, got "
                        f"{text!r}", where="--scheduler")


class Engine:
    """Runs lists of tasks on one engine; use as a context manager.

    Parameters
    ----------
    spec : EngineSpec
        Which engine.
    memory_limit : int, optional
        Bytes per worker for a LocalCluster.
    """

    #: Seconds to wait for a remote scheduler.
    connect_timeout = 10

    def __init__(self, spec: EngineSpec, *, memory_limit: int | None = None):
        self.spec = spec
        self.memory_limit = memory_limit
        self._client = None
        self._cluster = None
        self._pool = None

    def __enter__(self) -> Engine:
        if self.spec.kind == "threads":
            self._pool = concurrent.futures.ThreadPoolExecutor(max_workers=self.spec.workers)
        if self.spec.kind == "processes":
            # one pool for the whole build (dask would start one per compute call); spawn,
            # because forking a process that runs threads can deadlock
            self._pool = concurrent.futures.ProcessPoolExecutor(
                max_workers=self.spec.workers, mp_context=multiprocessing.get_context("spawn"))
        if self.spec.kind in ("local", "remote"):
            try:
                from distributed import Client, LocalCluster
            except ImportError:  # pragma: no cover - distributed is a dependency
                raise SettingsError("dask.distributed is not installed",
                                    where="--scheduler") from None
            if self.spec.kind == "local":
                self._cluster = LocalCluster(
                    n_workers=self.spec.workers, threads_per_worker=1, processes=True,
                    dashboard_address=None,
                    memory_limit=self.memory_limit if self.memory_limit else "auto")
                self._client = Client(self._cluster)
            else:
                try:
                    self._client = Client(self.spec.address, timeout=self.connect_timeout)
                except OSError as exc:
                    raise SettingsError(f"cannot reach the dask scheduler at "
                                        f"{self.spec.address} ({exc})",
                                        where="--scheduler") from None
        return self

    def __exit__(self, *exc_info) -> None:
        if self._pool is not None:
            self._pool.shutdown(cancel_futures=True)
            self._pool = None
        if self._client is not None:
            self._client.close()
        if self._cluster is not None:
            self._cluster.close()
        self._client = self._cluster = None

    @property
    def workers(self) -> int:
        """How many tasks run at once."""
        if self._client is not None:
            return max(1, sum(self._client.nthreads().values()))
        return self.spec.workers

    def map(self, func: Callable, items: Iterable, *, desc: str, unit: str = "task",
            progress: bool = True, weights: Sequence[int] | None = None) -> Iterator:
        """Yield ``func(item)`` for every item, in order, running them concurrently.

        A sliding window: a new task starts as soon as the oldest result has been taken, so
        workers never wait for a whole block to finish, yet at most ``2 x workers`` tasks are
        in flight (and ``items``, which may be a generator, is consumed only that far ahead),
        so memory stays bounded by the size of a task, not by the number of items.
        ``weights`` (e.g. traces per line) make the progress bar count work rather than
        tasks; with a generator they give the total.
        """
        weights = list(weights) if weights is not None else None
        total = sum(weights) if weights is not None else None
        count = len(weights) if weights is not None else (
            len(items) if isinstance(items, Sized) else None)
        if total is None:
            total = count
        batch = self._batch_size(count)
        window = max(2, 2 * self.workers)
        tasks = iter(items) if batch == 1 else _batches(items, batch)
        task_func = func if batch == 1 else functools.partial(_run_batch, func)
        with contextlib.ExitStack() as stack, bar_for(enabled=progress, total=total, desc=desc,
                                                      unit=unit) as bar:
            submit = self._submitter(stack)
            pending: collections.deque = collections.deque()
            try:
                for task in itertools.islice(tasks, window):
                    pending.append(submit(task_func, task))
                done = 0
                while pending:
                    results = pending.popleft().result()
                    for task in itertools.islice(tasks, 1):
                        pending.append(submit(task_func, task))
                    for result in ([results] if batch == 1 else results):
                        bar.update(weights[done] if weights is not None else 1)
                        done += 1
                        yield result
            finally:  # an error, or the caller stopped early: nothing is left running
                for future in pending:
                    future.cancel()

    def _batch_size(self, count: int | None) -> int:
        """Items per task: one on threads; on processes and clusters, where every task costs
        pickling and messages (about 15 ms each on a LocalCluster here), up to eight, while
        leaving at least eight tasks per worker to share out."""
        if self.spec.kind == "threads" or not count:
            return 1
        return max(1, min(8, count // (8 * self.workers)))

    def offloader(self) -> Callable | None:
        """``submit(func, *args) -> future`` on a worker process of this machine, or None.

        For side tasks that read and write local files (the NetCDF cube): a process pool or
        a LocalCluster shares this machine's files; threads share the GIL, and a remote
        cluster's workers may not see the files.
        """
        if self.spec.kind == "local" and self._client is not None:
            return functools.partial(self._client.submit, pure=False)
        if self.spec.kind == "processes" and self._pool is not None:
            return self._pool.submit
        return None

    def _submitter(self, stack: contextlib.ExitStack) -> Callable:
        """``submit(func, item) -> future`` on this engine."""
        if self._client is not None:
            return functools.partial(self._client.submit, pure=False)
        pool = self._pool
        if pool is None:  # an engine used without its with block: a pool for this map only
            pool = stack.enter_context(concurrent.futures.ThreadPoolExecutor(
                max_workers=self.spec.workers))
        return pool.submit


def _batches(items: Iterable, size: int) -> Iterator[list]:
    iterator = iter(items)
    while batch := list(itertools.islice(iterator, size)):
        yield batch


def _run_batch(func: Callable, batch: list) -> list:
    """Run ``func`` on every item of one batch, in a worker (module level: picklable)."""
    return [func(item) for item in batch]


@contextlib.contextmanager
def engine(scheduler: str | None = None, *, workers: int | None = None,
           memory_limit: int | None = None) -> Iterator[Engine]:
    """Open the engine a ``--scheduler`` value names (see :class:`Engine`)."""
    with Engine(parse_scheduler(scheduler, workers=workers), memory_limit=memory_limit) as e:
        yield e
