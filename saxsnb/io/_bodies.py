"""The numbers of many file bodies, read by maintained parsers.

Bodies laid out alike (one separator byte, the same empty fields on every line, as a
program writes them: ``"%.8e %.8e %.8e"``, ``"%.6g,%.6g"``, a Fortran-style row with
fixed padding) are joined and parsed in one call of polars' multi-threaded CSV reader
(its float parser rounds correctly, see the module tests against ``float()``); a group
it refuses, and every other body, is read by ``numpy.loadtxt`` file by file; any body
that does not parse cleanly either way is re-read line by line, only to name the line
that is wrong (:func:`._textparse._line_errors`). Both parsers are stricter than
Python's ``float`` where they differ (``1_0``, non-ASCII digits): such a token fails
and is then named. The joined bodies are split by file at separator rows of NaN put
between them (:func:`_joined`), so no newline is counted in Python or numpy.

Measured on 256 files x 1,000 rows x 3 columns (benchmarks/bench_read.py sizes, CPU
time summed over threads, a 2-core machine under a load average of 11): the polars
call takes about 26 ns per number, the rest of this module about 6 ns (join, one copy
out of polars, the split); ``numpy.loadtxt`` takes 130-170 ns per number and the
per-file Python work before it (:func:`._textparse.split_file`) about 12 us per file
when files share a layout, 25 us when not. Tried and left: a numpy prototype for
fixed-width rows (digits taken by position, exact for up to 15 digits by Clinger's
fast path) took about 160 ns per number, and pyarrow's CSV reader 1.2-1.3x polars'
CPU time in the same run; ``numpy.fromstring`` about 250 ns per number.
"""

from __future__ import annotations

import io
import re

import numpy as np

from ._textparse import RawFile, _blank_gap, _line_errors, _refuse_truncated

__all__ = ["parse_bodies", "fast_parser"]

_SEPS = (b" ", b"\t", b",", b";")
_SEP_OR_SPACE = re.compile(rb"[\s,;]")
_TO_SPACE = bytes.maketrans(b"\t\r,;\x0b\x0c", b"      ")
_CONTROL = re.compile(rb"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")


def fast_parser():
    """The polars module, or None when polars is not installed (then every body is read
    by ``numpy.loadtxt``)."""
    try:
        import polars
    except ImportError:  # pragma: no cover - polars is a dependency
        return None
    return polars


def _layout_of(line: bytes, ncols: int) -> tuple[bytes, tuple[bool, ...]] | None:
    """(separator byte, which fields are non-empty) of a first line whose ``ncols``
    numbers are split by one separator byte, else None. Digits play no part: the line
    may be given with its digits turned into ``0``."""
    line = line.removesuffix(b"\r")
    for sep in _SEPS:
        fields = line.split(sep)
        full = [f for f in fields if f]
        if len(full) == ncols and not _SEP_OR_SPACE.search(b"".join(full)):
            return sep, tuple(bool(f) for f in fields)
    return None


def _layout(raw: RawFile, known: dict | None = None) -> tuple[bytes, tuple[bool, ...]] | None:
    """:func:`_layout_of` the body's first line (kept by the layout of the line split
    found, ``raw.shape``, in ``known``)."""
    if raw.shape is not None and known is not None:
        key = (raw.shape, raw.ncols)
        if key not in known:
            known[key] = _layout_of(raw.shape, raw.ncols)
        return known[key]
    head = bytes(raw.body[:1024])
    nl = head.find(b"\n")
    return None if nl <= 0 else _layout_of(head[:nl], raw.ncols)


