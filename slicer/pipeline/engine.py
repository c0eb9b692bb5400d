"""Where a build runs: a pool of threads or processes on this machine, or a dask cluster.

Work is cut into independent tasks (one per line to reduce, one per output tile to grid), each a
plain module-level function of picklable arguments, so the same graph runs on every engine.
Results come back in order; a progress bar counts finished tasks. Tasks run in a sliding
window of a few per worker (:meth:`Engine.map`).

Engines, as ``--scheduler`` spells them:

``auto`` (default)
    ``threads`` below 50 000 traces, ``processes`` from there on (300 000 where workers are
    spawned rather than forked by a fork server).
``threads``
    a pool of one thread per core on this machine.
``processes``
    a pool of one worker process per core (no GIL contention; arguments and results are
    pickled), forked by a fork server that has imported the task modules
    (:mod:`slicer.pipeline.worker_processes`). Until the first workers are up (the server's
    imports take about a second), :meth:`Engine.map` runs its tasks in the calling process,
    one at a time, on the core the server leaves free.
``local:N``
    a ``dask.distributed.LocalCluster`` of N single-threaded worker processes, started for the
    build and closed after it.
``tcp://HOST:PORT``
    an existing dask.distributed scheduler; every worker must see the input files at the same
    paths (shared or object storage).

Nothing hangs and nothing is left behind:

* an address is checked before anything connects (scheme ``tcp``, a host, a port from 1 to
  65535), and a remote scheduler must answer as one within :attr:`Engine.connect_timeout`
  seconds and a few more, whether nothing listens at the address or something that is not
  dask does;
* ``local:N`` and ``processes`` start at most :data:`WORKERS_PER_CORE` worker processes per
  core, and ``local:N`` no more than the machine's memory holds at :data:`WORKER_MEMORY` (or
  the ``memory_limit`` given) each; a larger count is refused before any process starts;
* worker processes end with the process that started them, even when it is killed
  (SIGKILL gives it no chance to stop them): ``processes`` workers watch it
  (:mod:`slicer.pipeline.worker_processes`), and a LocalCluster's do so by themselves
  (dask.distributed keeps a pipe from each to its parent open, and a worker exits when it
  closes).

While ``threads`` or ``processes`` tasks run, every process running them uses BLAS on one
thread (:func:`slicer.pipeline.worker_processes.one_blas_thread`): one task per core already
keeps the cores busy. A LocalCluster's workers are set so by dask.distributed itself.

Every refusal is a :class:`~slicer.core.errors.SettingsError` naming ``--scheduler``.
"""

from __future__ import annotations

import collections
import concurrent.futures
import contextlib
import functools
import itertools
import os
import threading
import urllib.parse
from collections.abc import Callable, Iterable, Iterator, Sequence, Sized
from dataclasses import dataclass

from slicer.core.atomic import current_umask
from slicer.core.errors import SettingsError
from slicer.core.progress import bar_for
from slicer.pipeline.remote_scheduler import ask_scheduler, one_line
from slicer.pipeline.task_warnings import replay, run_capturing
from slicer.pipeline.worker_processes import (
    forked_workers,
    one_blas_thread,
    start_worker,
    start_workers,
    worker_context,
)


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
#: then write every output (:mod:`slicer.pipeline.worker_outputs`). Builds of the surveys of
#: benchmarks/build_throughput.py on 2 cores, each in a fresh process, the two in turn
#: (2026-12-03, once the fork server and its workers started without BLAS threads and line
#: tasks without dask.array): medians of 4, threads against processes, 15 k traces 1.93 and
#: 2.31 s (3 pairs), 30 k 2.72 and 2.82 s (3), 45 k 3.30 and 3.41 s, 65 k 4.05 and 3.66 s
#: (processes ahead in 7 pairs of 8). Where workers are spawned, each importing everything
#: itself (no fork server: :func:`~slicer.pipeline.worker_processes.forked_workers`), the
#: switch stays at :data:`AUTO_PROCESSES_TRACES_SPAWNED`.
AUTO_PROCESSES_TRACES = 50_000
#: The switch where workers are spawned: measured when every worker imported the task modules
#: itself (benchmarks/scale.py, 2 cores, 2026-12-02): threads 9.1 s and processes 10.1 s at
#: 200 k traces (starting and importing in the workers cost 2-3 s), 28.8 s and 24.4 s at 1 M.
AUTO_PROCESSES_TRACES_SPAWNED = 300_000

#: Most worker processes per core: tasks are single-threaded numpy work and file reads, so more
#: workers than cores only help while some wait on a disk; beyond a few per core they add
#: memory, start-up time and contention and nothing else.
WORKERS_PER_CORE = 4

