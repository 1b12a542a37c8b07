"""What the panels draw: linearised-plot coordinates, fitted lines, maps, error bars.


Pure numpy, no fitting: the few array reshapes a plot needs live here, tested like any
function, so the widgets stay free of maths. The linearised plots come from the one
table :data:`saxsnb.analysis._linear.LINEAR_PLOTS`.
"""

from __future__ import annotations

import numpy as np

from ..analysis._linear import linear_plot
from ..errors import SaxsInputError
from .overview import block_edges as _block_edges
from .overview import overview_map

__all__ = [
    "similarity_map",
    "linear_x",
    "q_from_linear_x",
    "line_coefficients",
    "line_residuals",
    "KRATKY_REFERENCES",
    "scaled_q",
    "curve_at",
    "overview_map",
    "errorbar_segments",
    "PHASE_COLOURS",
    "phase_colours",
    "label_levels",
    "scaled_sigma",
]

#: The one colour code of the phases, in notebook figures and panels alike (Okabe & Ito
#: 2008 colour-blind-safe colours, in the order of ``analysis._reflections.PHASES``;
#: "" = a peak assigned to no phase, grey).
PHASE_COLOURS = {
    "lamellar": "#0072B2",
    "hexagonal": "#D55E00",
    "Pn3m": "#009E73",
    "Im3m": "#CC79A7",
    "Ia3d": "#E69F00",
    "Fd3m": "#56B4E9",
    "Pm3n": "#000000",
    "Fm3m": "#B8A800",
    "": "#7F7F7F",
}


def phase_colours(phases) -> list[str]:
    """The colour of each phase name (:data:`PHASE_COLOURS`; unknown names grey).

    >>> phase_colours(["Pn3m", "", "lamellar"])
    ['#009E73', '#7F7F7F', '#0072B2']
    """
    return [PHASE_COLOURS.get(str(p), PHASE_COLOURS[""]) for p in np.asarray(phases).ravel()]


def label_levels(x, *, min_gap: float) -> np.ndarray:
    """Stacking level (0, 1, 2, ...) of text labels at positions ``x`` so that labels
    closer than ``min_gap`` along x go on different levels (the first free level from
    the left), e.g. the hkl labels of two coexisting phases.

    >>> label_levels([1.0, 1.01, 1.02, 2.0], min_gap=0.05).tolist()
    [0, 1, 2, 0]
    >>> label_levels([1.0, 1.2, 1.21], min_gap=0.05).tolist()
    [0, 0, 1]
    """
    x = np.asarray(x, dtype=float).ravel()
    levels = np.zeros(x.size, dtype=int)
    last: list[float] = []  # right-most x placed on each level
    for k in np.argsort(x, kind="stable"):
        for lev, end in enumerate(last):
            if x[k] - end >= min_gap:
                levels[k], last[lev] = lev, x[k]
                break
        else:
            levels[k] = len(last)
            last.append(x[k])
    return levels


def scaled_sigma(transformed, intensity, sigma):
    """Sigma of a curve transformed by a factor per point (``transformed = f(q) I``,
    e.g. the Kratky plot q² I): ``f(q) sigma = transformed / I * sigma``; NaN where
    I is 0 or missing.

    >>> scaled_sigma([4.0, 9.0], [1.0, 1.0], [0.1, 0.2]).tolist()
    [0.4, 1.8]
    """
    t = np.asarray(transformed, dtype=float)
    i = np.asarray(intensity, dtype=float)
    s = np.asarray(sigma, dtype=float)
    ok = np.isfinite(i) & (i != 0)
    return np.where(ok, t * s / np.where(ok, i, 1.0), np.nan)


def linear_x(q, kind: str):
    """Abscissa of the linearised plot ``kind`` for q (q^2, or q^4 for Porod).


    >>> linear_x(np.array([2.0]), "guinier").tolist(), linear_x(2.0, "porod")
    ([4.0], 16.0)
    """
    return np.asarray(q, dtype=float) ** _power(kind) if np.ndim(q) else float(q) ** _power(kind)


