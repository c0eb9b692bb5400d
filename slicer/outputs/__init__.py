"""What a build writes: the slice cube (NetCDF, Zarr), GeoTIFF slices, figures and the sink that
streams tiles into all of them.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
