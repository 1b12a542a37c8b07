"""Reading a folder of text-column curves into one series, and writing one back.

File layout understood by :func:`read_series` (and written by
:func:`write_text_series`)::

    # saxsnb series frame 12            <- free text: ignored
    # sample = lipid mix B              <- key = value (or key: value), '#' optional
    # q_unit = 1/nm                     <- unit of the q column
    # intensity_unit = arb
    # temperature = 25.5                <- numeric: a per-frame scan coordinate
    # temperature_units = degC          <- its units (or "temperature = 25.5 degC")
    # q I sigma                         <- column header; "q(1/A)" also gives the unit
    1.000000e-01 2.5e+02 1.2e+00        <- 2 to 4 columns: q, I, sigma, dq
    ...
    exposure_start: 2024-05-01T12:00:03 <- optional trailing metadata after the rows:
    transmission = 0.81                    key: value / key = value lines and/or
    {"beam": {"wavelength": 0.1}}          a JSON object (nested keys: beam.wavelength)
"""

from __future__ import annotations

import glob as _glob
import json
import os
import re
import sys
from collections.abc import Iterable, Mapping
from concurrent.futures import ThreadPoolExecutor
from datetime import datetime
from pathlib import Path

import numpy as np
import xarray as xr

from .._jsonsafe import to_json_safe
from ..errors import SaxsFileError, SaxsInputError
from ..series import CANONICAL_Q_UNIT, q_unit_factor, scan_coords, validate
from ._assemble import Curve, build_series
from ._atomic import atomic_folder
from ._bodies import parse_bodies
from ._textparse import HeaderCache, split_file

__all__ = ["read_series", "write_text_series", "find_files", "DATA_EXTENSIONS", "MIN_Q_POINTS"]

#: File extensions picked from a folder (when any such file exists).
DATA_EXTENSIONS = (".dat", ".txt", ".csv", ".chi", ".xy")
_BATCH = 256
_THREADS = min(2, os.cpu_count() or 1) or 1
_PROGRESS_MIN = 500
#: Fewest rows of data a curve may have: fewer q points are refused (no fit or
#: comparison means anything on them; often a file cut short or a summary table).
MIN_Q_POINTS = 5


def _natural_key(path: str):
    return [int(t) if t.isdigit() else t.lower() for t in re.split(r"(\d+)", os.path.basename(path))]


def find_files(source) -> list[str]:
    """The list of files named by ``source`` (glob, folder, path or list of paths).

    Folders give their regular, non-hidden files with a data extension
    (:data:`DATA_EXTENSIONS`), or all non-hidden files if none has one, in natural
    order (``f2`` before ``f10``); globs are sorted the same way; lists keep their order.
    """
    if isinstance(source, (str, os.PathLike)):
        s = os.fspath(source)
        if os.path.isdir(s):
            entries = [e for e in os.scandir(s) if not e.name.startswith(".") and e.is_file()]
            data = [e.path for e in entries if os.path.splitext(e.name)[1].lower() in DATA_EXTENSIONS]
            files = data or [e.path for e in entries]
            if not files:
                raise SaxsInputError(f"the folder {s!r} holds no data files", parameter="source")
            return sorted(files, key=_natural_key)
        if os.path.isfile(s):
            return [s]
        if _glob.has_magic(s):
            files = [f for f in _glob.glob(s) if os.path.isfile(f)]
            if not files:
                raise SaxsInputError(f"no file matches {s!r}", parameter="source")
            return sorted(files, key=_natural_key)
        raise SaxsFileError("no such file or folder", path=s)
    if isinstance(source, Iterable):
        files = [os.fspath(p) for p in source]
        if not files:
            raise SaxsInputError("the list of files is empty", parameter="source")
        for f in files:
            if not os.path.isfile(f):
                raise SaxsFileError("no such file", path=f)
        return files
    raise SaxsInputError(
        f"source must be a folder, a glob, a path or a list of paths, not {type(source).__name__}",
        parameter="source",
    )


