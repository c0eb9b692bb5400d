"""Attack the radar line readers (SEG-Y and the NetCDF line format) with broken files.

Every mutant must give a valid Line / LineInfo or a one-line SlicerError naming the file, and
leave the file as it was (see attack_kit).
"""

from __future__ import annotations

import faulthandler
import struct
import subprocess
import sys

import pytest
from attack_kit import (
    HANG_REASON,
    HANGS,
    INTERVAL_NS,
    attack,
    binary_cases,
    check_info,
    check_line,
    failed,
    seeds,
)
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from mutate import SEGY_BINARY_FIELDS, SEGY_TRACE_FIELDS, Mutant, segy_layout

import slicer
from slicer.io.reading import header_positions
from slicer.io.segy import segy_ensemble_numbers

#: SEG-Y: the 3600 header bytes and the first trace header decide how the rest is read.
SEGY_CASES = [c for name, data in seeds().segy.items()
              for c in binary_cases(f"segy-{name}", data, header=3600 + 240, fields=25,
                                    flips=25, segy=True)]
#: NetCDF-4 / HDF5: the superblock and object headers sit in the first few kilobytes.
#: Not scaled by SLICER_ATTACK_SCALE: libhdf5 can loop forever on a damaged file (see HANGS in
#: attack_kit), and every such mutant must be listed there before the suite can run it.
NETCDF_CASES = [c for name, data in seeds().netcdf.items()
                for c in binary_cases(f"netcdf-{name}", data, header=4096, fields=0,
                                      flips=60, segy=False, scaled=False)]


def read_all(path, case, *, segy: bool):
    """Every reader of a line file, each under the promise; the Line read, if any."""
    info = attack(lambda: slicer.line_info(path), path, case)
    if not failed(info):
        check_info(info, case)
    line = attack(lambda: slicer.read_line(path), path, case)
    if not failed(line):
        check_line(line, case)
        assert not failed(info), f"{case}: read_line reads what line_info refused"
        assert line.shape == (info.n_traces, info.n_samples), case
    given_dt = attack(lambda: slicer.read_line(path, sample_interval_ns=INTERVAL_NS), path, case)
    if not failed(given_dt):
        check_line(given_dt, case)
    xy = attack(lambda: header_positions(path), path, case)
    if not failed(xy) and xy is not None:
        assert len(xy) == 2 and xy[0].shape == xy[1].shape, case
    if segy:
        attack(lambda: segy_ensemble_numbers(path), path, case)
    return line


@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
@pytest.mark.parametrize("case", SEGY_CASES, ids=lambda c: c.id)
def test_segy_mutants_keep_the_promise(case, tmp_path):
    path = case.mutant.materialise(tmp_path / "L000.sgy")
    read_all(path, case, segy=True)


@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
@pytest.mark.parametrize("case", [c for c in NETCDF_CASES if c.id not in HANGS],
                         ids=lambda c: c.id)
def test_netcdf_mutants_keep_the_promise(case, tmp_path):
    path = case.mutant.materialise(tmp_path / "L000.nc")
    # libhdf5 can loop for ever on a damaged heap (HANGS); if a library change moves that to
    # another mutant, end the run with a traceback naming it rather than hang CI.
    faulthandler.dump_traceback_later(120, exit=True)
    try:
        read_all(path, case, segy=False)
    finally:
        faulthandler.cancel_dump_traceback_later()


#: The child reads the file once; SIGALRM, left at its default action, ends it if the read has
#: not returned after ALARM_S seconds (a healthy read of this file takes milliseconds).
_CHILD = """
import signal, sys
import slicer
signal.alarm(int(sys.argv[2]))
try:
    slicer.line_info(sys.argv[1])
except slicer.SlicerError:
    pass
print("returned")
"""
ALARM_S = 3


@pytest.mark.xfail(strict=True, raises=AssertionError, reason=HANG_REASON)
@pytest.mark.parametrize("case", [c for c in NETCDF_CASES if c.id in HANGS], ids=lambda c: c.id)
def test_netcdf_mutants_that_hang_libhdf5(case, tmp_path):
    assert case.mutant.name == HANGS[case.id], "the generator changed: update HANGS"
    path = case.mutant.materialise(tmp_path / "L000.nc")
    child = subprocess.run([sys.executable, "-c", _CHILD, str(path), str(ALARM_S)],
                           capture_output=True, text=True, timeout=300)
    assert child.returncode == 0 and "returned" in child.stdout, \
        f"{case}: line_info did not return (exit {child.returncode})"


def test_the_seeds_themselves_read(tmp_path):
    """The mutation starts from valid files: each seed reads back whole."""
    for name, data in {**seeds().segy, **seeds().netcdf}.items():
        suffix = ".nc" if data.startswith((b"\x89HDF", b"CDF")) else ".sgy"
        path = Mutant("seed", data).materialise(tmp_path / f"{name}{suffix}")
        line = read_all(path, name, segy=suffix == ".sgy")
        assert not failed(line), f"seed {name}: {line}"
        assert line.sizes["trace"] == 12 and line.attrs["sample_interval_ns"] == INTERVAL_NS


# --- properties: any value in any header field ------------------------------------------------

_FIELDS = [(byte - 1, code, True) for byte, code, _, _ in SEGY_BINARY_FIELDS] + \
          [(byte - 1, code, False) for byte, code, _, _ in SEGY_TRACE_FIELDS]
_RANGES = {"h": (-2**15, 2**15 - 1), "H": (0, 2**16 - 1), "i": (-2**31, 2**31 - 1),
           "I": (0, 2**32 - 1), "Q": (0, 2**64 - 1), "B": (0, 255)}


@st.composite
def header_edits(draw):
    """One to three header fields of the SEG-Y seed set to any value their type holds."""
    edits = []
    for _ in range(draw(st.integers(1, 3))):
        offset, code, binary = draw(st.sampled_from(_FIELDS))
        if code == "d":
            value = draw(st.floats(allow_nan=True, allow_infinity=True))
        else:
            value = draw(st.integers(*_RANGES[code]))
        trace = None if binary else draw(st.integers(-1, 11))  # -1: every trace
        edits.append((offset, code, value, trace))
    return edits


_counter = iter(range(10**9))


@settings(max_examples=120, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(edits=header_edits())
@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
def test_any_header_values_keep_the_promise(edits, tmp_path):
    data = bytearray(seeds().segy["ieee"])
    trace_bytes, n_traces = segy_layout(bytes(data))
    for offset, code, value, trace in edits:
        if trace is None:
            struct.pack_into(">" + code, data, offset, value)
        else:
            for k in range(n_traces) if trace < 0 else [trace]:
                struct.pack_into(">" + code, data, 3600 + k * trace_bytes + offset, value)
    folder = tmp_path / f"h{next(_counter)}"
    folder.mkdir()
    path = Mutant("edits", bytes(data)).materialise(folder / "L000.sgy")
    read_all(path, f"header edits {edits}", segy=True)
