"""The attack suite's mutation driver: deterministic broken copies of valid input files.

A :class:`Mutant` is a named recipe for what to put at a path: some bytes, a folder, or
nothing at all.  Every generator draws from a ``random.Random`` seeded by the caller, so a run
is reproducible and the number of mutants is bounded.

Generators by kind of input:

- :func:`generic_mutants`: the empty file, a folder in place of the file, a missing file;
- :func:`byte_mutants`: bit flips, random bytes, truncation at random offsets, deleted and
  repeated spans (any format);
- :func:`segy_mutants`: SEG-Y binary-header fields (sample count, interval, format code,
  revision, trace count...) and trace-header fields (coordinates, scalar, units) set to zero,
  extreme or random values, at the SEG-Y rev 1 / rev 2.0 byte positions;
- :func:`csv_mutants`: columns and rows duplicated, dropped or swapped, fields made empty,
  non-numeric, NaN, infinite, huge, quoted across lines or longer than the csv module allows;
- :func:`toml_mutants`: values replaced by other types and extreme numbers, keys dropped,
  repeated or misspelt, tables renamed;
- :func:`encoding_mutants`: the same text as latin-1 (with a non-ASCII letter), UTF-16 and
  UTF-32 with and without a byte-order mark, UTF-8 with a BOM, CRLF or CR line ends, NUL bytes.
"""

from __future__ import annotations

import csv
import io
import random
import struct
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

__all__ = ["Mutant", "byte_mutants", "csv_mutants", "encoding_mutants", "generic_mutants",
           "segy_mutants", "text_mutants", "toml_mutants"]


@dataclass(frozen=True)
class Mutant:
    """What to put at a path: ``data`` bytes (``kind="bytes"``), a folder or nothing."""

    name: str
    data: bytes = b""
    kind: str = "bytes"  # "bytes", "directory" or "missing"

    def materialise(self, path: Path) -> Path:
        """Create the mutant at ``path`` (whose folder must exist) and return ``path``."""
        if self.kind == "bytes":
            path.write_bytes(self.data)
        elif self.kind == "directory":
            path.mkdir()
            (path / "inside.txt").write_text("a folder, not a file\n")
        elif self.kind != "missing":
            raise ValueError(f"unknown mutant kind {self.kind!r}")
        return path


def generic_mutants() -> list[Mutant]:
    """What can stand where any file should: nothing, an empty file, a folder."""
    return [Mutant("empty"), Mutant("directory", kind="directory"),
            Mutant("missing", kind="missing")]


# --- bytes ------------------------------------------------------------------------------------


def byte_mutants(data: bytes, rng: random.Random, count: int, *, start: int = 0,
                 stop: int | None = None) -> Iterator[Mutant]:
    """``count`` byte-level mutants of ``data``, edited within ``data[start:stop]`` (a
    truncation may cut anywhere)."""
    stop = len(data) if stop is None else min(stop, len(data))
    for _ in range(count):
        op = rng.choice(("flip", "flips", "byte", "truncate", "truncate", "delete", "repeat",
                         "insert", "zero-span", "ff-span"))
        at = rng.randrange(start, stop) if stop > start else 0
        out = bytearray(data)
        if op == "flip":
            out[at] ^= 1 << rng.randrange(8)
        elif op == "flips":
            for _ in range(rng.randint(2, 16)):
                out[rng.randrange(start, stop)] ^= 1 << rng.randrange(8)
        elif op == "byte":
            out[at] = rng.randrange(256)
        elif op == "truncate":
            at = rng.randrange(len(data))
            out = out[:at]
        elif op == "delete":
            del out[at:at + rng.randint(1, 64)]
        elif op == "repeat":
            span = out[at:at + rng.randint(1, 64)]
            out[at:at] = span
        elif op == "insert":
            out[at:at] = bytes(rng.randrange(256) for _ in range(rng.randint(1, 16)))
        else:
            fill = 0 if op == "zero-span" else 0xFF
            n = rng.randint(1, 512)
            out[at:at + n] = bytes([fill]) * len(out[at:at + n])
        yield Mutant(f"{op}@{at}", bytes(out))


