"""SEG-Y radar lines: reading (one line at a time) and writing, through segyio.

Byte positions below are 1-based, as the standards print them: SEG-Y rev 1 (Norris & Faichney
eds., 2002) and rev 2.0 (Hagelund & Levin eds., 2017).  Files are big-endian as the standard
says, or little-endian as some recorders write them (rev 2's byte-order constant at bytes
3297-3300, or a sample format code that only reads as one little-endian); files are always
opened with ``ignore_geometry=True`` because a radar line has no inline/crossline geometry.

Sample interval convention (DEVELOPERS.md, "SEG-Y sample interval"): the integer microsecond
field (bytes 3217-3218) cannot hold a radar interval (tenths of a nanosecond), so it is never
used; only the rev 2 extended interval (bytes 3273-3280, IEEE double, microseconds) is trusted,
when the revision (byte 3501) is at least 2 and the value lies in the radar range.
"""

from __future__ import annotations

import contextlib
import os
import struct
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import segyio

from slicer.core.atomic import atomic_path, data_first, refuse_existing
from slicer.core.conventions import TRACE, TWT
from slicer.core.errors import InputFileError, OutputError, SettingsError, warn
from slicer.io.lines import (
    PLAUSIBLE_INTERVAL_NS,
    LineInfo,
    _check_file,
    _check_line,
    _choose_interval,
    _line_interval,
    _line_xy,
    _make_line,
    _plausible_interval,
    _zero_nonfinite,
)

if TYPE_CHECKING:  # hints only (see slicer.io.reading)
    import xarray as xr

_TEXT_BYTES = 3200
_HEADERS_BYTES = 3600  # textual + binary header
_TRACE_HEADER_BYTES = 240

#: Sample format codes segyio decodes: code -> (LineInfo.format name, bytes per sample).
_FORMATS = {
    1: ("segy-ibm", 4), 2: ("segy-int4", 4), 3: ("segy-int2", 2), 5: ("segy-ieee", 4),
    6: ("segy-ieee8", 8), 8: ("segy-int1", 1), 9: ("segy-int8", 8), 10: ("segy-uint4", 4),
    11: ("segy-uint2", 2), 12: ("segy-uint8", 8), 16: ("segy-uint1", 1),
}
#: Codes the writer produces: IBM float, int32, int16, IEEE float.
_WRITE_FORMATS = {1: None, 2: np.int32, 3: np.int16, 5: None}

#: Rev 2.0 byte-order constant 0x01020304 (bytes 3297-3300) as a little-endian writer stores it.
_LITTLE_ENDIAN_MARK = b"\x04\x03\x02\x01"
#: International foot, for binary headers stating measurement system 2 (feet).
_FOOT_M = 0.3048

_SEGYIO_ERRORS = (RuntimeError, OSError, ValueError, IndexError, KeyError)


@dataclass(frozen=True)
class _Layout:
    """What the 3600 header bytes and the file size say about a SEG-Y file."""

    format_code: int
    n_samples: int
    n_traces: int
    revision: int
    interval_ns: float | None
    little: bool = False  #: little-endian headers and samples


def _field(head: bytes, byte: int, code: str, little: bool = False) -> int | float:
    """A binary header field at 1-based ``byte`` (big-endian unless ``little``)."""
    return struct.unpack_from(("<" if little else ">") + code, head, byte - 1)[0]


def _little_endian(head: bytes) -> bool:
    """Whether the headers are little-endian: rev 2's byte-order constant says so, or the
    sample format code (bytes 3225-3226) is a known one only when read little-endian."""
    if head[3500] >= 2 and head[3296:3300] == _LITTLE_ENDIAN_MARK:
        return True
    return _field(head, 3225, "h") not in _FORMATS and _field(head, 3225, "h", True) in _FORMATS


