"""The project's own radar line format: one NetCDF-4 file (h5netcdf) per line.

Layout (format version 1):

- variable ``amplitude`` (trace, twt), float32, with ``units``;
- coordinate ``twt`` (twt), float64, ``units = "ns"``, evenly spaced;
- optional per-trace ``x``, ``y`` (trace), float64, metres;
- global attributes ``slicer_line_format = 1``, ``sample_interval_ns``, ``line``, and
  ``time_zero_ns`` / ``history`` so a processed line reads back as it was written.

Unlike SEG-Y, the ``twt`` values themselves are stored, so a line whose time zero has been
corrected keeps its time axis.  Stored ``x``/``y`` come back as ``header_x``/``header_y``: the
survey, not the file, decides where traces lie.
"""

from __future__ import annotations

import contextlib
import math
import os
import struct
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr

from slicer.core.atomic import atomic_path, data_first, refuse_existing
from slicer.core.conventions import TRACE, TWT, UNITS
from slicer.core.errors import InputFileError
from slicer.io.lines import (
    AMPLITUDE_UNITS,
    LineInfo,
    _check_file,
    _check_line,
    _choose_interval,
    _line_interval,
    _line_xy,
    _make_line,
    _zero_nonfinite,
)

#: Version written to (and accepted from) the ``slicer_line_format`` global attribute.
LINE_FORMAT_VERSION = 1
_ENGINE = "h5netcdf"
_NS_UNITS = ("ns", "nanosecond", "nanoseconds")
#: Relative tolerance on the evenness of ``twt`` and on agreement with the interval attribute.
_SPACING_RTOL = 1e-6
_ATTR_RTOL = 1e-3
#: h5py / h5netcdf / xarray failures on a file that is not (valid) NetCDF-4.
_NETCDF_ERRORS = (OSError, ValueError, KeyError, RuntimeError, TypeError, IndexError,
                  OverflowError, struct.error)  # the last three: damaged classic files (SciPy)


def write_line_netcdf(line: xr.DataArray, path: str | os.PathLike, *,
                      overwrite: bool = False) -> Path:
    """Write a line as a slicer NetCDF line file, atomically.

    Parameters
    ----------
    line : xarray.DataArray
        A Line, dims ``(trace, twt)``; ``twt`` in ns. Per-trace ``x``/``y`` (or, for a line
        not yet placed, ``header_x``/``header_y``) are stored as ``x``/``y`` (m).
    path : path-like
        The output file (``.nc``).
    overwrite : bool
        Replace an existing file of that name; without it the file is refused (OutputError)
        and left as it was.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    OutputError
        A line with wrong dims, no samples or no sample interval; an existing ``path``
        without ``overwrite``.
    SettingsError
        A path given first (the order before 2026-12-04: the line comes first, as in every
        writer).
    """
    data_first(line, path, "write_line_netcdf", "line")
    path = refuse_existing(path, overwrite=overwrite)
    where = str(path)
    _check_line(line, where)
    line = line.transpose(TRACE, TWT)
    interval_ns = _line_interval(line, where)
    twt = (np.asarray(line[TWT].values, dtype=np.float64) if TWT in line.coords
           else interval_ns * np.arange(line.sizes[TWT], dtype=np.float64))
    coords = {TWT: (TWT, twt, {"units": UNITS[TWT], "long_name": "two-way travel time"})}
    xy = _line_xy(line)
    if xy is not None:
        for key, values in zip(("x", "y"), xy, strict=True):
            coords[key] = (TRACE, values, {"units": UNITS[key]})
    # Built from plain arrays so that no encoding inherited from a file the line was read from
    # (chunk sizes, original shape, source) reaches the writer.
    ds = xr.Dataset(
        {"amplitude": ((TRACE, TWT), np.asarray(line.values, dtype=np.float32),
                       {"units": line.attrs.get("units", AMPLITUDE_UNITS),
                        "long_name": "radar amplitude"})},
        coords=coords,
        attrs={"slicer_line_format": LINE_FORMAT_VERSION, "sample_interval_ns": interval_ns,
               "line": str(line.attrs.get("line", path.stem)),
               "time_zero_ns": float(line.attrs.get("time_zero_ns", 0.0)),
               "history": str(line.attrs.get("history", ""))},
    )
    # Merge, never replace, a variable's encoding (stack-notes trap 6).
    encoding = {"amplitude": {**ds["amplitude"].encoding, "zlib": True, "complevel": 4,
                              "dtype": "float32"}}
    with atomic_path(path, overwrite=overwrite) as tmp:
        ds.to_netcdf(tmp, engine=_ENGINE, encoding=encoding)
    return path


