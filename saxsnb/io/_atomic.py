"""Atomic file writing: write to a temporary file in the target folder, then rename.

A reader never sees a half-written file, and a failed write leaves the old file (if
any) untouched.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from ..errors import SaxsFileError

__all__ = ["atomic_path", "atomic_write_bytes"]


@contextlib.contextmanager
def atomic_path(path, *, overwrite: bool = True) -> Iterator[Path]:
    """Yield a temporary path next to ``path``; on success it replaces ``path``.

    Parameters
    ----------
    path : str or Path
        Final destination.
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
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise SaxsFileError("the folder does not exist", path=folder)
    if target.exists() and not overwrite:
        raise SaxsFileError("the file exists and overwrite=False", path=target)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=folder)
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        yield tmp
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


def atomic_write_bytes(path, data: bytes, *, overwrite: bool = True) -> None:
    """Write ``data`` to ``path`` atomically."""
    with atomic_path(path, overwrite=overwrite) as tmp:
        try:
            with open(tmp, "wb") as f:
                f.write(data)
        except OSError as exc:
            raise SaxsFileError(f"cannot write: {exc}", path=path) from exc
