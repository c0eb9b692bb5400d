"""Trace processing: time zero, dewow, background removal, gain, envelope, migration and the
measurement of ties at line crossings.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