#: Bytes one worker process holds at least (when no ``memory_limit`` is given): a worker that
#: has imported the build's libraries and run its tasks holds 220-250 MB here (2026-12).
WORKER_MEMORY = 256 * 2**20

_FORMS = "auto, threads, processes, local:N or tcp://HOST:PORT"

#: Said when a worker process ends in the middle of a task (multiprocessing gives only
#: BrokenProcessPool): the usual causes, and the way round them.
WORKER_LOST = ("a worker process ended in the middle of a task: out of memory, killed, or (a "
               "script calling slicer.build) the build starts again in each worker, so put it "
               "under if __name__ == '__main__':. Threads need neither: --scheduler threads")


def parse_scheduler(text: str | None, *, workers: int | None = None,
                    traces: int | None = None) -> EngineSpec:
    """Parse a ``--scheduler`` value (see the module docstring); ``auto`` needs ``traces``.

    Parameters
    ----------
    text : str or None
        ``auto``, ``threads``, ``processes``, ``local:N`` or ``tcp://HOST:PORT`` (surrounding
        spaces ignored); None means ``threads``.
    workers : int, optional
        Concurrent tasks of ``threads`` and ``processes`` (and the count ``auto`` weighs);
        default the machine's core count. ``local:N`` takes N instead.
    traces : int, optional
        The survey's trace count, from which ``auto`` chooses; without it ``auto`` gives
        ``threads``.

    Returns
    -------
    EngineSpec
        Kind, worker count and (remote) address; nothing is started or connected to.
    """
    n = workers or os.cpu_count() or 1
    text = (text or "threads").strip()
    if text == "auto":
        switch = AUTO_PROCESSES_TRACES if forked_workers() else AUTO_PROCESSES_TRACES_SPAWNED
        text = "processes" if (traces or 0) >= switch and n > 1 else "threads"
    if text == "threads":
        return EngineSpec(text, n)
    if text == "processes":
        return EngineSpec(text, _check_process_count(n, text))
    if text.startswith("local:"):
        try:
            count = int(text.split(":", 1)[1])
        except ValueError:
            count = 0
        if count < 1:
            raise SettingsError(f"expected local:N with N >= 1 workers, got {text!r}",
                                where="--scheduler")
        return EngineSpec("local", _check_process_count(count, text))
    if "://" in text or text.startswith("tcp:"):
        return EngineSpec("remote", n, address=_scheduler_address(text))
    raise SettingsError(f"expected {_FORMS}, got {text!r}", where="--scheduler")


def _check_process_count(count: int, text: str) -> int:
    """``count`` worker processes, if at most :data:`WORKERS_PER_CORE` per core."""
    cores = os.cpu_count() or 1
    most = WORKERS_PER_CORE * cores
    if count > most:
        raise SettingsError(f"{text} asks for {count} worker processes; this machine has "
                            f"{cores} cores and takes at most {most} ({WORKERS_PER_CORE} per "
                            "core)", where="--scheduler")
    return count


def _scheduler_address(text: str) -> str:
    """The ``tcp://HOST:PORT`` address ``text`` gives, checked for form only (no connection)."""
    def bad(why: str) -> SettingsError:
        return SettingsError(f"{why} in {text!r}; expected tcp://HOST:PORT, e.g. "
                             "tcp://10.0.0.5:8786", where="--scheduler")

    try:
        parts = urllib.parse.urlsplit(text)
        port = parts.port
    except ValueError as exc:  # a port that is no number or out of range, a broken [IPv6]
        raise bad(f"no valid address ({exc})") from None
    if parts.scheme != "tcp":
        raise bad(f"unknown scheme {parts.scheme + '://' if parts.scheme else '(none)'}")
    if not parts.hostname:
        raise bad("no host")
    if parts.username is not None or parts.path not in ("", "/") or parts.query \
            or parts.fragment:
        raise bad("more than a host and port")
    if port is None:
        raise bad("no port (a dask scheduler listens on 8786 unless told otherwise)")
    if port == 0:
        raise bad("port 0")
    return f"tcp://{parts.netloc}"


