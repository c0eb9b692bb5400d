"""The pipeline: survey lines in, georeferenced slices, cube, overview and record out.

:func:`build` opens its engine first (:mod:`slicer.pipeline.build_engine`), then imports the
cube building (:mod:`slicer.pipeline.cube_build`) and the writers, so that a ``processes``
engine's fork server imports the task modules (about 1.2 s of a core) while this process
imports its own (0.65 s). One after the other, the two held up the first line tasks.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import functools
import importlib
import threading
import time
import warnings
from pathlib import Path

import numpy as np

from slicer.core.commit import OutputFolder
from slicer.core.errors import SettingsError, SlicerWarning
from slicer.outputs.names import FORMATS, OVERVIEW_NAME, OVERVIEW_PAGES, VIEW_NAMES
from slicer.pipeline.build_engine import open_engine
from slicer.pipeline.build_result import BuildResult
from slicer.pipeline.settings import BuildSettings


def build(settings: BuildSettings, *, progress: bool = True, command: list[str] | None = None,
          repeat_of: dict | None = None) -> BuildResult:
    """Build the slices of a survey and write them to ``settings.out``.

    Writes the outputs ``settings.formats`` asks for -- ``slices/`` (one Cloud Optimized
    GeoTIFF per slice, ``tif``, the default), ``cube.zarr`` (``zarr``) and ``cube.nc`` (CF
    NetCDF, ``nc``) -- and always the overview (``overview.png``, or ``overview-01.png``, ...
    for more slices than one page holds), ``viewer.html`` (the slices in one page,
    :mod:`slicer.outputs.viewer`), ``radargrams/<LINE>.png`` (each processed line, unless
    ``settings.radargrams`` is off) and ``record.json`` (every setting and input, with
    checksums; ``radargrams`` lists each line's picture and ends). The cube is gridded tile
    by tile into a Zarr working store in the build folder, so memory does not grow with the
    grid (with GeoTIFFs alone, a cube of at most 64 MiB on threads is held in memory instead,
    and on worker processes in one raw file: :mod:`slicer.outputs.working_store`); the slices
    and the NetCDF cube are written from it once it is complete, and it becomes ``cube.zarr``
    or, if the Zarr cube was not asked for, is deleted before the commit (and with the build
    folder on any failure).
    Everything is written into a folder beside ``settings.out`` and switched in whole at the
    end (:mod:`slicer.core.commit`): a build that fails or is stopped leaves the earlier
    build, or the new one, whole. With ``overwrite`` the earlier build's outputs are
    replaced and every other file in the folder is kept.

    Parameters
    ----------
    settings : BuildSettings
        What to build; ``settings.out`` must be set.
    progress : bool
        Show progress bars (on a terminal).
    command : list of str, optional
        The command line, kept in the record.
    repeat_of : dict, optional
        The record this build repeats (:func:`slicer.pipeline.repeat.repeat_build`), kept in
        the record; its ``record`` path is written relative to the output folder.

    The record's paths are relative to the output folder and its floats free of binary noise
    (:mod:`slicer.pipeline.record`).

    Returns
    -------
    BuildResult
        ``cube`` is the committed cube, opened from the output folder the first time it is
        asked for, lazily (dask): from ``cube.zarr`` when written, else from the slice
        GeoTIFFs (rioxarray, stacked along the slice dim; windows, coordinates and attrs as
        the build made them), else from ``cube.nc``. It stays valid after the call, as long
        as those files do.

    Raises
    ------
    SlicerError
        On any bad input or setting, before anything is written.
    """
    if settings.out is None:
        raise SettingsError("no output folder given", where="--out")
    formats = settings.formats.split(",")
    folder = OutputFolder(settings.out, overwrite=bool(settings.overwrite),
                          names=[*(FORMATS[f] for f in formats), OVERVIEW_NAME, OVERVIEW_PAGES,
                                 *VIEW_NAMES],
                          inputs=input_files(settings))
    with contextlib.ExitStack() as stack:
        caught = stack.enter_context(warnings.catch_warnings(record=True))
        engine = stack.enter_context(open_engine(settings))
        # the engine first: a process engine's fork server imports the task modules (1.2 s)
        # while this process imports the cube building and the writers (0.65 s; kept out of
        # this module for that)
        from slicer.io.reading import describe_file
        from slicer.outputs.cube import empty_cube
        from slicer.outputs.sink import CubeSink
        from slicer.pipeline.cube_build import TILE, reduce_and_plan, with_depth_error
        from slicer.pipeline.record import tidy_record
        from slicer.pipeline.view import RadargramPainter, open_result, write_views
        from slicer.pipeline.worker_outputs import WorkerSink
        stack.enter_context(folder)
        painter = stack.enter_context(RadargramPainter(folder.path))  # lines drawn on a thread
        if engine.offloader() is not None and {"zarr", "nc"} & set(formats):
            _import_aside("distributed")  # for the workers' Zarr store: see _import_aside
        warnings.simplefilter("always", SlicerWarning)
        r = reduce_and_plan(settings, engine, progress=progress, cube_in_memory=False,
                            on_image=painter.add)
        # read while the tiles are gridded: on workers this process writes no GeoTIFF, and
        # the versions need rasterio (0.13 s) and the packages' metadata
        from slicer.pipeline.record import environment
        aside = concurrent.futures.ThreadPoolExecutor(1, thread_name_prefix="slicer-versions")
        versions = aside.submit(environment, hdf5="nc" in formats)
        aside.shutdown(wait=False)
        r.record["inputs"] = None  # filled in below, in this place of the record
        if command is not None:
            r.record["command"] = command
        if repeat_of is not None:
            r.record["repeat_of"] = repeat_of
        gridding = time.perf_counter()
        table = r.reduced.table
        template = with_depth_error(
            empty_cube(r.layout.shape(table.sizes["slice"]), tile=TILE, accessor=False,
                       **r.kwargs), settings, table)
        out = folder.path  # written whole, then switched in by folder.commit
        tags = {"PROCESSING": r.record["processing"], "SOURCE": str(settings.source)}
        common = dict(tags=tags, tile=TILE, progress=progress, title=settings.title,
                      formats=formats, display=settings.display, page_slices=True)
        if engine.offloader() is not None:  # workers on this machine write every output
            sink = WorkerSink(out, template, engine=engine, **common)
        else:
            sink = CubeSink(out, template, offload=None, **common)
        with sink:
            if isinstance(sink, WorkerSink):
                sink.grid(r.layout.jobs(table.values), count=r.layout.count)
            else:
                for row0, col0, block in r.layout.blocks(table.values, engine=engine,
                                                         progress=progress):
                    sink.write(row0, col0, block)
        r.record["radargrams"] = painter.result()
        viewing = time.perf_counter()
        # the page's slices were taken as the slice GeoTIFFs were written: nothing is read back
        pages = sink.page_slices
        viewer = write_views(out, template if pages else open_result(template, sink.files),
                             r.record["radargrams"], title=settings.title, slices=pages)
        r.record["seconds"]["radargrams_drawn"] = round(painter.seconds, 3)
        r.record["seconds"]["viewer"] = round(time.perf_counter() - viewing, 3)
        # The line files were checksummed by their tasks; the tables and geometry files
        # (small) are done here.
        r.record["inputs"] = [describe_file(p) for p in _side_inputs(settings)] + \
            r.reduced.inputs
        r.record["grid"]["empty_cells"] = sink.empty_cells
        r.record["environment"] = versions.result()
        r.record["warnings"] = [str(w.message) for w in caught
                                if issubclass(w.category, SlicerWarning)]
        r.record["seconds"]["grid_and_write"] = round(time.perf_counter() - gridding, 3)
        r.record = tidy_record(r.record, folder=folder.target)
        written = [*sink.files, *(out / d["file"] for d in r.record["radargrams"]), viewer]
        files = folder.commit([p.relative_to(out).as_posix() for p in written], r.record,
                              default=_jsonable)
    warned = [str(w.message) for w in caught if issubclass(w.category, SlicerWarning)]
    for w in caught:
        if not issubclass(w.category, SlicerWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    for message in warned:  # the caller sees them too
        warnings.warn(message, SlicerWarning, stacklevel=2)
    return BuildResult(cube=functools.partial(open_result, template, files), record=r.record,
                       files=files, warnings=warned)


def _import_aside(module: str) -> None:
    """Import ``module`` on a daemon thread, if it is installed. The Zarr store the workers
    grid into (when ``cube.zarr`` or ``cube.nc`` is asked for) is created after the line
    tasks; dask's graph code imports dask.distributed there (0.4 s, benchmarks/README.md),
    while the workers wait. Imported while they run the line tasks, where this process has
    little to do, it is ready by then."""
    def run() -> None:
        with contextlib.suppress(ImportError):
            importlib.import_module(module)
    threading.Thread(target=run, name=f"slicer-import-{module}", daemon=True).start()


def input_files(settings: BuildSettings) -> list[Path]:
    """Every file a build of ``settings`` reads: the line files, then the others."""
    return list(dict.fromkeys([*(Path(e.file) for e in settings.lines),
                               *_side_inputs(settings)]))


def _side_inputs(settings: BuildSettings) -> list[Path]:
    """The build's input files other than the line files, each once, in a stable order."""
    files = [settings.source, *settings.extras.get("tables", [])]
    for f in (settings.velocity_model, settings.control_points):
        if f is not None:
            files.append(Path(f))
    for e in settings.lines:
        files.extend(p for p in (e.track, e.marks, e.channels) if p is not None)
    for fit in settings.extras.get("control_fits", []):
        files.append(Path(fit["control_points"]))
    return list(dict.fromkeys(files))


def _jsonable(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot record {type(value).__name__}")


__all__ = ["BuildResult", "build", "input_files"]
