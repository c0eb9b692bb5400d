"""A build's pictures for looking at it: one radargram per line and the viewer page.

A build keeps each processed line decimated (its line task's ``image``); :class:`RadargramPainter`
draws them as ``radargrams/<LINE>.png`` on a thread of the building process as the line tasks
return them (and on while the cube is gridded), so only a few are ever held, and
:func:`write_views` writes ``viewer.html`` from the finished cube, read one slice at a time,
with those pictures. :func:`write_build_viewer` writes the page again for a build folder from
its record, its cube and its radargrams.
"""

from __future__ import annotations

import os
import queue
import re
import threading
import time
from collections.abc import Sequence
from pathlib import Path

import numpy as np
import xarray as xr

from slicer.core.errors import InputFileError
from slicer.outputs.names import FORMATS, RADARGRAMS_DIR, VIEW_NAMES, VIEWER_NAME
from slicer.outputs.sink import cube_from_slices


def file_names(names: Sequence[str]) -> list[str]:
    """One file name per line: its name with only letters, digits, ``.``, ``_``, ``-`` kept,
    made unique by a number after repeats."""
    seen: set[str] = set()
    return [_file_name(name, seen) for name in names]


def _file_name(name: str, seen: set[str]) -> str:
    base = re.sub(r"[^A-Za-z0-9._-]+", "_", name).strip("._") or "line"
    candidate, k = base, 1
    while candidate.lower() in seen:  # unique on case-insensitive file systems too
        k += 1
        candidate = f"{base}_{k}"
    seen.add(candidate.lower())
    return f"{RADARGRAMS_DIR}/{candidate}.png"


class RadargramPainter:
    """Draw a build's radargrams into ``out/radargrams`` on one thread, as lines come in.

    A context manager: entering starts the thread, :meth:`add` hands it a line (waiting while
    :attr:`QUEUED` are queued, so no more are held), :meth:`result` waits for the last.
    Leaving on an exception stops it after the picture being drawn and waits, so nothing
    writes into a folder being removed.

    Parameters
    ----------
    out : path-like
        The build's folder (its stage).
    units : str
        Units of the values, for the colour bars.
    """

    #: Lines queued at most, waiting to be drawn.
    QUEUED = 8

    def __init__(self, out: str | os.PathLike, *, units: str = ""):
        self.out = Path(out)
        self.units = units
        self._queue: queue.Queue = queue.Queue(self.QUEUED)
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._error: BaseException | None = None
        self._done: list[dict] = []
        self._seen: set[str] = set()
        self._pages = None
        #: Time the drawing thread spent drawing (s), overlapping the reading and gridding.
        self.seconds = 0.0

    def __enter__(self) -> RadargramPainter:
        self._thread = threading.Thread(target=self._run, name="radargrams", daemon=True)
        self._thread.start()
        return self

    def add(self, image: xr.DataArray) -> None:
        """Queue one line (:func:`slicer.outputs.radargram.image_of_samples`, with ``line``,
        ``velocity`` and ``windows`` in its attrs: see
        :func:`slicer.pipeline.line_tasks.reduce_line`)."""
        self._put(image)

    def _put(self, item) -> None:
        while self._thread is not None and self._thread.is_alive():
            try:
                self._queue.put(item, timeout=0.2)
                return
            except queue.Full:  # a failed thread takes no more: result() raises its error
                continue

    def _run(self) -> None:
        try:
            while (image := self._queue.get()) is not None and not self._stop.is_set():
                started = time.perf_counter()
                self._draw(image)
                self.seconds += time.perf_counter() - started
        except BaseException as exc:  # raised by result(), in the building thread
            self._error = exc

    def _draw(self, image: xr.DataArray) -> None:
        if self._pages is None:  # the frames are drawn once (benchmarks/radargrams.py)
            from slicer.outputs.radargram_pages import RadargramPages
            self._pages = RadargramPages(units=self.units)
            (self.out / RADARGRAMS_DIR).mkdir(exist_ok=True)
        line = str(image.attrs.get("line", image.name))
        name = _file_name(line, self._seen)
        self._pages.save(image, self.out / name, velocity=image.attrs.get("velocity"),
                         windows=image.attrs.get("windows"))
        self._done.append({"line": line, "file": name, "start": image.attrs["line_start"],
                           "end": image.attrs["line_end"]})

    def _finish(self) -> None:
        if self._thread is not None:
            self._put(None)
            self._thread.join()

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            self._stop.set()
            self._finish()

    def result(self) -> list[dict]:
        """Wait for every line queued; what was drawn: ``line``, ``file`` (relative to the
        folder), ``start``, ``end`` (m) each.

        Raises
        ------
        SlicerError
            Whatever stopped the drawing (e.g. a full disk).
        """
        self._finish()
        if self._error is not None:
            raise self._error
        return list(self._done)