def _joined(pl, raws: list[RawFile], idx: list[int], sep: bytes, pattern: tuple[bool, ...]):
    """Data (rows, ncols) of each body of ``idx`` parsed by polars as one block, or None
    if polars refuses any of it (then each body is read on its own).

    The bodies (each ending with a newline) are joined with a line of NaN laid out as
    their rows between two of them; polars gives every line one row, so the rows whose
    q is NaN are exactly the separators when there are as many as separators (a NaN q
    in a file makes one more, and that group is read file by file), and they split the
    rows by file with no count of the newlines."""
    bodies = [raws[i].body for i in idx]
    buf = (sep.join(b"nan" if full else b"" for full in pattern) + b"\n").join(bodies)
    # control bytes need no search: polars refuses them in a number (a tab or carriage
    # return next to one it strips, as the format allows), tested in tests/test_io_text.py
    schema = {f"c{j}": (pl.Float64 if full else pl.String) for j, full in enumerate(pattern)}
    try:
        df = pl.read_csv(
            buf,
            has_header=False,
            separator=sep.decode(),
            schema=schema,
            quote_char=None,
            comment_prefix=None,
            eol_char="\n",
            raise_if_empty=True,
            truncate_ragged_lines=False,
            ignore_errors=False,
            try_parse_dates=False,
        )
    except Exception:  # any refusal (a bad token, a ragged line): read file by file
        return None
    # a blank line, a line of blanks or a missing field gives nulls
    height, n_sep = df.height, len(idx) - 1
    nulls = df.null_count().row(0)
    if any(n != (0 if full else height) for n, full in zip(nulls, pattern)):
        return None
    data = df.select([f"c{j}" for j, full in enumerate(pattern) if full]).to_numpy(order="fortran")
    seps = np.flatnonzero(np.isnan(data[:, 0])) if n_sep else np.empty(0, dtype=np.int64)
    if seps.size != n_sep:
        return None
    starts = np.concatenate([[0], seps + 1])
    stops = np.concatenate([seps, [height]])
    # line numbers of all rows at once: a file's rows count on from its first line
    first = np.array([raws[i].first_line for i in idx], dtype=np.int64)
    lines = np.arange(height, dtype=np.int64) + np.repeat(first - starts, stops - starts + 1)[:height]
    out = []
    for k in range(len(idx)):
        a, b = int(starts[k]), int(stops[k])
        out.append((data[a:b], lines[a:b]))
    return out


def _alone(raw: RawFile) -> tuple[np.ndarray, np.ndarray]:
    """One body read by ``numpy.loadtxt`` (separators: any run of blanks, ',' and ';')."""
    body = bytes(raw.body)
    if _CONTROL.search(body) or b"_" in body or (not raw.comma and b"," in body):
        raise _line_errors(raw)
    text = body.translate(_TO_SPACE)
    if not text.strip():  # (numpy would warn; warnings filters are not thread-safe to change)
        raise _line_errors(raw)
    try:
        data = np.loadtxt(io.BytesIO(text), dtype=np.float64, ndmin=2, comments=None, encoding="latin-1")
    except ValueError:
        raise _line_errors(raw) from None
    if data.shape[0] == 0 or data.shape[1] != raw.ncols:
        raise _line_errors(raw)
    n = data.shape[0]
    if body.count(b"\n") == n:
        rows = raw.first_line + np.arange(n)
    else:  # blank (or comment) lines among the rows
        lines = body.split(b"\n")
        rows = raw.first_line + np.array([k for k, ln in enumerate(lines) if ln.strip()], dtype=np.int64)
        if rows.size != n:
            raise _line_errors(raw)
        if rows.size > 1 and rows[-1] - rows[-2] > 1:
            err = _blank_gap(raw, rows)
            if err is not None:
                raise err
    return np.ascontiguousarray(data.T).T, rows


def parse_bodies(raws: list[RawFile]) -> list[tuple[np.ndarray, np.ndarray]]:
    """Numbers of each file body as ``(data (n_rows, n_cols), line_numbers)``.

    Raises the :class:`~saxsnb.errors.SaxsFileError` of the first bad body, naming its
    file and line."""
    results: list[tuple[np.ndarray, np.ndarray] | None] = [None] * len(raws)
    pl = fast_parser()
    if pl is not None:
        groups: dict = {}
        known: dict = {}
        for i, r in enumerate(raws):
            key = _layout(r, known)
            if key is not None:
                groups.setdefault(key, []).append(i)
        for (sep, pattern), idx in groups.items():
            got = _joined(pl, raws, idx, sep, pattern)
            if got is not None:
                for i, res in zip(idx, got):
                    results[i] = res
    for i, r in enumerate(raws):
        if results[i] is None:
            results[i] = _alone(r)
        if r.cut_check >= 0:
            _refuse_truncated(r.path, r.source, r.cut_check)
    return results  # type: ignore[return-value]
