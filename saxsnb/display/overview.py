"""The overview map of a series (log10 I over frame and q), built block by block.

The map is a mean of log10 I over blocks of frames and q points. It is reduced one
block of frames at a time (:func:`overview_block`: partial sums that never hold more
than the block) and the parts are added (:func:`overview_combine`), so the same code
makes the map of an in-memory series and, chunk by chunk on dask, of a series far
larger than memory. The same pass keeps the positive values of a few evenly spaced
frames (:func:`sample_frames`) for the fixed range of the log axes.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError

__all__ = ["overview_map", "overview_edges", "overview_block", "overview_combine", "sample_frames",
           "block_edges", "BLOCK_FRAMES"]

#: Frames reduced at a time for an in-memory series (bounds the temporaries).
BLOCK_FRAMES = 2048
#: Most frames sampled for the positive range of log axes.
SAMPLE_FRAMES = 256


def block_edges(n: int, max_blocks: int) -> np.ndarray:
    """Start indices of at most ``max_blocks`` contiguous blocks covering ``range(n)``.

    >>> block_edges(10, 4).tolist()
    [0, 3, 6, 9]
    """
    k = max(1, int(np.ceil(n / max(1, int(max_blocks)))))
    return np.arange(0, n, k)


def sample_frames(n: int, max_frames: int = SAMPLE_FRAMES) -> np.ndarray:
    """At most ``max_frames`` evenly spaced frame positions of ``range(n)`` (all when fewer).

    >>> sample_frames(5).tolist(), sample_frames(10, 3).tolist()
    ([0, 1, 2, 3, 4], [0, 4, 9])
    """
    if n <= max_frames:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, max_frames).round().astype(int))


def overview_edges(n_frames: int, n_q: int, *, max_rows: int = 400, max_cols: int = 400):
    """Row (frame block) and column (q block) start indices of the map."""
    return block_edges(n_frames, max_rows), block_edges(n_q, max_cols)


def overview_block(intensity, start: int, rows, cols, mask=None, sample=None):
    """Partial sums of the overview map over frames ``start .. start + len(intensity)``.

    Parameters
    ----------
    intensity : array (n_block, n_q)
        The frames of the block; non-positive and non-finite points are left out.
    start : int
        Position of the block's first frame in the series.
    rows, cols : arrays of int
        Start indices of the map's rows and columns (:func:`overview_edges`).
    mask : bool array like ``intensity``, optional
        True = excluded.
    sample : array of int, optional
        Series positions of the sampled frames (:func:`sample_frames`); the positive
        finite values of those in this block are returned too.

    Returns
    -------
    (first_row, sums, counts, sampled): the map row of the block's first frame, the
    sums of log10 I and the point counts of the rows it touches
    (``(k, len(cols))``), and the sampled positive values (1-D).
    """
    I = np.asarray(intensity, dtype=float)
    n = I.shape[0]
    ok = np.isfinite(I) & (I > 0)
    if mask is not None:
        ok &= ~np.asarray(mask, dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        logI = np.where(ok, np.log10(np.where(ok, I, 1.0)), 0.0)
    rows = np.asarray(rows)
    first = int(np.searchsorted(rows, start, side="right") - 1)
    inner = rows[(rows > start) & (rows < start + n)] - start
    local = np.concatenate([[0], inner]).astype(np.intp)
    sums = np.add.reduceat(np.add.reduceat(logI, local, axis=0), cols, axis=1)
    counts = np.add.reduceat(np.add.reduceat(ok.astype(float), local, axis=0), cols, axis=1)
    picked = np.zeros(0)
    if sample is not None:
        s = np.asarray(sample)
        s = s[(s >= start) & (s < start + n)] - start
        if s.size:
            v, keep = I[s], ok[s]
            picked = v[keep]
    return first, sums, counts, picked


def overview_combine(q, n_frames: int, rows, cols, parts) -> dict:
    """The overview map from the parts of :func:`overview_block` (see :func:`overview_map`
    for the keys); ``"sampled"`` holds the sampled positive values."""
    q = np.asarray(q, dtype=float)
    n_q = q.size
    total = np.zeros((rows.size, cols.size))
    count = np.zeros((rows.size, cols.size))
    sampled = []
    for first, sums, counts, picked in parts:
        k = sums.shape[0]
        total[first:first + k] += sums
        count[first:first + k] += counts
        sampled.append(np.asarray(picked, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(count > 0, total / np.where(count > 0, count, 1.0), np.nan)
        qpos = q > 0
        lq = np.where(qpos, np.log(np.where(qpos, q, 1.0)), 0.0)
        qsum = np.add.reduceat(lq, cols)
        qcount = np.add.reduceat(qpos.astype(float), cols)
        qmean = np.where(
            qcount > 0,
            np.exp(qsum / np.where(qcount > 0, qcount, 1.0)),
            np.add.reduceat(q, cols) / np.diff(np.append(cols, n_q)),
        )
    return {
        "log10_intensity": mean,
        "q": qmean,
        "frame_start": rows,
        "frame_stop": np.append(rows[1:], n_frames),
        "row_step": int(rows[1] - rows[0]) if rows.size > 1 else 1,
        "col_step": int(cols[1] - cols[0]) if cols.size > 1 else 1,
        "sampled": np.concatenate(sampled) if sampled else np.zeros(0),
    }


def overview_map(q, intensity, *, max_rows: int = 400, max_cols: int = 400, mask=None,
                 sample=None) -> dict:
    """Downsample a series to a small map of log10 intensity over (frame, q).


    Parameters
    ----------
    q : array (n_q,), 1/nm
    intensity : array (n_frames, n_q)
        Non-positive and non-finite points are left out of the block means.
    max_rows, max_cols : int
        Largest number of rows (frame blocks) and columns (q blocks) of the map.
    mask : bool array (n_frames, n_q), optional
        True = left out too.
    sample : array of int, optional
        Frames whose positive values are returned in ``"sampled"``.


    Returns
    -------
    dict with ``log10_intensity`` (n_rows, n_cols), the mean of log10 I over each
    block (NaN where a block holds no positive point); ``q`` (n_cols,), the
    geometric mean q of each column block (1/nm); ``frame_start``, ``frame_stop``
    (n_rows,), the frames ``[start, stop)`` that each row averages; ``row_step``
    and ``col_step``, the block sizes (1 when nothing was merged); ``sampled``.

    The frames are reduced :data:`BLOCK_FRAMES` at a time (:func:`overview_block`).


    Examples
    --------
    >>> m = overview_map(np.array([1.0, 2.0, 4.0, 8.0]), np.full((6, 4), 10.0), max_rows=3, max_cols=2)
    >>> m["log10_intensity"].tolist(), m["frame_start"].tolist(), m["row_step"], m["col_step"]
    ([[1.0, 1.0], [1.0, 1.0], [1.0, 1.0]], [0, 2, 4], 2, 2)
    >>> np.round(m["q"], 3).tolist()
    [1.414, 5.657]
    """
    q = np.asarray(q, dtype=float)
    I = np.asarray(intensity)
    if I.ndim != 2 or I.shape[1] != q.size:
        raise SaxsInputError(
            f"intensity has shape {I.shape}; expected (n_frames, {q.size})", parameter="intensity"
        )
    n_f, n_q = I.shape
    rows, cols = overview_edges(n_f, n_q, max_rows=max_rows, max_cols=max_cols)
    parts = [
        overview_block(I[a:a + BLOCK_FRAMES], a, rows, cols,
                       None if mask is None else mask[a:a + BLOCK_FRAMES], sample)
        for a in range(0, n_f, BLOCK_FRAMES)
    ]
    return overview_combine(q, n_f, rows, cols, parts)
