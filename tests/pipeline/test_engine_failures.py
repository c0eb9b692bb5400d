"""Tests of slicer.pipeline.engine when things go wrong: a bad or silent scheduler address is one
clear error within a bounded wait, too many workers are refused before any process starts,
and worker processes die with a killed build."""

import concurrent.futures
import contextlib
import os
import signal
import socket
import subprocess
import sys
import textwrap
import threading
import time

import psutil
import pytest

from slicer.cli import main
from slicer.core.errors import SettingsError
from slicer.pipeline import engine as engine_module
from slicer.pipeline.engine import WORKERS_PER_CORE, Engine, EngineSpec, parse_scheduler

#: A generous bound on any wait these tests allow (the engine's own bounds are a few seconds
#: with the 1 s connect timeout set below): a call that has not returned by then hangs.
BOUND = 30


def outcome_within(seconds: float, func):
    """The exception ``func()`` raises (None if none), failing if it has not returned within
    ``seconds`` (run in a daemon thread, so that a hang fails the test instead of stopping
    the suite)."""
    box = {}

    def run():
        try:
            func()
        except BaseException as exc:  # noqa: BLE001 - handed to the test
            box["error"] = exc

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    thread.join(seconds)
    assert not thread.is_alive(), f"still waiting after {seconds} s: the wait is not bounded"
    return box.get("error")


@contextlib.contextmanager
def listening_server(reply: bytes = b""):
    """A TCP server on 127.0.0.1 that accepts every connection, sends ``reply`` (if any) and
    then says nothing, holding the connection open. Yields its port."""
    server = socket.create_server(("127.0.0.1", 0))
    held = []

    def serve():
        with contextlib.suppress(OSError):  # the server is closed
            while True:
                conn, _ = server.accept()
                held.append(conn)
                if reply:
                    conn.sendall(reply)

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    try:
        yield server.getsockname()[1]
    finally:
        server.close()
        for conn in held:
            conn.close()


def free_port() -> int:
    with socket.create_server(("127.0.0.1", 0)) as s:
        return s.getsockname()[1]


def enter(scheduler: str, **kwargs):
    with Engine(parse_scheduler(scheduler), **kwargs):
        pass


@pytest.fixture
def short_timeout(monkeypatch):
    monkeypatch.setattr(Engine, "connect_timeout", 1)


# --- addresses -----------------------------------------------------------------------------

@pytest.mark.parametrize("address, why", [
    ("tcp://127.0.0.1", "no port"),
    ("tcp://127.0.0.1:", "no port"),
    ("tcp://127.0.0.1:0", "port 0"),
    ("tcp://127.0.0.1:70000", "out of range"),
    ("tcp://127.0.0.1:x", "no valid address"),
    ("tcp://127.0.0.1:8786:1", "no valid address"),
    ("tcp://[::1:8786", "no valid address"),
    ("tcp://:8786", "no host"),
    ("udp://127.0.0.1:8786", "unknown scheme udp://"),
    ("tls://127.0.0.1:8786", "unknown scheme tls://"),
    ("tcp://127.0.0.1:8786/status", "more than a host and port"),
    ("tcp://me@127.0.0.1:8786", "more than a host and port"),
    ("127.0.0.1:8786", "expected auto, threads, processes, local:N or tcp://HOST:PORT"),
])
def test_bad_address_is_one_line_naming_the_option(address, why):
    with pytest.raises(SettingsError) as info:
        parse_scheduler(address)
    message = str(info.value)
    assert message.startswith("--scheduler: ") and why in message, message
    assert "\n" not in message and info.value.where == "--scheduler"


@pytest.mark.parametrize("address, normal", [
    ("tcp://10.0.0.5:8786", "tcp://10.0.0.5:8786"),
    ("tcp://sched.example.org:8786/", "tcp://sched.example.org:8786"),
    ("tcp://[::1]:8786", "tcp://[::1]:8786"),
])
def test_good_addresses_are_kept(address, normal):
    assert parse_scheduler(address).address == normal


def test_server_that_never_answers_is_refused_within_the_bound(short_timeout):
    # Something listens and accepts but never speaks: dask's own Client(timeout=...) waits
    # for its handshake for ever.
    with listening_server() as port:
        error = outcome_within(BOUND, lambda: enter(f"tcp://127.0.0.1:{port}"))
    assert isinstance(error, SettingsError), error
    assert error.where == "--scheduler"
    assert "did not answer as dask within 3 s" in str(error)