def write_views(out: str | os.PathLike, cube: xr.DataArray, radargrams: Sequence[dict], *,
                title: str | None = None, slices: Sequence | None = None) -> Path:
    """Write ``out/viewer.html`` from ``cube`` (read a slice at a time) and the radargrams
    listed (:meth:`RadargramPainter.result`, files relative to ``out``). Returns its path.

    ``slices``: the page's slices already taken (:attr:`slicer.outputs.sink.CubeSink.page_slices`);
    then ``cube`` may be the build's template, whose values are not read.
    """
    from slicer.outputs.viewer import LineImage, write_viewer
    out = Path(out)
    lines = [LineImage(r["line"], out / r["file"], tuple(r["start"]), tuple(r["end"]))
             for r in radargrams]  # each file read as the page is written
    return write_viewer(cube, out / VIEWER_NAME, lines=lines, title=title, slices=slices)


def open_result(template: xr.DataArray, files: list[Path]) -> xr.DataArray:
    """The committed cube, lazily: from ``cube.zarr``, else the slice GeoTIFFs, else ``cube.nc``.

    ``files`` are the committed outputs (:meth:`OutputFolder.commit`); ``template`` the cube's
    template the GeoTIFFs were written from.
    """
    names = {f.name: f for f in files}
    if FORMATS["zarr"] in names:
        from slicer.outputs.zarr_store import open_cube_zarr  # zarr: only where written
        return open_cube_zarr(names[FORMATS["zarr"]])
    slices = [f for f in files if f.parent.name == "slices" and f.suffix == ".tif"]
    if slices:
        return cube_from_slices(template, slices)
    from slicer.outputs.cube import read_cube_netcdf
    return read_cube_netcdf(names[FORMATS["nc"]])


def template_from_record(record: dict) -> xr.DataArray:
    """The cube's template (grid, windows, CRS; lazy NaN values) of a build from its record."""
    from slicer.outputs.cube import TILE, empty_cube
    grid, sl, settings = record["grid"], record["slices"], record.get("settings", {})
    below = sl["axis"] in ("depth", "elevation")  # converted from time with a velocity
    velocity = settings.get("velocity") if below else None
    if velocity is None and below and settings.get("permittivity"):
        from slicer.core.physics import velocity_from_permittivity
        velocity = float(velocity_from_permittivity(settings["permittivity"]))
    name = "signed_envelope" if settings.get("attribute") == "signed" else "envelope"
    return empty_cube((len(sl["top"]), grid["ny"], grid["nx"]), tile=TILE, west=grid["west"],
                      north=grid["north"], cell=grid["cell"], crs=settings.get("crs"),
                      top=np.asarray(sl["top"]), bottom=np.asarray(sl["bottom"]),
                      axis=sl["axis"], velocity=velocity,
                      processing=record.get("processing", ""), name=name,
                      vertical_datum=settings.get("datum") if sl["axis"] == "elevation" else None)


def write_build_viewer(out: str | os.PathLike) -> Path:
    """(Re)write ``viewer.html`` of the build in folder ``out`` from its record, its cube
    (``cube.zarr``, else the slice GeoTIFFs, else ``cube.nc``, as the build lists them) and its
    radargrams (``record["radargrams"]``, those still present). Returns the page's path.

    The page is written in place (atomically); the record is not changed.

    Raises
    ------
    InputFileError
        The folder holds no slicer build, or none with a cube.
    """
    from slicer.core.commit import read_record
    out = Path(out)
    record = read_record(out) if out.is_dir() else None
    if record is None:
        raise InputFileError("holds no slicer build (no record.json)", where=str(out))
    files = [out / o for o in record["outputs"]]
    if not any(f.name in ("cube.zarr", "cube.nc") or f.suffix == ".tif" for f in files):
        raise InputFileError("the build holds no cube (no cube.zarr, slices or cube.nc)",
                             where=str(out))
    cube = open_result(template_from_record(record), files)
    lines = [r for r in record.get("radargrams") or [] if (out / r["file"]).is_file()]
    return write_views(out, cube, lines, title=record.get("settings", {}).get("title"))


__all__ = ["RADARGRAMS_DIR", "VIEWER_NAME", "VIEW_NAMES", "RadargramPainter", "file_names",
           "open_result", "template_from_record", "write_build_viewer",
           "write_views"]