@dataclass(frozen=True)
class _Contents:
    """The validated parts of a line file, before its samples are loaded."""

    amplitude: xr.DataArray
    twt_ns: np.ndarray | None
    interval_ns: float | None
    xy: tuple[np.ndarray, np.ndarray] | None


@contextlib.contextmanager
def _open(path: Path) -> Iterator[xr.Dataset]:
    """Open a line file, turning the NetCDF stack's exceptions into InputFileError."""
    _check_file(path)
    classic = _netcdf3(path)
    if not classic:
        _check_hdf5(path)
    try:
        # No CF time decoding: "ns" units on twt must stay plain float64 nanoseconds.
        with xr.open_dataset(path, engine="scipy" if classic else _ENGINE, decode_times=False,
                             decode_timedelta=False) as ds:
            yield ds
    except _NETCDF_ERRORS as exc:
        kind = "NetCDF-3" if classic else "NetCDF-4"
        raise InputFileError(f"not a readable {kind} line file ({exc})",
                             where=str(path)) from None


def _netcdf3(path: Path) -> bool:
    """Whether the file is classic NetCDF (format 1 or 2, 64-bit offsets: magic ``CDF\\x01``
    or ``CDF\\x02``), which SciPy's reader opens; xarray writes it where netCDF4 is
    missing."""
    try:
        with open(path, "rb") as fh:
            return fh.read(4) in (b"CDF\x01", b"CDF\x02")
    except OSError:
        return False


def _check_hdf5(path: Path) -> None:
    """Open the file with h5py alone and read what h5netcdf reads first (the root attribute
    ``_nc3_strict``): when that fails, h5netcdf's half-built File prints an ignored
    AttributeError traceback from its destructor, on stderr, past the InputFileError."""
    import h5py

    try:
        with h5py.File(path, "r") as f:
            f.attrs.get("_nc3_strict")
    except _NETCDF_ERRORS as exc:
        raise InputFileError(f"not a readable NetCDF-4 line file ({exc})",
                             where=str(path)) from None


def _contents(ds: xr.Dataset, path: Path) -> _Contents:
    """Check a line file's structure (no samples loaded) and return what it holds."""
    def bad(message: str) -> InputFileError:
        return InputFileError(message, where=str(path))

    version = ds.attrs.get("slicer_line_format", LINE_FORMAT_VERSION)
    if version != LINE_FORMAT_VERSION:
        raise bad(f"line format version {version!r} is not supported (this slicer reads "
                  f"{LINE_FORMAT_VERSION})")
    if "amplitude" not in ds.data_vars:
        raise bad("no 'amplitude' variable (not a slicer line file)")
    amp = ds["amplitude"]
    if set(amp.dims) != {TRACE, TWT} or amp.ndim != 2:
        raise bad(f"'amplitude' must have dims (trace, twt), not {amp.dims}")
    amp = amp.transpose(TRACE, TWT)
    if amp.sizes[TRACE] == 0 or amp.sizes[TWT] == 0:
        raise bad(f"the line holds no samples ({amp.sizes[TRACE]} traces of "
                  f"{amp.sizes[TWT]} samples)")

    twt, spacing = None, None
    if TWT in ds.variables:
        twt, spacing = _twt_spacing(ds[TWT], bad)
    attr = ds.attrs.get("sample_interval_ns")
    if attr is not None:
        try:
            attr = float(attr)
        except (TypeError, ValueError):
            raise bad(f"sample_interval_ns attribute {attr!r} is not a number") from None
        if not (math.isfinite(attr) and attr > 0):
            raise bad(f"sample_interval_ns attribute {attr!r} is not a positive number")
        if spacing is not None and abs(attr - spacing) > _ATTR_RTOL * spacing:
            raise bad(f"sample_interval_ns attribute {attr:g} ns disagrees with the twt "
                      f"spacing {spacing:g} ns")
    # The attribute, when consistent, is the exact value written; the spacing carries rounding.
    interval = attr if attr is not None else spacing

    xy = None
    if "x" in ds.variables or "y" in ds.variables:
        for key in ("x", "y"):
            if key not in ds.variables or ds[key].dims != (TRACE,):
                raise bad("per-trace 'x' and 'y' must both be present, with dim (trace,)")
        xy = (np.asarray(ds["x"].values, dtype=np.float64),
              np.asarray(ds["y"].values, dtype=np.float64))
    return _Contents(amp, twt, interval, xy)


