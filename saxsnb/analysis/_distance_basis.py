"""The p(r) basis and its transform: piecewise-linear p(r) on 0..Dmax, the exact matrix
to I(q), the shared per-Dmax terms (see saxsnb.analysis._distance).
"""

from __future__ import annotations

from collections import OrderedDict

import numpy as np
from scipy.special import sici

from ..errors import SaxsInputError

__all__ = ["transform_matrix", "forward_transform", "sphere_distance_distribution", "default_dmax_candidates"]


_CACHE_SIZE = 128  # per-Dmax terms, about 0.45 MB each at 500 q points
_CACHE: OrderedDict = OrderedDict()


# --------------------------------------------------------------------- forward model
def _g(q, r):
    """G(q, r) = int_0^r (r - t) sin(q t)/(q t) dt, shape (n_q, n_r); r^2 / 2 at q = 0."""
    q = np.asarray(q, dtype=float)[:, None]
    r = np.asarray(r, dtype=float)[None, :]
    x = q * r
    qs = np.where(q == 0, 1.0, q)
    g = r * sici(x)[0] / qs - 2.0 * np.sin(0.5 * x) ** 2 / qs**2
    return np.where(q == 0, 0.5 * r * r, g)


def _gprime(q, r):
    """dG/dr = Si(q r)/q (r at q = 0)."""
    q = np.asarray(q, dtype=float)[:, None]
    r = np.asarray(r, dtype=float)[None, :]
    qs = np.where(q == 0, 1.0, q)
    return np.where(q == 0, r + 0 * q, sici(q * r)[0] / qs)


def _hat_matrix(q, r):
    """4 pi int phi_j(r) sin(qr)/(qr) dr for the hats phi_j on the increasing grid r
    (all points, end hats one-sided), shape (n_q, n_r)."""
    r = np.asarray(r, dtype=float)
    g = _g(q, r)
    h = np.diff(r)
    slope = np.diff(g, axis=1) / h  # (G(r_j+1) - G(r_j)) / h_j+1
    out = np.empty_like(g)
    out[:, 1:-1] = slope[:, 1:] - slope[:, :-1]
    gp = _gprime(q, r[[0, -1]])
    out[:, 0] = slope[:, 0] - gp[:, 0]
    out[:, -1] = gp[:, 1] - slope[:, -1]
    return 4.0 * np.pi * out


def transform_matrix(q, dmax: float, n_r: int = 51):
    """The matrix mapping the inner p(r) values to I(q), and the r grid.

    Parameters
    ----------
    q : array (n_q,), 1/nm
    dmax : float, nm
    n_r : int
        Points of the r grid 0 .. dmax (both ends included, where p = 0).

    Returns
    -------
    A : array (n_q, n_r - 2)
        ``I = A @ p[1:-1]`` (intensity units when p is in intensity units per nm).
    r : array (n_r,), nm

    Examples
    --------
    >>> q = np.array([1e-6, 1.0])
    >>> A, r = transform_matrix(q, 10.0, 11)
    >>> float(A[0].sum() / (4 * np.pi * (r[-1] - r[1])))  # q -> 0: 4 pi int p dr, p = 1 inside
    1.0
    """
    dmax = float(dmax)
    if not np.isfinite(dmax) or dmax <= 0:
        raise SaxsInputError(f"dmax must be a positive number, got {dmax}", parameter="dmax")
    r = np.linspace(0.0, dmax, int(n_r))
    return _hat_matrix(q, r)[:, 1:-1], r


def forward_transform(q, r, p):
    """I(q) = 4 pi int p(r) sin(q r)/(q r) dr for p(r) given on a grid (the model check).

    p is taken as piecewise linear between the grid points and zero outside them; the
    integral is exact for that p (see the module notes).

    Parameters
    ----------
    q : array (n_q,), 1/nm
    r : array (n_r,) or (n_frames, n_r), nm, increasing (e.g. the ``r`` output of
        :func:`distance_distribution`)
    p : array (n_r,) or (n_frames, n_r), intensity units per nm

    Returns
    -------
    array (n_q,) or (n_frames, n_q)

    Examples
    --------
    A sphere of radius 1 nm with p normalised to I(0) = 1 (the closed form of
    :func:`sphere_distance_distribution`):

    >>> r = np.linspace(0, 2.0, 401)
    >>> I = forward_transform(np.array([1e-8, 2.0]), r, sphere_distance_distribution(r, 1.0))
    >>> bool(abs(I[0] - 1) < 1e-6), bool(abs(I[1] - (3 * (np.sin(2) - 2 * np.cos(2)) / 8) ** 2) < 1e-4)
    (True, True)
    """
    q = np.asarray(q, dtype=float)
    r = np.asarray(r, dtype=float)
    p = np.asarray(p, dtype=float)
    if q.ndim != 1:
        raise SaxsInputError("q must be one-dimensional", parameter="q")
    if r.shape[-1] != p.shape[-1] or r.shape[-1] < 2:
        raise SaxsInputError(
            f"r has shape {r.shape} and p {p.shape}; the last axes must match", parameter="r"
        )
    if np.any(np.diff(r, axis=-1) <= 0):
        raise SaxsInputError("r must be strictly increasing", parameter="r")
    if r.ndim == 1:
        return p @ _hat_matrix(q, r).T
    rr, pp = np.broadcast_to(r, np.broadcast_shapes(r.shape, p.shape)), np.asarray(p)
    rr = rr.reshape(-1, r.shape[-1])
    pp = np.broadcast_to(pp, np.broadcast_shapes(r.shape, p.shape)).reshape(-1, r.shape[-1])
    grids, inverse = np.unique(rr, axis=0, return_inverse=True)
    out = np.empty((rr.shape[0], q.size))
    for k, grid in enumerate(grids):  # one matrix per distinct grid (few: one per Dmax)
        sel = np.flatnonzero(inverse.ravel() == k)
        out[sel] = pp[sel] @ _hat_matrix(q, grid).T
    return out.reshape(*np.broadcast_shapes(r.shape, p.shape)[:-1], q.size)


