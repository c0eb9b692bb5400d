"""Tests of slicer.pipeline.record: the numbers, paths and versions a written record holds, and
build settings read back exactly from it.

The reference for decimals is Python's :mod:`decimal` module (exact decimal arithmetic,
IBM's General Decimal Arithmetic Specification); the JSON text is parsed with
``parse_float=Decimal`` so that each number is seen exactly as written.
"""

import dataclasses
import importlib.metadata as md
import json
import math
import subprocess
import sys
from decimal import Decimal

import h5py
import numpy as np
import pyproj
import pytest
import rasterio
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from slicer.gridding.windows import make_windows
from slicer.pipeline.record import SIGNIFICANT, environment, tidy_number, tidy_record
from slicer.pipeline.repeat import BuildRecord
from slicer.pipeline.settings import BuildSettings, load_settings

TABLE = "file,start_x,start_y,end_x,end_y\nL0.sgy,0,0,0,10\nL1.sgy,0.5,10,0.5,0\n"


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    p = tmp_path_factory.mktemp("record") / "lines.csv"
    p.write_text(TABLE)
    return p


def digits(value: Decimal) -> int:
    """Significant digits of a decimal (0 for zero)."""
    return 0 if value == 0 else len(value.normalize().as_tuple().digits)


def decimal_text(low: float, high: float, *, most: int = 15, low_open: bool = False):
    """Decimal text a user could type, in [low, high], with at most ``most`` significant
    digits: any such decimal in the normal range reads back from a float64 unchanged (C's
    DBL_DIG is 15; a subnormal float holds fewer digits)."""
    def typed(pair):
        x, n = pair
        return f"{x:.{n}g}"

    def valid(t):
        x = float(t)
        return (low <= x <= high and not (low_open and x == low)
                and (x == 0 or x >= sys.float_info.min))
    return st.tuples(st.floats(low, high), st.integers(1, most)).map(typed).filter(valid)


@st.composite
def option_sets(draw) -> tuple[dict, dict]:
    """Valid build options as the command line passes them, and the decimal text of each
    number option."""
    texts = {}

    def number(name, low, high, **kw):
        texts[name] = draw(decimal_text(low, high, **kw))
        return float(texts[name])

    options = {"crs": draw(st.sampled_from(["EPSG:32633", "EPSG:2154", "EPSG:27700"])),
               "background": draw(st.sampled_from(["mean", "median", "off"])),
               "ties": draw(st.sampled_from(["off", "report", "apply"])),
               "level": draw(st.booleans()), "title": draw(st.text(max_size=30)),
               "gain": draw(st.sampled_from(["none", "power:1", "power:1.5", "exp:0.3"])),
               "scheduler": draw(st.sampled_from(["auto", "threads"])),
               "memory_limit": draw(st.sampled_from([None, "2GB", 10 ** 9]))}
    for name, low, high, kw in (("cell", 0.001, 1000, {}), ("radius", 0.001, 10_000, {}),
                                ("max_gap", 0, 10_000, {}), ("sample_interval", 0.001, 20, {}),
                                ("time_zero_threshold", 0, 1, {"low_open": True}),
                                ("control_tolerance", 0, 100, {"low_open": True})):
        if draw(st.booleans()):
            options[name] = number(name, low, high, **kw)
    for name in ("time_zero", "dewow"):
        word = draw(st.sampled_from(["auto", "off", None] if name == "dewow" else ["auto", None]))
        options[name] = word if word else number(name, 0, 100_000, low_open=True)
    kind = draw(st.sampled_from(["velocity", "permittivity", None]))
    if kind == "velocity":
        options["velocity"] = number("velocity", 0.01, 0.2997)  # MIN_VELOCITY and below c
    elif kind == "permittivity":
        options["permittivity"] = number("permittivity", 1, 100, low_open=True)
    if kind and draw(st.booleans()):
        std = number("velocity_std", 0, 0.05)
        v = options.get("velocity") or 0.299792458 / math.sqrt(options["permittivity"])
        assume(std < v)
        options["velocity_std"] = std
    if kind:
        top = draw(st.decimals(0, 2, places=2))
        step = draw(st.decimals(Decimal("0.05"), 1, places=2))
        options["depths"] = f"{top}:{top + step * draw(st.integers(1, 20))}:{step}"
        options["migrate"] = draw(st.sampled_from(["auto", "off", "stolt", "phase-shift"]))
        if draw(st.booleans()):
            options["thickness"] = number("thickness", 0.01, float(step), most=4)
    return options, texts


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(drawn=option_sets())
def test_settings_read_back_exactly_from_the_written_record(table, drawn):
    options, texts = drawn
    built = load_settings(table, **options)
    text = json.dumps(tidy_record({"settings": built.to_record()}, folder=table.parent))
    record = BuildRecord(table.parent / "record.json", json.loads(text))
    back = record.options()
    given = {k: v for k, v in options.items() if v is not None}
    assert {k: back.get(k) for k in given} == given
    defaults = {f.name: f.default for f in dataclasses.fields(BuildSettings)}
    assert all(back[k] == defaults[k] for k in set(back) - set(given))
    assert load_settings(record.source, **back).to_record() == built.to_record()
    exact = json.loads(text, parse_float=Decimal)["settings"]
    for name, typed in texts.items():  # the number as the user typed it, digit for digit
        assert exact[name] == Decimal(typed), name


