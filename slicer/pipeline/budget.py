"""The memory a build will need, estimated before it starts, against a limit.

A build holds at once: the trace x slice table and trace frames of the whole survey (a few
dozen numbers per trace), one line per worker being processed (samples and the FFT work arrays
of the envelope), and one output tile per worker being gridded (its weights and values). The
estimate adds these up; a build that cannot fit in ``--memory-limit`` even with one worker is
refused with the numbers, before anything is read.
"""

from __future__ import annotations

from dataclasses import dataclass

from slicer.core.errors import SettingsError

#: Default budget for a build's working data (the interpreter and libraries add ~0.3 GB).
DEFAULT_LIMIT = 1 << 30

#: Bytes per sample while a line is processed: float32 samples and copies at each step, and
#: the complex128 FFT of the envelope on a trace zero-padded to twice its length.
LINE_BYTES_PER_SAMPLE = 56
#: Bytes per trace of the survey-wide table: positions, frame (direction, spacing), line id.
TRACE_BYTES = 7 * 8 + 4
#: Bytes per weight (sparse row, column, value, and the temporaries that build them).
WEIGHT_BYTES = 48


def parse_bytes(value, *, where: str = "--memory-limit") -> int:
    """Bytes from ``1GB``, ``512MiB``, ``2e9`` or a number (units as :func:`dask.utils.parse_bytes`
    reads them: kB/MB/GB decimal, KiB/MiB/GiB binary).

    Raises
    ------
    SettingsError
        Not a size, or not a positive one (naming ``where``).
    """
    import dask.utils  # ~0.1 s; only a build that states a limit pays it

    if isinstance(value, bool):
        value = repr(value)  # True is an int to Python, but not a size
    try:
        size = dask.utils.parse_bytes(value)
    except (ValueError, TypeError, AttributeError):  # dask reads strings and numbers only
        raise SettingsError(f"expected a size such as 1GB or 512MiB, got {value!r}",
                            where=where) from None
    if size <= 0:
        raise SettingsError(f"must be a positive size, got {value!r}", where=where)
    return int(size)


def human(n: float) -> str:
    """``1.40 GiB`` style (:func:`dask.utils.format_bytes`)."""
    import dask.utils

    return dask.utils.format_bytes(int(n))


@dataclass(frozen=True)
class Estimate:
    """Peak working memory of a build, by part (bytes)."""

    table: int
    lines: int
    tiles: int
    cube: int
    workers: int
    #: The overview's decimated slices, kept while a streamed cube is written.
    overview: int = 0

    @property
    def total(self) -> int:
        return self.table + self.lines + self.tiles + self.cube + self.overview

    def describe(self) -> str:
        return (f"about {human(self.total)}: {human(self.table)} for the trace table, "
                f"{human(self.lines)} for {self.workers} line(s) in work, {human(self.tiles)} "
                f"for tiles, {human(self.cube)} for the cube in memory"
                + (f", {human(self.overview)} for the overview" if self.overview else ""))


def estimate(*, n_traces: int, max_line_traces: int, n_samples: int, n_slices: int,
             grid_cells: int, tile: int, neighbours: float, workers: int,
             cube_in_memory: bool, formats: tuple[str, ...] = ("tif", "zarr", "nc")
             ) -> Estimate:
    """Estimate a build's peak working memory.

    Parameters
    ----------
    n_traces, max_line_traces, n_samples, n_slices : int
        Survey size: all traces, the longest line, samples per trace, slices.
    grid_cells : int
        Cells of the output grid.
    tile : int
        Tile edge (cells).
    neighbours : float
        Traces weighing in on a cell, on average.
    workers : int
        Tasks running at once.
    cube_in_memory : bool
        Whether the whole cube is assembled in memory (rather than streamed to disk).
    formats : tuple of str
        The cube outputs written: a small cube written as GeoTIFFs alone is held in memory
        while it is gridded (:func:`slicer.outputs.working_store.stages_in_memory`).
    """
    table = n_traces * (TRACE_BYTES + 4 * n_slices)
    lines = workers * max_line_traces * n_samples * LINE_BYTES_PER_SAMPLE
    cells = min(grid_cells, tile * tile)
    tiles = workers * int(cells * (neighbours * WEIGHT_BYTES + 12 * n_slices))
    from slicer.outputs.working_store import stages_in_memory
    staged = stages_in_memory(n_slices * grid_cells, formats=formats, offload=False)
    cube = 4 * n_slices * grid_cells if cube_in_memory or staged else 0
    # A streamed cube's writer keeps the overview's panels (at most MAX_SHEET_CELLS cells).
    from slicer.outputs.display import MAX_SHEET_CELLS  # no matplotlib: it loads elsewhere
    overview = 0 if cube_in_memory else 4 * min(n_slices * grid_cells, MAX_SHEET_CELLS)
    return Estimate(table=int(table), lines=int(lines), tiles=tiles, cube=int(cube),
                    workers=workers, overview=int(overview))
