"""From 2D detector images to curves: one sparse matrix from pixels to bins.

:func:`integration_matrix` builds, once per geometry and mask, a ``scipy.sparse`` matrix
``A`` of shape ``(n_bins, n_pixels)`` whose element ``A[b, p]`` is the fraction of pixel
``p`` that falls into bin ``b`` (q bins for a curve, (q, chi) bins for a cake).
:meth:`IntegrationMatrix.integrate` then reduces a whole stack of frames with one
sparse product per chunk of frames.

Sub-pixel sampling (how a pixel is split)
-----------------------------------------
Each pixel is divided into ``subpixels x subpixels`` equal squares; the centre of each
square is mapped to (q, chi) with the full geometry (tilt included) and gives
``1 / subpixels**2`` of the pixel to the bin it falls in. ``subpixels=1`` assigns whole
pixels by their centre. Each column of ``A`` sums to 1 for a pixel that lies wholly
inside the binned range, so counts are conserved.

Intensity and its uncertainty (per bin ``b``, per frame)
--------------------------------------------------------
With ``c_p`` the counts of pixel ``p`` and ``w_p`` its correction (relative solid angle
times polarisation factor, each optional; :mod:`saxsnb.analysis._geometry`), evaluated at
the pixel centre::

    I_b     = sum_p A_bp c_p / sum_p A_bp w_p
    sigma_b = sqrt(sum_p A_bp^2 var_p) / sum_p A_bp w_p

the ratio-of-sums estimator (common practice), so a frame with ``c_p = K w_p`` gives
``I_b = K`` exactly. ``var_p`` is the Poisson variance, estimated by the counts
(``max(c_p, 0)``), unless a variance stack is given; a bin whose variance sum is 0 (no
counts at all) gets the variance of one count, ``sum_p A_bp^2``, so its sigma is not 0.
Poisson counts of one pixel split over bins are correlated between neighbouring bins;
the sigma above is the marginal one of each bin. Non-finite pixels of a frame are left
out of that frame only (its normalisation is recomputed). Bins with no pixel give NaN.

Examples
--------
>>> from saxsnb.analysis._geometry import DetectorGeometry
>>> g = DetectorGeometry(31.5, 31.5, 1000, 0.2, 0.2, 0.1, shape=(64, 64))
>>> m = integration_matrix(g, n_bins=20, solid_angle=False, polarization=False)
>>> frames = np.full((3, 64, 64), 10.0)
>>> out = m.integrate(frames)
>>> out["intensity"].shape, bool(np.allclose(out["intensity"], 10.0))
((3, 20), True)
>>> bool(np.isclose(out["counts"].sum(), 3 * 64 * 64 * 10.0))   # counts conserved
True
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.sparse as sp

from ..errors import SaxsInputError
from ._geometry import DetectorGeometry

__all__ = ["IntegrationMatrix", "integration_matrix", "bin_edges"]


def bin_edges(lo: float, hi: float, n_bins: int, spacing: str = "linear") -> np.ndarray:
    """``n_bins + 1`` edges from ``lo`` to ``hi``, ``"linear"`` or ``"log"`` spaced.

    >>> bin_edges(0.0, 1.0, 4).tolist()
    [0.0, 0.25, 0.5, 0.75, 1.0]
    """
    if int(n_bins) < 1:
        raise SaxsInputError(f"must be >= 1, got {n_bins}", parameter="n_bins")
    if not (np.isfinite(lo) and np.isfinite(hi) and hi > lo):
        raise SaxsInputError(f"needs lo < hi, got ({lo}, {hi})", parameter="q_range")
    if spacing == "linear":
        return np.linspace(lo, hi, int(n_bins) + 1)
    if spacing == "log":
        if lo <= 0:
            raise SaxsInputError("log spacing needs q_min > 0", parameter="q_range")
        return np.geomspace(lo, hi, int(n_bins) + 1)
    raise SaxsInputError(f"must be 'linear' or 'log', got {spacing!r}", parameter="spacing")


def _in_sector(chi: np.ndarray, chi_range) -> np.ndarray:
    lo, hi = (float(c) for c in chi_range)
    lo = (lo + 180.0) % 360.0 - 180.0
    hi = (hi + 180.0) % 360.0 - 180.0
    if hi == lo:
        return np.ones(chi.shape, bool)
    return (chi >= lo) & (chi < hi) if lo < hi else (chi >= lo) | (chi < hi)


@dataclass(frozen=True)
class IntegrationMatrix:
    """Pixels -> bins, built by :func:`integration_matrix` (module doc for the formulas).

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix (2 n_bins, n_pixels); rows ``[:n_bins]`` hold ``A``,
        rows ``[n_bins:]`` hold ``A**2`` (so one product gives sums and variances).
    q_edges, q : bin edges and centres in 1/nm.
    chi_edges, chi : bin edges and centres in degrees (a curve has one chi bin).
    correction : per-pixel ``w_p`` (flattened), 1 where no correction applies.
    norm : ``sum_p A_bp w_p`` per bin; ``pixels`` : ``sum_p A_bp`` per bin.
    shape : image shape (rows, columns).

    Examples
    --------
    >>> from saxsnb.analysis._geometry import DetectorGeometry
    >>> g = DetectorGeometry(7.5, 7.5, 500, 0.2, 0.2, 0.1, shape=(16, 16))
    >>> m = integration_matrix(g, n_bins=5, n_chi=4)
    >>> m.is_cake, m.integrate(np.ones((2, 16, 16)))["intensity"].shape
    (True, (2, 5, 4))
    """

    matrix: sp.csr_matrix
    q_edges: np.ndarray
    chi_edges: np.ndarray
    correction: np.ndarray
    norm: np.ndarray
    pixels: np.ndarray
    shape: tuple
    subpixels: int

    @property
    def n_bins(self) -> int:
        return self.norm.size

    @property
    def q(self) -> np.ndarray:
        return 0.5 * (self.q_edges[1:] + self.q_edges[:-1])

    @property
    def chi(self) -> np.ndarray:
        return 0.5 * (self.chi_edges[1:] + self.chi_edges[:-1])

    @property
    def is_cake(self) -> bool:
        return self.chi_edges.size > 2

    @cached_property
    def fractions(self) -> sp.csr_matrix:
        """``A`` alone, (n_bins, n_pixels)."""
        return self.matrix[: self.n_bins]

    @cached_property
    def squares(self) -> sp.csr_matrix:
        """``A**2`` (elementwise), (n_bins, n_pixels)."""
        return self.matrix[self.n_bins:]

    # CSC copies for the products: the kernel then walks the pixels in memory order and
    # scatters into the (small) bin rows, instead of gathering pixels scattered over the image.
    @cached_property
    def fractions_csc(self) -> sp.csc_matrix:
        return self.fractions.tocsc()

    @cached_property
    def squares_csc(self) -> sp.csc_matrix:
        return self.squares.tocsc()

    @cached_property
    def stacked_csc(self) -> sp.csc_matrix:
        return self.matrix.tocsc()

    def integrate(self, images, variance=None, *, chunk: int = 16, progress: bool = False) -> dict:
        """Reduce a stack of frames ``(n_frames, rows, columns)`` (or one image).

        Parameters
        ----------
        images : array (n_frames, rows, columns) of counts, any real dtype (or a 2D image).
        variance : optional array of the same shape (e.g. after dark subtraction);
            default: Poisson, the counts themselves.
        chunk : frames per sparse product (bounds the float64 working memory).
        progress : show a tqdm bar over chunks.

        Returns
        -------
        dict with ``intensity`` and ``sigma`` of shape (n_frames, n_bins) — or
        (n_frames, n_q, n_chi) for a cake — in counts per relative solid angle, ``counts``
        (the summed counts ``sum_p A_bp c_p``, same shape) and ``pixels`` (per bin).
        """
        X = np.asarray(images)
        if X.ndim == 2:
            X = X[None]
        if X.ndim != 3 or X.shape[1:] != tuple(self.shape):
            raise SaxsInputError(f"images must be (frames, {self.shape[0]}, {self.shape[1]}), got {X.shape}",
                                 parameter="images")
        if not (np.issubdtype(X.dtype, np.number) and not np.iscomplexobj(X)):
            raise SaxsInputError(f"images must be real numbers, got dtype {X.dtype}", parameter="images")
        V = None if variance is None else np.asarray(variance)
        if V is not None:
            V = V[None] if V.ndim == 2 else V
            if V.shape != X.shape:
                raise SaxsInputError(f"variance shape {V.shape} differs from images {X.shape}",
                                     parameter="variance")
        n_f, n_b = X.shape[0], self.n_bins
        total = np.empty((n_f, n_b))
        var = np.empty((n_f, n_b))
        norm = np.broadcast_to(self.norm, (n_f, n_b)).copy()
        A1, A2 = self.fractions_csc, self.squares_csc
        same = self.subpixels == 1                      # whole pixels: A**2 == A
        M = A1 if same else self.stacked_csc
        exact_ints = X.dtype.kind in "iu"
        n_p = self.correction.size
        starts = range(0, n_f, max(1, int(chunk)))
        if progress:
            from tqdm.auto import tqdm

            starts = tqdm(starts, desc="integrating", unit="chunk")
        for s in starts:
            xc = X[s:s + chunk].reshape(-1, n_p)
            # (pixels, frames) float64 in one pass: the layout the CSC product reads in order
            x = np.empty((n_p, xc.shape[0]))
            x[...] = xc.T
            bad = False
            if not exact_ints:
                finite = np.isfinite(x)
                bad = not finite.all()
                if bad:
                    x[~finite] = 0.0
            if V is None:
                r = M @ x                                   # (n_bins or 2 n_bins, frames)
                total[s:s + chunk] = r[:n_b].T
                negative = X.dtype.kind != "u" and (x < 0).any()
                if negative:
                    var[s:s + chunk] = (A2 @ np.maximum(x, 0.0)).T
                else:
                    var[s:s + chunk] = r[:n_b].T if same else r[n_b:].T
            else:
                v = np.empty_like(x)
                v[...] = V[s:s + chunk].reshape(-1, n_p).T
                if bad:
                    v[~finite] = 0.0
                total[s:s + chunk] = (A1 @ x).T
                var[s:s + chunk] = (A2 @ v).T
            if bad:
                norm[s:s + chunk] = (A1 @ (finite * self.correction[:, None])).T
        ones = np.asarray(A2.sum(axis=1)).ravel()
        var = np.where(var > 0, var, ones)
        with np.errstate(divide="ignore", invalid="ignore"):
            empty = norm <= 0
            intensity = np.where(empty, np.nan, total / np.where(empty, 1, norm))
            sigma = np.where(empty, np.nan, np.sqrt(var) / np.where(empty, 1, norm))
        out = {"intensity": intensity, "sigma": sigma, "counts": total}
        if self.is_cake:
            shp = (n_f, self.q_edges.size - 1, self.chi_edges.size - 1)
            out = {k: v.reshape(shp) for k, v in out.items()}
            out["pixels"] = self.pixels.reshape(shp[1:])
        else:
            out["pixels"] = self.pixels.copy()
        return out


def integration_matrix(geometry: DetectorGeometry, *, mask=None, n_bins: int = 500, q_range=None,
                       q_edges=None, spacing: str = "linear", n_chi: int | None = None, chi_range=None,
                       subpixels: int = 2, solid_angle: bool = True, polarization: bool = True,
                       shape=None) -> IntegrationMatrix:
    """Build the pixels -> bins matrix for a geometry and mask (module doc).

    Parameters
    ----------
    geometry : :class:`DetectorGeometry` (its ``shape``, or ``shape=``, gives the image size).
    mask : bool array (rows, columns), True = pixel excluded; optional.
    n_bins, q_range, spacing : q bins (``n_bins`` between ``q_range`` (1/nm), default the
        q span of the unmasked pixels); or explicit ``q_edges``.
    n_chi : number of chi bins over ``chi_range`` for a cake (``None``: one azimuthal bin,
        i.e. a curve).
    chi_range : (lo, hi) degrees: only pixels with lo <= chi < hi (a sector; lo > hi wraps
        through 180). Default: the full circle.
    subpixels : each pixel is sampled on a ``subpixels x subpixels`` grid (>= 1).
    solid_angle, polarization : include the relative solid angle / polarisation factor in
        the per-pixel correction ``w_p``.

    Returns
    -------
    IntegrationMatrix

    Examples
    --------
    >>> from saxsnb.analysis._geometry import DetectorGeometry
    >>> g = DetectorGeometry(7.5, 7.5, 500, 0.2, 0.2, 0.1, shape=(16, 16))
    >>> m = integration_matrix(g, n_bins=5, subpixels=3)
    >>> round(float(m.pixels.sum()), 6)        # every pixel shared out once
    256.0
    """
    shape = geometry._shape(shape)
    n_pix = shape[0] * shape[1]
    s = int(subpixels)
    if s < 1:
        raise SaxsInputError(f"must be >= 1, got {subpixels}", parameter="subpixels")
    if mask is None:
        keep = np.ones(n_pix, bool)
    else:
        m = np.asarray(mask)
        if m.shape != tuple(shape):
            raise SaxsInputError(f"mask shape {m.shape} differs from the image shape {shape}",
                                 parameter="mask")
        keep = ~m.astype(bool).ravel()
    if not keep.any():
        raise SaxsInputError("the mask hides every pixel", parameter="mask")
    rows = np.arange(shape[0], dtype=float)[:, None]
    cols = np.arange(shape[1], dtype=float)[None, :]
    if q_edges is None:
        if q_range is None:
            qc = geometry.q_map(shape).ravel()[keep]
            half = 0.5 * max(geometry.pixel_size_x_mm, geometry.pixel_size_y_mm) / geometry.distance_mm
            dq = 4 * np.pi / geometry.wavelength_nm * half / 2
            q_range = (max(qc.min() - dq, 0.0), qc.max() + dq)
        q_edges = bin_edges(q_range[0], q_range[1], n_bins, spacing)
    q_edges = np.asarray(q_edges, float)
    if q_edges.ndim != 1 or q_edges.size < 2 or np.any(np.diff(q_edges) <= 0):
        raise SaxsInputError("q_edges must increase strictly, with at least 2 edges", parameter="q_edges")
    lo_c, hi_c = (-180.0, 180.0) if chi_range is None else (float(chi_range[0]), float(chi_range[1]))
    if n_chi is None:
        chi_edges = np.array([lo_c, hi_c if hi_c > lo_c else hi_c + 360.0])
    else:
        if int(n_chi) < 1:
            raise SaxsInputError(f"must be >= 1, got {n_chi}", parameter="n_chi")
        chi_edges = np.linspace(lo_c, hi_c if hi_c > lo_c else hi_c + 360.0, int(n_chi) + 1)
    n_q, n_c = q_edges.size - 1, chi_edges.size - 1
    pix = np.arange(n_pix).reshape(shape)
    bins_list, pix_list = [], []
    offsets = (np.arange(s) + 0.5) / s - 0.5
    for dy in offsets:
        for dx in offsets:
            q, chi = geometry.q_chi(rows + dy, cols + dx)
            iq = np.searchsorted(q_edges, q, side="right") - 1
            ok = (iq >= 0) & (iq < n_q) & keep.reshape(shape)
            if chi_range is not None:
                ok &= _in_sector(chi, chi_range)
            if n_c > 1:
                rel = (chi - chi_edges[0]) % 360.0
                ic = np.minimum((rel / (chi_edges[-1] - chi_edges[0]) * n_c).astype(np.int64), n_c - 1)
                b = iq * n_c + ic
            else:
                b = iq
            bins_list.append(b[ok])
            pix_list.append(pix[ok])
    b = np.concatenate(bins_list)
    p = np.concatenate(pix_list)
    n_bins_total = n_q * n_c
    A = sp.csr_matrix((np.full(b.size, 1.0 / s**2), (b, p)), shape=(n_bins_total, n_pix))
    A.sum_duplicates()
    A2 = A.multiply(A).tocsr()
    w = np.ones(shape)
    if solid_angle:
        w = w * geometry.solid_angle(shape)
    if polarization:
        w = w * geometry.polarization_factor(shape)
    w = w.ravel()
    norm = A @ w
    pixels = np.asarray(A.sum(axis=1)).ravel()
    if not (pixels > 0).any():
        raise SaxsInputError("no unmasked pixel falls in the q range", parameter="q_range")
    M = sp.vstack([A, A2], format="csr")
    return IntegrationMatrix(matrix=M, q_edges=q_edges, chi_edges=chi_edges, correction=w, norm=norm,
                             pixels=pixels, shape=tuple(shape), subpixels=s)
