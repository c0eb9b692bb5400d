"""From placed traces to a regular grid: depth or time windows, gridding weights and line
levelling.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
