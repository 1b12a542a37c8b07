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

    @cached_property
    def _blocks32(self) -> list:
        return _pixel_blocks(self.stacked_csc if self.subpixels > 1 else self.fractions_csc, np.float32)

    @cached_property
    def _blocks64(self) -> list:
        return _pixel_blocks(self.stacked_csc if self.subpixels > 1 else self.fractions_csc, np.float64)

    def integrate(self, images, variance=None, *, chunk: int = 64, progress: bool = False) -> dict:
        """Reduce a stack of frames ``(n_frames, rows, columns)`` (or one image).

        Parameters
        ----------
        images : array (n_frames, rows, columns) of counts, any real dtype (or a 2D image).
        variance : optional array of the same shape (e.g. after dark subtraction);
            default: Poisson, the counts themselves.
        chunk : frames per sparse product (bounds the working memory).
        progress : show a tqdm bar over chunks.

        Returns
        -------
        dict with ``intensity`` and ``sigma`` of shape (n_frames, n_bins) — or
        (n_frames, n_q, n_chi) for a cake — in counts per relative solid angle, ``counts``
        (the summed counts ``sum_p A_bp c_p``, same shape) and ``pixels`` (per bin).

        Notes
        -----
        Fast route (Poisson variance, finite non-negative counts): each chunk of frames is
        laid out pixels x frames one block of pixels at a time into a small reused buffer
        (it stays in cache), and one sparse product per block gives the sums and, in the
        same pass, the Poisson variances. Integer and float32 images use float32
        buffers (values up to 2**24 in magnitude are exact; a block with larger values
        goes through float64); the per-block sums are float32 and the sums
        over blocks float64, so results equal the float64 route to a relative 1e-6
        (``tests/test_images_geometry.py``). Other inputs (float64 images, larger
        counts) use float64 buffers. A chunk with non-finite or negative values, or with
        a variance stack, takes the general route (float64, its own normalisation).
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
        chunk = max(1, int(chunk))
        starts = range(0, n_f, chunk)
        if progress:
            from tqdm.auto import tqdm

            starts = tqdm(starts, desc="integrating", unit="chunk")
        for s in starts:
            sl = slice(s, s + chunk)
            done = False
            if V is None:
                done = self._chunk_fast(X[sl], total[sl], var[sl])
            if not done:
                self._chunk_general(X[sl], None if V is None else V[sl], total[sl], var[sl], norm[sl])
        ones = np.asarray(self.squares_csc.sum(axis=1)).ravel()
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

    def _chunk_fast(self, xc, total, var) -> bool:
        """Sums and Poisson variances of one chunk; False (nothing written) if it needs the
        general route (non-finite or negative values)."""
        n_c, n_b = xc.shape[0], self.n_bins
        xc = xc.reshape(n_c, -1)
        kind = xc.dtype
        small = kind.kind in "iub" or kind in (np.float16, np.float32)
        rows = self.matrix.shape[0] if self.subpixels > 1 else n_b
        acc = np.zeros((rows, n_c))
        blocks = self._blocks32 if small else self._blocks64
        width = blocks[0][1] - blocks[0][0] if blocks else 0
        buf = np.empty((width, n_c), np.float32 if small else np.float64)
        y = np.empty((rows, n_c), buf.dtype)
        check_finite = kind.kind == "f"
        check_sign = kind.kind not in "ub"
        check_big = small and kind.itemsize >= 4
        for p0, p1, r0, r1, indptr, indices, data in blocks:
            b = buf[:p1 - p0]
            b[...] = xc[:, p0:p1].T
            if check_finite and not np.isfinite(b).all():
                return False
            if check_sign and b.min() < 0:
                return False
            if check_big and max(b.max(), -b.min()) > _F32_EXACT:
                # values above 2**24 lose digits in float32 sums: this block in float64
                blk = self._blocks64[(p0 // width)]
                b64 = np.asarray(xc[:, p0:p1].T, np.float64, order="C")
                y64 = np.zeros((r1 - r0, n_c))
                _csc_matvecs(r1 - r0, p1 - p0, n_c, blk[4], blk[5], blk[6], b64, y64)
                acc[r0:r1] += y64
                continue
            yb = y[:r1 - r0]          # only the bins this block of pixels reaches
            yb[...] = 0
            _csc_matvecs(r1 - r0, p1 - p0, n_c, indptr, indices, data, b, yb)
            acc[r0:r1] += yb
        total[...] = acc[:n_b].T
        var[...] = acc[:n_b].T if self.subpixels == 1 else acc[n_b:].T
        return True

    def _chunk_general(self, xc, vc, total, var, norm) -> None:
        """One chunk in float64, any values: non-finite pixels left out of their frame."""
        n_p, n_b = self.correction.size, self.n_bins
        A1, A2 = self.fractions_csc, self.squares_csc
        same = self.subpixels == 1                      # whole pixels: A**2 == A
        M = A1 if same else self.stacked_csc
        x = np.empty((n_p, xc.shape[0]))
        x[...] = xc.reshape(-1, n_p).T
        finite = np.isfinite(x)
        bad = not finite.all()
        if bad:
            x[~finite] = 0.0
        if vc is None:
            r = M @ x
            total[...] = r[:n_b].T
            if (x < 0).any():
                var[...] = (A2 @ np.maximum(x, 0.0)).T
            else:
                var[...] = r[:n_b].T if same else r[n_b:].T
        else:
            v = np.empty_like(x)
            v[...] = vc.reshape(-1, n_p).T
            if bad:
                v[~finite] = 0.0
            total[...] = (A1 @ x).T
            var[...] = (A2 @ v).T
        if bad:
            norm[...] = (A1 @ (finite * self.correction[:, None])).T


_F32_EXACT = 2.0**24          # integers up to this are exact in float32
_BLOCK = 8192                 # pixels per block of the fast route (buffer stays in cache)


def _pixel_blocks(csc: sp.csc_matrix, dtype) -> list:
    """Column (pixel) blocks of a CSC matrix: (p0, p1, r0, r1, indptr from 0, indices from
    r0, data as dtype), rows r0 <= r < r1 being the bins the block reaches."""
    n_p = csc.shape[1]
    data = csc.data.astype(dtype)
    indices = csc.indices.astype(np.int32) if csc.indices.dtype != np.int32 else csc.indices
    out = []
    for p0 in range(0, n_p, _BLOCK):
        p1 = min(p0 + _BLOCK, n_p)
        a0, a1 = int(csc.indptr[p0]), int(csc.indptr[p1])
        ip = (csc.indptr[p0:p1 + 1] - a0).astype(indices.dtype)
        ind = indices[a0:a1]
        r0, r1 = (int(ind.min()), int(ind.max()) + 1) if ind.size else (0, 0)
        out.append((p0, p1, r0, r1, ip, (ind - r0).astype(indices.dtype), data[a0:a1]))
    return out


def _csc_matvecs(n_row, n_col, n_vecs, indptr, indices, data, x, y) -> None:
    """``y += A @ x`` for a CSC block ``A`` and C-ordered ``x`` (n_col, n_vecs), in place.

    Uses scipy's compiled kernel (no result allocation); the public product otherwise.
    """
    if _sparsetools is not None:
        _sparsetools.csc_matvecs(n_row, n_col, n_vecs, indptr, indices, data, x.ravel(), y.ravel())
    else:  # pragma: no cover - a scipy without the private kernel module
        y += sp.csc_matrix((data, indices, indptr), shape=(n_row, n_col)) @ x


try:  # scipy's compiled sparse kernels (private module, stable for many releases)
    from scipy.sparse import _sparsetools
except ImportError:  # pragma: no cover
    _sparsetools = None


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
