"""Corrections of reduced curves: background subtraction and intensity scaling.

Pure numpy, vectorised over any leading frame axes (q last). Uncertainties are
propagated to first order for independent errors, in quadrature (common practice;
e.g. Taylor 1997, An Introduction to Error Analysis, ch. 3).
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError

__all__ = ["subtract_background", "scale_intensity"]


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
    scale : float
        Factor applied to the background (e.g. a transmission or thickness ratio),
        taken as exact.

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
    scale = _finite_scalar(scale, "scale")
    I = np.asarray(intensity, dtype=float)
    S = np.asarray(sigma, dtype=float)
    B = np.asarray(bg_intensity, dtype=float)
    BS = np.asarray(bg_sigma, dtype=float)
    _broadcast(I, S, ("intensity", "sigma"))
    _broadcast(I, B, ("intensity", "bg_intensity"))
    _broadcast(B, BS, ("bg_intensity", "bg_sigma"))
    out_i = I - scale * B
    out_s = np.hypot(S, scale * BS)
    return out_i, np.broadcast_to(out_s, out_i.shape).copy()


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
