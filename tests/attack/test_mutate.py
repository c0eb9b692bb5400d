"""The mutation driver itself: reproducible, and each mutant is the damage its name says."""

from __future__ import annotations

import random
import struct

from attack_kit import LINE_TABLE, VELOCITY_LAYERED, seeds
from mutate import (
    Mutant,
    byte_mutants,
    csv_mutants,
    encoding_mutants,
    generic_mutants,
    segy_layout,
    segy_mutants,
    toml_mutants,
)


def _all(seed: int):
    rng = random.Random(seed)
    data = seeds().segy["ieee"]
    return [*segy_mutants(data, rng, 20), *byte_mutants(data, rng, 20),
            *csv_mutants(LINE_TABLE, rng, 20), *toml_mutants(VELOCITY_LAYERED, rng, 20)]


def test_the_same_seed_gives_the_same_mutants_and_another_seed_others():
    assert _all(1) == _all(1)
    assert _all(1) != _all(2)


def test_binary_header_mutants_set_exactly_the_named_field():
    data = seeds().segy["ieee"]
    for m in segy_mutants(data, random.Random(0), 0):
        if not m.name.startswith("bin 3221 "):  # samples per trace
            continue
        value = int(m.name.rsplit("= ", 1)[1])
        assert struct.unpack_from(">H", m.data, 3220)[0] == value
        assert m.data[:3220] == data[:3220] and m.data[3222:] == data[3222:]


def test_trace_header_mutants_reach_every_trace():
    data = seeds().segy["ieee"]
    trace_bytes, n_traces = segy_layout(data)
    assert n_traces == 12
    m = next(m for m in segy_mutants(data, random.Random(0), 0)
             if m.name == "trace[all] 71 coordinate scalar = 10")
    for k in range(n_traces):
        assert struct.unpack_from(">h", m.data, 3600 + k * trace_bytes + 70)[0] == 10


def test_byte_mutants_stay_in_their_window_except_truncation():
    data = bytes(range(256)) * 40
    for m in byte_mutants(data, random.Random(3), 200, start=100, stop=200):
        if m.name.startswith("truncate"):
            assert data.startswith(m.data)
        else:
            assert m.data[:100] == data[:100], m.name


def test_csv_and_encoding_mutants_all_change_the_file():
    original = LINE_TABLE.encode()
    named = [*csv_mutants(LINE_TABLE, random.Random(0), 0), *encoding_mutants(LINE_TABLE)]
    assert all(m.data != original for m in named), [m.name for m in named
                                                    if m.data == original]


def test_generic_mutants_make_nothing_a_file_or_a_folder(tmp_path):
    kinds = {m.name: m.materialise(tmp_path / m.name) for m in generic_mutants()}
    assert not kinds["missing"].exists()
    assert kinds["empty"].is_file() and kinds["empty"].stat().st_size == 0
    assert kinds["directory"].is_dir()
    assert Mutant("x", b"abc").materialise(tmp_path / "x").read_bytes() == b"abc"
