"""The Line data model shared by every line reader: what a file holds, sample-interval rules,
NaN handling and the shape of the returned :class:`xarray.DataArray`.

The readers (:mod:`slicer.io.segy`, :mod:`slicer.io.linefile`) build on this module, and
:mod:`slicer.io.reading` chooses between them, so the rules are the same whatever the format.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from slicer.core.conventions import TRACE, TWT, UNITS
from slicer.core.errors import InputFileError, OutputError, SettingsError, warn

if TYPE_CHECKING:  # imported where used (see slicer.io.reading)
    import xarray as xr

#: Suffixes (lower case) and the format each one selects.
SEGY_SUFFIXES = (".sgy", ".segy")
NETCDF_SUFFIXES = (".nc",)

#: Radar sample intervals outside this range (ns) are taken as a header that cannot hold one.
PLAUSIBLE_INTERVAL_NS = (0.001, 20.0)

#: Relative difference above which a given interval "disagrees" with the file's own.
_INTERVAL_RTOL = 1e-3

#: Units of raw amplitudes: recorder counts, dimensionless (CF / UDUNITS spelling).
AMPLITUDE_UNITS = "1"


@dataclass(frozen=True)
class LineInfo:
    """What a line file holds, read from its headers only (no samples).

    Attributes
    ----------
    path : Path
        The file.
    n_traces : int
        Number of traces.
    n_samples : int
        Samples per trace.
    sample_interval_ns : float or None
        The sample interval the file itself states, ns; None when it holds no usable one.
    format : str
        ``"segy-ieee"``, ``"segy-ibm"``, ``"segy-int2"``, ``"segy-int4"`` (other SEG-Y sample
        codes are named alike) or ``"netcdf"``.
    first_sample_ns : float
        Two-way time of the first sample, ns, as the file states it (a NetCDF line's stored
        ``twt`` may start late; SEG-Y records start at 0).
    """

    path: Path
    n_traces: int
    n_samples: int
    sample_interval_ns: float | None
    format: str
    first_sample_ns: float = 0.0


def _check_file(path: Path) -> int:
    """Refuse a missing, non-regular or empty file; return its size in bytes."""
    if not path.exists():
        hint = (" (a Windows path? separate folders with /)" if "\\" in str(path) else "")
        raise InputFileError(f"file not found{hint}", where=str(path))
    if not path.is_file():
        raise InputFileError("not a regular file", where=str(path))
    size = path.stat().st_size
    if size == 0:
        raise InputFileError("file is empty (0 bytes)", where=str(path))
    return size


def _plausible_interval(interval_ns: float | None) -> bool:
    """Whether ``interval_ns`` is a finite value in the radar range of PLAUSIBLE_INTERVAL_NS."""
    if interval_ns is None or not math.isfinite(interval_ns):
        return False
    low, high = PLAUSIBLE_INTERVAL_NS
    return low <= interval_ns <= high


def _choose_interval(path: Path, file_ns: float | None, user_ns: float | None,
                     what: str) -> float:
    """Apply the sample-interval rule: the user's value wins, the file's serves otherwise.

    ``what`` names where the file's value lives, for the messages.
    """
    if user_ns is not None:
        user_ns = float(user_ns)
        if not (math.isfinite(user_ns) and user_ns > 0):
            raise SettingsError(f"sample interval must be a positive number of ns, got "
                                f"{user_ns!r}", where="--sample-interval")
        if file_ns is not None and abs(user_ns - file_ns) > _INTERVAL_RTOL * file_ns:
            warn(f"{path}: {what} states a sample interval of {file_ns:g} ns; using the given "
                 f"{user_ns:g} ns")
        return user_ns
    if file_ns is None:
        raise SettingsError(f"{path}: {what} holds no usable radar sample interval "
                            f"(expected {PLAUSIBLE_INTERVAL_NS[0]:g}-"
                            f"{PLAUSIBLE_INTERVAL_NS[1]:g} ns); give it with --sample-interval",
                            where="--sample-interval")
    return file_ns


#: The largest float32 whose square float32 still holds (sqrt(3.4e38)): an envelope squares
#: its samples, so larger ones (no recorder makes them: a damaged file) come out infinite.
FLOAT32_ROOT = 1.8e19


def _zero_nonfinite(data: np.ndarray, path: Path) -> np.ndarray:
    """Set NaN / inf samples, and finite ones too large to process (above
    :data:`FLOAT32_ROOT`: one such sample had made its whole line's envelopes infinite), to 0
    in place, warning with their counts."""
    # one sum of squares first (BLAS): any NaN or infinity, or a sample whose square float32
    # cannot hold, makes it non-finite, so a clean line (nearly every line) is cleared at a
    # fraction of the cost of the mask; a sum that overflowed from many large finite values
    # only sends it on to the mask
    flat = data.reshape(-1)
    with np.errstate(over="ignore", invalid="ignore"):  # inf - inf, or an overflow: no noise
        energy = np.dot(flat, flat)
    if np.isfinite(energy):
        return data
    bad = ~np.isfinite(data)
    count = int(bad.sum())
    if count:
        data[bad] = 0.0
        warn(f"{path}: {count} NaN or infinite sample(s) set to 0")
    huge = np.abs(data) > FLOAT32_ROOT
    count = int(huge.sum())
    if count:
        peak = float(np.abs(data[huge]).max())
        data[huge] = 0.0
        warn(f"{path}: {count} sample(s) up to {peak:.3g}, beyond any recorder's range (a "
             f"damaged file, or samples stored in another format?), set to 0"
             + (f": {100 * count / data.size:.2g} % of the line" if count > 1 else ""))
    return data


def _make_line(data: np.ndarray, *, interval_ns: float, path: Path, name: str | None,
               header_xy: tuple[np.ndarray, np.ndarray] | None = None,
               twt_ns: np.ndarray | None = None, time_zero_ns: float = 0.0, history: str = "",
               units: str = AMPLITUDE_UNITS) -> xr.DataArray:
    """Build the Line DataArray from a (trace, twt) array and what the reader found.

    ``twt_ns`` is a stored time axis to keep; by default ``twt`` is ``interval_ns * i``.
    """
    n_traces, n_samples = data.shape
    if twt_ns is None:
        twt_ns = interval_ns * np.arange(n_samples, dtype=np.float64)
    coords = {
        TWT: (TWT, np.asarray(twt_ns, dtype=np.float64),
              {"units": UNITS[TWT], "long_name": "two-way travel time"}),
        TRACE: (TRACE, np.arange(n_traces, dtype=np.int64), {"long_name": "trace index",
                                                             "units": "1"}),
    }
    if header_xy is not None:
        for key, values in zip(("header_x", "header_y"), header_xy, strict=True):
            coords[key] = (TRACE, np.asarray(values, dtype=np.float64),
                           {"units": "m", "long_name": f"{key[-1]} stored in the file"})
    import xarray as xr

    return xr.DataArray(
        np.asarray(data, dtype=np.float32), dims=(TRACE, TWT), coords=coords, name="amplitude",
        attrs=line_attrs(path, interval_ns=interval_ns, name=name, time_zero_ns=time_zero_ns,
                         history=history, units=units),
    )


def line_attrs(path: Path, *, interval_ns: float, name: str | None = None,
               time_zero_ns: float = 0.0, history: str = "",
               units: str = AMPLITUDE_UNITS) -> dict:
    """The attrs of a Line read from ``path`` (:func:`_make_line`; also a build's line task,
    which reads a line's samples without the DataArray)."""
    return {"line": name if name is not None else path.stem, "source": str(path),
            "sample_interval_ns": float(interval_ns), "time_zero_ns": float(time_zero_ns),
            "history": history, "units": units}


def _line_interval(line: xr.DataArray, where: str) -> float:
    """The sample interval of a Line (ns): its attribute, else its ``twt`` spacing."""
    value = line.attrs.get("sample_interval_ns")
    if value is None and line.sizes.get(TWT, 0) >= 2:
        value = float(line[TWT][1] - line[TWT][0])
    if value is None or not (math.isfinite(float(value)) and float(value) > 0):
        raise OutputError("the line has no positive sample_interval_ns attribute or twt "
                            "spacing", where=where)
    return float(value)


def _line_xy(line: xr.DataArray) -> tuple[np.ndarray, np.ndarray] | None:
    """Per-trace coordinates to store: ``x``/``y`` if placed, else ``header_x``/``header_y``."""
    for xname, yname in (("x", "y"), ("header_x", "header_y")):
        if xname in line.coords and yname in line.coords:
            return (np.asarray(line[xname].values, dtype=np.float64),
                    np.asarray(line[yname].values, dtype=np.float64))
    return None


def _check_line(line: xr.DataArray, where: str) -> None:
    """Refuse anything a writer cannot store as a line."""
    import xarray as xr

    if not isinstance(line, xr.DataArray) or set(line.dims) != {TRACE, TWT}:
        dims = getattr(line, "dims", None)
        raise OutputError(f"a line must be a DataArray with dims (trace, twt), got {dims}",
                            where=where)
    if line.sizes[TRACE] == 0 or line.sizes[TWT] == 0:
        raise OutputError(f"the line is empty ({dict(line.sizes)})", where=where)
