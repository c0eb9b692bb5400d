"""Attack the CSV readers (line table, GNSS track, distance marks, control points, channel
table) with broken copies of valid tables, and with any text in any field.

Every mutant must give a valid result or a one-line SlicerError naming the file, and leave the
file as it was (see attack_kit).
"""

from __future__ import annotations

import csv
import io

import pytest
from attack_kit import (
    CHANNELS,
    CONTROL_POINTS,
    LINE_TABLE,
    LINE_TABLE_OPTIONAL,
    MARKS,
    TRACK_LONLAT,
    TRACK_TIME,
    TRACK_XY,
    attack,
    check_channels,
    check_entries,
    check_marks,
    check_points,
    check_track,
    csv_cases,
    failed,
)
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from mutate import Mutant

import slicer


def _line_table(path, case):
    for ends in (True, False):
        entries = attack(lambda e=ends: slicer.read_line_table(path, ends=e), path, case)
        if not failed(entries):
            check_entries(entries, case, ends=ends)


def _track(key):
    def read(path, case):
        track = attack(lambda: slicer.read_track(path, key=key), path, case)
        if not failed(track):
            check_track(track, case)
    return read


def _simple(reader, check):
    def read(path, case):
        result = attack(lambda: reader(path), path, case)
        if not failed(result):
            check(result, case)
    return read


#: reader name -> (file name, seeds, read-and-check function).
READERS = {
    "line-table": ("lines.csv", {"plain": LINE_TABLE, "optional": LINE_TABLE_OPTIONAL},
                   _line_table),
    "track": ("track.csv", {"xy": TRACK_XY, "lonlat": TRACK_LONLAT}, _track("trace")),
    "track-time": ("track.csv", {"time": TRACK_TIME}, _track("time")),
    "marks": ("marks.csv", {"plain": MARKS}, _simple(slicer.read_marks, check_marks)),
    "control-points": ("control.csv", {"plain": CONTROL_POINTS},
                       _simple(slicer.read_control_points, check_points)),
    "channels": ("channels.csv", {"plain": CHANNELS},
                 _simple(slicer.read_channel_table, check_channels)),
}
#: Random mutants per seed (besides the fixed list of each generator).
COUNT = 45

CASES = [(reader, case) for reader, (_, texts, _) in READERS.items()
         for seed, text in texts.items() for case in csv_cases(f"{reader}-{seed}", text, COUNT)]


@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
@pytest.mark.parametrize("reader, case", CASES, ids=[c.id for _, c in CASES])
def test_csv_mutants_keep_the_promise(reader, case, tmp_path):
    name, _, read = READERS[reader]
    path = case.mutant.materialise(tmp_path / name)
    read(path, case)


@pytest.mark.parametrize("reader", READERS)
def test_the_seeds_themselves_read(reader, tmp_path):
    name, texts, read = READERS[reader]
    for seed, text in texts.items():
        path = Mutant("seed", text.encode()).materialise(tmp_path / f"{seed}-{name}")
        read(path, seed)  # checks the result when there is one
        with pytest.raises(AssertionError, match="message does not name"):
            # The checker itself can fail: a message that names another file is caught.
            attack(lambda: (_ for _ in ()).throw(slicer.InputFileError("x", where="elsewhere")),
                   path, seed)


# --- properties: any text in any field --------------------------------------------------------

_counter = iter(range(10**9))
_fields = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=30)


@settings(max_examples=40, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(reader=st.sampled_from(sorted(READERS)), data=st.data())
@pytest.mark.filterwarnings("ignore::slicer.SlicerWarning")
def test_any_field_text_keeps_the_promise(reader, data, tmp_path):
    name, texts, read = READERS[reader]
    text = texts[data.draw(st.sampled_from(sorted(texts)), label="seed")]
    rows = list(csv.reader(io.StringIO(text)))
    for _ in range(data.draw(st.integers(1, 3), label="edits")):
        r = data.draw(st.integers(0, len(rows) - 1), label="row")
        c = data.draw(st.integers(0, len(rows[r]) - 1), label="column")
        rows[r][c] = data.draw(_fields, label="text")
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    folder = tmp_path / f"f{next(_counter)}"
    folder.mkdir()
    path = Mutant("fields", out.getvalue().encode()).materialise(folder / name)
    read(path, f"{reader} with fields {rows}")
