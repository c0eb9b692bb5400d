"""Reading and writing survey files: SEG-Y and NetCDF radar lines, the line table and TOML files.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
