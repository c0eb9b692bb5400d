"""Engines: the same tasks give the same results on threads, processes and a LocalCluster."""

import math

import numpy as np
import pytest

import slicer
from slicer._engine import Engine, parse_scheduler
from slicer._errors import SettingsError


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


def test_unreachable_cluster_is_one_clear_error(monkeypatch):
    monkeypatch.setattr(Engine, "connect_timeout", 2)
    with pytest.raises(SettingsError, match="cannot reach the dask scheduler"), \
            Engine(parse_scheduler("tcp://127.0.0.1:9")):
        pass


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
