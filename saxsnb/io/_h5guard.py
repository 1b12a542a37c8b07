"""Careful access to HDF5 files (NXcanSAS and NetCDF-4) that may be damaged or foreign.

- every link is looked at before it is followed: external links (to other files),
  virtual datasets and datasets stored in external files are refused, as are
  dangling soft links; nothing outside the file is ever opened;
- the tree walk before reading is bounded (:data:`MAX_OBJECTS` objects,
  :data:`MAX_DEPTH` levels), so a linked cycle cannot loop;
- a dataset is read only if its size is plausible for the file
  (:data:`MAX_EXPANSION` times the file size, at least :data:`MIN_LIMIT` bytes);
- any error of the HDF5 library on the way is turned into a
  :class:`~saxsnb.errors.SaxsFileError` naming the file and the path inside it.
"""

from __future__ import annotations

import contextlib
import os
import time
from collections.abc import Iterator

import numpy as np

from ..errors import SaxsError, SaxsFileError

__all__ = ["Guard", "MAX_OBJECTS", "MAX_DEPTH", "MAX_EXPANSION"]

#: Most objects (groups, datasets, links) walked in one file.
MAX_OBJECTS = 20_000
#: Deepest group nesting walked.
MAX_DEPTH = 32
#: Largest ratio of a dataset's size in memory to the file's size (compression).
MAX_EXPANSION = 1000
MIN_LIMIT = 1 << 26

#: Exceptions that h5py (and the libraries on it) raise for damaged or unexpected files.
H5_ERRORS = (
    OSError,
    KeyError,
    ValueError,
    TypeError,
    RuntimeError,
    IndexError,
    AttributeError,
    UnicodeError,
    OverflowError,
    RecursionError,
    MemoryError,
)


class Guard:
    """Link-aware, size-checked access to one open h5py file, naming paths in errors."""

    def __init__(self, path: str):
        self.path = path
        self.where = "/"
        try:
            self.size = os.path.getsize(path)
        except OSError:
            self.size = 0

    def error(self, message: str, where: str | None = None) -> SaxsFileError:
        return SaxsFileError(f"{where or self.where}: {message}", path=self.path)

    @contextlib.contextmanager
    def at(self, where: str) -> Iterator[None]:
        """Name ``where`` in any library error raised inside the block."""
        old, self.where = self.where, where
        try:
            yield
        except SaxsError:
            raise
        except H5_ERRORS as exc:
            raise self.error(f"cannot read ({type(exc).__name__}: {exc})", where) from None
        finally:
            self.where = old

    def child(self, group, name: str, where: str):
        """``group[name]`` after checking the link; refuses external and dangling links."""
        import h5py

        link = group.get(name, getlink=True)
        if link is None:
            raise self.error("no such object", where)
        if isinstance(link, h5py.ExternalLink):
            raise self.error(
                f"is an external link to {link.filename}:{link.path}; links to other files are not followed",
                where,
            )
        obj = group.get(name)
        if obj is None:
            raise self.error("is a dangling link (it points to nothing)", where)
        if isinstance(obj, h5py.Dataset):
            if obj.is_virtual:
                raise self.error("is a virtual dataset (data in other files): not followed", where)
            if obj.external:
                raise self.error("stores its data in external files: not followed", where)
        return obj

    def children(self, group, where: str) -> list[tuple[str, object]]:
        """(name, object) of every member of ``group``, each through :meth:`child`."""
        return [(name, self.child(group, name, f"{where.rstrip('/')}/{name}")) for name in group]

    def walk(self, f) -> None:
        """Check every link in the file once (bounded), before anything is read."""
        import h5py

        count = 0
        stack = [(f, "/", 0)]
        while stack:
            group, where, depth = stack.pop()
            with self.at(where):
                names = list(group)
                for name in names:
                    count += 1
                    if count > MAX_OBJECTS:
                        raise self.error(f"more than {MAX_OBJECTS} objects: refused (damaged?)")
                    sub = f"{where.rstrip('/')}/{name}"
                    obj = self.child(group, name, sub)
                    if isinstance(obj, h5py.Group):
                        if depth + 1 > MAX_DEPTH:
                            raise self.error(f"groups nested more than {MAX_DEPTH} deep", sub)
                        stack.append((obj, sub, depth + 1))

    def dataset(self, obj, where: str):
        import h5py

        if not isinstance(obj, h5py.Dataset):
            raise self.error(f"is a {type(obj).__name__.lower()} where a dataset belongs", where)
        return obj

    def read(self, dset, where: str, *, strings: bool = False) -> np.ndarray:
        """All values of ``dset`` after a size check."""
        self.dataset(dset, where)
        with self.at(where):
            n = int(np.prod(dset.shape, dtype=np.float64)) if dset.shape is not None else 0
            nbytes = n * max(int(dset.dtype.itemsize), 1)
            limit = max(MIN_LIMIT, MAX_EXPANSION * self.size)
            if nbytes > limit:
                raise self.error(
                    f"shape {dset.shape} ({nbytes} bytes) is implausible for a file of {self.size} bytes",
                    where,
                )
            if strings or dset.dtype.kind in "SO":
                return np.asarray(dset.asstr()[()], dtype=object)
            return np.asarray(dset[()])

    def attr(self, obj, name: str, where: str, default=None):
        """Attribute ``name`` of ``obj`` (``default`` if absent), library errors named."""
        with self.at(where):
            if name not in obj.attrs:
                return default
            return obj.attrs[name]


