"""The line table: one CSV row per recorded line, naming its file and where it ran.

Columns (header required; other columns are ignored with a warning, and one that looks like a
misspelt column name, or a column named twice, is refused)::

    file,start_x,start_y,end_x,end_y

``file`` is relative to the CSV's folder (or absolute); coordinates are in the survey CRS (m).
The traces of a line are spaced evenly from its start point (first trace) to its end point (last
trace), so a zigzag (bidirectional) survey simply swaps start and end on every other row.

Optional columns say how a row's traces are placed instead (see
:mod:`slicer.geometry.positioning`); an
empty field means the survey's default:

``positions``
    ``table`` (start to end), ``headers`` (the file's trace-header coordinates) or ``track``.
``track``
    A CSV of GNSS fixes for this line (``trace`` or ``time`` key, ``lon,lat`` or ``x,y``).
``marks``
    A CSV ``trace,distance`` of marks dropped at known distances (m) from the start point.
``channels``
    A channel table ``channel,across,along``: the file is a multi-channel swath, expanded
    into one line per channel.
``start_elevation``, ``end_elevation``
    The ground's elevation (m above the survey's vertical datum) at the first and last trace,
    for elevation slices with ``terrain = "table"`` (linear along the line in between).
"""

from __future__ import annotations

import csv
import difflib
import math
import os
import re
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from slicer.core.errors import LineTableError, warn

COLUMNS = ("file", "start_x", "start_y", "end_x", "end_y")
#: Optional columns: how a row is positioned (values), and which of them name files.
OPTIONAL = ("positions", "track", "marks", "channels", "start_elevation", "end_elevation")
#: Optional columns holding numbers (m above the vertical datum).
NUMBER_COLUMNS = ("start_elevation", "end_elevation")
PATH_COLUMNS = ("track", "marks", "channels")
#: Where a line's positions can come from.
POSITION_SOURCES = ("table", "headers", "track")


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
    #: Per-line position source (one of :data:`POSITION_SOURCES`), or None for the survey's.
    positions: str | None = None
    #: GNSS track, distance marks and channel table files of this line, if any.
    track: Path | None = None
    marks: Path | None = None
    channels: Path | None = None
    #: After channel expansion: this entry's channel name, its index among the swath's
    #: channels (trace ``k`` of the file is channel ``k % channel_count`` when the headers
    #: do not number channels), and its offset ``(across, along)`` (m) from the reference.
    channel: str | None = None
    channel_index: int = 0
    channel_count: int = 1
    offset: tuple[float, float] = (0.0, 0.0)
    #: Block of the survey the line belongs to (TOML ``[[block]]`` name), if any.
    block: str | None = None
    #: Ground elevation (m above the vertical datum) at the first and last trace, if given.
    start_elevation: float | None = None
    end_elevation: float | None = None

    @property
    def has_ends(self) -> bool:
        """True when start and end are known (not NaN)."""
        return all(math.isfinite(v) for v in (*self.start, *self.end))

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


def unknown_names(names, *, what: str, where: str, strict: bool) -> list[str]:
    """Names (columns or keys) that are not line-table columns.

    A name within a typo of a known one is refused ("did you mean"); with ``strict`` every
    unknown name is. Returns the unknown names left, for the caller to mention.
    """
    known = COLUMNS + OPTIONAL
    unknown = [n for n in names if n not in known]
    for n in unknown:
        close = difflib.get_close_matches(n.lower(), known, n=1, cutoff=0.75)
        if close or strict:
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise LineTableError(f"unknown {what} {n!r}{hint}; known: {', '.join(known)}",
                                 where=where)
    return unknown


def make_entry(fields: dict, *, base: Path, where: str, ends: bool = True) -> LineEntry:
    """Validate one row (a mapping of the five columns) into a :class:`LineEntry`.

    With ``ends=False`` (positions from the files' headers) the start and end columns may be
    absent or empty; the entry then has NaN ends until :func:`with_ends` fills them.
    """
    if not isinstance(fields, dict):
        raise LineTableError(f"expected a table of file, start_x, ... (a [[line]] table), got "
                             f"{fields!r}", where=where)
    name = fields.get("file")
    if not isinstance(name, str | os.PathLike) or not str(name).strip():
        raise LineTableError("column file is empty" if name in (None, "") else
                             f"column file: expected a file name, got {name!r}", where=where)
    if "\x00" in str(name):
        raise LineTableError(f"column file: {str(name)!r} holds a NUL character", where=where)
    extra = _optional(fields, base=base, where=where)
    source = extra.get("positions")
    if source is None and extra.get("track") is not None:
        source = extra["positions"] = "track"
    if source == "track" and extra.get("track") is None:
        raise LineTableError("positions = track needs a track file in column track",
                             where=where)
    if extra.get("marks") is not None and source not in (None, "table"):
        raise LineTableError(f"distance marks stretch a line between its start and end; they "
                             f"do not combine with positions = {source}", where=where)
    need_ends = ends if source is None else source == "table"
    if not need_ends and all(str(fields.get(c) or "").strip() == "" for c in COLUMNS[1:]):
        nan = (math.nan, math.nan)
        return LineEntry(file=_file_path(base, name), start=nan, end=nan, where=where,
                         **extra)
    sx, sy, ex, ey = (_number(None if fields.get(c) is None else str(fields.get(c)), c, where)
                      for c in COLUMNS[1:])
    entry = LineEntry(file=_file_path(base, name), start=(sx, sy), end=(ex, ey), where=where,
                      **extra)
    if entry.length == 0:
        raise LineTableError("line has zero length (start and end points coincide)",
                             where=where)
    return entry


