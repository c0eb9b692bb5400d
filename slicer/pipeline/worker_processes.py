"""How a ``processes`` engine's workers start, and how they end with the build.

Workers are forked by a fork server that has imported the task modules once
(:func:`worker_context`), take the umask and environment of the building process
(:func:`start_worker`), and end as soon as that process does, even when it is killed
(:func:`exit_with_parent`).
"""

from __future__ import annotations

import concurrent.futures
import functools
import multiprocessing
import multiprocessing.context
import os
import select
import signal
import sys
import threading
import time
from collections.abc import Sequence

#: Seconds between a spawned worker's checks that the process that started it lives (where
#: there are no process descriptors: :func:`exit_with_parent`).
PARENT_CHECK_INTERVAL = 0.5

#: Modules every ``processes`` worker imports as soon as the pool starts (:func:`_warm_up`):
#: what the line and tile tasks need, imported once by the fork server (:func:`worker_context`).
#: A worker would otherwise import them at its first task, about 1.4-1.6 s of a core after the
#: calling process has planned the build; started at once, the imports overlap that work.
#: scipy.spatial (the tiles' KD-tree) and rasterio (the slices' writer) are imported where
#: the gridding and the writers use them, not at the top, for the calling process's sake.
#: Not the Zarr store's module (zarr and dask.array, 0.14-0.28 s): only builds writing
#: ``cube.zarr`` or ``cube.nc`` use it, and their workers import it at their first tile.
#: Nor xarray, pandas, dask or pyproj (0.3-0.4 s of the server's CPU): none of these modules
#: imports them at the top, and no line, tile or slice task uses them (DEVELOPERS.md, Tests).
WARM_MODULES = ("slicer.pipeline.line_tasks", "slicer.outputs.radargram",
                "slicer.pipeline.worker_outputs", "scipy.spatial", "rasterio.shutil")
#: What the fork server imports before :data:`WARM_MODULES`: BLAS libraries then load on one
#: thread in the server and its workers (:mod:`slicer.pipeline.server_start`).
SERVER_START = "slicer.pipeline.server_start"


#: The warning filter the resource tracker starts with (it takes this process's -W options).
QUIET_TRACKER = "ignore::UserWarning:multiprocessing.resource_tracker"


def _quiet_resource_tracker() -> None:
    """Keep multiprocessing's resource tracker from adding its own lines to an error.

    When a build fails while workers hold a pool queue (a full disk, say), the tracker may
    find the queue's semaphore still registered once every process is gone; it removes it and
    says so in a two-line warning after slicer's one-line error. Nothing is left behind either
    way, so the tracker, which starts with this process's warning options, is told to stay
    quiet (before it starts: the first pool starts it).
    """
    if QUIET_TRACKER not in sys.warnoptions:
        sys.warnoptions.append(QUIET_TRACKER)


def worker_context() -> multiprocessing.context.BaseContext:
    """How ``processes`` workers start: forked by a fork server where there is one.

    The fork server is a fresh process (no threads, so forking it is safe, unlike forking
    the calling process) that imports :data:`WARM_MODULES` once; every worker forked from it
    starts with them imported, where a spawned worker imports them itself (1.6 s of a core
    each, benchmarks/startup.py), and ends without tearing its modules down. It lives as long
    as the calling process, for every later build. Spawn where there is no fork server
    (Windows) or no process descriptor to watch the calling process by (before Linux 5.3).
    """
    _quiet_resource_tracker()
    if not forked_workers():
        return multiprocessing.get_context("spawn")  # see exit_with_parent
    context = multiprocessing.get_context("forkserver")
    # used when the server first starts; SERVER_START before numpy loads (see there)
    context.set_forkserver_preload([SERVER_START, *WARM_MODULES])
    return context


def forked_workers() -> bool:
    """Whether ``processes`` workers are forked by a fork server here (:func:`worker_context`),
    rather than spawned, each importing the task modules itself."""
    return _process_handles() and "forkserver" in multiprocessing.get_all_start_methods()


