"""Warnings raised in a worker process, carried back with the task's result and raised again
in the calling process.

A build collects its warnings in the calling process (``warnings.catch_warnings``) and lists
them in its record: a file whose samples hold NaN, trace headers in feet, uneven trace steps
before migration. On threads every task warns there. A task run by a worker process (or a
dask worker) warns in that process, where the warning went to the worker's stderr and never
reached the record. So such a task runs under :func:`run_capturing`, which records its
warnings, and the engine raises each again in the calling process as its result is taken
(:func:`replay`), with its category, text and place, so the caller's filters decide, as for a
task on a thread.
"""

from __future__ import annotations

import pickle
import warnings
from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True)
class CaughtWarning:
    """One warning raised in a worker: its category, text and where it was raised."""

    category: type[Warning]
    message: str
    filename: str
    lineno: int


def run_capturing(func: Callable, item) -> tuple[object, list[CaughtWarning]]:
    """``func(item)`` and the warnings it raised (in a worker process; module level, so
    picklable). Every warning is kept (``"always"``): the calling process's filters decide
    what is shown, as they do for tasks on its threads.

    Not for a process that runs several tasks on threads at once: ``catch_warnings`` is
    process-wide (Python docs, warnings module), so a warning could be kept by another
    task's capture; it is still raised again, once.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = func(item)
    return result, [_portable(w) for w in caught]


def _portable(w: warnings.WarningMessage) -> CaughtWarning:
    category = w.category
    try:  # a category defined where the calling process cannot import it
        pickle.dumps(category)
    except (pickle.PicklingError, AttributeError, TypeError):
        category = UserWarning
    return CaughtWarning(category, str(w.message), str(w.filename), int(w.lineno or 0))


def replay(caught: list[CaughtWarning], registry: dict) -> None:
    """Raise again, in this process, the warnings a worker's task raised.

    ``registry`` is shared by the results of one map: a warning shown once per place by the
    filters in force ("default") is shown once per map, not once per task.
    """
    for w in caught:
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno,
                               registry=registry)


__all__ = ["CaughtWarning", "replay", "run_capturing"]
