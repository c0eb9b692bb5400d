"""A build's output folder, committed as one unit: every interruption leaves one build whole.

The scheme
----------
``OUT`` is the output folder (symlinks resolved). A build never writes into ``OUT``. It writes
every output, the record last, into a *stage*: a new folder beside ``OUT`` named
``<OUT>.slicer-new-<id>`` (``<id>``: 12 hex digits, new for each build). Only when the stage is
complete is it *switched* in:

1. The stage and ``OUT`` are exchanged in one step (Linux ``renameat2(RENAME_EXCHANGE)``): the
   name ``OUT`` now holds the new build, the stage's name the earlier folder. Where the system
   cannot exchange, ``OUT`` is renamed to ``<OUT>.slicer-old-<id>`` and the stage to ``OUT``
   (two steps). A new ``OUT`` is simply the stage renamed.
2. The earlier folder is renamed to ``<OUT>.slicer-old-<id>``.
3. Every entry of the earlier folder that its build did not write (its ``record.json`` lists
   what it wrote, under ``"outputs"``) is put back into ``OUT`` by rename: whole entries, going
   into a folder that both hold (``slices/``) to move its entries one by one. The user's files
   therefore survive, and so do files that appeared during the build.
4. What is left of the earlier build is deleted, then the old folder if it is empty.

A Ctrl-C during steps 1-4 (a few milliseconds) is held back until they are done.

Before anything is read, the build refuses (one :class:`OutputError`) to replace what slicer did
not write: an entry of ``OUT`` with an output's name that the earlier record does not list, a
``record.json`` that is not a slicer record, or an input of the build (line file, table, track,
control points, velocity model...) that an output would replace. The exact slice names are
checked again just before the switch.

Crash points (the process killed, or stopped with the machine once what it wrote reached the
disk: slicer does not fsync)
----------------------------------------------------------------------------------------------
- Before step 1 (start-up, reading, gridding, writing the stage): ``OUT`` is untouched, the
  earlier build whole. The stage is left over.
- Between steps 1 and 4: ``OUT`` is the new build, whole; the earlier folder, with any user
  files not yet put back, is left beside it under a ``slicer-new``/``slicer-old`` name.
- Only in the two-step fallback of step 1, between its two renames (one system call), is
  ``OUT`` missing; both folders are whole beside it.

Recovery (:func:`recover`) runs at the start of every build into ``OUT``: it finds the folders
of any earlier interrupted build by name and finishes or undoes its commit. A ``slicer-old``
folder, or a ``slicer-new`` one whose id is the ``build_id`` of the record in ``OUT``, holds an
earlier folder: its user files are put back and the rest deleted. Any other ``slicer-new``
folder is an unfinished stage and is deleted. If ``OUT`` is missing the switch is finished
(stage to ``OUT``). A folder still held by a running build (an ``flock`` on it, where the system
has one) is left alone. Temporary files of slicer versions that wrote into ``OUT`` directly
(``.cube.xxxxxxxx.tmp.nc`` and the like) are deleted too.

``OUT`` cannot be a mount point, nor contain the current folder (it is renamed away); the
folder beside it must be writable.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import secrets
import shutil
from collections.abc import Callable, Iterable
from pathlib import Path, PurePosixPath

from slicer.core.atomic import (
    FolderBusy,
    atomic_write_text,
    exchange,
    held_interrupt,
    lock_folder,
    prepare_output_dir,
    take_group,
    unlock,
)
from slicer.core.commit_checks import check_inputs, check_place, check_taken, covered
from slicer.core.errors import OutputError, SlicerError, warn

#: The record of a build, kept in its output folder; lists the build's outputs.
RECORD = "record.json"

#: Temporary files of slicer versions that wrote into the output folder directly.
_LEGACY = re.compile(r"\.(?:(?:slice_\d+_[^/]*|cube|overview|record)\.[a-z0-9_]{8}\.tmp\."
                     r"(?:tif|nc|png|json)|cube\.zarr\.(?:[a-z0-9_]{8}\.tmp|old-[0-9a-f]{8})|"
                     r"cube\.nc\.[a-z0-9_]{8}\.(?:tmp|parts))")


def sibling(target: Path, kind: str, build_id: str) -> Path:
    """The stage (``kind="new"``) or earlier folder (``"old"``) of build ``build_id``."""
    return target.with_name(f"{target.name}.slicer-{kind}-{build_id}")


def _siblings(target: Path) -> dict[str, dict[str, Path]]:
    """Stages and earlier folders beside ``target``, by build id."""
    pattern = re.compile(re.escape(target.name) + r"\.slicer-(new|old)-([0-9a-f]{12})")
    found: dict[str, dict[str, Path]] = {}
    with contextlib.suppress(FileNotFoundError, NotADirectoryError):
        for entry in os.scandir(target.parent):
            m = pattern.fullmatch(entry.name)
            if m and entry.is_dir(follow_symlinks=False):
                found.setdefault(m.group(2), {})[m.group(1)] = Path(entry.path)
    return found


def read_record(folder: Path) -> dict | None:
    """The slicer record in ``folder`` (a dict with ``outputs``), or None if there is none.

    Raises
    ------
    OutputError
        ``record.json`` exists but is not a slicer record.
    """
    path = folder / RECORD
    if not os.path.lexists(path):
        return None
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        record = None
    if (not isinstance(record, dict) or "slicer" not in record
            or not isinstance(record.get("outputs"), list)):
        raise OutputError("is not the record of a slicer build; not replaced (move it away, or "
                          "choose another --out)", where=str(path))
    return record


def owned_entries(record: dict | None) -> set[str]:
    """The paths (relative, POSIX) a record says its build wrote, and the record itself."""
    if record is None:
        return set()
    owned = {RECORD}
    for entry in record.get("outputs", []):
        if isinstance(entry, str):
            p = PurePosixPath(entry)
            # only plain relative paths inside the folder: a record never reaches outside it
            if p.parts and not p.is_absolute() and not {"..", "."} & set(p.parts):
                owned.add(p.as_posix())
    return owned


def _record_id(folder: Path) -> str | None:
    with contextlib.suppress(OSError, ValueError, OutputError):
        record = read_record(folder)
        if record is not None:
            return record.get("build_id")
    return None


def _put_back(old: Path, target: Path, owned: set[str], rel: str = "") -> list[str]:
    """Move every entry of ``old`` not in ``owned`` into ``target``; the paths kept in ``old``.

    An entry moves whole when ``target`` has nothing of that name; where both hold a folder
    (not a symlink) of that name its entries are moved one by one. An entry whose name is
    taken in ``target`` by something else stays in ``old``.
    """
    kept = []
    here = old / rel if rel else old
    for name in sorted(os.listdir(here)):
        r = f"{rel}/{name}" if rel else name
        if r in owned:
            continue
        src, dst = old / r, target / r
        if not os.path.lexists(dst):
            try:
                os.rename(src, dst)
            except OSError:
                kept.append(r)
        elif (src.is_dir() and not src.is_symlink() and dst.is_dir()
              and not dst.is_symlink()):
            kept += _put_back(old, target, owned, r)
        else:
            kept.append(r)
    return kept


def _remove_owned(old: Path, owned: set[str], kept: list[str]) -> None:
    """Delete the entries of ``owned`` in ``old``, then its folders left empty (not kept ones)."""
    for r in sorted(owned):
        path = old / r
        # never through a symlink: a record names paths inside its folder only
        if any(p.is_symlink() for p in [*list(path.parents)[:len(PurePosixPath(r).parts) - 1]]):
            continue
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            with contextlib.suppress(FileNotFoundError, IsADirectoryError, PermissionError):
                path.unlink()
    keep = set(kept)
    for folder, _, _ in os.walk(old, topdown=False):
        r = "" if Path(folder) == old else Path(folder).relative_to(old).as_posix()
        if r and (covered(r, keep) or any(k.startswith(r + "/") for k in keep)):
            continue
        with contextlib.suppress(OSError):
            os.rmdir(folder)  # only when empty


def _retire(old: Path, target: Path) -> None:
    """Put back the user's entries of an earlier folder ``old`` into ``target``, delete the rest."""
    _clear(old, target, *_put_back_users(old, target))