# --- SEG-Y ------------------------------------------------------------------------------------

#: Binary-header fields (1-based byte, struct code, name) with the values to try besides random
#: ones: SEG-Y rev 1 (Norris & Faichney 2002) and rev 2.0 (Hagelund & Levin 2017) positions.
SEGY_BINARY_FIELDS = (
    (3217, "h", "sample interval (us)", (0, 1, -1, 4000, 32767, -32768)),
    (3221, "H", "samples per trace", (0, 1, 2, 65535, 32768)),
    (3225, "h", "sample format code", (0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 16, 17, -1, 32767)),
    (3255, "h", "measurement system", (0, 1, 2, 3, -1)),
    (3273, "d", "extended sample interval (us)", (0.0, -1e-4, 1e-4, 1e300, float("nan"),
                                                  float("inf"), float("-inf"), 5e-324)),
    (3297, "I", "byte-order constant", (0, 0x04030201, 0x01020304, 0xFFFFFFFF)),
    (3501, "B", "revision major", (0, 1, 2, 3, 255)),
    (3503, "h", "fixed-length traces flag", (0, 1, -1)),
    (3505, "h", "extended textual headers", (0, 1, 2, -1, 32767)),
    (3507, "i", "additional trace headers", (0, 1, -1)),
    (3513, "Q", "traces in the file", (0, 1, 2, 2**64 - 1)),
)

#: Trace-header fields (1-based byte within the 240-byte trace header, code, name, values).
SEGY_TRACE_FIELDS = (
    (25, "i", "trace number within ensemble", (0, 1, -1, 2**31 - 1)),
    (71, "h", "coordinate scalar", (0, 1, -1, 10, -10, 32767, -32768)),
    (73, "i", "source X", (0, 1, -1, 2**31 - 1, -2**31)),
    (77, "i", "source Y", (0, 1, -1, 2**31 - 1, -2**31)),
    (89, "h", "coordinate units", (0, 1, 2, 3, 4, -1)),
    (115, "H", "samples in this trace", (0, 1, 65535)),
    (117, "h", "sample interval in this trace (us)", (0, -1, 32767)),
    (181, "i", "CDP X", (0, 1, -1, 2**31 - 1, -2**31)),
    (185, "i", "CDP Y", (0, 1, -1, 2**31 - 1, -2**31)),
)

_BYTES = {"h": 2, "H": 2, "i": 4, "I": 4, "Q": 8, "d": 8, "B": 1}


def _random_value(code: str, rng: random.Random):
    if code == "d":
        return rng.choice((rng.uniform(-1e3, 1e3), rng.uniform(0, 1e-2),
                           struct.unpack(">d", rng.randbytes(8))[0]))
    bits = 8 * _BYTES[code]
    if code.isupper():
        return rng.randrange(2 ** bits)
    return rng.randrange(-(2 ** (bits - 1)), 2 ** (bits - 1))


def _put(out: bytearray, offset: int, code: str, value) -> None:
    struct.pack_into(">" + code, out, offset, value)


def segy_layout(data: bytes) -> tuple[int, int]:
    """(bytes per trace including its header, number of traces) of a valid SEG-Y file."""
    n_samples = struct.unpack_from(">H", data, 3220)[0]
    code = struct.unpack_from(">h", data, 3224)[0]
    per_sample = {1: 4, 2: 4, 3: 2, 5: 4, 6: 8, 8: 1}[code]
    trace_bytes = 240 + n_samples * per_sample
    return trace_bytes, (len(data) - 3600) // trace_bytes


