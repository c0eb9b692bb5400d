"""Atomic file writing, the user's file permissions, and output-folder safety.

Every file slicer writes goes first to a temporary file in the same folder and is then renamed
over its final name (``os.replace`` is atomic on POSIX and Windows within one file system), so a
build killed mid-way leaves each file either whole or absent, never half written. A whole build
folder is committed as one unit by :mod:`slicer.core.commit`, with the folder primitives here
(:func:`exchange`, :func:`lock_folder`, :func:`held_interrupt`).

Files and folders get the permissions any program of the user would give them: ``0o666`` and
``0o777`` less the process's umask. ``tempfile.mkstemp`` and ``mkdtemp`` make ``0o600`` and
``0o700`` (private while they are temporary), so :func:`temp_file` and :func:`temp_folder` set
the normal mode at once, before anything is written into them.
"""

from __future__ import annotations

import contextlib
import ctypes
import errno
import io
import os
import shutil
import signal
import stat
import sys
import tempfile
import threading
from collections.abc import Iterable, Iterator
from pathlib import Path

from slicer.core.errors import OutputError, SettingsError

try:
    import fcntl
except ImportError:  # Windows: no advisory locks; a live build folder is then not recognised
    fcntl = None


def current_umask() -> int:
    """The process's umask, read without changing it where the system allows (Linux)."""
    with contextlib.suppress(OSError, ValueError, IndexError):
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    mask = os.umask(0o022)  # elsewhere the only way to read it is to set it, and set it back
    os.umask(mask)
    return mask


def file_mode() -> int:
    """Mode of a new file: ``0o666`` less the umask."""
    return 0o666 & ~current_umask()


def folder_mode() -> int:
    """Mode of a new folder: ``0o777`` less the umask."""
    return 0o777 & ~current_umask()


def writable(folder: str | os.PathLike) -> bool:
    """Whether the user may change ``folder``: :func:`os.access`, and for a folder of the
    user's own its owner's write bit (which root, whom access never refuses, would ignore)."""
    st = os.stat(folder)
    return os.access(folder, os.W_OK) and (st.st_uid != os.geteuid()
                                           or bool(st.st_mode & stat.S_IWUSR))


def take_group(like: str | os.PathLike, folder: str | os.PathLike) -> None:
    """Give ``folder`` the owner (where the user may) and group of ``like``, and its
    set-group-ID bit: a folder that will replace ``like``, before anything is written into it,
    so that its files take the group that writing into ``like`` gives them (a shared project
    folder's, with the bit set) and ``like``'s users keep their access. Best effort: what the
    system refuses is left as the user's defaults."""
    try:
        st = os.stat(like)
    except OSError:
        return
    for owner in (st.st_uid, -1):  # only root may give a folder away; a member its group
        try:
            os.chown(folder, owner, st.st_gid)
            break
        except OSError:
            continue
    if st.st_mode & stat.S_ISGID:
        with contextlib.suppress(OSError):
            os.chmod(folder, stat.S_IMODE(os.stat(folder).st_mode) | stat.S_ISGID)


def temp_file(folder: str | os.PathLike, *, prefix: str, suffix: str = "") -> Path:
    """Create an empty temporary file in ``folder`` with the user's normal file mode."""
    fd, tmp = tempfile.mkstemp(prefix=prefix, suffix=suffix, dir=folder)
    os.close(fd)
    os.chmod(tmp, file_mode())
    return Path(tmp)


def temp_folder(parent: str | os.PathLike, *, prefix: str, suffix: str = "") -> Path:
    """Create an empty temporary folder in ``parent`` with the user's normal folder mode."""
    tmp = tempfile.mkdtemp(prefix=prefix, suffix=suffix, dir=parent)
    os.chmod(tmp, folder_mode())
    return Path(tmp)


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = True) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it to ``path`` if the block succeeds.

    The temporary file keeps the final suffix (GDAL and matplotlib choose a format from it)
    and already has the user's normal file mode. On any exception the temporary file is
    removed and ``path`` is left as it was.

    Parameters
    ----------
    path : path-like
        The final file name.
    overwrite : bool
        Replace a file already at ``path``. When false an existing file is refused before the
        block runs (:func:`refuse_existing`), and the result is put in place by a hard link,
        which fails rather than replace a file that appeared meanwhile.

    Returns
    -------
    contextlib.AbstractContextManager of pathlib.Path
        Use in a ``with`` statement; its target is the temporary file's path, an empty file
        in the same folder as ``path``, to be written inside the block.

    Raises
    ------
    OutputError
        ``overwrite`` is false and ``path`` exists.
    """
    path = refuse_existing(path, overwrite=overwrite)
    tmp_path = temp_file(path.parent, prefix=f".{path.stem}.", suffix=f".tmp{path.suffix}")
    try:
        yield tmp_path
        if overwrite:
            os.replace(tmp_path, path)
        else:
            put_new(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def data_first(data, path, function: str, what: str) -> None:
    """Refuse a writer's call with the path first and the data second (the order two writers
    took before 2026-12-04): SettingsError naming ``function``, rather than a TypeError from
    deep inside the writer."""
    if isinstance(data, str | os.PathLike) and not isinstance(path, str | os.PathLike):
        raise SettingsError(f"the {what} comes first and then the path; got the path "
                            f"{os.fspath(data)!r} first", where=function)


def refuse_existing(path: str | os.PathLike, *, overwrite: bool) -> Path:
    """``path`` as a Path; an OutputError if something is there and ``overwrite`` is false
    (nothing on disk is replaced without the caller asking)."""
    path = Path(path)
    if not overwrite and (path.exists() or path.is_symlink()):
        raise OutputError("already exists (pass overwrite=True to replace it)",
                          where=str(path))
    return path


def put_new(tmp_path: Path, path: Path) -> None:
    """Move ``tmp_path`` to ``path`` only if nothing is there (a link cannot clobber)."""
    try:
        os.link(tmp_path, path)
    except FileExistsError:
        raise OutputError("already exists (pass overwrite=True to replace it)",
                          where=str(path)) from None
    except OSError:  # a file system without hard links: the check before the work stands
        refuse_existing(path, overwrite=False)
        os.replace(tmp_path, path)
        return
    tmp_path.unlink()


def atomic_write_text(path: str | os.PathLike, text: str, *, overwrite: bool = True) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically and return the path (``overwrite``: see
    :func:`atomic_path`)."""
    with atomic_path(path, overwrite=overwrite) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)


