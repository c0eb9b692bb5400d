"""Tests of slicer.pipeline.engine: the same tasks give the same results on threads,
processes and a LocalCluster (failures: test_engine_failures.py)."""

import math
import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import slicer
from slicer.core.errors import SettingsError
from slicer.pipeline.engine import Engine, parse_scheduler


@pytest.mark.parametrize("text, kind, workers", [
    (None, "threads", None), ("threads", "threads", None), ("processes", "processes", None),
    ("local:3", "local", 3), ("tcp://10.0.0.5:8786", "remote", None)])
def test_parse_scheduler(text, kind, workers):
    spec = parse_scheduler(text)
    assert spec.kind == kind
    if workers:
        assert spec.workers == workers
    if kind == "remote":
        assert spec.address == "tcp://10.0.0.5:8786"


@pytest.mark.parametrize("bad", ["local:0", "local:x", "gpu", "tcp://", "cluster"])
def test_bad_scheduler(bad):
    with pytest.raises(SettingsError, match="--scheduler"):
        parse_scheduler(bad)


@pytest.mark.parametrize("scheduler", ["threads", "processes", "local:2"])
def test_map_keeps_order(scheduler):
    items = list(range(1, 30))
    with Engine(parse_scheduler(scheduler)) as e:
        got = list(e.map(math.factorial, items, desc="t", progress=False))
    assert got == [math.factorial(i) for i in items]


def test_distributed_build_equals_threaded(small_survey):
    settings = slicer.load_settings(small_survey.line_table, sample_interval=0.1,
                                    time_zero=3.0, velocity=0.1, depths="0:2.4:0.1",
                                    cell=0.1)
    threaded = slicer.build_cube(settings, progress=False).cube
    clustered = slicer.build_cube(settings.replace(scheduler="local:2"), progress=False)
    assert clustered.record["engine"] == "local:2"
    np.testing.assert_allclose(clustered.cube.values, threaded.values, rtol=1e-6,
                               equal_nan=True)
    processes = slicer.build_cube(settings.replace(scheduler="processes"), progress=False)
    np.testing.assert_allclose(processes.cube.values, threaded.values, rtol=1e-6,
                               equal_nan=True)


def test_auto_scheduler_by_survey_size():
    assert parse_scheduler("auto", traces=10, workers=2).kind == "threads"
    assert parse_scheduler("auto", traces=10**6, workers=2).kind == "processes"
    assert parse_scheduler("auto", traces=10**6, workers=1).kind == "threads"
    # the boundary, measured (slicer.pipeline.engine.AUTO_PROCESSES_TRACES): threads ahead up
    # to 45 k traces, processes at 65 k
    assert parse_scheduler("auto", traces=49_999, workers=2).kind == "threads"
    assert parse_scheduler("auto", traces=50_000, workers=2).kind == "processes"


def test_auto_scheduler_where_workers_are_spawned(monkeypatch):
    # spawned workers (no fork server: Windows, Linux before 5.3) each import the task modules
    # themselves, 1.4-1.6 s of a core: the switch stays where it was measured for them
    import slicer.pipeline.engine as engine_module
    monkeypatch.setattr(engine_module, "forked_workers", lambda: False)
    assert parse_scheduler("auto", traces=65_000, workers=2).kind == "threads"
    assert parse_scheduler("auto", traces=299_999, workers=2).kind == "threads"
    assert parse_scheduler("auto", traces=300_000, workers=2).kind == "processes"


@pytest.mark.parametrize("scheduler", ["threads", "processes"])
def test_map_of_a_generator_in_batches_keeps_order(scheduler):
    # 300 items on 2 process workers go as batches of 8; a generator is consumed lazily.
    with Engine(parse_scheduler(scheduler, workers=2)) as e:
        assert e._batch_size(300) == (1 if scheduler == "threads" else 8)
        got = list(e.map(math.factorial, (i % 40 for i in range(300)), desc="t",
                         progress=False, weights=[1] * 300))
    assert got == [math.factorial(i % 40) for i in range(300)]


def test_map_keeps_a_bounded_window_in_flight():
    # The sliding window: while the caller holds result k, at most 2 x workers later items
    # have been taken from the generator.
    taken = []

    def source():
        for i in range(50):
            taken.append(i)
            yield i

    with Engine(parse_scheduler("threads", workers=2)) as e:
        results = e.map(abs, source(), desc="t", progress=False)
        for k, value in enumerate(results):
            assert value == k
            assert len(taken) <= k + 1 + 4
    assert len(taken) == 50


