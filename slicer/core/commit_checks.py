"""The checks an output folder passes before a build writes anything
(:class:`slicer.core.commit.OutputFolder`): nothing the user wrote is replaced, no input is
overwritten, and the folder can be switched out whole.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from fnmatch import fnmatchcase
from pathlib import Path, PurePosixPath

from slicer.core.atomic import writable
from slicer.core.errors import OutputError


def covered(rel: str, entries: set[str]) -> bool:
    """``rel`` is one of ``entries`` or lies inside one of them."""
    p = PurePosixPath(rel)
    return any(str(q) in entries for q in (p, *list(p.parents)[:-1]))


def check_place(target: Path, given: Path) -> None:
    """Refuse an existing output folder the build cannot switch out: read-only, a mount point,
    or holding the current folder."""
    where = str(given)
    if not writable(target):  # the build would replace it all the same: say so instead
        raise OutputError("is read-only; make it writable to build into it, or choose "
                          "another --out", where=where)
    if os.path.ismount(target):
        raise OutputError("is a mount point; slicer builds beside the output folder and "
                          "switches it in whole, so give a folder inside it", where=where)
    try:
        cwd = Path(os.path.realpath(os.getcwd()))
    except OSError:  # the current folder was deleted: it is not in the output folder
        return
    if cwd == target or target in cwd.parents:
        raise OutputError("holds the current folder, which the finished build replaces; "
                          "run slicer from another folder", where=where)


def check_inputs(target: Path, inputs: Iterable[str | os.PathLike], *, owned: set[str],
                 names: list[str]) -> None:
    """Refuse an input of the build that lies where an output (one of ``names``, or what the
    earlier build wrote, ``owned``) would replace it."""
    for given in inputs:
        path = Path(os.path.realpath(given))
        if target not in path.parents:
            continue
        rel = path.relative_to(target).as_posix()
        parts = [str(p) for p in (PurePosixPath(rel), *list(PurePosixPath(rel).parents)[:-1])]
        if covered(rel, owned) or any(fnmatchcase(p, n) for p in parts for n in names):
            raise OutputError("is an input of this build and lies where its outputs go; "
                              "move it out of the output folder or choose another --out",
                              where=str(given))


def check_taken(target: Path, rels: Iterable[str], folders: Iterable[str] = (), *,
                owned: set[str]) -> None:
    """Refuse if the output folder holds, at one of ``rels``, something the earlier build
    did not write (not in ``owned``), or anything but a folder at one of ``folders`` or their
    parents."""
    checks = [(PurePosixPath(r), True) for r in rels]
    checks += [(PurePosixPath(f), False) for f in folders]
    for p, whole in checks:
        for part in [*reversed(list(p.parents)[:-1]), p]:
            path = target / part
            if not os.path.lexists(path) or covered(part.as_posix(), owned):
                continue
            if (whole and part == p) or path.is_symlink() or not path.is_dir():
                raise OutputError("was not written by slicer (the folder's record.json does "
                                  "not list it), and an output of this build would replace "
                                  "it; move it away or choose another --out",
                                  where=str(path))


__all__ = ["check_inputs", "check_place", "check_taken", "covered"]
