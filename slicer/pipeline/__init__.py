"""Builds end to end: settings, the task engine, memory budgets, per-line tasks, survey ties, the
velocity analysis of a survey, the build itself and the demo.

The public names are re-exported by :mod:`slicer`; import them from there.
"""