def _read_bytes(path: str) -> bytes:
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_BINARY", 0))
        try:
            size = os.fstat(fd).st_size
            parts = [os.read(fd, size + 1)]
            while len(parts[-1]) > 0 and sum(map(len, parts)) > size:
                parts.append(os.read(fd, 1 << 20))  # the file grew while being read
            return b"".join(parts)
        finally:
            os.close(fd)
    except OSError as exc:
        raise SaxsFileError(f"cannot read the file: {exc.strerror or exc}", path=path) from exc


def _progress(total: int, progress: bool | None):
    if progress is None:
        progress = total >= _PROGRESS_MIN and sys.stderr.isatty()
    if not progress:
        return None
    from tqdm.auto import tqdm

    return tqdm(total=total, desc="reading", unit="file")


def _read_batch(paths: list[str]) -> list[Curve]:
    cache = HeaderCache()  # files of a batch are mostly laid out alike
    raws = [split_file(p, os.path.basename(p), _read_bytes(p), cache) for p in paths]
    curves = []
    for raw, (data, lines) in zip(raws, parse_bodies(raws)):
        nc = data.shape[1]
        curves.append(
            Curve(
                name=raw.name,
                q=data[:, 0],
                intensity=data[:, 1],
                sigma=data[:, 2] if nc > 2 else None,
                dq=data[:, 3] if nc > 3 else None,
                q_unit=raw.q_unit,
                intensity_unit=raw.intensity_unit,
                meta=raw.meta,
                units=raw.units,
                attrs=raw.attrs,
                lines=lines,
                path=raw.path,
                attr_lines=raw.attr_lines,
            )
        )
    return curves


def _curves(files: list[str], progress: bool | None) -> list[Curve]:
    """Read and parse files in batches on a few threads (file reads and numpy release the GIL)."""
    bar = _progress(len(files), progress)
    batches = [files[b : b + _BATCH] for b in range(0, len(files), _BATCH)]
    curves: list[Curve] = []
    try:
        if len(batches) == 1:
            results = iter([_read_batch(batches[0])])
        else:
            pool = ThreadPoolExecutor(max_workers=_THREADS)
            results = pool.map(_read_batch, batches)
        for batch in results:
            curves.extend(batch)
            if bar is not None:
                bar.update(len(batch))
    finally:
        if len(batches) > 1:
            pool.shutdown(wait=True, cancel_futures=True)
        if bar is not None:
            bar.close()
    return curves


