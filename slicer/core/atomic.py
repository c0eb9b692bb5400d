"""Atomic file writing and output-folder safety.

Every file slicer writes goes first to a temporary file in the same folder and is then renamed
over its final name (``os.replace`` is atomic on POSIX and Windows within one file system), so a
build killed mid-way leaves each file either whole or absent, never half written.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from slicer.core.errors import OutputError


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` if the block succeeds.

    The temporary file keeps the final suffix (GDAL and matplotlib choose a format from it).
    On any exception the temporary file is removed and ``path`` is left as it was.

    Parameters
    ----------
    path : path-like
        The final file name.
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=f".tmp{path.suffix}",
                               dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.replace(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def atomic_write_text(path: str | os.PathLike, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically and return the path."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def prepare_output_dir(path: str | os.PathLike, *, overwrite: bool = False,
                       create: bool = True) -> Path:
    """Check that ``path`` can take a build's outputs, and create it.

    Parameters
    ----------
    path : path-like
        The output folder.
    overwrite : bool
        Allow a folder that already holds files; slicer then replaces its own outputs.
    create : bool
        Create the folder (and parents). With ``False`` only the checks run, so a build can
        refuse bad settings before anything is written.

    Raises
    ------
    OutputError
        If ``path`` is a file, or a non-empty folder and ``overwrite`` is false.
    """
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise OutputError("output path is a file, not a folder", where=str(path))
    if path.is_dir() and any(path.iterdir()) and not overwrite:
        raise OutputError("output folder is not empty (use --overwrite to replace its outputs)",
                          where=str(path))
    for parent in path.parents:
        if parent.exists():
            if not parent.is_dir():
                raise OutputError("a parent of the output path is a file", where=str(parent))
            break
    if create:
        try:
            path.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create output folder ({exc.strerror})",
                              where=str(path)) from None
    return path