def _inspect(path: Path) -> _Layout:
    """Check a SEG-Y file's headers and size arithmetic without segyio, which is lenient."""
    size = _check_file(path)
    if size < _HEADERS_BYTES:
        raise InputFileError(f"file is {size} bytes, shorter than the {_HEADERS_BYTES}-byte "
                             "SEG-Y textual and binary headers", where=str(path))
    try:
        with open(path, "rb") as fh:
            head = fh.read(_HEADERS_BYTES)
    except OSError as exc:
        raise InputFileError(f"cannot read the file ({exc.strerror})", where=str(path)) from None
    revision = head[3500]
    little = _little_endian(head)
    code = _field(head, 3225, "h", little)
    if code not in _FORMATS:
        order = (" read little-endian, as the byte-order constant (bytes 3297-3300) says,"
                 if little else "")
        raise InputFileError(f"not a readable SEG-Y file: sample format code {code} (binary "
                             f"header bytes 3225-3226{order}) is not one of "
                             f"{sorted(_FORMATS)}", where=str(path))
    fmt_name, bytes_per_sample = _FORMATS[code]
    n_samples = _field(head, 3221, "H", little)
    if n_samples == 0:
        raise InputFileError("binary header states 0 samples per trace (bytes 3221-3222)",
                             where=str(path))
    n_ext = _field(head, 3505, "h", little)
    if n_ext < 0:
        raise InputFileError("a variable number of extended textual headers is not supported",
                             where=str(path))
    if revision >= 2 and _field(head, 3507, "i", little) != 0:
        raise InputFileError("additional trace headers (bytes 3507-3510) are not supported",
                             where=str(path))
    trace0 = _HEADERS_BYTES + _TEXT_BYTES * n_ext
    trace_bytes = _TRACE_HEADER_BYTES + n_samples * bytes_per_sample
    data_bytes = size - trace0
    if data_bytes < 0:
        raise InputFileError(f"file is {size} bytes, shorter than its headers ({n_ext} extended "
                             "textual headers promised)", where=str(path))
    if data_bytes == 0:
        raise InputFileError("file holds no traces", where=str(path))
    if data_bytes % trace_bytes:
        raise InputFileError(f"truncated or not SEG-Y: {data_bytes} bytes of trace data is not "
                             f"a whole number of {trace_bytes}-byte traces ({n_samples} samples, "
                             f"{fmt_name})", where=str(path))
    n_traces = data_bytes // trace_bytes
    promised = _field(head, 3513, "Q", little) if revision >= 2 else 0
    if promised and promised != n_traces:
        raise InputFileError(f"truncated or inconsistent: binary header states {promised} "
                             f"traces (bytes 3513-3520), the file holds {n_traces}",
                             where=str(path))
    interval_ns = None
    if revision >= 2:
        # 12 significant digits drop the noise of the us -> ns conversion (0.1 ns stays 0.1).
        interval_ns = float(f"{_field(head, 3273, 'd', little) * 1000.0:.12g}")
    return _Layout(code, n_samples, n_traces, revision,
                   interval_ns if _plausible_interval(interval_ns) else None, little)


@contextlib.contextmanager
def _segyio_file(path: Path, layout: _Layout) -> Iterator[segyio.SegyFile]:
    """Open with segyio, turning its exceptions into InputFileError."""
    try:
        with segyio.open(str(path), "r", ignore_geometry=True,
                         endian="little" if layout.little else "big") as f:
            # memory-mapped reads: the samples and header fields are copied straight out of
            # the page cache instead of one read() call per trace (segyio falls back to plain
            # reads where mapping fails, and says so with False)
            f.mmap()
            if f.tracecount != layout.n_traces or len(f.samples) != layout.n_samples:
                raise InputFileError(f"segyio sees {f.tracecount} traces of {len(f.samples)} "
                                     f"samples, the headers {layout.n_traces} of "
                                     f"{layout.n_samples}", where=str(path))
            yield f
    except _SEGYIO_ERRORS as exc:
        raise InputFileError(f"segyio cannot read the file ({exc})", where=str(path)) from None