def sphere_distance_distribution(r, radius: float, i0: float = 1.0):
    """Closed-form p(r) of a homogeneous sphere, normalised so that 4 pi int p dr = i0.

    p(r) = c x^2 (1 - 3x/4 + x^3/16), x = r / R, on 0 <= r <= 2R (Guinier & Fournet
    1955; Glatter & Kratky 1982); int_0^2R x^2 (1 - 3x/4 + x^3/16) dr = R / 3 gives
    c = 3 i0 / (4 pi R) (re-derived by quadrature in tests/test_distance.py).

    >>> r = np.linspace(0, 2, 2001)
    >>> p = sphere_distance_distribution(r, 1.0)
    >>> round(float(r[np.argmax(p)]), 3)
    1.049
    """
    r = np.asarray(r, dtype=float)
    x = r / float(radius)
    p = np.where((x >= 0) & (x <= 2), x**2 * (1 - 0.75 * x + x**3 / 16), 0.0)
    return i0 * p * 3.0 / (4.0 * np.pi * float(radius))


# --------------------------------------------------------------------- shared pieces
def _second_differences(K: int):
    D2 = np.zeros((K, K))
    i = np.arange(K)
    D2[i, i] = -2.0
    D2[i[1:], i[:-1]] = 1.0
    D2[i[:-1], i[1:]] = 1.0
    return D2


class _Shared:
    """What one Dmax needs for any frame on the q grid: the matrix, its version in the
    prior's metric, the functionals of I0 and the r^2 moment."""

    def __init__(self, q, dmax, n_r):
        A, r = transform_matrix(q, dmax, n_r)
        K = n_r - 2
        D2 = _second_differences(K)
        omega = D2.T @ D2
        Lc = np.linalg.cholesky(omega)  # omega = Lc Lc^T
        Li = np.linalg.inv(Lc)
        self.dmax, self.r, self.A, self.K = float(dmax), r, A, K
        self.h = r[1]
        self.Lc, self.Li = Lc, Li
        self.trace_omega = float(np.trace(omega))
        self.At = A @ Li.T  # A p = At u with u = Lc^T p
        self.rownorm2 = np.einsum("mk,mk->m", A, A)  # trace(A^T W A) = w @ rownorm2
        one = np.ones(K)
        m2 = r[1:-1] ** 2 + self.h**2 / 6.0
        self.li_one = Li @ one  # functionals in the u metric: g^T p = (Li g)^T u
        self.li_m2 = Li @ m2
        self.m2 = m2


def _shared(q, dmax, n_r):
    key = (q.tobytes(), float(dmax), int(n_r))
    hit = _CACHE.get(key)
    if hit is None:
        hit = _Shared(q, dmax, n_r)
        _CACHE[key] = hit
        if len(_CACHE) > _CACHE_SIZE:
            _CACHE.popitem(last=False)
    else:
        _CACHE.move_to_end(key)
    return hit


def default_dmax_candidates(q, q_range=None, n: int = 24):
    """Candidate Dmax values for the automatic choice: ``n`` values evenly spaced in
    log between 2 pi / q_max (two Shannon channels) and pi / q_min (the longest length
    whose first Shannon point q = pi / Dmax is still measured), q_min > 0 and q_max of
    the grid inside ``q_range``. Depends on the grid only (the same in every chunk).

    >>> c = default_dmax_candidates(np.linspace(0.1, 2.0, 50), n=5)
    >>> [round(float(v), 3) for v in (c[0], c[-1])]
    [3.142, 31.416]
    """
    q = np.asarray(q, dtype=float)
    lo, hi = _range_bounds(q_range)
    qq = q[(q > 0) & (q >= lo) & (q <= hi) & np.isfinite(q)]
    if qq.size < 2:
        raise SaxsInputError("the q range holds fewer than two positive q values", parameter="q_range")
    d_lo, d_hi = 2 * np.pi / qq.max(), np.pi / qq.min()
    if d_hi <= d_lo * 1.5:
        d_hi = 1.5 * d_lo
    return np.geomspace(d_lo, d_hi, int(n))


def _range_bounds(q_range):
    if q_range is None:
        return -np.inf, np.inf
    try:
        lo, hi = q_range
    except (TypeError, ValueError):
        raise SaxsInputError("q_range must be None or a pair (q_min, q_max)", parameter="q_range") from None
    lo = -np.inf if lo is None else float(lo)
    hi = np.inf if hi is None else float(hi)
    if not lo < hi:
        raise SaxsInputError(f"q_range {q_range} is empty (q_min must be below q_max)", parameter="q_range")
    return lo, hi