def _put_back_users(old: Path, target: Path) -> tuple[set[str], list[str]]:
    """Put back what the build of ``old`` did not write; what it wrote, and what stayed."""
    try:
        owned = owned_entries(read_record(old))
    except OutputError:
        owned = set()  # not a slicer record: everything in it is the user's
    return owned, _put_back(old, target, owned)


def _clear(old: Path, target: Path, owned: set[str], kept: list[str]) -> None:
    """Delete the earlier build in ``old``; warn of entries that could not be put back."""
    _remove_owned(old, owned, kept)
    if kept:
        shown = ", ".join(kept[:5]) + (" ..." if len(kept) > 5 else "")
        warn(f"{old}: kept, it holds entries that could not be put back into {target} "
             f"(their names taken there, or the move refused) ({shown}); move them yourself")


def _remove_legacy(target: Path) -> None:
    for folder in (target, target / "slices"):
        with contextlib.suppress(OSError):
            for entry in os.scandir(folder):
                if _LEGACY.fullmatch(entry.name):
                    if entry.is_dir(follow_symlinks=False):
                        shutil.rmtree(entry.path, ignore_errors=True)
                    else:
                        with contextlib.suppress(OSError):
                            os.unlink(entry.path)


def recover(target: str | os.PathLike) -> None:
    """Finish or undo the commit of any interrupted build into ``target`` (see the module
    docstring), and delete its leftovers. Folders of a build still running are left alone."""
    target = Path(os.path.realpath(target))
    for build_id, found in sorted(_siblings(target).items()):
        fds: list[int | None] = []
        try:
            for path in found.values():
                fds.append(lock_folder(path))
        except (FolderBusy, OSError):
            unlock(fds)
            continue  # a build still running, another process recovering it, or unreadable
        try:
            _recover_one(target, build_id, found)
        except OSError as exc:
            warn(f"{target}: could not clear what an interrupted build left beside it "
                 f"({exc}); the next build retries")
        finally:
            unlock(fds)
    if target.is_dir():
        _remove_legacy(target)