class Engine:
    """Runs lists of tasks on one engine; use as a context manager.

    Parameters
    ----------
    spec : EngineSpec
        Which engine.
    memory_limit : int, optional
        Bytes per worker for a LocalCluster.
    """

    #: Seconds a remote scheduler has to be reached (and 2 more to answer; see
    #: :func:`~slicer.pipeline.remote_scheduler.ask_scheduler`), then again to take this
    #: client: it bounds every wait on the address. Across a WAN a reply takes well under a
    #: second; a scheduler that has not answered in 10 s is not there or not dask.
    connect_timeout = 10

    def __init__(self, spec: EngineSpec, *, memory_limit: int | None = None):
        if spec.kind in ("processes", "local"):  # also for a spec not from parse_scheduler
            _check_process_count(spec.workers, spec.label if spec.kind == "local" else spec.kind)
        self.spec = spec
        self.memory_limit = memory_limit
        self._client = None
        self._cluster = None
        self._pool = None
        self._blas = None  # BLAS limited to one thread while tasks run here (see __enter__)
        #: Set once a ``processes`` engine's workers have started (None: nothing starts).
        self._starting: threading.Event | None = None

    def __enter__(self) -> Engine:
        if self.spec.kind in ("threads", "processes"):  # this process runs tasks too
            self._blas = one_blas_thread()
        try:
            self._open()
        except BaseException:
            self.__exit__(None, None, None)  # the BLAS setting back, anything opened closed
            raise
        return self

    def _open(self) -> None:
        if self.spec.kind == "threads":
            self._pool = concurrent.futures.ThreadPoolExecutor(max_workers=self.spec.workers)
        if self.spec.kind == "processes":
            # one pool for the whole build (dask would start one per compute call)
            self._pool = concurrent.futures.ProcessPoolExecutor(
                max_workers=self.spec.workers, mp_context=worker_context(),
                initializer=start_worker,
                initargs=(os.getpid(), current_umask(), dict(os.environ)))
            # one task per worker starts every worker now, importing what the tasks need;
            # from a thread, as a fork server answers only once it has imported them
            self._starting = threading.Event()  # set once they are up
            threading.Thread(target=start_workers,
                             args=(self._pool, self.spec.workers, self._starting),
                             name="slicer-start-workers", daemon=True).start()
        if self.spec.kind in ("local", "remote"):
            try:
                from distributed import Client, LocalCluster
            except ImportError:  # pragma: no cover - distributed is a dependency
                raise SettingsError("dask.distributed is not installed",
                                    where="--scheduler") from None
            if self.spec.kind == "local":
                self._check_memory()
                self._cluster = LocalCluster(
                    n_workers=self.spec.workers, threads_per_worker=1, processes=True,
                    dashboard_address=None,
                    memory_limit=self.memory_limit if self.memory_limit else "auto")
                self._client = Client(self._cluster)
            else:
                self._client = self._connect(Client)

    def _check_memory(self) -> None:
        """Refuse a LocalCluster whose workers cannot all have their memory on this machine."""
        from dask.utils import format_bytes
        from distributed.system import MEMORY_LIMIT  # RAM, or less under a cgroup or rlimit

        each = max(self.memory_limit or 0, WORKER_MEMORY)
        if self.spec.workers * each > MEMORY_LIMIT:
            raise SettingsError(
                f"{self.spec.label} needs {self.spec.workers} x {format_bytes(each)} of memory, "
                f"more than this machine's {format_bytes(MEMORY_LIMIT)}; use fewer workers",
                where="--scheduler")

    def _connect(self, client_class: type):
        """A client of the remote scheduler, within twice :attr:`connect_timeout` + 5 s.

        ``Client(timeout=...)`` bounds the TCP connection but not dask's handshake after it
        (dask.distributed issue 8071: a server that accepts and stays silent holds it for
        ever), so first the scheduler is asked who it is, in a bounded wait.
        """
        address, timeout = self.spec.address, self.connect_timeout
        ask_scheduler(address, timeout)
        try:
            return client_class(address, timeout=timeout)
        except (OSError, ValueError) as exc:  # TimeoutError is an OSError
            raise SettingsError(f"cannot reach the dask scheduler at {address} within "
                                f"{timeout:g} s ({one_line(exc)})", where="--scheduler") from None

    def __exit__(self, *exc_info) -> None:
        if self._pool is not None:
            self._pool.shutdown(cancel_futures=True)
            self._pool = None
        if self._blas is not None:
            self._blas.restore_original_limits()
            self._blas = None
        if self._client is not None:
            self._client.close()
        if self._cluster is not None:
            self._cluster.close()
        self._client = self._cluster = None

    def wait_for_workers(self, timeout: float | None = None) -> bool:
        """Wait until a ``processes`` engine's workers have started (or failed to); True if
        they have (always for other engines), False after ``timeout`` seconds. Until then
        :meth:`map` runs its tasks in this process."""
        return self._starting is None or self._starting.wait(timeout)

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
        tasks; with a generator they give the total. Warnings a task raises in a worker
        process are raised again here as its result is taken
        (:mod:`slicer.pipeline.task_warnings`), as they are from a task on a thread.
        """
        weights = list(weights) if weights is not None else None
        total = sum(weights) if weights is not None else None
        count = len(weights) if weights is not None else (
            len(items) if isinstance(items, Sized) else None)
        if total is None:
            total = count
        batch = self._batch_size(count)
        window = max(2, 2 * self.workers)
        items, done = iter(items), 0
        task_func = func if batch == 1 else functools.partial(_run_batch, func)
        # a task in another process warns there: its warnings come back with its result
        elsewhere = self._client is not None or isinstance(
            self._pool, concurrent.futures.ProcessPoolExecutor)
        if elsewhere:
            task_func = functools.partial(run_capturing, task_func)
        registry: dict = {}
        with contextlib.ExitStack() as stack, bar_for(enabled=progress, total=total, desc=desc,
                                                      unit=unit) as bar:
            # while the worker processes start (the fork server imports the task modules,
            # about a second, and a submit waits for it), the tasks run here, one at a time
            while self._starting is not None and not self._starting.is_set():
                item = next(items, _END)
                if item is _END:
                    return
                result = func(item)
                bar.update(weights[done] if weights is not None else 1)
                done += 1
                yield result
            left = None if count is None else count - done
            tasks = items if batch == 1 else _batches(items, batch, count=left,
                                                      workers=self.workers)
            submit = self._submitter(stack)
            pending: collections.deque = collections.deque()
            try:
                for task in itertools.islice(tasks, window):
                    pending.append(submit(task_func, task))
                while pending:
                    try:
                        results = pending.popleft().result()
                    except concurrent.futures.process.BrokenProcessPool:
                        raise SettingsError(WORKER_LOST, where="--scheduler") from None
                    for task in itertools.islice(tasks, 1):
                        pending.append(submit(task_func, task))
                    if elsewhere:
                        results, caught = results
                        replay(caught, registry)
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
        if isinstance(pool, concurrent.futures.ProcessPoolExecutor):
            return functools.partial(_submit_to_processes, pool)
        return pool.submit


def _submit_to_processes(pool: concurrent.futures.ProcessPoolExecutor, func: Callable, item):
    """``pool.submit(func, item)``; a worker process that cannot be started (the system's
    process or memory limit, no usable temporary folder for the fork server) is one
    SettingsError naming --scheduler (a fork server that cannot fork ends the answer early:
    EOFError)."""
    try:
        return pool.submit(func, item)
    except (OSError, EOFError) as exc:
        reason = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
        raise SettingsError(f"cannot start a worker process ({reason}); --scheduler threads "
                            "needs none", where="--scheduler") from None


def _batches(items: Iterable, size: int, *, count: int | None = None,
             workers: int = 1) -> Iterator[list]:
    """Lists of up to ``size`` items; with ``count`` (the number of items) known, they shrink
    towards one item over the last ``2 x size x workers`` items, so the workers run out of
    work together (a last batch of eight 1 M-trace lines kept one worker busy half a second
    alone)."""
    iterator, left = iter(items), count
    while True:
        n = size if left is None else max(1, min(size, left // (2 * workers)))
        batch = list(itertools.islice(iterator, n))
        if not batch:
            return
        if left is not None:
            left -= len(batch)
        yield batch


#: The end of the items (a sentinel no item can be).
_END = object()


def _run_batch(func: Callable, batch: list) -> list:
    """Run ``func`` on every item of one batch, in a worker (module level: picklable)."""
    return [func(item) for item in batch]


@contextlib.contextmanager
def engine(scheduler: str | None = None, *, workers: int | None = None,
           memory_limit: int | None = None) -> Iterator[Engine]:
    """Open the engine a ``--scheduler`` value names (see :class:`Engine`).

    Parameters
    ----------
    scheduler : str, optional
        A ``--scheduler`` value (:func:`parse_scheduler`); default ``threads``. No trace
        count is given, so ``auto`` gives ``threads``.
    workers : int, optional
        Concurrent tasks of ``threads`` and ``processes``; default the core count.
    memory_limit : int, optional
        Bytes per worker of a ``local:N`` cluster.

    Returns
    -------
    contextlib.AbstractContextManager of Engine
        The open engine as the ``with`` target, closed (workers stopped) when the block ends.
    """
    with Engine(parse_scheduler(scheduler, workers=workers), memory_limit=memory_limit) as e:
        yield e
