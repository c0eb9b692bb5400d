"""Radar velocity: velocity models and their files, hyperbola fitting, the diffraction search and
survey planning.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