def _recover_one(target: Path, build_id: str, found: dict[str, Path]) -> None:
    new, old = found.get("new"), found.get("old")
    if not os.path.lexists(target) and old is not None:
        if new is not None:  # between the two renames of a switch: the stage was complete
            os.rename(new, target)
            new = None
        else:
            os.rename(old, target)
            old = None
    earlier = [old] if old is not None else []
    if new is not None:
        if _record_id(target) == build_id:
            earlier.append(new)  # switched: the stage's name holds the earlier folder
        else:
            shutil.rmtree(new, ignore_errors=True)  # a stage never switched in
    for folder in earlier:
        _retire(folder, target)


class OutputFolder:
    """The output folder of one build: written aside, switched in whole (module docstring).

    Constructing it recovers any earlier interrupted build and checks the folder; entering it
    makes the stage (:attr:`path`), where the build writes everything; :meth:`commit` writes
    the record and switches the stage in. Leaving the block without a commit, or on an
    exception, deletes the stage and leaves ``out`` as it was.

    Parameters
    ----------
    out : path-like
        The output folder.
    overwrite : bool
        Allow a folder that is not empty: the earlier build's outputs are replaced, every other
        entry kept.
    inputs : iterable of path-like
        The build's input files: refused if an output would replace one.
    names : iterable of str
        The outputs the build may write, relative POSIX paths or ``fnmatch`` patterns
        (``"slices/slice_*.tif"``); the record is added.

    Raises
    ------
    OutputError
        ``out`` is a file or a mount point, holds the current folder, is not empty (without
        ``overwrite``), has entries with the outputs' names that slicer did not write, or an
        input would be replaced.
    """

    def __init__(self, out: str | os.PathLike, *, overwrite: bool = False,
                 inputs: Iterable[str | os.PathLike] = (), names: Iterable[str] = ()):
        self.given = Path(out)
        self.target = Path(os.path.realpath(out))
        self.names = [*names, RECORD]
        self.build_id = secrets.token_hex(6)
        self._fds: list[int | None] = []
        self._created: list[Path] = []
        self._state = "new"
        target = self.target
        prepare_output_dir(self.given, overwrite=True, create=False)  # not a file, nor in one
        if target.is_dir():
            check_place(target, self.given)
        #: The stage: the folder beside ``out`` that the build writes into.
        self.path = sibling(target, "new", self.build_id)
        recover(target)
        prepare_output_dir(self.given, overwrite=overwrite, create=False)  # empty, or overwrite
        self._owned = owned_entries(read_record(target)) if target.is_dir() else set()
        check_inputs(target, inputs, owned=self._owned, names=self.names)
        fixed = [n for n in self.names if not any(c in n for c in "*?[")]
        folders = {str(PurePosixPath(n).parent) for n in self.names if n not in fixed}
        check_taken(target, fixed, folders - {"."}, owned=self._owned)

    def __enter__(self) -> OutputFolder:
        parent = self.target.parent
        missing = [p for p in (parent, *parent.parents) if not p.exists()]
        try:
            parent.mkdir(parents=True, exist_ok=True)
            self._created = missing
            os.mkdir(self.path)  # the user's normal folder mode
            take_group(self.target, self.path)  # and the group of the folder it replaces
            self._state = "staged"
            self._fds.append(lock_folder(self.path))
        except OSError as exc:
            self._discard()
            raise OutputError(f"cannot create the build folder beside the output folder "
                              f"({exc.strerror or exc})", where=str(self.path)) from None
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if self._state == "staged":
            self._discard()
        unlock(self._fds)
        self._fds = []
        if exc is not None:
            self._name_final(exc)

    def _name_final(self, exc: BaseException) -> None:
        """Name the output folder, not the stage, in an error (what the user knows of)."""
        stage, final = str(self.path), str(self.given)
        if isinstance(exc, SlicerError):
            exc.where = exc.where.replace(stage, final) if exc.where else exc.where
            exc.message = exc.message.replace(stage, final)
            exc.args = tuple(a.replace(stage, final) if isinstance(a, str) else a
                             for a in exc.args)
        elif isinstance(exc, OSError):
            for attr in ("filename", "filename2"):
                value = getattr(exc, attr)
                if isinstance(value, str):
                    setattr(exc, attr, value.replace(stage, final))

    def _discard(self) -> None:
        shutil.rmtree(self.path, ignore_errors=True)
        self._state = "discarded"
        for folder in self._created:  # innermost first; only folders made for this build
            with contextlib.suppress(OSError):
                folder.rmdir()

    def commit(self, outputs: Iterable[str], record: dict, *,
               default: Callable | None = None) -> list[Path]:
        """Write ``record`` (with ``outputs`` and ``build_id`` added) and switch the stage in.

        Parameters
        ----------
        outputs : iterable of str
            The outputs written into the stage, relative POSIX paths.
        record : dict
            The build's record; updated in place and written to ``record.json`` (JSON,
            ``default`` converting what json cannot).

        Returns
        -------
        list of pathlib.Path
            The outputs in the output folder, the record last.
        """
        if self._state != "staged":
            raise OutputError(f"the build folder is {self._state}, not staged",
                              where=str(self.path))
        outputs = [PurePosixPath(o).as_posix() for o in outputs]
        check_taken(self.target, [*outputs, RECORD], owned=self._owned)
        self._sweep(outputs)
        record["outputs"] = outputs
        record["build_id"] = self.build_id
        try:
            atomic_write_text(self.path / RECORD,
                              json.dumps(record, indent=2, default=default) + "\n")
        except OSError as exc:
            raise OutputError(f"cannot write the record ({exc.strerror or exc})",
                              where=str(self.given / RECORD)) from None
        self._switch()
        return [self.given / o for o in [*outputs, RECORD]]

    def _sweep(self, outputs: list[str]) -> None:
        """Delete what the stage holds besides ``outputs`` and the record (a writer's leftover)."""
        keep = {PurePosixPath(o).parts[0] for o in outputs} | {RECORD}
        for entry in [e for e in self.path.iterdir() if e.name not in keep]:
            remove = shutil.rmtree if entry.is_dir() and not entry.is_symlink() else os.remove
            with contextlib.suppress(OSError):
                remove(entry)

    def _switch(self) -> None:
        target, stage = self.target, self.path
        old = sibling(target, "old", self.build_id)
        with held_interrupt():  # a Ctrl-C waits for the renames (well under a millisecond)
            try:
                if not target.is_dir():
                    os.rename(stage, target)
                    self._state = "committed"
                    return
                shutil.copystat(target, stage)  # the folder keeps its mode (and ACLs)
                # the earlier folder is held too: no other build's recovery takes it meanwhile
                self._fds.append(lock_folder(target, wait=True))
                if exchange(stage, target):
                    self._state = "committed"
                    with contextlib.suppress(OSError):
                        os.rename(stage, old)
                        stage = old
                else:
                    os.rename(target, old)
                    try:
                        os.rename(stage, target)
                    except OSError:
                        os.rename(old, target)
                        raise
                    self._state = "committed"
                    stage = old
            except OSError as exc:
                raise OutputError(f"cannot switch the finished build in "
                                  f"({exc.strerror or exc})", where=str(self.given)) from None
            try:
                owned, kept = _put_back_users(stage, target)
            except OSError as exc:  # the build is in place; the next one finishes this
                warn(f"{stage}: the files in it not written by slicer were not all put back "
                     f"({exc.strerror or exc}); the next build into {target} does")
                return
        # deleting the earlier build may take a while: a Ctrl-C meanwhile leaves the rest to
        # the next build
        try:
            _clear(stage, target, owned, kept)
        except OSError as exc:
            warn(f"{stage}: the earlier build in it was not all deleted ({exc.strerror or exc}); "
                 f"the next build into {target} does")


__all__ = ["OutputFolder", "read_record", "recover"]