def check_room(folder: str | os.PathLike, need: int, *, where: str | os.PathLike) -> None:
    """Refuse to write ``need`` more bytes into ``folder`` if its disk has less room left.

    Checked before each part of a build's outputs (a tile, a slice), with ``need`` the part's
    uncompressed size: a disk that fills meanwhile (another program, or another build) then
    ends the build with one line, before GDAL or zarr meet the full disk, which they report
    with many lines of their own.

    Raises
    ------
    OutputError
        Less than ``need`` bytes free; ``where`` (the output file or folder) is named.
    """
    free = shutil.disk_usage(folder).free
    if free < need:
        from dask.utils import format_bytes  # here: a worker checks without importing dask
        raise OutputError(f"the disk is full: {format_bytes(free)} free, and the next part of the "
                          f"outputs may take {format_bytes(need)}", where=str(where))


class GuardedFile(io.RawIOBase):
    """A binary file whose first write error is kept, not raised; later writes are dropped.

    For files written by a C library that cannot recover from a failed write: HDF5 (h5py,
    h5netcdf) left a half-closed file behind when the disk filled, and closing it again at
    exit crashed the interpreter (segmentation fault). Through this file the library never
    sees an error: it finishes and closes a file that is not whole, and the caller checks
    :attr:`error` afterwards, raises it and removes the file.

    Parameters
    ----------
    path : path-like
        The file, opened ``w+b`` (truncated) or ``r+b``.
    mode : {"w+b", "r+b"}
    """

    def __init__(self, path: str | os.PathLike, mode: str = "w+b"):
        super().__init__()
        if mode not in ("w+b", "r+b"):
            raise ValueError(f"mode must be 'w+b' or 'r+b', not {mode!r}")
        self.path = Path(path)
        self._file = open(self.path, mode, buffering=0)  # closed by close()
        #: The first OSError of a write, truncate or flush, or None.
        self.error: OSError | None = None

    def readable(self) -> bool:
        return True

    def writable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        return self._file.readinto(buffer)

    def write(self, data) -> int:
        size = memoryview(data).nbytes
        if self.error is None:
            try:
                written = self._file.write(data)
            except OSError as exc:
                self.error = exc
            else:
                # a short write is a full disk too; say so with the usual words
                if written is not None and written < size:
                    self.error = OSError(28, os.strerror(28), str(self.path))
        return size

    def seek(self, offset: int, whence: int = io.SEEK_SET) -> int:
        return self._file.seek(offset, whence)

    def tell(self) -> int:
        return self._file.tell()

    def truncate(self, size: int | None = None) -> int:
        try:
            return self._file.truncate(size)
        except OSError as exc:
            self.error = self.error or exc
            return self.tell() if size is None else size

    def flush(self) -> None:
        pass  # unbuffered: every write went straight to the system

    def close(self) -> None:
        if not self.closed:
            self._file.close()
        super().close()

    def check(self) -> None:
        """Raise the kept error (an OSError naming the file), if there is one."""
        if self.error is not None:
            error = self.error
            if error.filename is None:
                error = OSError(error.errno, error.strerror or str(error), str(self.path))
            raise error


class FolderBusy(OutputError):
    """A folder is locked by a running build (:func:`lock_folder`)."""


def lock_folder(path: Path, *, wait: bool = False) -> int | None:
    """Hold an advisory lock on folder ``path``: its descriptor, or None if there are none.

    Raises :class:`FolderBusy` if another process holds it (and ``wait`` is false).
    """
    if fcntl is None:
        return None
    fd = os.open(path, os.O_RDONLY)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
    except OSError as exc:
        os.close(fd)
        if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN):
            raise FolderBusy("is held by a running build", where=str(path)) from None
        return None  # a file system without flock: go on unlocked
    return fd


def unlock(fds: Iterable[int | None]) -> None:
    """Release the locks of :func:`lock_folder` (None stands for no lock)."""
    for fd in fds:
        if fd is not None:
            os.close(fd)  # closing the descriptor releases the lock


def exchange(a: Path, b: Path) -> bool:
    """Swap folders ``a`` and ``b`` in one step; False where the system cannot.

    Linux's ``renameat2(RENAME_EXCHANGE)`` (glibc 2.28+), which Python does not wrap; other
    systems, and file systems without the flag, fall back to two renames.
    """
    if not sys.platform.startswith("linux"):
        return False
    try:
        renameat2 = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):
        return False
    at_fdcwd, rename_exchange = -100, 2
    if renameat2(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.EINVAL, errno.ENOSYS, errno.EOPNOTSUPP, errno.ENOTSUP):
        return False
    raise OSError(code, os.strerror(code), str(b))


@contextlib.contextmanager
def held_interrupt() -> Iterator[None]:
    """Hold back a Ctrl-C (SIGINT) until the block is done, then raise it."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    previous = signal.signal(signal.SIGINT, lambda signum, frame: caught.append(signum))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
    if caught:
        raise KeyboardInterrupt


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

    Returns
    -------
    pathlib.Path
        ``path`` as a Path (created only with ``create``).

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
