"""What :func:`slicer.build` and :func:`slicer.build_cube` return."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import xarray as xr


class BuildResult:
    """What a build made: the cube, the files written and the record of how.

    Parameters
    ----------
    cube : xarray.DataArray or callable
        The cube, or a function of no arguments that opens it: a written build's cube is
        opened from its files the first time :attr:`cube` is asked for, not before (the
        command line never asks; opening a 400 k-trace build's 24 slice GeoTIFFs, lazily
        still, took 0.3 s of its 8.7 s).
    record : dict
        The build's record (``record.json``).
    files : list of Path, optional
        The files written.
    warnings : list of str, optional
        The warnings the build gave.
    """

    def __init__(self, cube: xr.DataArray | Callable[[], xr.DataArray], record: dict,
                 files: list[Path] | None = None, warnings: list[str] | None = None):
        self._cube = None if callable(cube) else cube
        self._open = cube if callable(cube) else None
        self.record = record
        self.files = [] if files is None else list(files)
        self.warnings = [] if warnings is None else list(warnings)

    @property
    def cube(self) -> xr.DataArray:
        """The cube (opened on first use when the build wrote it; see the class)."""
        if self._cube is None and self._open is not None:
            self._cube = self._open()
            self._open = None
        return self._cube

    def __repr__(self) -> str:
        cube = "not opened yet" if self._cube is None else f"dims {dict(self._cube.sizes)}"
        return (f"BuildResult(cube: {cube}, {len(self.files)} files, "
                f"{len(self.warnings)} warnings)")


__all__ = ["BuildResult"]
