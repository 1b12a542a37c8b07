"""Corrections of reduced curves: background subtraction and intensity scaling.

Pure numpy, vectorised over any leading frame axes (q last). Uncertainties are
propagated to first order for independent errors, in quadrature (common practice;
e.g. Taylor 1997, An Introduction to Error Analysis, ch. 3).
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError

__all__ = ["subtract_background", "scale_intensity", "match_frames", "fit_scale", "normalization_factor"]


def _finite_scalar(value, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise SaxsInputError(f"{name} must be a number, got {value!r}", parameter=name) from None
    if not np.isfinite(v):
        raise SaxsInputError(f"{name} must be finite, got {value!r}", parameter=name)
    return v


def _broadcast(a, b, names: tuple[str, str]) -> None:
    try:
        np.broadcast_shapes(np.shape(a), np.shape(b))
    except ValueError:
        raise SaxsInputError(
            f"{names[1]} has shape {np.shape(b)}, which does not broadcast against "
            f"{names[0]} of shape {np.shape(a)} (q must be the last axis)",
            parameter=names[1],
        ) from None


def subtract_background(
    intensity, sigma, bg_intensity, bg_sigma, *, scale: float = 1.0
) -> tuple[np.ndarray, np.ndarray]:
    """Subtract a (scaled) background curve from sample curves.

    Parameters
    ----------
    intensity, sigma : array (..., n_q)
        Sample curves and their standard deviations.
    bg_intensity, bg_sigma : array (n_q,) or (..., n_q)
        Background; a single curve is subtracted from every frame (broadcasting).
    scale : float or array (n_frames, 1)
        Factor applied to the background (e.g. a transmission or thickness ratio, or
        the per-frame result of :func:`fit_scale`), taken as exact.

    Returns
    -------
    intensity, sigma : arrays of the broadcast shape
        ``I - scale * I_bg`` and ``sqrt(sigma^2 + (scale * sigma_bg)^2)``; new arrays,
        the inputs are not modified. Non-finite inputs give NaN at that point.

    Notes
    -----
    Independent errors added in quadrature (common practice).

    Examples
    --------
    >>> I, s = subtract_background([[5.0, 7.0], [6.0, 8.0]], [[0.3, 0.3], [0.3, 0.3]],
    ...                            [1.0, 2.0], [0.4, 0.4])
    >>> I.tolist(), s.round(6).tolist()
    ([[4.0, 5.0], [5.0, 6.0]], [[0.5, 0.5], [0.5, 0.5]])
    """
    if np.ndim(scale) == 0:
        scale = _finite_scalar(scale, "scale")
    else:
        scale = np.asarray(scale, dtype=float)
        if not np.all(np.isfinite(scale)):
            raise SaxsInputError("scale must be finite", parameter="scale")
    I = np.asarray(intensity, dtype=float)
    S = np.asarray(sigma, dtype=float)
    B = np.asarray(bg_intensity, dtype=float)
    BS = np.asarray(bg_sigma, dtype=float)
    _broadcast(I, S, ("intensity", "sigma"))
    _broadcast(I, B, ("intensity", "bg_intensity"))
    _broadcast(B, BS, ("bg_intensity", "bg_sigma"))
    _broadcast(I, scale, ("intensity", "scale"))
    shape = np.broadcast_shapes(I.shape, S.shape, B.shape, BS.shape, np.shape(scale))
    out_i = np.empty(shape)
    out_s = np.empty(shape)
    if not out_i.size:
        return out_i, out_s
    n_q = shape[-1] if shape else 1
    views = [np.broadcast_to(a, shape).reshape(-1, n_q) if np.ndim(a) else a
             for a in (I, S, B, BS, scale)]
    I2, S2, B2, BS2, sc2 = views
    oi, os_ = out_i.reshape(-1, n_q), out_s.reshape(-1, n_q)
    one = np.ndim(scale) == 0 and scale == 1.0
    # in cache-sized blocks of rows, in place: each value is read and written once
    step = max(1, 16384 // n_q)
    tmp = np.empty((min(step, oi.shape[0]), n_q))
    with np.errstate(invalid="ignore", over="ignore"):
        for a in range(0, oi.shape[0], step):
            b = slice(a, a + step)
            t = tmp[: oi[b].shape[0]]
            if one:
                np.subtract(I2[b], B2[b], out=oi[b])
                np.multiply(BS2[b], BS2[b], out=t)
            else:
                f = sc2 if np.ndim(sc2) == 0 else sc2[b]
                np.multiply(B2[b], f, out=t)
                np.subtract(I2[b], t, out=oi[b])
                np.multiply(BS2[b], f, out=t)
                np.multiply(t, t, out=t)
            np.multiply(S2[b], S2[b], out=os_[b])
            np.add(os_[b], t, out=os_[b])
            np.sqrt(os_[b], out=os_[b])
    return out_i, out_s


def scale_intensity(
    intensity, sigma, factor, factor_sigma=0.0
) -> tuple[np.ndarray, np.ndarray]:
    """Multiply curves by a calibration factor that has its own uncertainty.

    Parameters
    ----------
    intensity, sigma : array (..., n_q)
    factor : float or array broadcasting against ``intensity`` (e.g. (n_frames, 1))
        Calibration factor (for example to 1/cm from a standard).
    factor_sigma : float or array like ``factor``
        Standard deviation of ``factor``.

    Returns
    -------
    intensity, sigma : new arrays
        ``k I`` and ``sqrt((k sigma)^2 + (I sigma_k)^2)``.

    Notes
    -----
    First-order propagation for a product of independent quantities (common
    practice). The factor error is common to all points of a curve, so it moves
    the whole curve together; it is not independent point to point.

    Examples
    --------
    >>> I, s = scale_intensity([2.0, 4.0], [0.1, 0.2], 3.0, 0.3)
    >>> I.tolist(), s.round(6).tolist()
    ([6.0, 12.0], [0.67082, 1.341641])
    """
    I = np.asarray(intensity, dtype=float)
    S = np.asarray(sigma, dtype=float)
    k = np.asarray(factor, dtype=float)
    sk = np.asarray(factor_sigma, dtype=float)
    if not np.all(np.isfinite(k)):
        raise SaxsInputError("factor must be finite", parameter="factor")
    if not np.all(np.isfinite(sk)) or np.any(sk < 0):
        raise SaxsInputError("factor_sigma must be finite and >= 0", parameter="factor_sigma")
    _broadcast(I, S, ("intensity", "sigma"))
    _broadcast(I, k, ("intensity", "factor"))
    _broadcast(I, sk, ("intensity", "factor_sigma"))
    out_i = k * I
    out_s = np.hypot(k * S, I * sk)
    return out_i, np.broadcast_to(out_s, out_i.shape).copy()


def match_frames(values, background_values, *, tolerance=None) -> np.ndarray:
    """For each frame, the position of the background frame with the nearest scan value.

    Parameters
    ----------
    values : array (n_frames,)
        Scan values of the series (temperature, time, position, ...).
    background_values : array (n_background,)
        Scan values of the background frames, in any order.
    tolerance : float, optional
        Largest accepted distance; default half the smallest spacing between distinct
        background values (infinite for one background frame).

    Returns
    -------
    int array (n_frames,): background position for each frame.

    Raises
    ------
    SaxsInputError naming the first frame without a partner within ``tolerance``.

    Examples
    --------
    >>> match_frames([20.0, 25.0, 30.0], [30.0, 25.0, 20.0]).tolist()
    [2, 1, 0]
    """
    v = np.asarray(values, dtype=float)
    b = np.asarray(background_values, dtype=float)
    if b.ndim != 1 or b.size == 0 or not np.all(np.isfinite(b)):
        raise SaxsInputError("background scan values must be finite", parameter="background")
    if tolerance is None:
        d = np.diff(np.unique(b))
        tol = np.inf if d.size == 0 else 0.5 * float(d.min())
    else:
        tol = _finite_scalar(tolerance, "tolerance")
        if tol < 0:
            raise SaxsInputError("tolerance must be >= 0", parameter="tolerance")
    order = np.argsort(b, kind="stable")
    bs = b[order]
    pos = np.clip(np.searchsorted(bs, v), 1, max(bs.size - 1, 1))
    lo = pos - 1 if bs.size > 1 else np.zeros_like(pos)
    hi = np.minimum(pos, bs.size - 1)
    pick = np.where(np.abs(v - bs[lo]) <= np.abs(bs[hi] - v), lo, hi)
    dist = np.abs(v - bs[pick])
    bad = np.flatnonzero(~(dist <= tol))
    if bad.size:
        i = int(bad[0])
        raise SaxsInputError(
            f"frame {i} (scan value {v[i]:g}) has no background frame within {tol:g} "
            f"(nearest {bs[pick[i]]:g}); {bad.size} frame(s) without a partner: give tolerance= "
            "or a background covering the scan",
            parameter="background", frame=i,
        )
    return order[pick]


def fit_scale(q, intensity, sigma, bg_intensity, bg_sigma, *, q_range) -> dict[str, np.ndarray]:
    """Per-frame factor k that best matches ``k * background`` to each frame on a q range.

    Parameters
    ----------
    q : array (n_q,)
    intensity, sigma : arrays (n_frames, n_q)
    bg_intensity, bg_sigma : arrays (n_q,) or (n_frames, n_q)
    q_range : (q_min, q_max)
        Where sample and background should agree (typically a high-q range where the
        sample contributes nothing but the solvent).

    Returns
    -------
    dict of (n_frames,) arrays: ``scale``, ``scale_sigma`` and ``n_points``.

    Notes
    -----
    Weighted least squares through the origin, ``k = sum w I B / sum w B^2`` with
    ``w = 1 / (sigma^2 + sigma_B^2)`` (common practice); ``scale_sigma = sqrt(chi2_red /
    sum w B^2)`` includes the scatter about the fit. Raises SaxsInputError naming
    ``scale_q_range`` when a frame has fewer than 3 usable points in the range.

    Examples
    --------
    >>> q = np.linspace(1.0, 2.0, 11)
    >>> out = fit_scale(q, [1.5 / q], [np.full(11, 0.01)], 1 / q, np.full(11, 0.01), q_range=(1, 2))
    >>> round(float(out["scale"][0]), 6)
    1.5
    """
    I = np.atleast_2d(np.asarray(intensity, dtype=float))
    S = np.atleast_2d(np.asarray(sigma, dtype=float))
    B = np.broadcast_to(np.asarray(bg_intensity, dtype=float), I.shape)
    BS = np.broadcast_to(np.asarray(bg_sigma, dtype=float), I.shape)
    q = np.asarray(q, dtype=float)
    try:
        lo, hi = (float(v) for v in q_range)
    except (TypeError, ValueError):
        raise SaxsInputError(f"scale_q_range must be (q_min, q_max), got {q_range!r}",
                             parameter="scale_q_range") from None
    inr = (q >= lo) & (q <= hi)
    # only the points of the range enter the sums: the arrays cut to them first (the
    # temporaries are those of the range, not of the whole curves)
    cols = np.flatnonzero(inr)
    I, S, B, BS = (a[:, cols] for a in (I, S, B, BS))
    var = S**2 + BS**2
    ok = np.isfinite(I) & np.isfinite(B) & np.isfinite(var) & (var > 0)
    n = ok.sum(axis=1)
    bad = np.flatnonzero(n < 3)
    if bad.size:
        raise SaxsInputError(
            f"frame {int(bad[0])} has {int(n[bad[0]])} usable points in scale_q_range "
            f"({lo:g}, {hi:g}); at least 3 are needed to fit the scale",
            parameter="scale_q_range", frame=int(bad[0]),
        )
    w = np.where(ok, 1.0 / np.where(ok, var, 1.0), 0.0)
    Iz, Bz = np.where(ok, I, 0.0), np.where(ok, B, 0.0)
    sbb = (w * Bz * Bz).sum(axis=1)
    if np.any(sbb <= 0):
        i = int(np.flatnonzero(sbb <= 0)[0])
        raise SaxsInputError("the background is zero on scale_q_range", parameter="scale_q_range", frame=i)
    k = (w * Iz * Bz).sum(axis=1) / sbb
    chi2 = (w * (Iz - k[:, None] * Bz) ** 2).sum(axis=1) / np.maximum(n - 1, 1)
    return {"scale": k, "scale_sigma": np.sqrt(np.maximum(chi2, 1.0) / sbb), "n_points": n}


def normalization_factor(n_frames: int, **factors) -> np.ndarray:
    """Product of per-frame normalisation factors (transmission, thickness, exposure,
    monitor, ...), each a positive number or an array of ``n_frames`` positive values.

    The intensity is divided by the product (common practice: counts per unit
    exposure, monitor count, transmitted beam and path length). A zero, negative or
    non-finite value raises SaxsInputError naming the parameter and the frame.

    Examples
    --------
    >>> normalization_factor(2, transmission=[0.5, 0.25], exposure=2.0).tolist()
    [1.0, 0.5]
    """
    out = np.ones(int(n_frames))
    for name, value in factors.items():
        if value is None:
            continue
        v = np.asarray(value, dtype=float)
        if v.ndim == 0:
            v = np.full(int(n_frames), float(v))
        if v.shape != (int(n_frames),):
            raise SaxsInputError(f"{name} has shape {v.shape}; expected a number or ({n_frames},) values",
                                 parameter=name)
        bad = np.flatnonzero(~(np.isfinite(v) & (v > 0)))
        if bad.size:
            i = int(bad[0])
            raise SaxsInputError(f"{name} must be positive and finite; got {v[i]!r} for frame {i}",
                                 parameter=name, frame=i)
        out = out * v
    return out
