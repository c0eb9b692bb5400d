"""The line table: one CSV row per recorded line, naming its file and where it ran.

Columns (header required, extra columns ignored)::

    file,start_x,start_y,end_x,end_y

``file`` is relative to the CSV's folder (or absolute); coordinates are in the survey CRS (m).
The traces of a line are spaced evenly from its start point (first trace) to its end point (last
trace), so a zigzag (bidirectional) survey simply swaps start and end on every other row.
"""

from __future__ import annotations

import csv
import math
import os
from dataclasses import dataclass
from pathlib import Path

from ._errors import LineTableError

COLUMNS = ("file", "start_x", "start_y", "end_x", "end_y")


@dataclass(frozen=True)
class LineEntry:
    """One line of a survey: its file and the ground positions of its first and last traces.

    Attributes
    ----------
    file : pathlib.Path
        The radar file (resolved against the table's folder).
    start, end : tuple of float
        ``(x, y)`` of the first and last trace in the survey CRS (m).
    where : str
        ``table:row`` for error messages.
    """

    file: Path
    start: tuple[float, float]
    end: tuple[float, float]
    where: str

    @property
    def length(self) -> float:
        """Distance from start to end (m)."""
        return math.hypot(self.end[0] - self.start[0], self.end[1] - self.start[1])


def _number(text: str | None, column: str, where: str) -> float:
    if text is None or not text.strip():
        raise LineTableError(f"column {column} is empty", where=where)
    try:
        value = float(text)
    except ValueError:
        raise LineTableError(f"column {column}: {text.strip()!r} is not a number",
                             where=where) from None
    if not math.isfinite(value):
        raise LineTableError(f"column {column}: {text.strip()!r} is not finite", where=where)
    return value


def make_entry(fields: dict, *, base: Path, where: str, ends: bool = True) -> LineEntry:
    """Validate one row (a mapping of the five columns) into a :class:`LineEntry`.

    With ``ends=False`` (positions from the files' headers) the start and end columns may be
    absent or empty; the entry then has NaN ends until :func:`with_ends` fills them.
    """
    name = fields.get("file")
    if name is None or not str(name).strip():
        raise LineTableError("column file is empty", where=where)
    if not ends and all(str(fields.get(c) or "").strip() == "" for c in COLUMNS[1:]):
        nan = (math.nan, math.nan)
        return LineEntry(file=(base / str(name).strip()), start=nan, end=nan, where=where)
    sx, sy, ex, ey = (_number(None if fields.get(c) is None else str(fields.get(c)), c, where)
                      for c in COLUMNS[1:])
    entry = LineEntry(file=(base / str(name).strip()), start=(sx, sy), end=(ex, ey), where=where)
    if entry.length == 0:
        raise LineTableError("line has zero length (start and end points coincide)",
                             where=where)
    return entry


def read_line_table(path: str | os.PathLike, *, ends: bool = True) -> list[LineEntry]:
    """Read and validate a line table CSV.

    With ``ends=False`` only the ``file`` column is required (positions come from the files).

    Raises
    ------
    LineTableError
        Missing file or columns, an empty table, an empty or non-numeric field (naming the row),
        a zero-length line or a file named twice.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise LineTableError("line table not found", where=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise LineTableError(f"cannot read line table ({exc})", where=str(path)) from None
    reader = csv.DictReader(text.splitlines())
    header = [h.strip() for h in (reader.fieldnames or [])]
    if not header:
        raise LineTableError("line table is empty (no header row)", where=str(path))
    missing = [c for c in (COLUMNS if ends else COLUMNS[:1]) if c not in header]
    if missing:
        raise LineTableError(
            f"missing column(s) {', '.join(missing)}; expected header {','.join(COLUMNS)}",
            where=str(path))
    reader.fieldnames = header
    entries = []
    for row_number, row in enumerate(reader, start=2):
        if not any((v or "").strip() for v in row.values() if isinstance(v, str)):
            continue  # blank line
        entries.append(make_entry(row, base=path.parent, where=f"{path}:{row_number}",
                                  ends=ends))
    if not entries:
        raise LineTableError("line table has no lines", where=str(path))
    check_unique(entries)
    return entries


def check_unique(entries: list[LineEntry]) -> None:
    """Refuse a survey that names the same file twice."""
    seen: dict[Path, str] = {}
    for e in entries:
        key = e.file.resolve()
        if key in seen:
            raise LineTableError(f"file {e.file.name} is already used at {seen[key]}",
                                 where=e.where)
        seen[key] = e.where


def with_ends(entry: LineEntry, x, y) -> LineEntry:
    """The entry with its start and end taken from its first and last trace positions."""
    import dataclasses
    return dataclasses.replace(entry, start=(float(x[0]), float(y[0])),
                               end=(float(x[-1]), float(y[-1])))
