"""A folder of text curves as a lazy (dask-backed) series, built from blocks of files.

``read_series(folder, chunks=N)`` reads the files twice, never all their text at once:

1. a first pass, in batches on a few threads (with the progress bar of
   :func:`read_series`), reads and parses every file and keeps only its metadata
   and a few checks of its numbers (its q grid against the first file's, how many
   points it masks); every error of the eager read is raised here, naming the file
   and line, before anything is returned;
2. the series' arrays are dask arrays of one task per block of N frames
   (``dask.delayed`` + ``dask.array.from_delayed``); computing a block (or saving the
   series to a store, chunk by chunk) reads and parses its N files again.

The result equals the eager ``read_series(folder)`` chunked (tests/test_io_lazy.py).
"""

from __future__ import annotations

import dataclasses
import warnings
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import xarray as xr

from ..errors import SaxsFileError, SaxsInputError, SaxsWarning
from ..series import _as_scan, estimate_sigma, from_arrays, q_unit_factor, validate
from ._assemble import Curve, _check_q, _intensity_unit, _part, _resolve_q_unit, series_metadata

__all__ = ["lazy_series"]


def _q_fine(q: np.ndarray) -> bool:
    with np.errstate(invalid="ignore"):
        return bool(np.isfinite(q).all() and (q > 0).all() and (np.diff(q) > 0).all())


def _bad_points(c: Curve) -> np.ndarray:
    """Points masked as in :func:`._assemble.build_series`: non-finite intensity, or
    (with a sigma column) sigma not finite and > 0."""
    bad = ~np.isfinite(c.intensity)
    if c.sigma is not None:
        with np.errstate(invalid="ignore"):
            bad |= ~((c.sigma > 0) & np.isfinite(c.sigma))
    return bad


@dataclasses.dataclass
class _Light:
    """What the first pass keeps of one file."""

    curve: Curve  # metadata only: no arrays (q is None unless the q column needs checks)
    n_q: int
    ncols: int
    fine: bool  # q finite, > 0, increasing
    same: bool  # on the first file's grid (relative tolerance 1e-9, as the eager read)
    n_bad: int


def _light_batch(read_batch, paths: list[str], q0: np.ndarray) -> list[_Light]:
    out = []
    for c in read_batch(paths):
        ncols = 2 + (c.sigma is not None) + (c.dq is not None)
        fine = _q_fine(c.q)
        q = c.q if fine else np.sort(c.q)  # the eager read sorts first (with a warning)
        same = q.shape == q0.shape and bool(np.isclose(q, q0, rtol=1e-9, atol=0.0).all())
        n_bad = int(_bad_points(c).sum())
        light = dataclasses.replace(  # a q column to check later keeps its q and line numbers
            c,
            q=None if fine else c.q,
            intensity=None if fine else np.zeros(c.q.size),
            sigma=None,
            dq=None,
            lines=None if fine else c.lines,
        )
        out.append(_Light(light, c.q.size, ncols, fine, same, n_bad))
    return out


def _first_pass(text, files: list[str], q0: np.ndarray, progress) -> list[_Light]:
    bar = text._progress(len(files), progress)
    batches = [files[b : b + text._BATCH] for b in range(0, len(files), text._BATCH)]
    lights: list[_Light] = []
    pool = ThreadPoolExecutor(max_workers=text._THREADS)
    try:
        for batch in pool.map(lambda p: _light_batch(text._read_batch, p, q0), batches):
            lights.extend(batch)
            if bar is not None:
                bar.update(len(batch))
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
        if bar is not None:
            bar.close()
    return lights


def _sorted(c: Curve) -> Curve:
    order = np.argsort(c.q, kind="stable")

    def take(a):
        return None if a is None else a[order]

    return dataclasses.replace(
        c, q=c.q[order], intensity=c.intensity[order], sigma=take(c.sigma), dq=take(c.dq), lines=take(c.lines)
    )


def _load_block(read_batch, paths: tuple[str, ...], q_fine: tuple[bool, ...], n_q: int, with_dq: bool):
    """Intensity, sigma, dq (or None) and mask of a block of files (the second pass)."""
    # rows out of q order: sorted as _check_q sorts them (it warned in the first pass;
    # no warnings filters here: they are global state, not safe in dask's threads)
    curves = [c if fine else _sorted(c) for c, fine in zip(read_batch(list(paths)), q_fine)]
    n = len(curves)
    I = np.stack([c.intensity for c in curves])
    S = np.full((n, n_q), np.nan)
    D = np.full((n, n_q), np.nan) if with_dq else None
    mask = np.zeros((n, n_q), dtype=bool)
    for i, c in enumerate(curves):
        if c.sigma is not None:
            S[i] = c.sigma
        if D is not None and c.dq is not None:
            D[i] = c.dq
        mask[i] = _bad_points(c)
    no_sigma = np.array([c.sigma is None for c in curves])
    if no_sigma.any():
        with np.errstate(invalid="ignore"):
            S[no_sigma] = estimate_sigma(I[no_sigma])
    return I, S, D, mask


