"""The one exception family of slicer.

Every error the library raises on bad input derives from :class:`SlicerError`, so the command
line can turn it into one clear line on stderr and exit code 2.  The message names the file,
row or option at fault; ``where`` carries that name separately for programs that want it.
"""

from __future__ import annotations

import warnings


class SlicerError(Exception):
    """Base class of every slicer error caused by input, settings or the file system.

    Parameters
    ----------
    message : str
        What is wrong, in one line, phrased for the user.
    where : str, optional
        The file, ``file:row`` or ``--option`` at fault; prefixed to the message.
    """

    def __init__(self, message: str, *, where: str | None = None):
        # One line whatever a file name or value holds: line breaks are shown escaped.
        where, message = (None if where is None else _one_line(where)), _one_line(message)
        self.where = where
        self.message = message
        super().__init__(f"{where}: {message}" if where else message)


def _one_line(text) -> str:
    text = str(text)
    if not any(c in text for c in "\r\n\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029"):
        return text
    return "".join(c if len(c.splitlines()) == 1 and c.splitlines()[0] == c
                   else c.encode("unicode_escape").decode("ascii") for c in text)


class InputFileError(SlicerError):
    """A radar or table file is missing, unreadable, truncated or inconsistent."""


class LineTableError(SlicerError):
    """A line table or survey file has a missing, empty or non-numeric field."""


class SettingsError(SlicerError):
    """An option is outside what physics or geometry allows."""


class OutputError(SlicerError):
    """The output location cannot be written without losing something."""


class SlicerWarning(UserWarning):
    """Something was tolerated but the user should know (NaN samples, dropped slices...)."""


def warn(message: str) -> None:
    """Issue a :class:`SlicerWarning` pointing at the caller's caller."""
    warnings.warn(message, SlicerWarning, stacklevel=3)
