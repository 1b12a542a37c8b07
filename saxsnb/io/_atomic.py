"""Atomic file writing, the one implementation used by every writer of saxsnb.

A file is written to a temporary file in the target's folder, flushed to disk
(``fsync``), given the mode a plain ``open(path, "w")`` would give it (the umask's, or
the old file's when one is replaced), then renamed over the target, and the folder is
synced. A reader never sees a half-written file; a failed or killed write leaves the
old file (if any) untouched. A target that is a symbolic link is written through: the
file it points to is replaced and the link stays.

Temporary files are named ``.<name>.<pid>-<random>.saxsnb-tmp``; those left behind by a
killed write (their process is gone, or they are older than a day) are removed by the
next write of the same name.

A series written as one text file per frame is written as a set
(:func:`atomic_folder`): into a temporary sibling folder, then swapped into place.
"""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import os
import shutil
import stat
import tempfile
import threading
import time
from collections.abc import Iterator
from pathlib import Path

from ..errors import SaxsFileError

__all__ = ["atomic_path", "atomic_write_bytes", "atomic_folder", "TMP_SUFFIX"]

#: Suffix of the temporary files and folders of unfinished writes.
TMP_SUFFIX = ".saxsnb-tmp"
_STALE_AFTER = 86400.0  # seconds: a temporary file this old belongs to no running write
_umask_lock = threading.Lock()


def _umask() -> int:
    with _umask_lock:
        mask = os.umask(0o022)
        os.umask(mask)
    return mask