def segy_line_info(path: str | os.PathLike) -> LineInfo:
    """Describe a SEG-Y line from its headers only (no samples are read).

    Parameters
    ----------
    path : path-like
        The SEG-Y file.

    Returns
    -------
    LineInfo
        ``sample_interval_ns`` is the rev 2 extended interval (ns) when plausible, else None.

    Raises
    ------
    InputFileError
        A missing, empty, truncated or malformed file.
    """
    path = Path(path)
    layout = _inspect(path)
    with _segyio_file(path, layout):
        pass
    return LineInfo(path=path, n_traces=layout.n_traces, n_samples=layout.n_samples,
                    sample_interval_ns=layout.interval_ns,
                    format=_FORMATS[layout.format_code][0])


def read_segy_line(path: str | os.PathLike, *, sample_interval_ns: float | None = None,
                   name: str | None = None, coordinates: bool = True) -> xr.DataArray:
    """Read one SEG-Y radar line into the Line data model (see DEVELOPERS.md).

    Trace positions are left to the survey: ``x``, ``y`` and ``distance`` are not set, but
    coordinates found in the trace headers come as ``header_x`` / ``header_y``.

    Parameters
    ----------
    path : path-like
        The SEG-Y file.
    sample_interval_ns : float, optional
        Sample interval, ns. Wins over the header's (warning if they differ by more than 0.1 %);
        required when the header holds no usable rev 2 interval.
    name : str, optional
        The line name; the file stem by default.
    coordinates : bool
        Read the trace-header coordinates. False skips that pass over every trace header
        (half the reading time of a line placed from its table, which needs none of them).

    Returns
    -------
    xarray.DataArray
        ``amplitude``, dims ``(trace, twt)``, float32; ``twt`` (ns) starts at 0 at the first
        sample. ``header_x`` / ``header_y`` (float64, m) are taken from CDP X/Y (bytes 181-188)
        or, if those are all zero, source X/Y (bytes 73-80), scaled by bytes 71-72 (only with
        ``coordinates``).

    Raises
    ------
    InputFileError
        A missing, empty, truncated or malformed file.
    SettingsError
        No usable interval in the header and none given (``where="--sample-interval"``).
    """
    path = Path(path)
    data, interval, header_xy = _read(path, sample_interval_ns, coordinates=coordinates)
    return _make_line(data, interval_ns=interval, path=path, name=name, header_xy=header_xy)


def read_segy_samples(path: str | os.PathLike, *, sample_interval_ns: float | None = None
                      ) -> tuple[np.ndarray, float]:
    """The samples of a SEG-Y line and its sample interval (ns), as :func:`read_segy_line`
    reads them (same checks, non-finite samples set to 0), without building the DataArray:
    ``(traces, samples)`` float32. For a build's line tasks (:mod:`slicer.geometry.survey`).
    """
    data, interval, _ = _read(Path(path), sample_interval_ns, coordinates=False)
    return data, interval


def _read(path: Path, sample_interval_ns: float | None, *, coordinates: bool):
    layout = _inspect(path)
    interval = _choose_interval(path, layout.interval_ns, sample_interval_ns,
                                "the SEG-Y header")
    with _segyio_file(path, layout) as f:
        data = np.asarray(f.trace.raw[:], dtype=np.float32).reshape(layout.n_traces,
                                                                    layout.n_samples)
        header_xy = _header_coordinates(f, path) if coordinates else None
    return _zero_nonfinite(data, path), interval, header_xy


def segy_header_positions(path: str | os.PathLike) -> tuple[np.ndarray, np.ndarray] | None:
    """Scaled trace-header coordinates (m) of every trace, reading no samples (or None)."""
    path = Path(path)
    layout = _inspect(path)
    with _segyio_file(path, layout) as f:
        return _header_coordinates(f, path)