def read_series(
    source,
    *,
    scan: str | None = None,
    pattern: str | None = None,
    q_unit: str | None = None,
    regrid: str | None = None,
    chunks: int | Mapping | None = None,
    progress: bool | None = None,
    time_from: str | None = None,
) -> xr.Dataset:
    """Read a series of text-column curves (one file per frame) into one Dataset.

    Parameters
    ----------
    source : str, Path or list of paths
        A folder (its files ending in .dat, .txt, .csv, .chi or .xy, else all
        non-hidden files), a glob such as ``"run7/*.dat"``, one file or a list of files.
        Columns are separated by whitespace, commas or semicolons; ``#`` starts a
        comment; lines before the first row of numbers are header (free text, column
        names, a row count, ``key = value`` / ``key: value`` lines). 2, 3 or 4 columns
        are q, intensity, sigma and dq (q resolution, kept as variable ``dq``). After
        the rows a trailing metadata section may follow, up to the end of the file:
        ``key = value`` / ``key: value`` lines, ``#`` comments, ``[title]`` lines and
        JSON objects (starting on a line of their own with ``{``; nested keys are
        flattened with dots, ``{"beam": {"wavelength": 0.1}}`` gives
        ``beam.wavelength``; ``{"value": 0.5, "units": "s"}`` gives a value with units;
        lists become attrs). Header and trailer values are read alike; a key they give
        different values is an error. Keys are lower-cased, other characters than
        letters, digits, ``_`` and ``.`` become ``_``; ``<key>_units`` gives the units.
    scan : str, optional
        Name of the scan coordinate; frames are sorted by it and ``attrs["scan"]`` is
        set. It must come from the metadata (header or trailer), ``pattern`` or
        ``time_from`` (``"time"``).
    pattern : str, optional
        Regular expression with named groups applied to each file name, e.g.
        ``r"T(?P<temperature>[-\\d.]+)C"``; each group becomes a per-frame coordinate
        (float when numeric). It overrides a header value of the same name.
    q_unit : {"1/nm", "1/A"}, optional
        Unit of the q column when the files do not say (a ``q_unit = ...`` header or a
        column header such as ``q(1/A)``). q is stored in 1/nm.
    regrid : {None, "first", "log"}
        Files on different q grids are an error unless this is given: ``"first"``
        interpolates intensity and sigma onto the first file's grid (points outside a
        file's range become NaN and are masked), ``"log"`` onto a log-spaced grid over
        the common range with as many points as the longest file. Recorded in history.
    chunks : int or dict, optional
        Return a dask-backed Dataset, e.g. ``{"frame": 500}`` (an int means frames),
        built lazily from blocks of that many files: every file is read once to check
        it and take its metadata (all errors are raised then, naming file and line),
        and a block's files are read again when the block is computed, so the text of
        all files is never held at once; ``read_series(folder, chunks=500).saxs.save(
        "series.zarr")`` converts a folder of any size to a store, block by block.
        (With ``regrid`` the series is read whole, then chunked.)
    progress : bool, optional
        Show a progress bar; by default only for many files in an interactive terminal.
    time_from : str, optional
        Name of an ISO 8601 timestamp in the files' metadata (``2024-05-01T12:00:03.5``,
        with or without a time zone, in all files alike), e.g. ``"exposure_start"``: a
        per-frame ``time`` coordinate in seconds from the earliest of them (the first
        frame in acquisition order) is added; ``scan="time"`` then sorts by it. The
        timestamps stay as text in their own coordinate.

    Returns
    -------
    xarray.Dataset
        The series (see :mod:`saxsnb.series`): intensity and sigma (frame, q), q in
        1/nm, one coordinate on ``frame`` per numeric header key or pattern group
        (float64, with ``units``), per-frame string coordinates for text values that
        vary, Dataset attrs for text values that are the same in every file, and
        ``attrs["source_files"]`` (file names in frame order). A missing sigma column
        is estimated (:func:`saxsnb.series.estimate_sigma`) and flagged with
        ``attrs["sigma_estimated"] = 1``. Non-finite intensity or sigma, and sigma <= 0,
        are masked with a :class:`~saxsnb.errors.SaxsWarning`; rows with unsorted q are
        sorted with a warning.

    Raises
    ------
    SaxsFileError
        Unreadable, binary, empty or malformed files, naming the file and line. Every
        row is data or an error, never dropped or added: refused are a malformed first
        row (``0.1 5e 0.1``), a line of another count of numbers just before the data
        (a summary), a last row alone after a blank line (a trailer), tokens such as
        ``1.#INF`` or ``4#2`` (``#`` starts a comment only after a blank), decimal
        commas (also ``1,5,2`` of integers: ambiguous), control bytes, and a last
        value cut short in a file without final newline.
        Also refused: a file with fewer than :data:`MIN_Q_POINTS` (5) rows of data,
        a line after the data that is neither metadata nor a comment (rows of data
        after the trailing metadata), invalid JSON in the trailer, a timestamp
        ``time_from`` cannot read.
    SaxsInputError
        Bad arguments, a missing q unit, an unknown scan name.

    Examples
    --------
    >>> import tempfile, pathlib, numpy as np, saxsnb
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> rows = "".join(f"{0.01 * k:.2f} {6 - k} 0.1\\n" for k in range(1, 6))
    >>> for i, T in enumerate([30.0, 20.0]):
    ...     _ = (d / f"s{i}.dat").write_text(
    ...         f"# temperature = {T} degC\\n# q_unit = 1/A\\n{rows}"
    ...         f'{{"exposure_start": "2024-05-01T12:00:0{3 * i}", "transmission": 0.8}}\\n')
    >>> ds = read_series(d, scan="temperature", time_from="exposure_start")
    >>> ds.temperature.values.tolist(), ds.q.values[:2].tolist(), ds.temperature.attrs["units"]
    ([20.0, 30.0], [0.1, 0.2], 'degC')
    >>> ds.time.values.tolist(), ds.time.attrs["units"], ds.transmission.values.tolist()
    ([3.0, 0.0], 's', [0.8, 0.8])
    """
    if time_from is not None and not isinstance(time_from, str):
        raise SaxsInputError("time_from must be the name of a timestamp in the files", parameter="time_from")
    files = find_files(source)
    frames = _lazy_frames(chunks, regrid)
    if frames is not None:
        from . import text as _self
        from ._lazy import lazy_series

        options = {"scan": scan, "pattern": pattern, "q_unit": q_unit, "time_from": time_from}
        ds = lazy_series(_self, files, frames, progress=progress, **options)
        ds = _record_read(
            ds, source, scan=scan, pattern=pattern, q_unit=q_unit, regrid=regrid, time_from=time_from
        )
        rest = {k: v for k, v in chunks.items() if k != "frame"} if isinstance(chunks, Mapping) else {}
        return ds.chunk(rest) if rest else ds
    curves = _curves(files, progress)
    if time_from is not None:
        _times(curves, time_from)
    ds = build_series(curves, scan=scan, pattern=pattern, q_unit=q_unit, regrid=regrid)
    short = next((c for c in curves if c.q.size < MIN_Q_POINTS), None)
    if short is not None:  # checked last: an error in the file itself is named first
        raise SaxsFileError(
            f"only {short.q.size} rows of data: a curve needs at least {MIN_Q_POINTS} q points",
            path=short.path or short.name,
        )
    ds = _record_read(
        ds, source, scan=scan, pattern=pattern, q_unit=q_unit, regrid=regrid, time_from=time_from
    )
    if chunks is not None:
        ds = ds.chunk({"frame": int(chunks)} if isinstance(chunks, int) else dict(chunks))
    return ds