def test_server_that_speaks_something_else_is_refused(short_timeout):
    with listening_server(b"HTTP/1.1 400 Bad Request\r\nContent-Length: 0\r\n\r\n") as port:
        error = outcome_within(BOUND, lambda: enter(f"tcp://127.0.0.1:{port}"))
    assert isinstance(error, SettingsError), error
    assert "does not speak dask" in str(error) and error.where == "--scheduler"


def test_nothing_listening_is_refused_within_the_bound(short_timeout):
    port = free_port()
    error = outcome_within(BOUND, lambda: enter(f"tcp://127.0.0.1:{port}"))
    assert isinstance(error, SettingsError), error
    assert "nothing answered within 1 s" in str(error) and error.where == "--scheduler"


def test_a_scheduler_is_taken_and_a_worker_refused(short_timeout):
    from distributed import LocalCluster

    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, protocol="tcp",
                      host="127.0.0.1", dashboard_address=None) as cluster:
        with Engine(parse_scheduler(cluster.scheduler_address)) as e:
            assert list(e.map(abs, [-1, -2, 3], desc="t", progress=False)) == [1, 2, 3]
        worker = next(iter(cluster.scheduler.workers))
        error = outcome_within(BOUND, lambda: enter(worker))
    assert isinstance(error, SettingsError), error
    assert "it is a dask Worker, not a scheduler" in str(error)


GOOD = ["--crs", "EPSG:32633", "--sample-interval", "0.1", "--time-zero", "3.0",
        "--velocity", "0.1", "--cell", "0.1", "--depths", "0:2.4:0.1"]


@pytest.mark.parametrize("scheduler, why", [
    ("tcp://127.0.0.1", "no port"),
    ("silent", "did not answer as dask"),
    ("local:1000", "at most"),
])
def test_command_line_refuses_in_one_line(small_survey, tmp_path, capsys, short_timeout,
                                          scheduler, why):
    out = tmp_path / "out"
    with listening_server() as port:
        if scheduler == "silent":
            scheduler = f"tcp://127.0.0.1:{port}"
        argv = ["build", str(small_survey.line_table), *GOOD, "--scheduler", scheduler,
                "--out", str(out)]
        box = {}
        assert outcome_within(BOUND, lambda: box.setdefault("code", main(argv))) is None
    err = capsys.readouterr().err
    lines = [x for x in err.splitlines() if x.strip()]
    assert box["code"] == 2 and len(lines) == 1, err
    assert "--scheduler" in lines[0] and why in lines[0] and "Traceback" not in err
    assert not out.exists()


# --- how many workers ----------------------------------------------------------------------

@pytest.fixture
def no_cluster(monkeypatch):
    """Make starting a LocalCluster fail the test: a refusal must come before it."""
    import distributed

    def refuse(*args, **kwargs):
        pytest.fail("a LocalCluster was started")

    monkeypatch.setattr(distributed, "LocalCluster", refuse)


def test_too_many_workers_per_core_are_refused_before_anything_starts(no_cluster):
    most = WORKERS_PER_CORE * (os.cpu_count() or 1)
    assert parse_scheduler(f"local:{most}").workers == most
    for text in (f"local:{most + 1}", "local:1000"):
        with pytest.raises(SettingsError, match=rf"--scheduler: {text} asks for .* at most"):
            parse_scheduler(text)
        with pytest.raises(SettingsError, match="--scheduler"):  # a spec made by hand
            Engine(EngineSpec("local", int(text.split(":")[1])))
    with pytest.raises(SettingsError, match="--scheduler: processes asks for 1000"):
        parse_scheduler("processes", workers=1000)


