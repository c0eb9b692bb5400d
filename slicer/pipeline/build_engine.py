"""The engine a build's settings ask for, chosen without importing the heavy stack.

:func:`slicer.pipeline.build.build` opens it first, so that a ``processes`` engine's fork
server imports the task modules while the calling process imports the rest of the build.
"""

from __future__ import annotations

from slicer.io.reading import line_info
from slicer.pipeline.engine import Engine, parse_scheduler
from slicer.pipeline.settings import BuildSettings


def open_engine(settings: BuildSettings) -> Engine:
    """The engine ``settings.scheduler`` names (a context manager); for ``auto``, chosen by
    the survey's trace count, read from the line files' headers."""
    traces = None
    if settings.scheduler == "auto":
        traces = sum(line_info(e.file).n_traces for e in settings.lines)
    return Engine(parse_scheduler(settings.scheduler, traces=traces))


__all__ = ["open_engine"]