def segy_mutants(data: bytes, rng: random.Random, count: int) -> Iterator[Mutant]:
    """Every listed value of every header field, then ``count`` random field values.

    Trace-header values go into one random trace, or into every trace (a consistent but
    extreme file).
    """
    trace_bytes, n_traces = segy_layout(data)

    def binary(byte, code, name, value):
        out = bytearray(data)
        _put(out, byte - 1, code, value)
        return Mutant(f"bin {byte} {name} = {value!r}", bytes(out))

    def trace(byte, code, name, value, which):
        out = bytearray(data)
        traces = range(n_traces) if which == "all" else [which]
        for k in traces:
            _put(out, 3600 + k * trace_bytes + byte - 1, code, value)
        return Mutant(f"trace[{which}] {byte} {name} = {value!r}", bytes(out))

    for byte, code, name, values in SEGY_BINARY_FIELDS:
        for value in values:
            yield binary(byte, code, name, value)
    for byte, code, name, values in SEGY_TRACE_FIELDS:
        for value in values:
            yield trace(byte, code, name, value, "all")
            yield trace(byte, code, name, value, rng.randrange(n_traces))
    fields = [(f, True) for f in SEGY_BINARY_FIELDS] + [(f, False) for f in SEGY_TRACE_FIELDS]
    for _ in range(count):
        (byte, code, name, _values), is_binary = rng.choice(fields)
        value = _random_value(code, rng)
        if is_binary:
            yield binary(byte, code, name, value)
        else:
            yield trace(byte, code, name, value,
                        rng.choice(("all", rng.randrange(n_traces))))
    # A textual header that is not EBCDIC text, and a file that ends inside a trace header.
    yield Mutant("text header of NULs", bytes(3200) + data[3200:])
    yield Mutant("headers only", data[:3600])
    yield Mutant("headers and half a trace header", data[:3600 + 120])


# --- CSV --------------------------------------------------------------------------------------

#: Field texts that no numeric column should accept silently, and some that it should.
BAD_FIELDS = ("", " ", "nan", "NaN", "-nan", "inf", "-inf", "Infinity", "1e309", "-1e309",
              "1e308", "-1e308", "9" * 400, "9" * 5000, "1e-400", "abc", "0x10", "1,5",
              "1_000", "--1", "\u0661\u0662", "\uff19", "\uff11e3", "0", "-0", "1e5", "\x00",
              "\u00e9", '"', "\u2212" + "1", "NULL", "None", "true")


def _rows(text: str) -> list[list[str]]:
    return [row for row in csv.reader(io.StringIO(text))]


def _text(rows: list[list[str]]) -> str:
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    return out.getvalue()