@functools.cache
def _process_handles() -> bool:
    """Whether this system gives process descriptors (``os.pidfd_open``, Linux 5.3 on)."""
    try:
        os.close(os.pidfd_open(os.getpid()))
    except (AttributeError, OSError):
        return False
    return True


def start_workers(pool: concurrent.futures.Executor, count: int,
                  started: threading.Event | None = None) -> None:
    """Start ``count`` workers of ``pool``, each importing :data:`WARM_MODULES` (a task of
    its own, so every worker starts at once), then set ``started``: when they have, or could
    not. A pool shut down meanwhile starts none."""
    try:
        concurrent.futures.wait([pool.submit(_warm_up, WARM_MODULES) for _ in range(count)])
    except (RuntimeError, OSError, EOFError):
        # shut down meanwhile (the build failed while planning), or no process could start:
        # the build's own first task meets that again and says so (engine.Engine.map)
        pass
    finally:
        if started is not None:
            started.set()


def _warm_up(modules: Sequence[str]) -> None:
    """Import ``modules`` in a worker (a task of its own, so every worker starts at once)."""
    import importlib
    for name in modules:
        importlib.import_module(name)


def start_worker(pool_process: int, umask: int, environ: dict[str, str]) -> None:
    """Initialise a ``processes`` worker: the umask and environment of the pool's process
    now (a worker forked by the fork server would have the server's, from when it started:
    files written with another mode, GDAL settings missed), BLAS on one thread
    (:func:`one_blas_thread`), then :func:`exit_with_parent`.
    """
    os.umask(umask)
    for name in set(os.environ) - set(environ):
        del os.environ[name]
    os.environ.update(environ)
    import numpy  # noqa: F401 - loaded by the fork server already; spawned, its BLAS now
    one_blas_thread()  # for the worker's life
    exit_with_parent(pool_process)


def one_blas_thread():
    """Limit every BLAS library loaded in this process to one thread (threadpoolctl); the
    limiter, whose ``restore_original_limits()`` undoes it.

    A build runs one task per core. A BLAS call in a task (the window means are one matrix
    product per line) would otherwise start the library's own thread per core, which then
    spin waiting for more work: OpenBLAS's spinning took a third of a 400 k build's CPU
    time, and the build 1.5 times as long (benchmarks/README.md, peers.py).
    """
    from threadpoolctl import threadpool_limits
    return threadpool_limits(limits=1, user_api="blas")


def exit_with_parent(pool_process: int) -> None:
    """Make this ``processes`` worker exit as soon as ``pool_process`` (the process whose
    pool it serves) is gone.

    A pool initializer. A killed pool process cannot shut its pool down, and the workers
    would wait on their task queue for ever (each holds both ends of it), keeping their
    memory and the pool's resource tracker alive. A daemon thread waits on a Linux process
    descriptor of the pool's process (``os.pidfd_open``), readable once it ends. A worker
    forked by a fork server (:func:`worker_context`) is the server's child, and the server
    lives while any of its workers does, so the worker must watch the pool's process itself.
    Where there are no process descriptors the workers are spawned by the pool's process,
    and the thread compares ``os.getppid()`` with it every :data:`PARENT_CHECK_INTERVAL`
    seconds. Chosen over Linux's ``PR_SET_PDEATHSIG``, which fires when the *thread* that
    started the worker ends (the pool may start workers from any thread that submits).
    """
    # Ctrl-C reaches the whole process group: the calling process handles it (one line, the
    # pool shut down), so a worker's own KeyboardInterrupt traceback would only be noise.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if _process_handles():
        try:
            handle = os.pidfd_open(pool_process)
        except ProcessLookupError:  # gone already
            os._exit(1)

        def watch() -> None:
            select.select([handle], [], [])
            os._exit(1)
    else:
        def watch() -> None:
            while os.getppid() == pool_process:
                time.sleep(PARENT_CHECK_INTERVAL)
            os._exit(1)

    threading.Thread(target=watch, name="slicer-parent-watch", daemon=True).start()
