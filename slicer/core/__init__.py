"""Shared pieces every stage uses: errors, naming conventions, radar physics (velocity,
permittivity, time and depth), atomic file writing and progress bars.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