def test_map_error_is_raised_and_stops_the_rest():
    with Engine(parse_scheduler("threads", workers=2)) as e, \
            pytest.raises(ZeroDivisionError):
        list(e.map(lambda x: 1 / x, [3, 2, 1, 0, 1, 2], desc="t", progress=False))


def _blas_threads(_item=None) -> tuple[int, ...]:
    """The thread count of every BLAS library loaded where this runs (threadpoolctl)."""
    from threadpoolctl import threadpool_info
    return tuple(i["num_threads"] for i in threadpool_info() if i["user_api"] == "blas")


@pytest.mark.parametrize("scheduler", ["threads", "processes"])
def test_tasks_use_blas_on_one_thread_and_the_caller_gets_its_own_back(scheduler):
    # One task per core already fills the machine; a BLAS call in a task (a line's window
    # means) started OpenBLAS's thread per core, which spun waiting for work: a third of a
    # 400 k build's CPU (perf), the build 1.5x as long. Measured with threadpoolctl, the
    # library a user would reach for; the caller's setting (2 here, whatever this machine's
    # default) comes back when the engine closes.
    from threadpoolctl import threadpool_limits
    with threadpool_limits(limits=2, user_api="blas"):
        before = _blas_threads()
        assert before and set(before) == {2}  # numpy's BLAS is loaded and not on one thread
        with Engine(parse_scheduler(scheduler, workers=2)) as engine:
            assert engine.wait_for_workers(60)  # else the tasks run in this process
            in_tasks = set(engine.map(_blas_threads, range(6), desc="b", progress=False))
            here = _blas_threads()
        assert _blas_threads() == before
    assert in_tasks and all(t and set(t) == {1} for t in in_tasks)  # 2 on CI's 2 cores
    assert set(here) == {1}  # the calling process runs tasks too (processes: until workers)


def _native_threads(_item=None) -> int:
    """Threads of this process that Python did not start (BLAS libraries' own), after a BLAS
    call."""
    import os
    import threading

    import numpy as np
    a = np.ones((300, 300), dtype=np.float32)
    a @ a
    return len(os.listdir("/proc/self/task")) - threading.active_count()


@pytest.mark.skipif(not Path("/proc/self/task").is_dir(), reason="no /proc")
def test_process_workers_start_without_blas_threads():
    # The fork server sets OPENBLAS_NUM_THREADS=1 before its modules load numpy
    # (slicer.pipeline.server_start): OpenBLAS then starts no thread of its own, where it
    # started one per core less one per library (numpy's, scipy's), each spinning a while at
    # start and after each call: 2 such threads per worker on 2 cores, none now (checked).
    with Engine(parse_scheduler("processes", workers=2)) as engine:
        assert engine.wait_for_workers(60)
        counts = set(engine.map(_native_threads, range(6), desc="b", progress=False))
    assert counts == {0}


def test_the_fork_servers_first_module_puts_blas_on_one_thread_as_it_loads():
    # in a fresh process, as the fork server imports it: before numpy, no limit taken after
    import subprocess
    import sys
    code = ("import slicer.pipeline.server_start\n"
            "import numpy, scipy.linalg\n"
            "from threadpoolctl import threadpool_info\n"
            "print(sorted({i['num_threads'] for i in threadpool_info() "
            "if i['user_api'] == 'blas'}))\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120, env={k: v for k, v in os.environ.items()
                                            if not k.endswith("_NUM_THREADS")})
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "[1]"


def test_an_engine_that_fails_to_open_gives_the_blas_setting_back(monkeypatch):
    # the limit is taken first (this process runs tasks too); a pool that cannot start
    # must not leave the caller's BLAS on one thread
    from threadpoolctl import threadpool_limits

    import slicer.pipeline.engine as engine_module

    def broken():
        raise OSError("no process can start here")

    monkeypatch.setattr(engine_module, "worker_context", broken)
    with threadpool_limits(limits=2, user_api="blas"):
        with pytest.raises(OSError, match="no process"), \
                Engine(parse_scheduler("processes", workers=2)):
            pass
        assert set(_blas_threads()) == {2}


def _process_state(_item):
    import os

    from slicer.core.atomic import current_umask
    return os.environ.get("SLICER_TEST_MARK"), current_umask(), "slicer.pipeline.line_tasks" in \
        __import__("sys").modules