def _twt_spacing(twt: xr.DataArray, bad) -> tuple[np.ndarray, float | None]:
    """Values and even spacing (ns, None for one sample) of a stored twt coordinate."""
    if twt.dims != (TWT,):
        raise bad(f"twt must have the single dim (twt,), not {twt.dims}")
    units = twt.attrs.get("units", "ns")
    if units not in _NS_UNITS:
        raise bad(f"twt units must be ns, not {units!r}")
    values = np.asarray(twt.values, dtype=np.float64)
    if not np.isfinite(values).all():
        raise bad("twt holds NaN or infinite values")
    if values.size < 2:
        return values, None
    step = (values[-1] - values[0]) / (values.size - 1)
    # times stored in float32 round to 6e-8 of their size: 0.1 ns steps to 40 ns vary by 5e-6
    rounding = 4 * np.finfo(twt.dtype).eps * np.abs(values).max() \
        if np.issubdtype(twt.dtype, np.floating) else 0.0
    if not step > 0 or np.abs(np.diff(values) - step).max() > max(_SPACING_RTOL * step,
                                                                   rounding):
        raise bad("twt is not evenly spaced and increasing")
    if rounding > _SPACING_RTOL * step:  # the even times the rounded ones stand for
        values = values[0] + step * np.arange(values.size)
    return values, float(step)


def netcdf_line_info(path: str | os.PathLike) -> LineInfo:
    """Describe a slicer NetCDF line file from its metadata (samples are not read).

    Parameters
    ----------
    path : path-like
        The ``.nc`` line file.

    Returns
    -------
    LineInfo
        ``format`` is ``"netcdf"``; ``sample_interval_ns`` from the twt spacing or attribute.

    Raises
    ------
    InputFileError
        A missing, empty, malformed or inconsistent file.
    """
    path = Path(path)
    with _open(path) as ds:
        found = _contents(ds, path)
    return LineInfo(path=path, n_traces=found.amplitude.sizes[TRACE],
                    n_samples=found.amplitude.sizes[TWT], sample_interval_ns=found.interval_ns,
                    format="netcdf",
                    first_sample_ns=0.0 if found.twt_ns is None else float(found.twt_ns[0]))


def netcdf_header_positions(path: str | os.PathLike) -> tuple[np.ndarray, np.ndarray] | None:
    """The stored per-trace ``x``, ``y`` (m) of a line file, reading no samples (or None)."""
    path = Path(path)
    with _open(path) as ds:
        found = _contents(ds, path)
        return None if found.xy is None else tuple(np.asarray(v, dtype=float)
                                                   for v in found.xy)


def read_line_netcdf(path: str | os.PathLike, *, sample_interval_ns: float | None = None,
                     name: str | None = None, coordinates: bool = True) -> xr.DataArray:
    """Read a slicer NetCDF line file into the Line data model (see DEVELOPERS.md).

    Parameters
    ----------
    path : path-like
        The ``.nc`` line file.
    sample_interval_ns : float, optional
        Sample interval, ns. Wins over the file's (warning if they differ by more than 0.1 %);
        the twt axis is then rebuilt from the stored first value.
    name : str, optional
        The line name; the file stem by default, as for every format (the stored ``line``
        attribute is informative only).
    coordinates : bool
        Attach the stored ``x``/``y``; False leaves them out (a line placed from elsewhere).

    Returns
    -------
    xarray.DataArray
        ``amplitude``, dims ``(trace, twt)``, float32; stored ``x``/``y`` as ``header_x`` /
        ``header_y`` (m); ``time_zero_ns`` and ``history`` as stored.

    Raises
    ------
    InputFileError
        A missing, empty, malformed or inconsistent file (e.g. uneven twt spacing).
    SettingsError
        No interval in the file (a single sample and no attribute) and none given.
    """
    path = Path(path)
    with _open(path) as ds:
        found = _contents(ds, path)
        interval = _choose_interval(path, found.interval_ns, sample_interval_ns,
                                    "the line file")
        data = np.array(found.amplitude.values, dtype=np.float32)
        attrs = dict(ds.attrs)
        units = str(found.amplitude.attrs.get("units", AMPLITUDE_UNITS))
    return _make_line(
        _zero_nonfinite(data, path), interval_ns=interval, path=path, name=name,
        header_xy=found.xy if coordinates else None,
        twt_ns=_time_axis(found, interval, data.shape[1]),
        time_zero_ns=float(attrs.get("time_zero_ns", 0.0)),
        history=str(attrs.get("history", "")), units=units)


def _time_axis(found: _Contents, interval_ns: float, n_samples: int) -> np.ndarray | None:
    """The stored twt values, or, when the interval was overridden, ones rebuilt from the
    stored first value; None (start at 0) when the file holds no twt."""
    if found.twt_ns is None:
        return None
    if interval_ns == found.interval_ns:
        return found.twt_ns
    return found.twt_ns[0] + interval_ns * np.arange(n_samples, dtype=np.float64)