def csv_mutants(text: str, rng: random.Random, count: int) -> Iterator[Mutant]:
    """Structural and field mutants of a headed CSV (``text`` with at least one data row)."""
    rows = _rows(text)
    width = len(rows[0])
    fixed = [
        ("header only", _text(rows[:1])),
        ("no header", _text(rows[1:])),
        ("header repeated", _text(rows[:1] + rows)),
        ("all rows repeated", _text(rows + rows[1:])),
        ("blank lines", "\n\n" + text.replace("\n", "\n\n")),
        ("trailing commas", text.replace("\n", ",\n")),
        ("spaces around fields", text.replace(",", " , ")),
        ("semicolons", text.replace(",", ";")),
        ("tabs", text.replace(",", "\t")),
        ("no final newline", text.rstrip("\n")),
        ("header upper case", _text([[h.upper() for h in rows[0]]] + rows[1:])),
        ("quoted field across lines", text.replace("\n", '\n"a\nb",', 1)),
        ("unterminated quote", text + '"never closed,1,2\n'),
        ("field longer than the csv limit", text + "x" * 200_000 + "\n"),
        ("one giant line", "," * 300_000 + "\n"),
        ("header of one empty name", "\n" + text),
        ("header of empty names", "," * (width - 1) + "\n" + _text(rows[1:])),
        ("NUL in header", "\x00" + text),
        ("multi-line header name", _text([[rows[0][0] + "\nx", *rows[0][1:]]] + rows[1:])),
        ("duplicate multi-line header name",
         _text([rows[0] + ["a\nb", "a\nb"]] + [r + ["1", "2"] for r in rows[1:]])),
        ("reversed columns", _text([r[::-1] for r in rows])),
        ("extra column", _text([rows[0] + ["note"]] + [r + ["x"] for r in rows[1:]])),
        ("short rows", _text(rows[:1] + [r[:-1] for r in rows[1:]])),
        ("long rows", _text(rows[:1] + [r + ["1", "2"] for r in rows[1:]])),
    ]
    for name, body in fixed:
        yield Mutant(name, body.encode("utf-8"))
    for c in range(width):
        yield Mutant(f"drop column {rows[0][c]}",
                     _text([r[:c] + r[c + 1:] for r in rows]).encode())
        yield Mutant(f"duplicate column {rows[0][c]}",
                     _text([r[:c + 1] + r[c:c + 1] + r[c + 1:] for r in rows]).encode())
    for _ in range(count):
        op = rng.choice(("field", "field", "field", "drop row", "duplicate row", "swap rows",
                         "swap columns", "shuffle rows", "drop column", "duplicate column",
                         "rename column"))
        out = [list(r) for r in rows]
        r = rng.randrange(1, len(out)) if len(out) > 1 else 0
        c = rng.randrange(width)
        if op == "field":
            value = rng.choice(BAD_FIELDS)
            if r < len(out) and c < len(out[r]):
                out[r][c] = value
            name = f"row {r + 1} column {rows[0][c]} = {value[:20]!r}"
        elif op == "drop row":
            del out[r]
            name = f"drop row {r + 1}"
        elif op == "duplicate row":
            out.insert(r, list(out[r]))
            name = f"duplicate row {r + 1}"
        elif op == "swap rows":
            s = rng.randrange(1, len(out)) if len(out) > 1 else 0
            out[r], out[s] = out[s], out[r]
            name = f"swap rows {r + 1},{s + 1}"
        elif op == "shuffle rows":
            body = out[1:]
            rng.shuffle(body)
            out = out[:1] + body
            name = "shuffle rows"
        elif op == "swap columns":
            d = rng.randrange(width)
            out = [[*row] for row in out]
            for row in out:
                if max(c, d) < len(row):
                    row[c], row[d] = row[d], row[c]
            name = f"swap columns {rows[0][c]},{rows[0][d]}"
        elif op == "drop column":
            out = [row[:c] + row[c + 1:] for row in out]
            name = f"drop column {rows[0][c]}"
        elif op == "duplicate column":
            out = [row[:c + 1] + row[c:c + 1] + row[c + 1:] for row in out]
            name = f"duplicate column {rows[0][c]}"
        else:
            out[0][c] = rng.choice((out[0][c] + "s", out[0][c][:-1], out[0][c].title(),
                                    " " + out[0][c] + " ", "", out[0][(c + 1) % width]))
            name = f"rename column {rows[0][c]} to {out[0][c]!r}"
        yield Mutant(name, _text(out).encode("utf-8"))


# --- TOML -------------------------------------------------------------------------------------

#: Values in TOML syntax to put in place of a key's value.
TOML_VALUES = ('""', '"abc"', '"1.5"', "0", "-1", "1", "0.0", "-0.0", "nan", "inf", "-inf",
               "1e308", "1e-320", "9" * 400, "-" + "9" * 400, "9" * 5000, "true", "false",
               "[]", "[1, 2]", "{}", "{ a = 1 }", "1979-05-27", "07:32:00", '"\\u00e9"',
               '"a\\nb"', "0x7FFFFFFFFFFFFFFF", '"EPSG:4326"', '"nowhere.csv"', '"../"', '"."')


