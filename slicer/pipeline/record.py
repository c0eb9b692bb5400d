"""How a build's ``record.json`` writes its numbers, paths and software versions.

Numbers
-------
No float in a written record carries binary noise such as ``0.30000000000000004``:

- A build option (a key of :data:`~slicer.pipeline.settings.OPTION_KEYS` under ``settings``)
  is written as the float it is. Options reach a build as decimal text (a flag or a TOML value)
  untouched by arithmetic, and JSON gets the shortest decimal that reads back as the same
  float, which is then the text the user wrote: any decimal of at most 15 significant digits
  in the normal range survives a trip through a float64 (IEEE 754 binary64; C's ``DBL_DIG``
  is 15). So ``--cell
  0.1`` is recorded as ``0.1``, and the recorded settings read back exactly (``--repeat``).
- A float32 value is written as the shortest decimal that reads back as the same float32.
- Every other float is computed and is written rounded to :data:`SIGNIFICANT` (12) significant
  digits. The rounding error of a few float64 operations lies in the 15th to 17th digit, so
  12 digits drop it with room to spare, and still resolve 10 µm on a UTM northing (seven digits
  before the point), far below any radar cell.
- NaN and infinity, which JSON cannot hold (RFC 8259, section 6), are written as ``null``.

Paths
-----
Every file path in a written record is relative to the record's own folder (``/``-separated),
and ``folder`` holds that folder's absolute path when the build wrote it. A build folder moved
together with its survey (the same relative layout) therefore still finds its inputs, and one
moved alone finds them through ``folder`` (:func:`anchors`). All of a record's paths are
read against the one folder in which its survey file is found, so that a moved copy of a survey
is never checked half against the original.
"""

from __future__ import annotations

import math
import os
import platform
import sys
from pathlib import Path

import numpy as np

from slicer.pipeline.options import OPTIONS

#: Significant digits of a computed float in a written record.
SIGNIFICANT = 12

#: Python packages whose versions a record keeps (read from the installed metadata).
PACKAGES = ("numpy", "scipy", "xarray", "pyproj", "rasterio", "segyio", "matplotlib",
            "h5netcdf", "h5py", "dask", "zarr", "numcodecs", "rioxarray")


def environment(*, hdf5: bool = False) -> dict:
    """Python, the platform, the versions of :data:`PACKAGES` and of the C libraries below.

    ``gdal`` and ``rasterio_proj`` are the GDAL and PROJ that rasterio runs on, ``proj`` the
    PROJ of pyproj (the wheels bring their own, and they can differ), ``hdf5`` the HDF5 of
    h5py when ``hdf5`` is true (a build writing ``cube.nc``, whose workers load h5py, not this
    process) or h5py is loaded here (NetCDF lines), else None: every build writes through
    rasterio and places with pyproj, but needs h5py only for NetCDF (0.09 s to import). A build
    on workers calls this on a thread while they grid.
    """
    import importlib.metadata as md

    import pyproj
    import rasterio

    if hdf5:
        import h5py  # noqa: F401 - its version below
    h5py = sys.modules.get("h5py")

    versions = {}
    for name in PACKAGES:
        try:
            versions[name] = md.version(name)
        except md.PackageNotFoundError:
            versions[name] = None
    return {"python": sys.version.split()[0], "platform": platform.platform(), **versions,
            "gdal": rasterio.__gdal_version__,
            "rasterio_proj": getattr(rasterio, "__proj_version__", None),
            "proj": pyproj.proj_version_str,
            "hdf5": h5py.version.hdf5_version if h5py is not None else None}


def tidy_number(value: float) -> float | None:
    """A computed float rounded to :data:`SIGNIFICANT` significant digits; None if not finite."""
    if isinstance(value, np.floating) and np.finfo(value.dtype).bits < 64:
        value = float(str(value))  # numpy prints the shortest text of its own precision
    value = float(value)
    if not math.isfinite(value):
        return None
    return float(f"{value:.{SIGNIFICANT}g}")


def _tidy(value, *, exact: bool = False):
    """``value`` with plain Python types and tidy floats; ``exact`` keeps float64s as they are."""
    if isinstance(value, dict):
        return {str(k): _tidy(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_tidy(v, exact=exact) for v in value]
    if isinstance(value, np.ndarray):
        return _tidy(list(value), exact=exact)
    if isinstance(value, bool | np.bool_):
        return bool(value)
    if isinstance(value, int | np.integer):
        return int(value)
    if isinstance(value, float | np.floating):
        if exact and isinstance(value, float) and math.isfinite(value):
            return float(value)
        return tidy_number(value)
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return value


def relative(path: str | os.PathLike, folder: Path) -> str:
    """``path`` relative to ``folder`` (both with symlinks resolved), ``/``-separated."""
    return Path(os.path.relpath(os.path.realpath(path), os.path.realpath(folder))).as_posix()


def _relative_paths(record: dict, folder: Path) -> None:
    """Make the record's file paths relative to ``folder``, in place."""
    def rel(value):
        return relative(value, folder) if isinstance(value, str) and value else value

    settings = record.get("settings") or {}
    for key in ("source", "control_points", "velocity_model", "out"):
        settings[key] = rel(settings.get(key))
    rows = [*(settings.get("control_fits") or []), *(record.get("inputs") or []),
            *(record.get("lines") or []), *(record.get("ties") or {}).get("corrections", [])]
    for row in rows:
        for key in ("file", "control_points"):
            if key in row:
                row[key] = rel(row[key])
    if isinstance(record.get("repeat_of"), dict):
        record["repeat_of"]["record"] = rel(record["repeat_of"].get("record"))


def tidy_record(record: dict, *, folder: str | os.PathLike | None = None) -> dict:
    """A copy of a build's record as it is written: plain JSON types, floats and paths tidied.

    Parameters
    ----------
    record : dict
        The record a build made.
    folder : path-like, optional
        The folder ``record.json`` goes into: paths are made relative to it and ``folder`` is
        added (absolute). Without it, paths are kept as they are.

    Returns
    -------
    dict
        Floats as this module's docstring states: build options exact, float32 values at
        their own precision, computed values to :data:`SIGNIFICANT` digits, NaN as None.
    """
    out = {}
    for key, value in record.items():
        if key == "settings" and isinstance(value, dict):
            out[key] = {str(k): _tidy(v, exact=k in OPTIONS) for k, v in value.items()}
        else:
            out[key] = _tidy(value)
    if folder is not None:
        out["folder"] = os.path.realpath(folder)
        _relative_paths(out, Path(folder))
    return out


def anchors(record_folder: Path, built_in: str | None) -> list[Path]:
    """The folders a record's relative paths may be relative to now, in order of preference.

    Parameters
    ----------
    record_folder : pathlib.Path
        The folder the record is in now: right when the build folder was left where it was or
        moved together with its survey.
    built_in : str, optional
        The record's ``folder``: where the build wrote it, right when the build folder was
        moved alone. Records without one (earlier slicer versions) held paths relative to the
        folder the build ran in, and the current folder is tried instead.
    """
    second = Path(built_in) if built_in else Path.cwd()
    return list(dict.fromkeys(Path(os.path.realpath(p)) for p in (record_folder, second)))


__all__ = ["SIGNIFICANT", "anchors", "environment", "relative", "tidy_number", "tidy_record"]