def _optional(fields: dict, *, base: Path, where: str) -> dict:
    """The optional columns of a row that are filled in, checked."""
    out = {}
    for column in OPTIONAL:
        value = fields.get(column)
        text = "" if value is None else str(value).strip()
        if not text:
            continue
        if column == "positions":
            if text not in POSITION_SOURCES:
                raise LineTableError(f"column positions: expected one of "
                                     f"{', '.join(POSITION_SOURCES)}, got {text!r}", where=where)
            out[column] = text
        elif column in NUMBER_COLUMNS:
            out[column] = _number(text, column, where)
        elif "\x00" in text:
            raise LineTableError(f"column {column}: {text!r} holds a NUL character",
                                 where=where)
        else:
            out[column] = _file_path(base, text)
    return out


def read_line_table(path: str | os.PathLike, *, ends: bool = True) -> list[LineEntry]:
    """Read and validate a line table CSV.

    With ``ends=False`` only the ``file`` column is required (positions come from the files).

    Parameters
    ----------
    path : path-like
        The table: header ``file,start_x,start_y,end_x,end_y`` (m) and optional columns.
    ends : bool
        Require the start and end columns (unless the table has a ``positions`` or
        ``track`` column).

    Returns
    -------
    list of LineEntry
        One per non-blank row, in file order; relative file names are taken from the
        table's folder.

    Raises
    ------
    LineTableError
        Missing file or columns, an empty table, an empty or non-numeric field (naming the row),
        a zero-length line or a file named twice.
    """
    path = Path(path)
    try:
        text = table_text(path)
    except FileNotFoundError:
        raise LineTableError("line table not found", where=str(path)) from None
    except (OSError, ValueError) as exc:  # ValueError: undecodable, or a NUL in the path
        raise LineTableError(f"cannot read line table ({exc})", where=str(path)) from None
    lines = text.splitlines()
    delimiter = table_delimiter(lines)
    reader = csv.DictReader(lines, delimiter=delimiter)
    header = [h.strip() for h in (_csv(lambda: reader.fieldnames, reader, path) or [])]
    if not any(header):
        raise LineTableError("line table is empty (no header row)", where=str(path))
    # a spreadsheet's export may end every row with empty columns: unnamed, they are ignored
    twice = sorted(n for n, k in Counter(h for h in header if h).items() if k > 1)
    if twice:
        raise LineTableError(f"column(s) {', '.join(twice)} named twice in the header",
                             where=str(path))
    ignored = unknown_names([h for h in header if h], what="column", where=str(path),
                            strict=False)
    if ignored:
        warn(f"{path}: column(s) {', '.join(ignored)} ignored")
    sources = set()
    if "positions" in header or "track" in header:
        sources = {"given per row"}
    missing = [c for c in (COLUMNS if ends and not sources else COLUMNS[:1]) if c not in header]
    if missing:
        raise LineTableError(
            f"missing column(s) {', '.join(missing)}; expected header {','.join(COLUMNS)}",
            where=str(path))
    reader.fieldnames = header
    entries = []
    for row_number, row in enumerate(_csv(lambda: list(reader), reader, path), start=2):
        if not any((v or "").strip() for v in row.values() if isinstance(v, str)):
            continue  # blank line
        if delimiter != ",":  # then its numbers may have decimal commas
            row = {k: decimal_point(v) for k, v in row.items()}
        entries.append(make_entry(row, base=path.parent, where=f"{path}:{row_number}",
                                  ends=ends))
    if not entries:
        raise LineTableError("line table has no lines", where=str(path))
    check_unique(entries)
    return entries


def table_text(path: Path) -> str:
    """The text of a table file: UTF-8 (with or without a byte-order mark), UTF-16 with its
    mark, or else Windows-1252, the encoding spreadsheets on Windows save "CSV" in.

    Raises
    ------
    OSError
        The file cannot be read (FileNotFoundError when missing).
    ValueError
        A byte no encoding above maps (naming its line).
    """
    data = path.read_bytes()
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        return data.decode("utf-16")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        try:
            return data.decode("cp1252")
        except UnicodeDecodeError as exc:
            line = data[:exc.start].count(b"\n") + 1
            raise ValueError(f"line {line} holds byte 0x{data[exc.start]:02x}, which is text in "
                             "neither UTF-8 nor Windows-1252; save the table as UTF-8") from None


def _file_path(base: Path, name) -> Path:
    """``name`` beside the table; a Windows path (``raw\\L000.sgy``) on a system that
    separates folders with ``/`` is taken with ``/`` when only that file exists."""
    path = base / str(name).strip()
    if "\\" in str(name) and os.sep == "/" and not path.exists():
        posix = base / str(name).strip().replace("\\", "/")
        if posix.exists():
            return posix
    return path


def table_delimiter(lines: list[str]) -> str:
    """The table's delimiter: a comma, or a semicolon or tab when the header holds one and no
    comma (spreadsheets in many locales export semicolons)."""
    first = next((line for line in lines if line.strip()), "")
    if "," not in first:
        for candidate in (";", "\t"):
            if candidate in first:
                return candidate
    return ","


_DECIMAL_COMMA = re.compile(r"\s*[-+]?\d+,\d+\s*")


def decimal_point(value):
    """``"512000,25"`` -> ``"512000.25"``; anything else as it is."""
    if isinstance(value, str) and _DECIMAL_COMMA.fullmatch(value):
        return value.replace(",", ".")
    return value


def _csv(read, reader: csv.DictReader, path: Path):
    """``read()`` (the header or the rows of ``reader``), a csv.Error naming the line."""
    try:
        return read()
    except csv.Error as exc:
        raise LineTableError(f"not a readable CSV table ({exc})",
                             where=f"{path}:{reader.reader.line_num}") from None


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
