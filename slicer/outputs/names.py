"""The names of a build's outputs inside its folder, without the modules that write them.

A build claims these names in its output folder (:class:`slicer.core.commit.OutputFolder`)
before it starts; keeping them here lets it do so without importing the writers (zarr,
rasterio, dask: a quarter of a second), which it imports once its workers are starting.
"""

from __future__ import annotations

#: The cube's outputs: slice GeoTIFFs (a folder), the Zarr and NetCDF cubes, the overview.
SLICES_DIR, ZARR_NAME, NETCDF_NAME, OVERVIEW_NAME = "slices", "cube.zarr", "cube.nc", "overview.png"
#: The pages of an overview longer than one page: overview-01.png, overview-02.png, ...
OVERVIEW_PAGES = "overview-*.png"
#: What a sink may write into the folder: names and patterns, relative POSIX paths.
OUTPUT_NAMES = (f"{SLICES_DIR}/slice_*.tif", ZARR_NAME, NETCDF_NAME, OVERVIEW_NAME,
                OVERVIEW_PAGES)
#: The cube outputs a sink can write, by the name ``formats`` gives them.
FORMATS = {"tif": f"{SLICES_DIR}/slice_*.tif", "zarr": ZARR_NAME, "nc": NETCDF_NAME}
#: The build's radargrams (a folder) and the viewer page.
RADARGRAMS_DIR, VIEWER_NAME = "radargrams", "viewer.html"
#: The outputs :mod:`slicer.pipeline.view` writes, as names and patterns.
VIEW_NAMES = (f"{RADARGRAMS_DIR}/*.png", VIEWER_NAME)
#: Zarr format written by default (see :mod:`slicer.outputs.zarr_store` for why not 3).
ZARR_FORMAT = 2

__all__ = ["FORMATS", "NETCDF_NAME", "OUTPUT_NAMES", "OVERVIEW_NAME", "OVERVIEW_PAGES",
           "RADARGRAMS_DIR", "SLICES_DIR", "VIEWER_NAME", "VIEW_NAMES", "ZARR_FORMAT",
           "ZARR_NAME"]