def _header_coordinates(f: segyio.SegyFile,
                        path: Path) -> tuple[np.ndarray, np.ndarray] | None:
    """Scaled per-trace coordinates from the trace headers (m), or None if all are zero."""
    def column(field: int) -> np.ndarray:
        return np.asarray(f.attributes(field)[:], dtype=np.float64)

    x, y = column(segyio.TraceField.CDP_X), column(segyio.TraceField.CDP_Y)
    if not (x.any() or y.any()):
        x, y = column(segyio.TraceField.SourceX), column(segyio.TraceField.SourceY)
        if not (x.any() or y.any()):
            return None
    units = column(segyio.TraceField.CoordinateUnits)
    if np.any((units != 0) & (units != 1)):
        warn(f"{path}: trace headers hold coordinates that are not lengths (coordinate units, "
             "bytes 89-90, other than 1); they are ignored")
        return None
    # Rev 1: a positive scalar multiplies, a negative one divides; rev 2: 0 means 1.  Divide
    # rather than multiply by 1/|s| so 51234567 / 100 gives the nearest double to 512345.67.
    scalar = column(segyio.TraceField.SourceGroupScalar)
    multiplier = np.where(scalar > 0, scalar, 1.0)
    divisor = np.where(scalar < 0, -scalar, 1.0)
    x, y = x * multiplier / divisor, y * multiplier / divisor
    if f.bin[segyio.BinField.MeasurementSystem] == 2:
        warn(f"{path}: binary header states coordinates in feet (bytes 3255-3256); converted "
             "to metres with the international foot (0.3048 m)")
        x, y = x * _FOOT_M, y * _FOOT_M
    return x, y