def q_from_linear_x(x, kind: str):
    """Inverse of :func:`linear_x`: q in 1/nm from the plot abscissa (NaN below 0).


    >>> q_from_linear_x(np.array([4.0, 16.0]), "guinier").tolist()
    [2.0, 4.0]
    """
    x = np.asarray(x, dtype=float)
    with np.errstate(invalid="ignore"):
        out = np.where(x >= 0, np.abs(x) ** (1.0 / _power(kind)), np.nan)
    return out if out.ndim else float(out)


def _power(kind: str) -> int:
    return linear_plot(kind).x_power


def line_coefficients(kind: str, values: dict) -> tuple[float, float]:
    """Intercept and slope of the straight line behind a fit result, in plot coordinates.


    Parameters
    ----------
    kind : {"guinier", "rod", "sheet", "porod"}
    values : mapping of result name -> float
        A Guinier result: ``intercept`` and ``slope`` when present, else ``i0`` and the
        size (``rg``, ``rc`` or ``rt``) with ln i0 = intercept and size^2 = -k slope
        (k = 3, 2, 1). A Porod result: ``porod_constant`` (intercept of q^4 I against
        q^4) and ``background`` (slope).


    Returns
    -------
    (intercept, slope) floats (NaN when the fit failed).


    >>> line_coefficients("guinier", {"i0": float(np.e), "rg": 3.0})
    (1.0, -3.0)
    >>> line_coefficients("porod", {"porod_constant": 2.0, "background": 0.1})
    (2.0, 0.1)
    """
    plot = linear_plot(kind)
    if plot.analysis == "porod":
        return float(values.get("porod_constant", np.nan)), float(values.get("background", np.nan))
    if "intercept" in values and "slope" in values:
        return float(values["intercept"]), float(values["slope"])
    i0, r = float(values.get("i0", np.nan)), float(values.get(plot.size, np.nan))
    with np.errstate(divide="ignore", invalid="ignore"):
        return float(np.log(i0)) if i0 > 0 else np.nan, -(r * r) / plot.size_factor


def line_residuals(x, y, sigma_y, intercept: float, slope: float):
    """The straight line ``intercept + slope x`` and normalised residuals.


    Returns
    -------
    line : array like ``x``
    residual : array, ``(y - line) / sigma_y`` (``y - line`` when ``sigma_y`` is None)


    >>> x, y, sy = np.array([0.0, 1.0]), np.array([1.0, 0.0]), np.array([0.5, 0.5])
    >>> line, res = line_residuals(x, y, sy, 1.0, -0.5)
    >>> line.tolist(), res.tolist()
    ([1.0, 0.5], [0.0, -1.0])
    """
    x = np.asarray(x, dtype=float)
    line = intercept + slope * x
    diff = np.asarray(y, dtype=float) - line
    if sigma_y is None:
        return line, diff
    with np.errstate(divide="ignore", invalid="ignore"):
        return line, diff / np.asarray(sigma_y, dtype=float)


#: Reference levels of the dimensionless Kratky plot (q Rg)^2 I / I0: the Guinier form
#: exp(-(q Rg)^2 / 3) peaks at q Rg = sqrt(3) with height 3/e (Durand et al. 2010,
#: J. Struct. Biol. 169, 45); the Gaussian chain tends to the plateau 2 (Debye 1947,
#: J. Phys. Colloid Chem. 51, 18).
KRATKY_REFERENCES = {
    "globule_peak_qrg": float(np.sqrt(3.0)),
    "globule_peak_height": float(3.0 / np.e),
    "chain_plateau": 2.0,
}


def scaled_q(q, size):
    """q times a size for each frame (the abscissa q Rg of a dimensionless plot).


    Parameters
    ----------
    q : array (n_q,), 1/nm
    size : array (n_frames,), nm


    Returns
    -------
    array (n_frames, n_q), dimensionless (NaN rows where ``size`` is NaN).


    >>> scaled_q(np.array([0.5, 1.0]), np.array([2.0])).tolist()
    [[1.0, 2.0]]
    """
    return np.asarray(q, dtype=float)[None, :] * np.asarray(size, dtype=float).reshape(-1, 1)


