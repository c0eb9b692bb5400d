"""Where every trace lies: straight lines from the table, trace headers, GNSS tracks, distance
marks, local grids, multi-channel swaths, line crossings and whole surveys.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