def test_workers_beyond_the_memory_are_refused_before_anything_starts(no_cluster):
    from distributed.system import MEMORY_LIMIT

    children = psutil.Process().children(recursive=True)
    error = outcome_within(BOUND, lambda: enter("local:2", memory_limit=MEMORY_LIMIT // 2 + 1))
    assert isinstance(error, SettingsError), error
    assert "local:2 needs 2 x" in str(error) and error.where == "--scheduler"
    assert psutil.Process().children(recursive=True) == children


def test_worker_memory_floor_counts_without_a_memory_limit(no_cluster, monkeypatch):
    from distributed.system import MEMORY_LIMIT

    monkeypatch.setattr(engine_module, "WORKER_MEMORY", MEMORY_LIMIT)
    with pytest.raises(SettingsError, match="--scheduler: local:2 needs 2 x"):
        enter("local:2")


# --- a killed build ------------------------------------------------------------------------

CHILD = textwrap.dedent("""
    import os, sys, time
    from slicer.pipeline.engine import Engine, parse_scheduler

    def worker_pid(_):
        time.sleep(0.05)
        return os.getpid()

    if __name__ == "__main__":
        with Engine(parse_scheduler(sys.argv[1], workers=2)) as engine:
            engine.wait_for_workers(60)  # else the first tasks run in this process
            pids = set(engine.map(worker_pid, range(16), desc="pids", progress=False))
            with open(sys.argv[2] + ".part", "w") as f:
                f.write(" ".join(map(str, pids)))
            os.replace(sys.argv[2] + ".part", sys.argv[2])
            time.sleep(600)
""")


def alive(process: psutil.Process) -> bool:
    """Running and not a zombie (an exited orphan that its new parent has not reaped)."""
    try:
        return process.is_running() and process.status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


@pytest.mark.parametrize("scheduler", ["processes", "local:1"])
def test_killed_build_leaves_no_process_behind(tmp_path, scheduler):
    script, pid_file = tmp_path / "child.py", tmp_path / "pids"
    script.write_text(CHILD)
    with open(tmp_path / "stderr", "w") as stderr:
        child = subprocess.Popen([sys.executable, str(script), scheduler, str(pid_file)],
                                 stdout=subprocess.DEVNULL, stderr=stderr)
    family = []
    try:
        deadline = time.monotonic() + 60  # starting and importing in the workers
        while not pid_file.exists():
            assert child.poll() is None, (tmp_path / "stderr").read_text()
            assert time.monotonic() < deadline, "the child's engine did not start in 60 s"
            time.sleep(0.1)
        task_pids = {int(p) for p in pid_file.read_text().split()}
        family = psutil.Process(child.pid).children(recursive=True)  # workers, tracker...
        assert task_pids and task_pids <= {p.pid for p in family}
    finally:
        child.send_signal(signal.SIGKILL)
        child.wait(BOUND)
    deadline = time.monotonic() + BOUND
    while (left := [p.pid for p in family if alive(p)]) and time.monotonic() < deadline:
        time.sleep(0.1)
    for pid in left:  # do not leak them into the rest of the suite
        with contextlib.suppress(psutil.NoSuchProcess):
            psutil.Process(pid).kill()
    assert not left, f"processes {left} of the killed build still run after {BOUND} s"


def _end_this_process(_item):
    os._exit(3)  # as the kernel's out-of-memory killer would end a worker: no exception


def test_a_worker_that_ends_mid_task_is_one_clear_error():
    # concurrent.futures raises BrokenProcessPool (its documented behaviour when a worker
    # ends abruptly); the engine names the scheduler and the causes instead
    with Engine(parse_scheduler("processes", workers=1)) as engine:
        assert engine.wait_for_workers(60)  # else the first tasks run in this process
        with pytest.raises(SettingsError, match="worker process ended") as caught:
            list(engine.map(_end_this_process, [1, 2], desc="ending", progress=False))
    assert caught.value.where == "--scheduler"
    assert "__main__" in str(caught.value) and "\n" not in str(caught.value)


def test_a_worker_process_that_cannot_start_is_one_clear_error(monkeypatch):
    # fork(2) fails with EAGAIN at the system's process limit (POSIX); concurrent.futures lets
    # that OSError out of submit, and the engine names the scheduler instead
    import errno

    def refuse(self):
        raise OSError(errno.EAGAIN, os.strerror(errno.EAGAIN))

    monkeypatch.setattr(concurrent.futures.ProcessPoolExecutor, "_spawn_process", refuse)
    with Engine(parse_scheduler("processes", workers=2)) as engine:
        assert engine.wait_for_workers(60)  # tried and failed; else the tasks run here
        with pytest.raises(SettingsError, match="cannot start a worker process") as caught:
            list(engine.map(abs, [1, 2], desc="starting", progress=False))
    assert caught.value.where == "--scheduler" and "\n" not in str(caught.value)