def curve_at(q, intensity, positions):
    """Intensity of one curve at given q positions (linear interpolation, for markers).


    Parameters
    ----------
    q : array (n_q,), increasing
    intensity : array (n_q,)
    positions : array (n,), NaN allowed (gives NaN)


    >>> curve_at(np.array([1.0, 2.0]), np.array([10.0, 20.0]), np.array([1.5, np.nan])).tolist()
    [15.0, nan]
    """
    p = np.asarray(positions, dtype=float)
    out = np.interp(
        np.where(np.isfinite(p), p, 0.0), np.asarray(q, dtype=float), np.asarray(intensity, dtype=float)
    )
    return np.where(np.isfinite(p), out, np.nan)


def errorbar_segments(q, intensity, sigma, *, floor: float | None = None):
    """Vertical +-sigma bars of one curve as a single polyline with gaps.


    Parameters
    ----------
    q, intensity, sigma : arrays (n_q,)
    floor : float, optional
        Lower ends below ``floor`` are drawn from ``floor`` (for a log axis that
        starts there; a bar reaching zero or below cannot be drawn on a log axis).


    Returns
    -------
    x, y : arrays (3 n_q,): for each point ``(q, I - sigma), (q, I + sigma), gap``;
    the gap has ``y = NaN`` (a plotting library leaves the line undefined there).


    Examples
    --------
    >>> x, y = errorbar_segments([1.0, 2.0], [10.0, 5.0], [1.0, 6.0], floor=0.5)
    >>> x.tolist()[:2], y.tolist()[:2], y.tolist()[3:5]
    ([1.0, 1.0], [9.0, 11.0], [0.5, 11.0])
    """
    q = np.asarray(q, dtype=float)
    I = np.asarray(intensity, dtype=float)
    S = np.asarray(sigma, dtype=float)
    lo = I - S
    if floor is not None:
        lo = np.where(lo < floor, floor, lo)
    x = np.repeat(q, 3)
    y = np.empty(3 * q.size)
    y[0::3] = lo
    y[1::3] = I + S
    y[2::3] = np.nan
    return x, y


def similarity_map(values, *, max_cells: int = 200) -> dict:
    """Shrink a (n_frames, n_frames) pair map to at most ``max_cells`` x ``max_cells``
    blocks of consecutive frames, each showing the largest value of its pairs (for
    -log10 p: the most dissimilar pair, so that no change is averaged away).

    Parameters
    ----------
    values : array (n, n)
    max_cells : int
        Largest number of blocks along each side.

    Returns
    -------
    dict with ``values`` (n_blocks, n_blocks), ``frame_start`` (n_blocks,) the first
    frame of each block, ``edges`` (n_blocks + 1,) the block edges in frame units
    (``start - 0.5``, last ``n - 0.5``) and ``step`` (frames per block, 1 when nothing
    was merged).

    Examples
    --------
    >>> m = similarity_map(np.arange(16.0).reshape(4, 4), max_cells=2)
    >>> m["values"].tolist(), m["frame_start"].tolist(), m["edges"].tolist(), m["step"]
    ([[5.0, 7.0], [13.0, 15.0]], [0, 2], [-0.5, 1.5, 3.5], 2)
    """
    v = np.asarray(values, dtype=float)
    if v.ndim != 2 or v.shape[0] != v.shape[1]:
        raise SaxsInputError(f"values has shape {v.shape}; expected (n, n)", parameter="values")
    n = v.shape[0]
    if n == 0:
        return {"values": v, "frame_start": np.zeros(0, np.int64), "edges": np.array([-0.5]), "step": 1}
    starts = _block_edges(n, max_cells)
    step = int(starts[1] - starts[0]) if starts.size > 1 else 1
    out = v if step == 1 else np.maximum.reduceat(np.maximum.reduceat(v, starts, axis=0), starts, axis=1)
    return {"values": out, "frame_start": starts, "edges": np.append(starts, n) - 0.5, "step": step}