def test_process_workers_take_the_callers_umask_and_environment_of_now(monkeypatch):
    # A worker forked by the fork server (started by an earlier build, with the umask and
    # environment of then) must still write files with the caller's mode of now and see the
    # GDAL settings set since (os.environ / os.umask, Python docs: inherited at process start).
    with Engine(parse_scheduler("processes", workers=1)) as engine:  # the server is running
        list(engine.map(_process_state, [0], desc="first", progress=False))
    monkeypatch.setenv("SLICER_TEST_MARK", "now")
    old = os.umask(0o037)
    try:
        with Engine(parse_scheduler("processes", workers=2)) as engine:
            assert engine.wait_for_workers(60)  # else the first tasks run in this process
            states = set(engine.map(_process_state, range(4), desc="state", progress=False))
    finally:
        os.umask(old)
    assert states == {("now", 0o037, True)}  # and the task modules were imported already


def _warning_task(item):
    import warnings

    from slicer.core.errors import SlicerWarning
    if item % 3 == 0:
        warnings.warn(f"item {item} is odd", SlicerWarning, stacklevel=1)
    if item == 4:
        warnings.warn("a divisor is zero", RuntimeWarning, stacklevel=1)
    return item * 2


@pytest.mark.parametrize("scheduler", ["threads", "processes", "local:2"])
def test_warnings_of_tasks_reach_the_caller_from_any_engine(scheduler):
    # A warning raised by a task in a worker process went to that worker's stderr, and a
    # build's record (collected with catch_warnings in the calling process) never had it.
    import warnings
    with Engine(parse_scheduler(scheduler, workers=2)) as engine, \
            warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        got = list(engine.map(_warning_task, range(10), desc="w", progress=False))
    assert got == [2 * i for i in range(10)]
    texts = sorted(str(w.message) for w in caught)
    assert texts == sorted(["a divisor is zero", *(f"item {i} is odd" for i in (0, 3, 6, 9))])
    from slicer.core.errors import SlicerWarning
    assert {w.category for w in caught} == {SlicerWarning, RuntimeWarning}
    assert all(w.filename.endswith("test_engine.py") for w in caught)  # where it was raised


def test_a_warning_from_workers_is_shown_once_under_the_default_filter():
    # as Python's "default" action shows a warning once per place, per map here
    import warnings
    with Engine(parse_scheduler("processes", workers=2)) as engine, \
            warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("default")
        list(engine.map(_warning_task, [4, 4, 4, 1], desc="w", progress=False))
    assert [str(w.message) for w in caught] == ["a divisor is zero"]


#: The engine whose workers the next task waits for (set in the calling process only).
_WAITING_ENGINE = None


def _pid_after(item):
    if item == 3 and _WAITING_ENGINE is not None:  # run here: let the workers come up first
        assert _WAITING_ENGINE.wait_for_workers(60)
    return item, os.getpid()


def test_tasks_run_here_until_the_workers_have_started(monkeypatch):
    # The fork server imports the task modules before the first worker exists (about a
    # second), and a submit waits for it: meanwhile the calling process takes the tasks in
    # turn, so that the core the server leaves free is not idle. Held back until item 2 ran,
    # the workers cannot take items 0-2; item 3 waits for them, so they take the rest.
    import threading

    import slicer.pipeline.engine as engine_module
    gate, real = threading.Event(), engine_module.start_workers

    def held(pool, count, started):
        gate.wait(60)
        real(pool, count, started)

    monkeypatch.setattr(engine_module, "start_workers", held)
    with Engine(parse_scheduler("processes", workers=2)) as engine:
        globals()["_WAITING_ENGINE"] = engine
        try:
            got = []
            for item, pid in engine.map(_pid_after, range(12), desc="t", progress=False):
                got.append((item, pid))
                if item == 2:
                    gate.set()
        finally:
            globals()["_WAITING_ENGINE"] = None
    assert [item for item, _ in got] == list(range(12))
    assert [pid == os.getpid() for _, pid in got] == [True] * 4 + [False] * 8


@settings(max_examples=100, deadline=None)
@given(count=st.integers(0, 400), size=st.integers(1, 8), workers=st.integers(1, 8))
def test_batches_keep_every_item_in_order_and_shrink_at_the_end(count, size, workers):
    from slicer.pipeline.engine import _batches
    batches = list(_batches(iter(range(count)), size, count=count, workers=workers))
    assert [i for b in batches for i in b] == list(range(count))
    sizes = [len(b) for b in batches]
    assert all(1 <= n <= size for n in sizes)
    assert sizes == sorted(sizes, reverse=True)  # never larger again once they shrink
    if count >= 2 * size * workers:  # the last task is one item: nobody waits on a big one
        assert sizes[-1] == 1 and sizes[0] == size