def lazy_series(text, files: list[str], frames: int, *, scan, pattern, q_unit, time_from, progress):
    """The series of ``files`` as dask arrays in chunks of ``frames`` frames (see the
    module docstring); ``text`` is :mod:`saxsnb.io.text` (its reader and settings)."""
    import dask
    import dask.array as da

    if frames < 1:
        raise SaxsInputError("chunks must be a positive number of frames", parameter="chunks")
    first = text._read_batch(files[:1])[0]
    q0 = first.q if _q_fine(first.q) else np.sort(first.q)  # the eager read sorts it (or refuses it)
    lights = _first_pass(text, files, q0, progress)
    curves = [x.curve for x in lights]
    if time_from is not None:
        text._times(curves, time_from)
    unit = _resolve_q_unit(curves, q_unit)
    for x in lights:  # the q checks of the eager read, in its order
        if not x.fine:
            _check_q(x.curve)
    intensity_unit = _intensity_unit(curves)
    bad = next((x for x in lights if not x.same), None)
    if bad is not None:
        c = bad.curve
        raise SaxsInputError(
            f"{c.path or c.name}: {_part(c)}its q grid ({bad.n_q} points) differs from that of "
            f"{curves[0].name} ({q0.size} points, {q0[0]:.6g}..{q0[-1]:.6g}); pass regrid='first' "
            "(interpolate onto the first file's grid) or regrid='log' (common log grid), without chunks",
            parameter="regrid",
        )
    n_bad = np.array([x.n_bad for x in lights])
    if n_bad.any():
        rows = np.flatnonzero(n_bad)
        shown = ", ".join(curves[int(i)].name for i in rows[:5])
        more = f" and {rows.size - 5} more" if rows.size > 5 else ""
        warnings.warn(
            f"{int(n_bad.sum())} points with non-finite intensity or sigma, or sigma <= 0, "
            f"were masked, in {rows.size} of {len(curves)} curves: {shown}{more}",
            SaxsWarning,
            stacklevel=4,
        )
    if q0.size < text.MIN_Q_POINTS:
        raise SaxsFileError(
            f"only {q0.size} rows of data: a curve needs at least {text.MIN_Q_POINTS} q points",
            path=first.path or first.name,
        )
    attrs = {"sigma_estimated": 1} if any(x.ncols < 3 for x in lights) else {}
    coords, attrs, history, order = series_metadata(curves, scan, pattern, attrs)
    order = np.arange(len(files)) if order is None else order
    with_dq = any(x.ncols > 3 for x in lights)
    has_mask = bool(n_bad.any())
    n_q = q0.size
    skeleton = from_arrays(
        q0,
        np.ones((1, n_q)),
        np.ones((1, n_q)),
        q_unit=unit,
        intensity_unit=intensity_unit,
        mask=np.zeros((1, n_q), dtype=bool) if has_mask else None,
        history=history,
    )
    load = dask.delayed(_load_block, pure=True, nout=4)
    parts: dict[str, list] = {"intensity": [], "sigma": [], "dq": [], "mask": []}
    for b in range(0, len(files), frames):
        idx = order[b : b + frames]
        block = load(
            text._read_batch, tuple(files[i] for i in idx), tuple(lights[i].fine for i in idx), n_q, with_dq
        )
        shape = (len(idx), n_q)
        parts["intensity"].append(da.from_delayed(block[0], shape, dtype=np.float64))
        parts["sigma"].append(da.from_delayed(block[1], shape, dtype=np.float64))
        if with_dq:
            parts["dq"].append(da.from_delayed(block[2], shape, dtype=np.float64))
        parts["mask"].append(da.from_delayed(block[3], shape, dtype=bool))
    dims = ("frame", "q")
    data_vars = {
        "intensity": (dims, da.concatenate(parts["intensity"]), skeleton["intensity"].attrs),
        "sigma": (dims, da.concatenate(parts["sigma"]), skeleton["sigma"].attrs),
    }
    if has_mask:
        data_vars["mask"] = (dims, da.concatenate(parts["mask"]), skeleton["mask"].attrs)
    n = len(files)
    scan_coords = _as_scan({k: (v, u) for k, (v, u) in coords.items()}, n)
    all_coords = {"frame": ("frame", np.arange(n, dtype=np.int64)), "q": skeleton["q"].variable}
    all_coords.update({k: ("frame", v, a) for k, (v, a) in scan_coords.items()})
    ds = xr.Dataset(data_vars, coords=all_coords, attrs=dict(skeleton.attrs))
    ds.attrs.update(attrs)
    if with_dq:
        factor = q_unit_factor(unit)
        dq = da.concatenate(parts["dq"]) * factor
        ds["dq"] = (dims, dq, {"units": "1/nm", "long_name": "q resolution"})
    return validate(ds)