def write_segy_line(line: xr.DataArray, path: str | os.PathLike, *, format_code: int = 5,
                    coordinate_scalar: int = -100, overwrite: bool = False) -> Path:
    """Write a line as SEG-Y rev 2.0, atomically.

    The sample interval goes into the rev 2 extended interval (bytes 3273-3280, microseconds);
    the integer field 3217-3218 is 0.  Per-trace ``x`` / ``y`` (or, for a line not yet placed,
    ``header_x`` / ``header_y``) go into the source, group and CDP X/Y fields.  Only samples
    are stored: ``twt`` restarts at 0 when read back, and processing attributes are dropped.
    A per-trace integer ``channel`` coordinate (a multi-channel swath) goes into the trace
    number within the ensemble (bytes 25-28).

    Parameters
    ----------
    line : xarray.DataArray
        A Line, dims ``(trace, twt)``; the interval is ``attrs["sample_interval_ns"]`` (ns) or
        else the ``twt`` spacing.
    path : path-like
        The output file (``.sgy``).
    format_code : {1, 2, 3, 5}
        Sample format: 1 IBM float, 2 int32, 3 int16, 5 IEEE float. The integer formats scale
        the largest absolute amplitude to the top of the integer range and keep no record of
        the scale (meant for tests of readers).
    coordinate_scalar : int
        SEG-Y coordinate scalar (bytes 71-72): negative divides, positive multiplies. -100
        (centimetres) keeps UTM northings within the 32-bit fields; -1000 would overflow them.
    overwrite : bool
        Replace an existing file of that name; without it the file is refused (OutputError)
        and left as it was.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    SettingsError
        Unsupported ``format_code`` or ``coordinate_scalar``; a path given first (the order
        before 2026-12-04: the line comes first, as in every writer).
    OutputError
        A line that cannot be stored: wrong dims, empty, no interval, non-finite coordinates,
        coordinates overflowing 32 bits, or non-finite amplitudes in an integer format.
    """
    data_first(line, path, "write_segy_line", "line")
    path = refuse_existing(path, overwrite=overwrite)
    where = str(path)
    if format_code not in _WRITE_FORMATS:
        raise SettingsError(f"SEG-Y format code must be one of {sorted(_WRITE_FORMATS)}, got "
                            f"{format_code!r}", where="format_code")
    if (isinstance(coordinate_scalar, bool) or not isinstance(coordinate_scalar, int | np.integer)
            or coordinate_scalar == 0 or not -32768 <= coordinate_scalar <= 32767):
        raise SettingsError(f"coordinate scalar must be a non-zero 16-bit integer, got "
                            f"{coordinate_scalar!r}", where="coordinate_scalar")
    _check_line(line, where)
    line = line.transpose(TRACE, TWT)
    interval_ns = _line_interval(line, where)
    if not _plausible_interval(interval_ns):
        warn(f"{path}: sample interval {interval_ns:g} ns is outside the radar range "
             f"{PLAUSIBLE_INTERVAL_NS[0]:g}-{PLAUSIBLE_INTERVAL_NS[1]:g} ns; slicer's reader "
             "will not trust it and will ask for --sample-interval")
    samples = _encode_samples(np.asarray(line.values, dtype=np.float32), format_code, where)
    n_traces, n_samples = samples.shape
    if n_samples > np.iinfo(np.uint16).max:
        raise OutputError(f"{n_samples} samples per trace exceed the binary header field "
                          "(65535)", where=where)
    xy = _line_xy(line)
    stored_xy = None if xy is None else _encode_coordinates(xy, int(coordinate_scalar), where)

    spec = segyio.spec()
    spec.format = format_code
    spec.tracecount = n_traces
    # Any spacing: segyio stores int(microseconds), which is 0 for every radar interval, and the
    # real interval is patched in afterwards.
    spec.samples = np.zeros(n_samples)
    with atomic_path(path, overwrite=overwrite) as tmp:
        with segyio.create(str(tmp), spec) as f:
            f.text[0] = _text_header(line, interval_ns, n_traces, n_samples)
            # One trace per ensemble (each trace its own CDP); no auxiliary traces.
            f.bin.update({segyio.BinField.Traces: 1, segyio.BinField.AuxTraces: 0,
                          segyio.BinField.MeasurementSystem: 1})
            f.trace = samples
            channels = _channel_numbers(line, where)
            for i in range(n_traces):
                f.header[i] = _trace_header(i, n_samples, coordinate_scalar, stored_xy)
                if channels is not None:  # a swath: ensemble = scan, trace in it = channel
                    f.header[i].update({segyio.TraceField.CDP_TRACE: int(channels[i])})
        _patch_binary_header(tmp, interval_ns, n_traces)
    return path


def _channel_numbers(line: xr.DataArray, where: str) -> np.ndarray | None:
    """Per-trace channel numbers of a swath (``channel`` coordinate, integers >= 1), or None."""
    if "channel" not in line.coords or line["channel"].dims != (TRACE,):
        return None
    numbers = np.asarray(line["channel"].values)
    if not np.issubdtype(numbers.dtype, np.integer) or numbers.min() < 1:
        raise OutputError("per-trace channel numbers must be integers >= 1 (SEG-Y bytes 25-28)",
                          where=where)
    return numbers


def segy_ensemble_numbers(path: str | os.PathLike) -> np.ndarray:
    """Trace number within the ensemble of every trace (bytes 25-28), reading no samples."""
    path = Path(path)
    layout = _inspect(path)
    with _segyio_file(path, layout) as f:
        return np.asarray(f.attributes(segyio.TraceField.CDP_TRACE)[:], dtype=np.int64)


def _encode_samples(samples: np.ndarray, format_code: int, where: str) -> np.ndarray:
    """Float32 samples as the array segyio writes for ``format_code``."""
    dtype = _WRITE_FORMATS[format_code]
    if dtype is None:
        return samples
    if not np.isfinite(samples).all():
        raise OutputError("NaN or infinite amplitudes cannot be stored as integers",
                          where=where)
    top = np.iinfo(dtype).max
    peak = float(np.abs(samples).max())
    scale = top / peak if peak > 0 else 1.0
    return np.clip(np.rint(samples.astype(np.float64) * scale), -top, top).astype(dtype)