def _lazy_frames(chunks, regrid) -> int | None:
    """Frames per block of a lazy read, or None for an eager read (then chunked)."""
    if chunks is None or regrid is not None:
        return None
    if isinstance(chunks, Mapping):
        n = chunks.get("frame")
        return None if n is None or n == -1 or isinstance(n, (tuple, str)) else int(n)
    if isinstance(chunks, bool) or not isinstance(chunks, (int, np.integer)):
        raise SaxsInputError("chunks must be a number of frames or a dict such as {'frame': 500}",
                             parameter="chunks")
    return int(chunks)


def _timestamp(text: str) -> datetime | None:
    t = text.strip()
    if len(t) < 10 or not _ISO_DATE.match(t):
        return None
    try:
        return datetime.fromisoformat(t[:-1] + "+00:00" if t[-1:] in "Zz" else t)
    except ValueError:
        return None


_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}")


def _times(curves: list[Curve], key: str) -> None:
    """Set a numeric ``time`` (seconds from the earliest timestamp ``key``) on each curve."""
    from ..io._textparse import _classify_key

    name = _classify_key(key)[1]
    stamps = []
    for c in curves:
        if "time" in c.meta and name != "time":
            raise SaxsFileError(
                f"has a 'time' value already, so time_from={key!r} cannot make one", path=c.path or c.name
            )
        value = c.meta.get(name)
        if value is None:
            raise SaxsFileError(f"has no {key!r} value (time_from)", path=c.path or c.name)
        ts = _timestamp(value)
        if ts is None:
            raise SaxsFileError(
                f"{key} = {value!r} is not an ISO 8601 timestamp such as 2024-05-01T12:00:03.5",
                path=c.path or c.name,
            )
        stamps.append(ts)
    aware = {ts.tzinfo is not None and ts.utcoffset() is not None for ts in stamps}
    if len(aware) > 1:
        c = curves[[ts.tzinfo is None for ts in stamps].index(True)]
        raise SaxsFileError(
            f"its {key!r} has no time zone while other files' have one; the times cannot be compared",
            path=c.path or c.name,
        )
    t0 = min(stamps)
    for c, ts in zip(curves, stamps):
        c.meta["time"] = repr((ts - t0).total_seconds())
        c.units["time"] = "s"