def _fsync_dir(folder: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def _fsync_file(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _clean_stale(folder: Path, name: str) -> None:
    """Remove temporary files or folders of killed writes of ``name`` in ``folder``."""
    now = time.time()
    with contextlib.suppress(OSError), os.scandir(folder) as entries:
        for entry in entries:
            if not (entry.name.startswith(f".{name}.") and entry.name.endswith(TMP_SUFFIX)):
                continue
            with contextlib.suppress(OSError):
                age = now - entry.stat(follow_symlinks=False).st_mtime
                if age < _STALE_AFTER and _alive(entry.name, name):
                    continue
                if entry.is_dir(follow_symlinks=False):
                    shutil.rmtree(entry.path, ignore_errors=True)
                else:
                    os.unlink(entry.path)


def _alive(entry: str, name: str) -> bool:
    """Whether the process that made the temporary ``entry`` may still be writing it."""
    pid = entry[len(name) + 2 :].split("-", 1)[0]
    if not pid.isdigit():
        return False
    if int(pid) == os.getpid():
        return True  # another thread of this process may be writing
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


def _has_entries(folder: Path) -> bool:
    with os.scandir(folder) as entries:
        return any(True for _ in entries)


def _prefix(name: str) -> str:
    return f".{name}.{os.getpid()}-"


def _real_target(path) -> Path:
    """The file that a write to ``path`` must replace (a symlink's target, resolved)."""
    target = Path(path)
    if target.is_symlink():
        target = Path(os.path.realpath(target))
    return target


@contextlib.contextmanager
def atomic_path(path, *, overwrite: bool = True) -> Iterator[Path]:
    """Yield a temporary path next to ``path``; on success it replaces ``path``.

    The code inside the ``with`` block writes the temporary file by name (any
    library may do so) and closes it; the file is then synced, given its mode and
    renamed over ``path``.

    Parameters
    ----------
    path : str or Path
        Final destination (a symbolic link is written through).
    overwrite : bool
        If False and ``path`` exists, raise :class:`SaxsFileError` before writing.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_path(d / "a.txt") as tmp:
    ...     _ = tmp.write_text("hello")
    >>> (d / "a.txt").read_text()
    'hello'
    """
    target = _real_target(path)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise SaxsFileError("the folder does not exist", path=folder)
    exists = os.path.lexists(path)
    if exists and not overwrite:
        raise SaxsFileError("the file exists and overwrite=False", path=path)
    if target.is_dir():
        raise SaxsFileError("a folder of that name exists", path=path)
    _clean_stale(folder, target.name)
    try:
        mode = stat.S_IMODE(os.stat(target).st_mode)
    except OSError:
        mode = 0o666 & ~_umask()
    try:
        fd, tmp_name = tempfile.mkstemp(prefix=_prefix(target.name), suffix=TMP_SUFFIX, dir=folder)
    except OSError as exc:
        raise SaxsFileError(f"cannot write: {exc.strerror or exc}", path=path) from exc
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        yield tmp
        try:
            os.chmod(tmp, mode)
            _fsync_file(tmp)
            os.replace(tmp, target)
        except OSError as exc:
            raise SaxsFileError(f"cannot write: {exc.strerror or exc}", path=path) from exc
        _fsync_dir(folder)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


def atomic_write_bytes(path, data: bytes, *, overwrite: bool = True) -> None:
    """Write ``data`` to ``path`` atomically (see :func:`atomic_path`).

    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "b.txt"
    >>> atomic_write_bytes(p, b"x")
    >>> p.read_bytes()
    b'x'
    """
    with atomic_path(path, overwrite=overwrite) as tmp:
        try:
            with open(tmp, "wb") as f:
                f.write(data)
        except OSError as exc:
            raise SaxsFileError(f"cannot write: {exc.strerror or exc}", path=path) from exc


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths in one step (Linux ``renameat2(RENAME_EXCHANGE)``); False if the
    system cannot."""
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or None, use_errno=True)
        fn = libc.renameat2
    except (OSError, AttributeError):
        return False
    at_fdcwd, exchange = -100, 2
    res = fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), exchange)
    return res == 0


def _remove_soon(tmp: Path, tries: int = 20) -> None:
    """Remove a failed write's temporary folder. A parallel writer (dask's threads,
    still finishing their chunks after the first one failed) may add files after the
    first removal, so it is repeated for up to about two seconds; what is left then
    is removed by the next write (``_clean_stale``)."""
    for _ in range(tries):
        shutil.rmtree(tmp, ignore_errors=True)
        time.sleep(0.1)
        if not tmp.exists():
            return


@contextlib.contextmanager
def atomic_folder(folder, *, overwrite: bool = False) -> Iterator[Path]:
    """Yield a new temporary folder; on success it becomes ``folder`` as a whole.

    ``folder`` must not exist, be empty, or ``overwrite=True``, in which case its
    old content is replaced completely (the old and the new set are swapped in one
    step where the system allows it, else by two renames). A killed write leaves the
    old set, or a temporary folder that the next write removes.

    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp()) / "set"
    >>> with atomic_folder(d) as tmp:
    ...     _ = (tmp / "a.dat").write_text("1 2")
    >>> sorted(p.name for p in d.iterdir())
    ['a.dat']
    """
    folder = Path(folder)
    if folder.is_symlink():
        folder = Path(os.path.realpath(folder))
    parent = folder.parent if str(folder.parent) else Path(".")
    if not parent.is_dir():
        try:
            parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise SaxsFileError(f"cannot create the folder: {exc.strerror or exc}", path=parent) from exc
    exists = folder.exists()
    if exists and not folder.is_dir():
        raise SaxsFileError("exists and is not a folder", path=folder)
    if exists and not overwrite and _has_entries(folder):
        raise SaxsFileError(
            "the folder is not empty; pass overwrite=True to replace its content as a whole, "
            "or choose a new folder",
            path=folder,
        )
    _clean_stale(parent, folder.name)
    try:
        tmp = Path(tempfile.mkdtemp(prefix=_prefix(folder.name), suffix=TMP_SUFFIX, dir=parent))
    except OSError as exc:
        raise SaxsFileError(f"cannot write: {exc.strerror or exc}", path=folder) from exc
    try:
        yield tmp
        try:
            os.chmod(tmp, 0o777 & ~_umask() if not exists else stat.S_IMODE(os.stat(folder).st_mode))
            with os.scandir(tmp) as entries:
                for entry in entries:
                    _fsync_file(Path(entry.path))
            _fsync_dir(tmp)
            if not exists:
                os.rename(tmp, folder)
            elif _exchange(tmp, folder):
                shutil.rmtree(tmp)  # now the old set
            else:
                old = Path(tempfile.mkdtemp(prefix=_prefix(folder.name), suffix=TMP_SUFFIX, dir=parent))
                os.rmdir(old)
                os.rename(folder, old)
                os.rename(tmp, folder)
                shutil.rmtree(old, ignore_errors=True)
        except OSError as exc:
            raise SaxsFileError(f"cannot write the set: {exc.strerror or exc}", path=folder) from exc
        _fsync_dir(parent)
    except BaseException:
        _remove_soon(tmp)
        raise
