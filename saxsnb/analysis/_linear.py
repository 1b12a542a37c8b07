"""Weighted straight-line fits over a leading frame axis: the engine of Guinier and Porod.

Three pieces, all pure numpy and vectorised over any leading axes:

- :func:`linearize` turns ``(q, I, sigma)`` into ``(x, y, sigma_y)`` for the usual
  linearising plots (Guinier ``ln I`` vs ``q^2``, rod and sheet cross-sections, log-log,
  Porod ``q^4 I`` vs ``q^4``) with first-order error propagation;
- :func:`weighted_linear_fit` fits ``y = intercept + slope * x`` to every row at once
  (non-finite points are excluded, so masked points arriving as NaN are honoured);
- :class:`WindowMoments` holds prefix sums of the weighted moments of each row, from
  which :meth:`WindowMoments.fit` gives the regression of *any* contiguous index window
  in a few array operations: every candidate window of every frame at once, which is
  what the automatic Guinier range search needs.

Both fitting routes end in the same formulas (``_line_from_moments``), so a window fit
and a direct fit of the same points agree to rounding.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..errors import SaxsInputError

__all__ = [
    "LINEAR_PLOTS",
    "LinearPlot",
    "SHAPE_PLOTS",
    "linear_plot",
    "linearize",
    "weighted_linear_fit",
    "index_range",
    "line_fit_shared_x",
]


class LinearPlot(NamedTuple):
    """One linearising plot: how to draw it and what its slope means.

    ``x = q**x_power`` (``ln q`` when ``x_power`` is 0); ``y = ln(q**y_power I)`` when
    ``log_y``, else ``q**y_power I``. For the Guinier-type plots the size follows from
    the slope b as ``size^2 = -size_factor * b`` and the line holds up to
    ``q_max size <= limit`` (``soft_limit`` is the stricter value for elongated
    particles). ``analysis`` and ``shape`` name the accessor call that fits the plot.

    Examples
    --------
    >>> p = LINEAR_PLOTS["sheet"]
    >>> p.x_label, p.y_label, p.size, p.size_factor, p.limit
    ('q^2', 'ln(q^2 I)', 'rt', 1.0, 0.7)
    """

    name: str
    x_power: int
    y_power: int
    log_y: bool
    x_label: str
    y_label: str
    title: str
    analysis: str | None = None
    shape: str | None = None
    size: str | None = None
    size_label: str | None = None
    size_factor: float | None = None
    limit: float | None = None
    soft_limit: float | None = None
    intercept_label: str | None = None
    derived: tuple[str, ...] = ()


#: The linearising plots, the one table used by the analysis, the accessor and the
#: panels. Guinier laws (Guinier 1939, Ann. Phys. 12, 161; Glatter & Kratky 1982):
#: compact ln I = ln I0 - q^2 Rg^2 / 3; rod ln(q I) = c - q^2 Rc^2 / 2; sheet
#: ln(q^2 I) = c - q^2 Rt^2. Limits of q_max R: 1.3 compact (0.8 elongated), about 1
#: for a rod cross-section (Jacques & Trewhella 2010, Protein Sci. 19, 642), 0.7 for a
#: sheet (our choice, see analysis._guinier). Porod: q^4 I = Kp + B q^4 (Porod 1951).
LINEAR_PLOTS = {
    "guinier": LinearPlot(
        "guinier",
        2,
        0,
        True,
        "q^2",
        "ln I",
        "Guinier fit (compact)",
        "guinier",
        "compact",
        "rg",
        "Rg",
        3.0,
        1.3,
        0.8,
        "I0",
        (),
    ),
    "rod": LinearPlot(
        "rod",
        2,
        1,
        True,
        "q^2",
        "ln(q I)",
        "Guinier fit (rod cross-section)",
        "guinier",
        "rod",
        "rc",
        "Rc",
        2.0,
        1.0,
        1.0,
        "lim q I",
        ("radius", "length"),
    ),
    "sheet": LinearPlot(
        "sheet",
        2,
        2,
        True,
        "q^2",
        "ln(q^2 I)",
        "Guinier fit (sheet thickness)",
        "guinier",
        "sheet",
        "rt",
        "Rt",
        1.0,
        0.7,
        0.7,
        "lim q^2 I",
        ("thickness",),
    ),
    "porod": LinearPlot(
        "porod", 4, 4, False, "q^4", "q^4 I", "Porod fit", "porod", None, "porod_constant", "Kp"
    ),
    "loglog": LinearPlot("loglog", 0, 0, True, "ln q", "ln I", "log-log plot"),
}

#: Guinier shape -> its plot ("compact" -> LINEAR_PLOTS["guinier"], ...).
SHAPE_PLOTS = {p.shape: p for p in LINEAR_PLOTS.values() if p.shape is not None}


def linear_plot(kind: str) -> LinearPlot:
    """The :data:`LINEAR_PLOTS` entry ``kind``; an unknown kind is a SaxsInputError.

    >>> linear_plot("rod").size, linear_plot("rod").size_factor
    ('rc', 2.0)
    """
    if kind not in LINEAR_PLOTS:
        raise SaxsInputError(
            f"unknown linear plot {kind!r}; use one of {sorted(LINEAR_PLOTS)}", parameter="kind"
        )
    return LINEAR_PLOTS[kind]


def linearize(q, intensity, sigma=None, kind: str = "guinier"):
    """Transform a curve (or a stack of curves) to the coordinates of a linear plot.

    Parameters
    ----------
    q : array (n_q,) or broadcastable to ``intensity``, 1/nm
    intensity : array (..., n_q)
    sigma : array like ``intensity``, optional
        One standard deviation of the intensity.
    kind : {"guinier", "rod", "sheet", "loglog", "porod"}
        ``guinier``: x = q^2, y = ln I; ``rod``: x = q^2, y = ln(q I); ``sheet``:
        x = q^2, y = ln(q^2 I); ``loglog``: x = ln q, y = ln I; ``porod``: x = q^4,
        y = q^4 I.

    Returns
    -------
    x, y, sigma_y : arrays broadcast to ``intensity.shape``. ``sigma_y`` is None when
    ``sigma`` is None. Points where a logarithm is undefined (I <= 0) are NaN in ``y``.

    Notes
    -----
    First-order (delta-method) propagation: for y = ln(q^k I), sigma_y = sigma / I; for
    y = q^4 I, sigma_y = q^4 sigma. The logarithmic form is biased when sigma/I is not
    small (a few tenths); such points carry little weight in a weighted fit anyway.

    Examples
    --------
    >>> x, y, sy = linearize([1.0, 2.0], [[np.e, 1.0]], [[0.1 * np.e, 0.5]])
    >>> x.tolist(), y.tolist(), np.round(sy, 3).tolist()
    ([[1.0, 4.0]], [[1.0, 0.0]], [[0.1, 0.5]])
    """
    plot = linear_plot(kind)
    I = np.asarray(intensity, dtype=float)
    q = np.broadcast_to(np.asarray(q, dtype=float), I.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = np.log(q) if plot.x_power == 0 else q**plot.x_power
        if not plot.log_y:
            qy = q**plot.y_power
            return x, qy * I, None if sigma is None else qy * np.asarray(sigma, dtype=float)
        pos = I > 0
        y = np.log(np.where(pos, I, np.nan))
        if plot.y_power:
            y = y + plot.y_power * np.log(q)
        sy = None if sigma is None else np.asarray(sigma, dtype=float) / np.where(pos, I, np.nan)
    return x, y, sy


def _weights(y, sigma):
    """Weights 1/sigma^2 (1 when sigma is None); 0 where any input is not usable."""
    y = np.asarray(y, dtype=float)
    if sigma is None:
        w = np.ones_like(y)
    else:
        s = np.asarray(sigma, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            w = 1.0 / (s * s)
        w = np.where(np.isfinite(w) & (s > 0), w, 0.0)
    return w


def _line_from_moments(S0, xm, ym, Sxx, Sxy, chi2, n, scale):
    """Slope, intercept, covariance and chi-square from weighted (centred) moments.

    ``S0 = sum w``, ``xm, ym`` weighted means, ``Sxx = sum w (x - xm)^2``,
    ``Sxy = sum w (x - xm)(y - ym)``, ``chi2 = sum w r^2``; ``scale`` (bool array)
    multiplies the covariance by the reduced chi-square.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = Sxy / Sxx
        intercept = ym - slope * xm
        var_b = 1.0 / Sxx
        var_a = 1.0 / S0 + xm * xm / Sxx
        cov_ab = -xm / Sxx
        dof = n - 2
        chi2_red = np.where(dof > 0, chi2 / np.maximum(dof, 1), np.nan)
        factor = np.where(scale, chi2_red, 1.0)
        ok = (n >= 2) & (Sxx > 0) & (S0 > 0)
        nan = np.nan
        return {
            "slope": np.where(ok, slope, nan),
            "intercept": np.where(ok, intercept, nan),
            "slope_sigma": np.where(ok, np.sqrt(var_b * factor), nan),
            "intercept_sigma": np.where(ok, np.sqrt(var_a * factor), nan),
            "slope_intercept_cov": np.where(ok, cov_ab * factor, nan),
            "chi2": np.where(ok, chi2, nan),
            "chi2_reduced": np.where(ok, chi2_red, nan),
            "n_points": np.asarray(n, dtype=np.int64),
            "x_mean": np.where(ok, xm, nan),
        }