def _record_read(ds: xr.Dataset, source, **options) -> xr.Dataset:
    """Append the read itself to the history (what ``ds.saxs.recipe()`` starts from).

    Files written by saxsnb carry the history of what made them; the steps before the
    read are in the numbers already, so a recipe starts at the last read."""
    import json

    from .. import __version__

    src = [str(p) for p in source] if isinstance(source, (list, tuple)) else str(source)
    kept = {k: v for k, v in options.items() if v is not None}
    entry = json.dumps({"operation": "read_series", "parameters": {"source": src, **kept},
                        "version": __version__}, sort_keys=True)
    out = ds.copy(deep=False)
    out.attrs = {**ds.attrs, "history": [*ds.attrs.get("history", []), entry]}
    return out


def _value_text(value) -> str:
    if isinstance(value, (float, np.floating)):
        return repr(float(value))
    if isinstance(value, (np.integer,)):
        return str(int(value))
    return str(value)


_FMT = re.compile(r"^%[-+ 0#]*\d{0,2}(?:\.\d{1,2})?[eEfFgG]$")
_CONTROL_TEXT = re.compile(r"[\x00-\x1f\x7f\x85\u2028\u2029]")


def _header_safe(text: str, what: str) -> str:
    """``text`` for a header line; one with a line break or control character could
    add lines (even rows of data) to the file, so it is refused."""
    text = str(text)
    if _CONTROL_TEXT.search(text):
        raise SaxsInputError(
            f"{what} {text!r} holds a line break or control character, which a text header cannot hold",
            parameter=what,
        )
    return text