def toml_mutants(text: str, rng: random.Random, count: int) -> Iterator[Mutant]:
    """Line-level mutants of a TOML file: values, keys and table headers."""
    lines = text.splitlines()
    assigns = [i for i, line in enumerate(lines) if "=" in line and not line.lstrip().startswith(
        ("#", "["))]
    headers = [i for i, line in enumerate(lines) if line.lstrip().startswith("[")]
    fixed = [
        ("first line only", lines[:1]),
        ("table headers only", [lines[i] for i in headers] or ["[x]"]),
        ("keys doubled", lines + [lines[i] for i in assigns]),
        ("unclosed string", lines + ['note = "never closed']),
        ("unclosed array", lines + ["extra = [1, 2"]),
        ("bare words", ["this is not toml"] + lines),
        ("whole file as one table", ["[survey]"] + lines),
    ]
    for name, body in fixed:
        yield Mutant(name, ("\n".join(body) + "\n").encode("utf-8"))
    for i in assigns:
        key = lines[i].split("=", 1)[0].strip()
        for name, body in (
                (f"drop {key}", lines[:i] + lines[i + 1:]),
                (f"repeat {key}", lines[:i + 1] + lines[i:]),
                (f"misspell {key}", lines[:i] + [lines[i].replace(key, key + "x", 1)]
                 + lines[i + 1:])):
            yield Mutant(f"line {i + 1}: {name}", ("\n".join(body) + "\n").encode("utf-8"))
    for i in headers:
        renamed = lines[:i] + [lines[i].replace("[[", "[").replace("]]", "]")] + lines[i + 1:]
        yield Mutant(f"line {i + 1}: table array as one table",
                     ("\n".join(renamed) + "\n").encode("utf-8"))
    for _ in range(count):
        out = list(lines)
        if assigns and rng.random() < 0.85:
            i = rng.choice(assigns)
            key = out[i].split("=", 1)[0]
            value = rng.choice(TOML_VALUES)
            out[i] = f"{key}= {value}"
            name = f"line {i + 1}: {key.strip()} = {value[:20]}"
        else:
            i = rng.randrange(len(out) + 1)
            junk = rng.choice(('extra = 1', '[[layer]]', '[[point]]', '[[line]]', '[[block]]',
                               'kind = "constant"', '[table]', '= 1', 'a.b.c = 1'))
            out.insert(i, junk)
            name = f"insert {junk!r} at line {i + 1}"
        yield Mutant(name, ("\n".join(out) + "\n").encode("utf-8"))


# --- text encodings ---------------------------------------------------------------------------


def encoding_mutants(text: str) -> Iterator[Mutant]:
    """``text`` in encodings and line ends other than plain UTF-8 with LF."""
    accented = text.replace("a", "\u00e4", 1)
    yield Mutant("latin-1 with a non-ASCII letter", accented.encode("latin-1"))
    yield Mutant("utf-16 with BOM", text.encode("utf-16"))
    yield Mutant("utf-16-le without BOM", text.encode("utf-16-le"))
    yield Mutant("utf-16-be without BOM", text.encode("utf-16-be"))
    yield Mutant("utf-32 with BOM", text.encode("utf-32"))
    yield Mutant("utf-8 with BOM", text.encode("utf-8-sig"))
    yield Mutant("utf-8 with two BOMs", ("\ufeff" + text).encode("utf-8-sig"))
    yield Mutant("CRLF line ends", text.replace("\n", "\r\n").encode())
    yield Mutant("CR line ends", text.replace("\n", "\r").encode())
    yield Mutant("NUL bytes between lines", text.replace("\n", "\n\x00").encode())
    yield Mutant("lone surrogate bytes", text.encode() + b"\xed\xa0\x80\n")
    yield Mutant("invalid UTF-8 byte", b"\xff" + text.encode())


def text_mutants(text: str, rng: random.Random, count: int) -> list[Mutant]:
    """Generic, encoding and byte mutants of a text file, ``count`` of the random ones."""
    data = text.encode("utf-8")
    return [*generic_mutants(), *encoding_mutants(text), *byte_mutants(data, rng, count)]