def weighted_linear_fit(x, y, sigma=None, *, scale_covariance: bool | None = None) -> dict:
    """Fit ``y = intercept + slope * x`` by weighted least squares, row by row.

    Parameters
    ----------
    x : array (..., n) or (n,)
        Abscissae, broadcast against ``y``.
    y : array (..., n)
        Ordinates; the fit runs along the last axis for every leading index.
    sigma : array like ``y``, optional
        One standard deviation of ``y``; weights are ``1 / sigma^2``. Points where x, y
        or sigma is not finite, or sigma <= 0, are excluded. Without sigma every
        point has weight 1.
    scale_covariance : bool, optional
        Multiply the covariance by the reduced chi-square (the residual scatter
        decides the uncertainty). Default: True without ``sigma`` (as
        ``numpy.polyfit(cov=True)`` and ``scipy.stats.linregress``), False with
        ``sigma`` (the sigmas are taken as absolute).

    Returns
    -------
    dict of arrays of shape ``y.shape[:-1]``: ``slope``, ``intercept``,
    ``slope_sigma``, ``intercept_sigma``, ``slope_intercept_cov``, ``chi2`` (sum of
    weighted squared residuals), ``chi2_reduced`` (chi2 / (n - 2)), ``n_points``
    (int), ``x_mean`` (weighted mean of x). Rows with fewer than two distinct usable
    x get NaN.

    Notes
    -----
    Two-pass centred sums (weighted means first), so the result does not lose digits
    when x lies far from zero: slope = Sxy / Sxx, intercept = ym - slope xm,
    var(slope) = 1 / Sxx, var(intercept) = 1 / S0 + xm^2 / Sxx,
    cov = -xm / Sxx (e.g. Bevington & Robinson 2003, Data Reduction and Error
    Analysis, ch. 6).

    Examples
    --------
    >>> x = np.array([0.0, 1.0, 2.0, 3.0])
    >>> r = weighted_linear_fit(x, np.array([[1.0, 3.0, 5.0, 7.0], [0.0, -1.0, -2.0, -3.0]]))
    >>> r["slope"].tolist(), r["intercept"].tolist()
    ([2.0, -1.0], [1.0, 0.0])
    """
    y = np.asarray(y, dtype=float)
    x = np.broadcast_to(np.asarray(x, dtype=float), y.shape)
    w = _weights(y, sigma)
    use = np.isfinite(x) & np.isfinite(y) & (w > 0)
    w = np.where(use, w, 0.0)
    xz = np.where(use, x, 0.0)
    yz = np.where(use, y, 0.0)
    n = use.sum(axis=-1)
    S0 = w.sum(axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        xm = (w * xz).sum(axis=-1) / S0
        ym = (w * yz).sum(axis=-1) / S0
    dx = np.where(use, xz - xm[..., None], 0.0)
    dy = np.where(use, yz - ym[..., None], 0.0)
    Sxx = (w * dx * dx).sum(axis=-1)
    Sxy = (w * dx * dy).sum(axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = Sxy / Sxx
        r = dy - slope[..., None] * dx
    chi2 = (w * np.where(use, r * r, 0.0)).sum(axis=-1)
    if scale_covariance is None:
        scale_covariance = sigma is None
    return _line_from_moments(S0, xm, ym, Sxx, Sxy, chi2, n, bool(scale_covariance))


def line_fit_shared_x(x, y, w, *, scale_covariance: bool = False, n_points=None) -> dict:
    """Fast weighted line fits of many rows that share one abscissa.

    Parameters
    ----------
    x : array (n,)
        The abscissa common to all rows (e.g. ln q or q^4 on a q range).
    y : array (n_rows, n)
        Ordinates; must be finite wherever ``w > 0`` (anything finite elsewhere).
    w : array (n_rows, n)
        Weights 1/sigma^2, 0 for excluded points.
    scale_covariance : bool
        As in :func:`weighted_linear_fit`.
    n_points : int array (n_rows,), optional
        The number of points with ``w > 0`` when the caller knows it.

    Returns
    -------
    dict as :func:`weighted_linear_fit`.

    Notes
    -----
    Raw moments about a fixed shift of x (its mean over the columns), reduced with
    ``numpy.einsum`` (no temporaries, summed row by row, so a row's result does not
    depend on the other rows). Agrees with :func:`weighted_linear_fit` to ~1e-12.

    Examples
    --------
    >>> r = line_fit_shared_x(np.array([1.0, 2.0, 3.0]), np.array([[2.0, 4.0, 6.0]]), np.ones((1, 3)))
    >>> round(float(r["slope"][0]), 12), round(float(r["intercept"][0]), 12)
    (2.0, 0.0)
    """
    x = np.asarray(x, dtype=float)
    shift = float(x.mean()) if x.size else 0.0
    xc = x - shift
    n = np.count_nonzero(w > 0, axis=-1) if n_points is None else n_points
    S0 = w.sum(-1)
    wy = w * y
    Sx = np.einsum("ij,j->i", w, xc)
    Sxx = np.einsum("ij,j->i", w, xc * xc)
    Sy = wy.sum(-1)
    Sxy = np.einsum("ij,j->i", wy, xc)
    Syy = np.einsum("ij,ij->i", wy, y)
    return line_from_sums(n, S0, Sx, Sy, Sxx, Sxy, Syy, shift, 0.0, scale_covariance)


def line_from_sums(n, S0, Su, Sv, Suu, Suv, Svv, x_ref, y_ref, scale_covariance=False) -> dict:
    """The weighted straight-line fit of each window from its six moment sums (x and y
    relative to ``x_ref`` / ``y_ref``), as :func:`weighted_linear_fit` returns it."""
    with np.errstate(divide="ignore", invalid="ignore"):
        um = Su / S0
        vm = Sv / S0
        Sxx = Suu - Su * um
        Sxy = Suv - Su * vm
        Syy = Svv - Sv * vm
        chi2 = np.maximum(Syy - Sxy * Sxy / Sxx, 0.0)
    xm = um + x_ref
    ym = vm + y_ref
    return _line_from_moments(S0, xm, ym, Sxx, Sxy, chi2, n, scale_covariance)


def index_range(q, q_range, n_frames: int):
    """Index windows ``[start, stop)`` of each frame for a q-range specification.

    Parameters
    ----------
    q : array (n_q,), increasing, 1/nm
    q_range : (a, b) or array (n_frames, 2)
        Inclusive bounds; NaN bounds mean "no limit on that side".
    n_frames : int

    Returns
    -------
    start, stop : int arrays (n_frames,), with ``q[start:stop]`` inside the range.

    Examples
    --------
    >>> index_range(np.array([0.1, 0.2, 0.3, 0.4]), (0.15, 0.3), 2)
    (array([1, 1]), array([3, 3]))
    """
    q = np.asarray(q, dtype=float)
    r = np.asarray(q_range, dtype=float)
    if r.shape == (2,):
        r = np.broadcast_to(r, (n_frames, 2))
    if r.shape != (n_frames, 2):
        raise SaxsInputError(
            f"q_range must be (q_min, q_max) or an array ({n_frames}, 2); got shape {r.shape}",
            parameter="q_range",
        )
    lo = np.where(np.isnan(r[:, 0]), -np.inf, r[:, 0])
    hi = np.where(np.isnan(r[:, 1]), np.inf, r[:, 1])
    if np.any(lo >= hi):
        f = int(np.argmax(lo >= hi))
        raise SaxsInputError(
            f"q_range lower bound {lo[f]} is not below the upper bound {hi[f]}",
            parameter="q_range",
            frame=f if r.shape[0] > 1 else None,
        )
    start = np.searchsorted(q, lo, side="left")
    stop = np.searchsorted(q, hi, side="right")
    return start.astype(np.int64), stop.astype(np.int64)