#: Seconds a file without saxsnb's whole-file checksum may take to be read once in a
#: child process before it is refused (see :func:`run_bounded`).
READ_TIMEOUT = 20.0


def run_bounded(fn, path: str, timeout: float | None = None) -> None:
    """Run ``fn()`` (a complete read of ``path``, result discarded) in a forked child
    process and wait at most ``timeout`` seconds.

    Damaged HDF5 metadata can make the HDF5 library loop inside C code, which no
    Python code can interrupt; a file that saxsnb's whole-file checksum does not vouch
    for (another program's file, or one changed since) is therefore read once in a
    child first. A family error raised there is raised here; a crash or a hang of the
    child is a :class:`SaxsFileError`. The read in this process that follows is then
    safe: the library behaves the same on the same bytes. Without ``os.fork`` (Windows)
    this check is skipped.
    """
    import pickle
    import select
    import signal

    if not hasattr(os, "fork"):
        fn()
        return
    timeout = READ_TIMEOUT if timeout is None else timeout
    r, w = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child: read, report, leave without any cleanup of the parent's
        code = 0
        try:
            os.close(r)
            try:
                import warnings

                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")  # shown by the read in the parent
                    fn()
                msg = ("ok", None)
            except SaxsError as exc:
                msg = ("family", str(exc))
            except BaseException as exc:  # noqa: BLE001 - reported to the parent
                msg = ("crash", f"{type(exc).__name__}: {exc}")
            os.write(w, pickle.dumps(msg))
        except BaseException:  # noqa: BLE001
            code = 1
        finally:
            os._exit(code)
    os.close(w)
    data = b""
    deadline = time.monotonic() + timeout
    try:
        while True:
            left = deadline - time.monotonic()
            if left <= 0:
                os.kill(pid, signal.SIGKILL)
                raise SaxsFileError(
                    f"reading did not finish within {timeout:g} s: the file's HDF5 structure is "
                    "probably damaged (it is not opened)",
                    path=path,
                )
            ready, _, _ = select.select([r], [], [], min(left, 1.0))
            if ready:
                chunk = os.read(r, 1 << 16)
                if not chunk:
                    break
                data += chunk
    finally:
        os.close(r)
        with contextlib.suppress(ChildProcessError):
            os.waitpid(pid, 0)
    try:
        kind, message = pickle.loads(data)
    except Exception:  # noqa: BLE001 - the child died without a report
        raise SaxsFileError("reading crashed the HDF5 library: the file is damaged", path=path) from None
    if kind == "family":
        raise SaxsFileError(message.split(": ", 1)[-1] if message.startswith(path) else message, path=path)
    if kind == "crash":
        raise SaxsFileError(f"cannot read ({message})", path=path)
