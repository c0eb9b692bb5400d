"""The ground surface's elevation at every trace, for elevation slices.

Three sources, one per survey (``terrain``):

- ``gnss``: each line's GNSS track with a ``height`` column; the antenna's height above the
  ground is subtracted (:func:`surface_from_heights`);
- ``table``: the line table's ``start_elevation`` and ``end_elevation``, linear along the line
  between its first and last trace (:func:`surface_from_ends`);
- a digital elevation model GeoTIFF (:class:`ElevationModel`), read with rasterio, sampled
  bilinearly between cell centres (scipy), with trace positions reprojected by pyproj when its
  CRS is not the survey's.

Elevations are metres above the vertical datum the user names; slicer does not convert between
vertical datums, so heights and the model must be on the same one.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from slicer.core.errors import InputFileError, SettingsError

#: Where a surface elevation can come from, besides the path of an elevation model.
TERRAIN_WORDS = ("gnss", "table")


def surface_from_heights(height, *, gnss_height: float, where: str = "track") -> np.ndarray:
    """Ground elevation (m) from GNSS antenna heights (m) and the antenna's height above ground.

    Raises
    ------
    InputFileError
        A height that is missing (NaN) or not finite, naming ``where`` and the first trace.
    """
    h = np.asarray(height, dtype=float)
    bad = np.flatnonzero(~np.isfinite(h))
    if bad.size:
        raise InputFileError(f"{bad.size} of {h.size} traces have no GNSS height (first: trace "
                             f"{bad[0]}); every trace needs one for elevation slices",
                             where=where)
    return h - float(gnss_height)


def surface_from_ends(x, y, *, start, end, start_elevation: float, end_elevation: float
                      ) -> np.ndarray:
    """Ground elevation (m) linear along a line, from its elevations at ``start`` and ``end``.

    Each trace takes the elevation of its projection on the segment from ``start`` to ``end``
    (``(x, y)`` in m), held at the end values beyond them.
    """
    sx, sy = (float(v) for v in start)
    ex, ey = (float(v) for v in end)
    dx, dy = ex - sx, ey - sy
    length2 = dx * dx + dy * dy
    px, py = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    f = (np.zeros(px.shape) if length2 == 0
         else np.clip(((px - sx) * dx + (py - sy) * dy) / length2, 0.0, 1.0))
    return float(start_elevation) + f * (float(end_elevation) - float(start_elevation))


@dataclass(frozen=True)
class ElevationModel:
    """A digital elevation model read into memory: band 1 of a GeoTIFF (m above the datum).

    Attributes
    ----------
    path : pathlib.Path
    values : numpy.ndarray
        ``(row, col)`` float64, NaN for nodata.
    transform : affine.Affine
        Cell corners (rasterio's convention).
    crs : pyproj.CRS
    """

    path: Path
    values: np.ndarray
    transform: object
    crs: object

    @classmethod
    def read(cls, path: str | os.PathLike) -> ElevationModel:
        """Read band 1 of a raster; nodata and masked cells become NaN."""
        import pyproj
        import rasterio
        path = Path(path)
        if not path.is_file():
            raise InputFileError("elevation model not found", where=str(path))
        try:
            with rasterio.open(path) as src:
                if src.crs is None:
                    raise InputFileError("the elevation model has no CRS; give one in the file "
                                         "(e.g. gdal_edit.py -a_srs)", where=str(path))
                values = src.read(1, masked=True).astype(np.float64).filled(np.nan)
                transform, crs = src.transform, pyproj.CRS.from_user_input(src.crs.to_wkt())
        except rasterio.errors.RasterioError as exc:
            raise InputFileError(f"cannot read the elevation model ({exc})",
                                 where=str(path)) from None
        if transform.b != 0 or transform.d != 0:
            raise InputFileError("the elevation model is rotated; warp it to a north-up grid "
                                 "first", where=str(path))
        return cls(path, values, transform, crs)

    def sample(self, x, y, *, crs, where: str = "line") -> np.ndarray:
        """Elevation (m) at points ``(x, y)`` of ``crs``, bilinear between cell centres.

        Raises
        ------
        InputFileError
            Some point lies outside the model or next to a nodata cell, naming how many and
            the first (in the survey CRS).
        """
        import pyproj
        from scipy.ndimage import map_coordinates
        px, py = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        qx, qy = px, py
        source = pyproj.CRS.from_user_input(crs)
        if not source.equals(self.crs):
            t = pyproj.Transformer.from_crs(source, self.crs, always_xy=True)
            qx, qy = t.transform(px, py)
        t = self.transform  # north-up (checked on reading): no rotation terms
        # cell centres sit at half-integer corner coordinates
        cols = (np.asarray(qx) - t.c) / t.a - 0.5
        rows = (np.asarray(qy) - t.f) / t.e - 0.5
        ny, nx = self.values.shape
        inside = ((rows >= -1e-9) & (rows <= ny - 1 + 1e-9)
                  & (cols >= -1e-9) & (cols <= nx - 1 + 1e-9))
        z = map_coordinates(self.values, [np.clip(rows, 0, ny - 1), np.clip(cols, 0, nx - 1)],
                            order=1, mode="nearest", prefilter=False)
        z[~inside] = np.nan
        bad = np.flatnonzero(~np.isfinite(z))
        if bad.size:
            i = bad[0]
            raise InputFileError(f"the elevation model does not cover {bad.size} of {z.size} "
                                 f"traces of {where} (first at {px[i]:.2f}, {py[i]:.2f}); it "
                                 "must cover the whole survey", where=str(self.path))
        return z


def check_terrain(terrain) -> str | Path:
    """``terrain`` normalised: one of :data:`TERRAIN_WORDS`, or the path of a GeoTIFF."""
    text = str(terrain).strip()
    if text.lower() in TERRAIN_WORDS:
        return text.lower()
    if not text:
        raise SettingsError("expected gnss, table or an elevation model GeoTIFF",
                            where="--terrain")
    return Path(text)


__all__ = ["TERRAIN_WORDS", "ElevationModel", "check_terrain", "surface_from_ends",
           "surface_from_heights"]