def write_text_series(
    ds: xr.Dataset, folder, *, stem: str = "frame", fmt: str = "%.8e", overwrite: bool = False
) -> list[Path]:
    """Write each frame to its own text file with a header of units and scan values.

    The files are written as one set: into a temporary folder next to ``folder``,
    which then takes the place of ``folder`` as a whole, so ``folder`` holds either
    its old content or the complete new series, never a mix or a part.

    Parameters
    ----------
    ds : xarray.Dataset
        A series (see :mod:`saxsnb.series`); it is not modified.
    folder : str or Path
        The folder of the set: new, or empty, or (with ``overwrite=True``) replaced
        completely. Files are ``{stem}_{index:0Nd}.dat`` with the frame index
        zero-padded.
    stem : str
        Start of the file names.
    fmt : str
        printf-style format of one number (``%e``, ``%f`` or ``%g`` with optional
        flags, width and precision), used for every column.
    overwrite : bool
        Replace a folder that already holds files (all of them, not only those of
        the same names). Without it a non-empty folder is an error.

    Returns
    -------
    list of Path, one per frame.

    Raises
    ------
    SaxsFileError
        ``folder`` is not empty and ``overwrite=False``, or cannot be written.
    SaxsInputError
        A bad ``fmt`` or ``stem``; a unit, name or text value with a line break.

    Notes
    -----
    Header lines are ``# key = value``: ``q_unit`` and ``intensity_unit``, each
    numeric scan coordinate and ``<name>_units``, ``sample``, other text values as
    ``key = value``, and other scalar attrs as ``attr.<name> = <JSON>`` so that
    :func:`read_series` gives them back as attrs. Masked points are written as NaN.
    Temporary folders left by a killed write are removed by the next write.

    Examples
    --------
    >>> import tempfile, os, numpy as np, saxsnb
    >>> ds = saxsnb.from_arrays([0.1, 0.2], [[2.0, 1.0]], [[0.1, 0.1]], scan={"time": [3.0]})
    >>> paths = write_text_series(ds, os.path.join(tempfile.mkdtemp(), "set"))
    >>> print(paths[0].read_text().splitlines()[3])
    # time = 3.0
    """
    validate(ds)
    if not isinstance(fmt, str) or not _FMT.match(fmt):
        raise SaxsInputError(
            f"fmt={fmt!r} is not a printf format of one number such as '%.8e' or '%.6g'", parameter="fmt"
        )
    if not isinstance(stem, str) or not stem or not re.fullmatch(r"[\w.\-]+", stem) or stem.startswith("."):
        raise SaxsInputError(
            f"stem={stem!r} must be letters, digits, '_', '-' or '.' (not first)", parameter="stem"
        )
    folder = Path(folder)
    n = ds.sizes["frame"]
    width = max(4, len(str(max(n - 1, 0))))
    q = ds["q"].values
    unit = _header_safe(ds["q"].attrs.get("units", CANONICAL_Q_UNIT), "q units")
    iunit = _header_safe(ds["intensity"].attrs.get("units", "arb"), "intensity units")
    I = np.asarray(ds["intensity"].values, dtype=float)
    S = np.asarray(ds["sigma"].values, dtype=float)
    if "mask" in ds.data_vars:
        M = np.asarray(ds["mask"].values, dtype=bool)
        I = np.where(M, np.nan, I)
        S = np.where(M, np.nan, S)
    cols = ["q", "I", "sigma"]
    D = None
    if "dq" in ds.data_vars:
        # dq is kept in 1/nm; write it in the unit of the q column
        D = np.asarray(ds["dq"].values, dtype=float) / q_unit_factor(unit)
        cols.append("dq")
    scans = scan_coords(ds)
    for name in scans:
        _header_safe(name, "coordinate name")
        _header_safe(ds[name].attrs.get("units", "") or "", f"units of {name}")
    const: list[str] = []
    for key, value in ds.attrs.items():
        if key in ("source_files",):
            continue
        key = _header_safe(key, "attr name")
        if key in ("sample", "scan") and isinstance(value, str) and not _CONTROL_TEXT.search(value):
            const.append(f"# {key} = {value}")
        else:
            text = json.dumps(to_json_safe(value, nonfinite="str"), ensure_ascii=False)
            const.append(f"# attr.{key} = {text}")
    names = [f"{stem}_{i:0{width}d}.dat" for i in range(n)]
    row_fmt = " ".join([fmt] * len(cols))
    with atomic_folder(folder, overwrite=overwrite) as tmp:
        for i in range(n):
            lines = [
                f"# saxsnb series frame {i}",
                f"# q_unit = {unit}",
                f"# intensity_unit = {iunit}",
            ]
            for name in scans:
                v = ds[name].values[i]
                lines.append(f"# {name} = {_header_safe(_value_text(v), f'value of {name}')}")
                u = ds[name].attrs.get("units")
                if u:
                    lines.append(f"# {name}_units = {u}")
            lines.extend(const)
            lines.append("# " + " ".join(cols))
            block = np.column_stack([q, I[i], S[i]] + ([D[i]] if D is not None else []))
            body = "\n".join(row_fmt % tuple(r) for r in block)
            text = "\n".join(lines) + "\n" + body + "\n"
            with open(tmp / names[i], "wb") as fh:
                fh.write(text.encode("utf-8"))
    return [folder / name for name in names]