def _encode_coordinates(xy: tuple[np.ndarray, np.ndarray], scalar: int,
                        where: str) -> tuple[np.ndarray, np.ndarray]:
    """Metres to the integers stored with ``scalar`` (SEG-Y rev 1 scalar semantics)."""
    out = []
    limit = np.iinfo(np.int32).max
    for values in xy:
        if not np.isfinite(values).all():
            raise OutputError("NaN or infinite trace coordinates cannot be stored in SEG-Y",
                              where=where)
        stored = np.rint(values * -scalar if scalar < 0 else values / scalar)
        if stored.size and np.abs(stored).max() > limit:
            raise OutputError(f"coordinates up to {np.abs(values).max():.3f} m overflow the "
                              f"32-bit SEG-Y fields with coordinate scalar {scalar}",
                              where=where)
        out.append(stored.astype(np.int32))
    return out[0], out[1]


def _trace_header(i: int, n_samples: int, scalar: int,
                  stored_xy: tuple[np.ndarray, np.ndarray] | None) -> dict:
    tf = segyio.TraceField
    header = {tf.TRACE_SEQUENCE_LINE: i + 1, tf.TRACE_SEQUENCE_FILE: i + 1, tf.CDP: i + 1,
              tf.TraceIdentificationCode: 1, tf.TRACE_SAMPLE_COUNT: n_samples,
              tf.TRACE_SAMPLE_INTERVAL: 0, tf.SourceGroupScalar: scalar,
              tf.CoordinateUnits: 1}
    if stored_xy is not None:
        x, y = int(stored_xy[0][i]), int(stored_xy[1][i])
        header.update({tf.SourceX: x, tf.SourceY: y, tf.GroupX: x, tf.GroupY: y,
                       tf.CDP_X: x, tf.CDP_Y: y})
    return header


def _text_header(line: xr.DataArray, interval_ns: float, n_traces: int, n_samples: int) -> str:
    name = str(line.attrs.get("line", "")).encode("ascii", "replace").decode("ascii")
    rows = {
        1: f"RADAR LINE {name}",
        2: f"TRACES {n_traces}  SAMPLES PER TRACE {n_samples}  SAMPLE INTERVAL {interval_ns:g} NS",
        3: "SAMPLE INTERVAL: REV 2 EXTENDED FIELD, BINARY HEADER BYTES 3273-3280 (US)",
        4: "BYTES 3217-3218 ARE 0: A RADAR INTERVAL IS NOT A WHOLE NUMBER OF US",
        5: "COORDINATES: SOURCE, GROUP AND CDP X/Y IN METRES, SCALAR IN BYTES 71-72",
        39: "SEG-Y_REV2.0",
        40: "END TEXTUAL HEADER",
    }
    return segyio.tools.create_text_header({k: v[:76] for k, v in rows.items()})


def _patch_binary_header(path: Path, interval_ns: float, n_traces: int) -> None:
    """Write the rev 2.0 binary header fields segyio has no names for (big-endian)."""
    interval_us = interval_ns / 1000.0
    fields = (
        # The integer interval is 0, not a rounded value: a radar interval is far below 1 us,
        # and a reader must not mistake any integer here (or segyio's 4000 us fallback for a
        # 0) for the interval; the extended field below carries it.
        (3217, "h", 0), (3219, "h", 0),
        (3273, "d", interval_us), (3281, "d", interval_us),  # extended interval, original
        (3297, "I", 0x01020304),  # byte-order constant: big-endian
        (3501, "B", 2), (3502, "B", 0),  # revision 2.0
        (3503, "h", 1),  # fixed-length traces
        (3513, "Q", n_traces),  # traces in the file: lets a reader detect truncation
    )
    with open(path, "r+b") as fh:
        for byte, code, value in fields:
            fh.seek(byte - 1)
            fh.write(struct.pack(">" + code, value))