@settings(max_examples=200, deadline=None)
@given(top=st.decimals(0, 100, places=4), step=st.decimals(Decimal("0.001"), 10, places=4),
       count=st.integers(1, 60))
def test_slice_bounds_are_written_as_their_decimals(top, step, count):
    windows = make_windows(float(top), float(top + step * count), float(step))
    record = {"slices": {"top": windows.top.tolist(), "bottom": windows.bottom.tolist()}}
    written = json.loads(json.dumps(tidy_record(record)), parse_float=Decimal)["slices"]
    assert len(written["top"]) == count
    for k, (t, b) in enumerate(zip(written["top"], written["bottom"], strict=True)):
        # the exact decimal top + k step, by decimal arithmetic (no binary noise)
        assert t == top + k * step and b == top + (k + 1) * step
        assert digits(t) <= SIGNIFICANT and digits(b) <= SIGNIFICANT


@given(st.floats(allow_nan=False, allow_infinity=False))
def test_computed_numbers_keep_twelve_significant_digits(x):
    y = tidy_number(x)
    assert digits(Decimal(repr(y))) <= SIGNIFICANT
    # within half a unit in the 12th digit of x (decimal arithmetic as the reference)
    d = Decimal(x)
    if d != 0:
        unit = Decimal(10) ** (d.adjusted() - SIGNIFICANT + 1)
        assert abs(Decimal(y) - d) <= unit / 2 * (1 + Decimal("1e-15"))


def test_float32_and_non_finite_values():
    # the shortest decimal that reads back as the same float32 (numpy's Dragon4 printing)
    assert tidy_number(np.float32(0.1)) == 0.1 and float(np.float32(0.1)) != 0.1
    assert tidy_number(float("nan")) is None and tidy_number(-math.inf) is None
    text = json.dumps(tidy_record({"a": [np.nan, np.float32(2.5), np.int64(3)]}))
    # strict JSON (RFC 8259 has no NaN): the parser is told to refuse NaN and Infinity
    assert json.loads(text, parse_constant=lambda c: pytest.fail(c)) == {"a": [None, 2.5, 3]}


def test_option_floats_are_kept_and_the_rest_rounded():
    noisy = 0.1 + 0.2  # 0.30000000000000004 in IEEE 754 binary64
    record = tidy_record({"settings": {"cell": noisy, "velocity_used": noisy},
                          "grid": {"west": noisy}})
    assert record["settings"]["cell"] == noisy  # an option is never rounded
    assert record["settings"]["velocity_used"] == 0.3 and record["grid"]["west"] == 0.3
    typed = "0.123456789012345"  # 15 significant digits, as typed
    text = json.dumps(tidy_record({"settings": {"velocity": float(typed)}}))
    assert text == '{"settings": {"velocity": ' + typed + '}}'


def test_environment_names_the_libraries_a_build_runs_on():
    env = environment()
    # each from the library's own report of itself
    assert env["gdal"] == rasterio.__gdal_version__
    assert env["proj"] == pyproj.proj_version_str
    assert env["hdf5"] == h5py.version.hdf5_version
    for name in ("zarr", "numcodecs", "rioxarray", "h5py", "numpy"):
        assert env[name] == md.version(name)


def test_environment_leaves_h5py_unloaded_when_the_build_did_not_use_it():
    # a build of GeoTIFFs from SEG-Y lines never touches HDF5: its record says None rather
    # than import h5py (0.09 s) to report a library the build did not run on
    code = ("import sys\nfrom slicer.pipeline.record import environment\n"
            "env = environment()\nprint(env['hdf5'], 'h5py' in sys.modules, env['gdal'])")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120, check=True)
    assert done.stdout.split() == ["None", "False", rasterio.__gdal_version__]


def test_environment_names_hdf5_for_a_build_writing_netcdf_on_workers():
    # a build writing cube.nc on worker processes loads h5py in the workers only: asked for
    # it (hdf5=True), a fresh process reports the HDF5 h5py runs on
    code = ("from slicer.pipeline.record import environment\n"
            "print(environment(hdf5=True)['hdf5'])")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120, check=True)
    assert done.stdout.split() == [h5py.version.hdf5_version]
