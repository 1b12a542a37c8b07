"""Pixel masks of 2D detector images: True = pixel excluded (the convention of the series).

Each function returns a new boolean array of shape (rows, columns); :func:`combine_masks`
joins them (logical or). Shapes are in pixels, with pixel centres at integer
coordinates ``x = column``, ``y = row`` (:mod:`saxsnb.analysis._geometry`).

Examples
--------
>>> m = combine_masks(circle_mask((5, 5), (2, 2), 1.0), gap_mask((5, 5), rows=[0]))
>>> m.astype(int)
array([[1, 1, 1, 1, 1],
       [0, 0, 1, 0, 0],
       [0, 1, 1, 1, 0],
       [0, 0, 1, 0, 0],
       [0, 0, 0, 0, 0]])
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError

__all__ = ["threshold_mask", "gap_mask", "circle_mask", "polygon_mask", "combine_masks", "mask_fraction"]


def _shape(shape) -> tuple:
    try:
        shape = tuple(int(s) for s in shape)
    except TypeError as exc:
        raise SaxsInputError(f"must be (rows, columns), got {shape!r}", parameter="shape") from exc
    if len(shape) != 2 or min(shape) < 1:
        raise SaxsInputError(f"must be (rows, columns), got {shape!r}", parameter="shape")
    return shape


def threshold_mask(images, *, low=None, high=None, saturation=None, nonfinite: bool = True) -> np.ndarray:
    """Mask dead, hot, saturated and invalid pixels from values (one image or a stack).

    Parameters
    ----------
    images : array (rows, columns) or (frames, rows, columns).
    low : a pixel whose value is <= ``low`` in *every* frame is dead (e.g. ``low=0``).
    high : a pixel above ``high`` in *any* frame is hot.
    saturation : a pixel at or above ``saturation`` in any frame is saturated (e.g. the
        counter's maximum, ``2**32 - 1`` for uint32 counts, or a negative-flag value
        used by the detector mapped beforehand).
    nonfinite : mask a pixel that is NaN or infinite in every frame.

    >>> threshold_mask(np.array([[0, 5], [9, 4]]), low=0, high=8).astype(int)
    array([[1, 0],
           [1, 0]])
    """
    x = np.asarray(images)
    if x.ndim == 2:
        x = x[None]
    if x.ndim != 3:
        raise SaxsInputError(f"must be an image or a stack of images, got shape {x.shape}",
                             parameter="images")
    m = np.zeros(x.shape[1:], bool)
    xf = x.astype(float, copy=False)
    finite = np.isfinite(xf)
    if nonfinite:
        m |= ~finite.any(axis=0)
    with np.errstate(invalid="ignore"):
        if low is not None:
            m |= np.all((xf <= low) | ~finite, axis=0) & finite.any(axis=0)
        if high is not None:
            m |= np.any(xf > high, axis=0)
        if saturation is not None:
            m |= np.any(xf >= saturation, axis=0)
    return m


def gap_mask(shape, *, rows=(), cols=(), module_shape=None, gap=(0, 0)) -> np.ndarray:
    """Detector gaps: whole rows / columns, or the gaps of a tiled detector.

    ``module_shape=(mr, mc)`` and ``gap=(gr, gc)``: modules of ``mr x mc`` pixels repeat
    with ``gr`` (``gc``) dead rows (columns) between them, starting with a module at (0, 0).

    >>> gap_mask((7, 3), module_shape=(3, 3), gap=(1, 0))[:, 0].astype(int).tolist()
    [0, 0, 0, 1, 0, 0, 0]
    """
    shape = _shape(shape)
    m = np.zeros(shape, bool)
    try:
        m[np.asarray(rows, int), :] = True
        m[:, np.asarray(cols, int)] = True
    except IndexError as exc:
        raise SaxsInputError(f"gap rows/columns outside the image {shape}: {exc}", parameter="rows") from exc
    if module_shape is not None:
        (mr, mc), (gr, gc) = (int(v) for v in module_shape), (int(v) for v in gap)
        if mr < 1 or mc < 1 or gr < 0 or gc < 0:
            raise SaxsInputError("module_shape must be >= 1 and gap >= 0", parameter="module_shape")
        r = np.arange(shape[0]) % (mr + gr) >= mr
        c = np.arange(shape[1]) % (mc + gc) >= mc
        m |= r[:, None] | c[None, :]
    return m


def circle_mask(shape, center, radius: float) -> np.ndarray:
    """Pixels whose centre lies within ``radius`` px of ``center = (x, y)`` (a beam stop).

    >>> int(circle_mask((9, 9), (4, 4), 2.0).sum())   # lattice points in a radius-2 disc
    13
    """
    shape = _shape(shape)
    if not (np.isfinite(radius) and radius >= 0):
        raise SaxsInputError(f"must be >= 0, got {radius}", parameter="radius")
    x0, y0 = (float(c) for c in center)
    yy, xx = np.ogrid[: shape[0], : shape[1]]
    return (xx - x0) ** 2 + (yy - y0) ** 2 <= radius**2


def polygon_mask(shape, vertices) -> np.ndarray:
    """Pixels whose centre lies inside the polygon ``vertices = [(x, y), ...]``.

    Even-odd ray-crossing rule (Shimrat 1962, Comm. ACM 5, 434), vectorised over pixels;
    a centre exactly on an edge may fall either side.

    >>> polygon_mask((4, 4), [(0.5, 0.5), (2.5, 0.5), (2.5, 2.5), (0.5, 2.5)]).astype(int)
    array([[0, 0, 0, 0],
           [0, 1, 1, 0],
           [0, 1, 1, 0],
           [0, 0, 0, 0]])
    """
    shape = _shape(shape)
    v = np.asarray(vertices, float)
    if v.ndim != 2 or v.shape[1] != 2 or v.shape[0] < 3 or not np.isfinite(v).all():
        raise SaxsInputError("needs at least 3 finite (x, y) vertices", parameter="vertices")
    yy, xx = np.mgrid[: shape[0], : shape[1]].astype(float)
    inside = np.zeros(shape, bool)
    x1, y1 = v[:, 0], v[:, 1]
    x2, y2 = np.roll(x1, -1), np.roll(y1, -1)
    for a, b, c, d in zip(x1, y1, x2, y2):   # loop over edges (a handful), vectorised over pixels
        crosses = (b > yy) != (d > yy)
        with np.errstate(divide="ignore", invalid="ignore"):
            xint = a + (yy - b) * (c - a) / (d - b)
        inside ^= crosses & (xx < xint)
    return inside


def combine_masks(*masks) -> np.ndarray:
    """Logical or of masks of one shape (``None`` entries are skipped).

    >>> combine_masks(np.eye(2, dtype=bool), None, np.fliplr(np.eye(2, dtype=bool))).all()
    np.True_
    """
    ms = [np.asarray(m, bool) for m in masks if m is not None]
    if not ms:
        raise SaxsInputError("no mask given", parameter="masks")
    shapes = {m.shape for m in ms}
    if len(shapes) != 1:
        raise SaxsInputError(f"masks of different shapes: {sorted(shapes)}", parameter="masks")
    return np.logical_or.reduce(ms)


def mask_fraction(mask) -> float:
    """Fraction of pixels excluded.

    >>> mask_fraction(np.eye(4, dtype=bool))
    0.25
    """
    return float(np.asarray(mask, bool).mean())
