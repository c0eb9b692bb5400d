"""Tests of slicer.io.linetable: reading a line table (CSV), naming the row or column at
fault."""

import pytest
from hypothesis import given
from hypothesis import strategies as st

from slicer.core.errors import LineTableError, SlicerWarning
from slicer.io.linetable import COLUMNS, read_line_table

HEADER = ",".join(COLUMNS)


def write(tmp_path, text, name="lines.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_reads_rows_relative_to_the_table(tmp_path):
    p = write(tmp_path, f"{HEADER},note\nL0.sgy,0,0,0,10,first\nsub/L1.sgy,0.5,10,0.5,0,\n")
    with pytest.warns(SlicerWarning, match="note ignored"):
        entries = read_line_table(p)
    assert [e.file for e in entries] == [tmp_path / "L0.sgy", tmp_path / "sub" / "L1.sgy"]
    assert entries[1].start == (0.5, 10.0) and entries[1].end == (0.5, 0.0)
    assert entries[0].length == pytest.approx(10.0)
    assert entries[1].where.endswith("lines.csv:3")


def test_blank_lines_and_bom_are_tolerated(tmp_path):
    p = tmp_path / "lines.csv"
    p.write_bytes(("\ufeff" + f"{HEADER}\nL0.sgy,0,0,1,0\n\n").encode("utf-8"))
    assert len(read_line_table(p)) == 1


@pytest.mark.parametrize("text", [
    # a spreadsheet in a locale with decimal commas exports semicolons (common practice)
    "file;start_x;start_y;end_x;end_y\r\nL0.sgy;512000,25;4650000,5;512010,25;4650000,5\r\n",
    "file\tstart_x\tstart_y\tend_x\tend_y\nL0.sgy\t512000.25\t4650000.5\t512010.25\t4650000.5\n",
    # and may end every row with empty, unnamed columns
    f"{HEADER},,\r\nL0.sgy,512000.25,4650000.5,512010.25,4650000.5,,\r\n",
])
def test_spreadsheet_exports_read_as_the_same_line(tmp_path, text):
    (entry,) = read_line_table(write(tmp_path, text))
    assert entry.file == tmp_path / "L0.sgy"
    assert entry.start == (512000.25, 4650000.5) and entry.end == (512010.25, 4650000.5)


@pytest.mark.parametrize("body, match", [
    ("", "empty"),
    (f"{HEADER}\n", "no lines"),
    ("file,start_x,start_y,end_x\nL0.sgy,0,0,1\n", "missing column.*end_y"),
    (f"{HEADER}\nL0.sgy,0,zero,1,0\n", r"lines.csv:2: column start_y: 'zero' is not a number"),
    (f"{HEADER}\nL0.sgy,0,0,,0\n", r"lines.csv:2: column end_x is empty"),
    (f"{HEADER}\nL0.sgy,0,0,1\n", r"lines.csv:2: column end_y is empty"),
    (f"{HEADER}\n,0,0,1,0\n", r"lines.csv:2: column file is empty"),
    (f"{HEADER}\nL0.sgy,0,0,1,0\nL1.sgy,5,5,5,5\n", r"lines.csv:3: line has zero length"),
    (f"{HEADER}\nL0.sgy,0,0,1,nan\n", "not finite"),
    (f"{HEADER}\nL0.sgy,0,0,1,0\nL0.sgy,0,1,1,1\n", r"lines.csv:3: file L0.sgy is already"),
])
def test_bad_tables_name_the_row_or_column(tmp_path, body, match):
    with pytest.raises(LineTableError, match=match):
        read_line_table(write(tmp_path, body))


def test_missing_table(tmp_path):
    with pytest.raises(LineTableError, match="not found"):
        read_line_table(tmp_path / "nope.csv")


@given(st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=40))
def test_any_bad_field_raises_only_line_table_errors(field):
    import tempfile
    from pathlib import Path
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "lines.csv"
        p.write_text(f"{HEADER}\nL0.sgy,{field},0,1,0\n", encoding="utf-8")
        try:
            entries = read_line_table(p)
        except LineTableError:
            return
        assert len(entries) >= 1  # a field that parses as a number (or splits cleanly) is fine


def test_a_windows_spreadsheet_table_reads(tmp_path):
    # saved by a spreadsheet on Windows: Windows-1252 text (a name with an e-acute, byte 0xe9)
    # and a backslash between folders; the file lies in raw/ here
    (tmp_path / "raw").mkdir()
    (tmp_path / "raw" / "Léa_01.sgy").write_bytes(b"")
    text = f"{HEADER}\r\nraw\\Léa_01.sgy,0,0,10,0\r\n".encode("cp1252")
    assert b"\xe9" in text
    (entry,) = read_line_table(write_bytes(tmp_path, text))
    assert entry.file == tmp_path / "raw" / "Léa_01.sgy"
    utf16 = f"{HEADER}\nLéa_01.sgy,0,0,10,0\n".encode("utf-16")  # with its byte-order mark
    (entry,) = read_line_table(write_bytes(tmp_path, utf16, "u16.csv"))
    assert entry.file.name == "Léa_01.sgy"


def test_bytes_no_encoding_maps_name_their_line(tmp_path):
    text = f"{HEADER}\nL0.sgy,0,0,10,0\nL\x81.sgy,0,1,10,1\n".encode("latin-1")  # 0x81: none
    with pytest.raises(LineTableError, match=r"line 3 holds byte 0x81.*save the table as UTF-8"):
        read_line_table(write_bytes(tmp_path, text))


def write_bytes(tmp_path, data, name="lines.csv"):
    p = tmp_path / name
    p.write_bytes(data)
    return p
