"""The pair-distance distribution p(r) of every frame: the indirect Fourier transform.

Model (Glatter 1977, J. Appl. Cryst. 10, 415; Glatter & Kratky 1982)::

    I(q) = 4 pi int_0^Dmax p(r) sin(q r) / (q r) dr   (+ b, an optional flat background)

    I0 = 4 pi int p dr,      Rg^2 = int p r^2 dr / (2 int p dr)

**Basis.** p(r) is piecewise linear on the uniform grid r_j = j Dmax / (n_r - 1),
j = 0 .. n_r - 1, with p(0) = p(Dmax) = 0; the n_r - 2 inner values are the unknowns
(linear B-splines, "hat" functions). The integral of each hat against the kernel is
exact: with G(q, r) = r Si(q r) / q - 2 sin^2(q r / 2) / q^2 (so that d^2G/dr^2 =
sin(q r)/(q r)), a hat centred on r_j with spacing h transforms to
4 pi (G(r_j+1) - 2 G(r_j) + G(r_j-1)) / h. I0 and the moment int p r^2 dr are exact
linear functions of the values (int hat_j r^2 dr = h (r_j^2 + h^2 / 6)).

**Regularisation** (Tikhonov & Arsenin 1977; Glatter 1977). Per frame the estimate
minimises ``chi2(p) + alpha * |D2 p|^2`` with chi2 weighted by 1/sigma^2 and D2 the
second differences of the values (zeros at both ends included), a discrete
int p''(r)^2 dr. The dimensionless ``weight`` is alpha divided by
trace(A^T W A) / trace(D2^T D2), so that it means the same for every frame whatever the
intensity units, the noise level or Dmax (weight = 1 balances the two terms on
average; useful weights are usually 1e-6 .. 1e-1).

**Choice of the weight and of Dmax** by the Bayesian evidence (Hansen 2000, J. Appl.
Cryst. 33, 1415; MacKay 1992, Neural Comput. 4, 415): with a Gaussian prior of
precision alpha D2^T D2 on p and Gaussian noise of known sigma, the log evidence is::

    log E = -1/2 [chi2(p_hat) + alpha |D2 p_hat|^2] + 1/2 sum_k log(w / (s_k + w))  (+ const)

where s_k are the eigenvalues of the data term in the prior's metric (the generalised
eigenvalue problem of (A^T W A, D2^T D2), scaled as the weight is) and w the weight.
The weight maximising log E is used: a log grid 1e-12 .. 1e2 of one value per decade,
then eight per decade within a decade of the best, then a parabola through the best
three. The same log E, maximised over the weight, scores
each candidate Dmax: the prior has the same shape for every Dmax (the grid is
stretched), so the scores are comparable, and too short a Dmax loses by misfit while
too long a one loses by its Occam factor. Without ``sigma`` the weights are equal and
the noise variance is integrated out (conjugate prior): log E = -n/2 log(chi2 + alpha
|D2 p|^2) + 1/2 sum log(w / (s_k + w)); then uncertainties are scaled by the residual
scatter and ``chi2_reduced`` is NaN.

**Uncertainties.** ``p_sigma``, ``i0_sigma`` and ``rg_sigma`` are posterior standard
deviations: the posterior covariance (A^T W A + alpha D2^T D2)^-1 propagated to first
order (Hansen 2000). They include what the smoothness prior leaves undetermined, so
they are wider than a pure noise propagation; they do not include the choice of Dmax.

**Non-negativity** (``nonnegative=True``): the weight and Dmax are chosen unconstrained,
then p >= 0 is imposed by the primal-dual active-set method (Hintermueller, Ito &
Kunisch 2002, SIAM J. Optim. 13, 865), all frames at once, with scipy's NNLS (Lawson &
Hanson 1974) for any frame where it has not converged; uncertainties are then those of
the free values, zero on the values held at zero.

**Series speed.** For each Dmax the matrix is built once for the shared q grid (and
cached). The per-frame data term A^T W A is one matrix product of the weights
(n_frames, n_q) with a shared table of products of matrix rows; frames whose weights
are the same up to a factor (no sigma, or sigma in proportion, same usable points)
share one eigendecomposition; other frames (their own sigma, NaN or masked points) get
their own small (n_r - 2)^2 eigendecomposition, batched. The weight search is then
elementwise over (frame, weight, eigenvalue).

**Automatic Dmax.** All candidates (default :func:`default_dmax_candidates`, 24 values
depending on the q grid only) are scored for every frame; around each frame's best
candidate the grid eight times finer in log Dmax is scored up to the neighbouring
candidates, and the best value of all is the Dmax. The evidence over log Dmax (flat
prior in log Dmax) gives a posterior; its spread about the chosen value is
``dmax_sigma``, and the spreads of I0 and Rg over it are added in quadrature to their
posterior uncertainties, so an ill-defined Dmax widens them (Hansen 2000 averages over
Dmax in the same spirit). With a fixed Dmax nothing is added. A Dmax found this way
tends to fall a few per cent short of the true maximum dimension: the last pairs are
few (a sphere's p(r) ends as (2R - r)^2) and sink into the noise. A particle with no
sharp maximum dimension (a Gaussian chain, a polydisperse sample) gets the Dmax where
p(r) disappears in the noise, and Rg from p(r) comes out a little low (a Gaussian chain
at 1 % noise: about 4 Rg, Rg 1-2 % low); fix Dmax generously (>= 6 Rg) for such samples.

**Resolution.** p(r) is resolved on n_r points; for very precise data (relative
errors well below 1 % near the minima of I(q)) the piecewise-linear p(r) can limit the
fit: raise ``n_r`` when the status is "poor_fit" on such data.

**Shannon channels** N = q_max Dmax / pi (Moore 1980, J. Appl. Cryst. 13, 168; the
number of independent parameters the data carry about p(r)). Below ``min_channels``
(default 3) the frame gets status ``"too_few_shannon_channels"``: the numbers are kept
but p(r) is little more than I0 and Rg.

Statuses (``status``): see :data:`NEW_STATUS_CODES`. Frames failing on input (no data,
empty range, zero sigma, too few points) get NaN everywhere; the other non-ok statuses
keep the numbers (they are warnings about meaning, not failures).
"""

from __future__ import annotations

from collections import OrderedDict

import numpy as np
from scipy.optimize import nnls
from scipy.special import sici

from ..errors import SaxsInputError
from ._arrays import as_frames

__all__ = [
    "NEW_STATUS_CODES",
    "distance_distribution",
    "forward_transform",
    "transform_matrix",
    "default_dmax_candidates",
    "sphere_distance_distribution",
]

#: Status codes of :func:`distance_distribution`: code -> (meaning, parameter the
#: status is about, plain-language message). "all_nan", "range_outside_data",
#: "zero_sigma" and "too_few_points" have the meaning they have in the Guinier fit.
NEW_STATUS_CODES = {
    "ok": ("p(r) computed", None, "p(r) computed"),
    "all_nan": ("no finite intensity in the frame", "intensity", "no finite intensity in this frame"),
    "range_outside_data": (
        "the q range excludes every measured point",
        "q_range",
        "the chosen q range misses the measured points",
    ),
    "zero_sigma": (
        "sigma <= 0 at a usable point",
        "sigma",
        "some points in the range have sigma = 0 and cannot be weighted",
    ),
    "too_few_points": (
        "fewer usable points than min_points (default 10)",
        "q_range",
        "too few usable points in the q range for p(r): widen the range",
    ),
    "too_few_shannon_channels": (
        "q_max Dmax / pi below min_channels (default 3): numbers kept",
        "q_range",
        "the q range holds too little information for a p(r) (too few Shannon channels): "
        "extend q_max or read only I0 and Rg",
    ),
    "dmax_too_small": (
        "fixed Dmax: the fit misses the data and a 1.5 times longer Dmax is decisively "
        "more probable (log evidence higher by > 5): numbers kept",
        "dmax",
        "Dmax is too short for these data: the particle is larger; increase Dmax",
    ),
    "dmax_at_scan_edge": (
        "automatic Dmax: the best candidate is the shortest or the longest scanned: numbers kept",
        "dmax_candidates",
        "the best Dmax lies at the edge of the scanned range: widen the Dmax candidates "
        "(at the long end the q range may be too short to see the particle's size)",
    ),
    "poor_fit": (
        "chi2_reduced above both 1.5 and 1 + 5 sqrt(2 / dof): the fit misses the data beyond "
        "their errors (and a longer Dmax does not help): numbers kept",
        "sigma",
        "the p(r) fit misses the data by more than their errors: sigma may be too small, or the "
        "data hold something a single p(r) does not describe (aggregates, interparticle "
        "interference, a background: try background=True)",
    ),
    "negative_i0": (
        "I0 from p(r) is zero or negative: Rg is NaN, p(r) kept",
        "intensity",
        "I0 from p(r) is zero or negative (check the background subtraction)",
    ),
}

_STATUS_DTYPE = "<U24"
_FAILED = ("all_nan", "range_outside_data", "zero_sigma", "too_few_points")
_CHUNK = 512  # frames per block in the weight search (memory ~ chunk * n_weights * n_r)
_TABLE_MIN_FRAMES = 16  # at or above: data terms through the shared product table
_WEIGHTS_COARSE = 10.0 ** np.arange(-12.0, 2.5)  # weight search: one per decade, then
_FINE_PER_DECADE = 8  # eight per decade around the best
_FLOOR = 1e-13  # weights below this times the largest eigenvalue are not resolved
_N_SUB = 8  # refinement grid: each candidate interval split in this many (log) steps
_DECISIVE = 5.0  # log Bayes factor (Kass & Raftery 1995, J. Am. Stat. Assoc. 90, 773)
_CACHE: OrderedDict = OrderedDict()
_CACHE_SIZE = 64


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
        raise SaxsInputError(f"r has shape {r.shape} and p {p.shape}; the last axes must match",
                             parameter="r")
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
    prior's metric, the product table, the functionals of I0 and the r^2 moment."""

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
        self.lower = np.tril_indices(K)
        self._table = None
        one = np.ones(K)
        m2 = r[1:-1] ** 2 + self.h**2 / 6.0
        self.li_one = Li @ one  # functionals in the u metric: g^T p = (Li g)^T u
        self.li_m2 = Li @ m2
        self.m2 = m2

    @property
    def table(self):
        """(n_q, K^2): products At[m, i] At[m, j] (built when first needed)."""
        if self._table is None:
            self._table = (self.At[:, :, None] * self.At[:, None, :]).reshape(self.At.shape[0], -1)
        return self._table


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


# --------------------------------------------------------------------- the engine
class _Frames:
    """Weighted data of the frames (zero weight on unused points)."""

    def __init__(self, q, I, S, usable, background):
        self.known_sigma = S is not None
        w = np.where(usable, 1.0 / np.where(usable, S if S is not None else 1.0, 1.0) ** 2, 0.0)
        y = np.where(usable, I, 0.0)
        self.q, self.w, self.y = q, w, y
        self.wy = w * y
        self.yy = np.einsum("fm,fm->f", self.wy, y)
        self.n = np.count_nonzero(usable, axis=1)
        self.background = background
        if background:
            self.sw = w.sum(axis=1)
            self.swy = self.wy.sum(axis=1)
            self.yy = self.yy - self.swy**2 / self.sw
        # frames with the same weights up to a factor share one eigendecomposition
        scale = w.max(axis=1, keepdims=True)
        with np.errstate(divide="ignore"):
            key = np.where(w > 0, np.round(np.log(w / np.where(scale > 0, scale, 1.0)), 10), -1e300)
        _, self.rep, self.group = np.unique(key, axis=0, return_index=True, return_inverse=True)
        self.group = self.group.ravel()
        self.scale = scale[:, 0]


def _data_terms(sh, fr, rows):
    """Li A^T W A Li^T (len(rows), K, K), its trace in the p metric, Li A^T W y."""
    w = fr.w[rows]
    K = sh.K
    if len(rows) >= _TABLE_MIN_FRAMES:
        G = (w @ sh.table).reshape(len(rows), K, K)
    else:
        G = np.einsum("mi,fm,mj->fij", sh.At, w, sh.At)
    trace = w @ sh.rownorm2
    if fr.background:
        u = w @ sh.At
        G -= u[:, :, None] * u[:, None, :] / fr.sw[rows, None, None]
        trace = trace - np.einsum("fk,fk->f", w @ sh.A, w @ sh.A) / fr.sw[rows]
    return G, trace


def _rhs(sh, fr, rows):
    b = fr.wy[rows] @ sh.At
    if fr.background:
        b = b - (fr.w[rows] @ sh.At) * (fr.swy[rows] / fr.sw[rows])[:, None]
    return b


def _log_evidence(s, cc2, yy, n, lam, known_sigma):
    """log E (up to a constant) for weights lam; s, cc2 (..., K), yy, n (...)."""
    den = s + lam[..., None]
    misfit = yy - np.sum(cc2 / den, axis=-1)  # chi2 + alpha |D2 p|^2
    occam = 0.5 * np.sum(np.log(lam[..., None] / den), axis=-1)
    if known_sigma:
        return -0.5 * misfit + occam
    return -0.5 * n * np.log(np.maximum(misfit, 1e-300)) + occam


def _choose_weight(s, cc2, yy, n, known_sigma):
    """Evidence-maximising weight per frame: a grid of one value per decade, then eight
    per decade within a decade of the best, then a parabola in log w through the best
    three (all frames at once)."""
    F = s.shape[0]
    floor = _FLOOR * s.max(axis=1)

    def scan(grid):  # grid (F, G) -> log E (F, G), -inf where unresolved
        e = _log_evidence(s[:, None, :], cc2[:, None, :], yy[:, None], n[:, None], grid, known_sigma)
        return np.where((grid > floor[:, None]) & np.isfinite(e), e, -np.inf)

    coarse = np.broadcast_to(_WEIGHTS_COARSE, (F, _WEIGHTS_COARSE.size))
    e = scan(coarse)
    lg0 = np.log10(coarse[np.arange(F), np.argmax(e, axis=1)])
    steps = np.arange(-_FINE_PER_DECADE, _FINE_PER_DECADE + 1) / _FINE_PER_DECADE
    lg = np.clip(lg0[:, None] + steps[None, :], np.log10(_WEIGHTS_COARSE[0]), np.log10(_WEIGHTS_COARSE[-1]))
    e = scan(10.0**lg)
    rows = np.arange(F)
    best = np.argmax(e, axis=1)
    k = np.clip(best, 1, steps.size - 2)
    e0, em, ep = e[rows, k], e[rows, k - 1], e[rows, k + 1]
    curv = ep - 2 * e0 + em
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.where(np.isfinite(curv) & (curv < 0), 0.5 * (em - ep) / curv, 0.0)
    shift = np.clip(np.nan_to_num(shift), -1.0, 1.0) / _FINE_PER_DECADE
    cand = 10.0 ** np.where(best == k, lg[rows, k] + shift, lg[rows, best])
    ec = np.where(cand > floor, _log_evidence(s, cc2, yy, n, cand, known_sigma), -np.inf)
    eb = e[rows, best]
    better = ec >= eb
    return np.where(better, cand, 10.0 ** lg[rows, best]), np.where(better, ec, eb)


def _evaluate(sh, fr, rows, weight, *, full, nonnegative=False):
    """Solve the frames ``rows`` at one Dmax, in blocks of frames; evidence and weight
    only unless ``full``."""
    rows = np.asarray(rows)
    parts = [_evaluate_block(sh, fr, rows[a : a + _CHUNK], weight, full, nonnegative)
             for a in range(0, rows.size, _CHUNK)]
    return {key: np.concatenate([part[key] for part in parts]) for key in parts[0]}


def _evaluate_block(sh, fr, rows, weight, full, nonnegative):
    groups, where = np.unique(fr.group[rows], return_inverse=True)
    where = where.ravel()
    rep_rows = fr.rep[groups]
    G, trace = _data_terms(sh, fr, rep_rows)
    c_rep = trace / sh.trace_omega
    Gs = G / c_rep[:, None, None]
    s, Q = np.linalg.eigh(Gs)
    s = np.maximum(s, 0.0)
    # weights in proportion to the representative's: c in the same proportion
    c = c_rep[where] * fr.scale[rows] / fr.scale[rep_rows][where]
    b = _rhs(sh, fr, rows) / np.sqrt(c)[:, None]
    sf = s[where]
    Qf = Q[where] if len(groups) > 1 else np.broadcast_to(Q[0], (len(rows), sh.K, sh.K))
    cc = (b[:, None, :] @ Qf)[:, 0, :]
    cc2 = cc * cc
    yy, n = fr.yy[rows], fr.n[rows].astype(float)
    if weight is None:
        lam, ev = _choose_weight(sf, cc2, yy, n, fr.known_sigma)
    else:
        lam = np.full(len(rows), float(weight))
        ev = _log_evidence(sf, cc2, yy, n, lam, fr.known_sigma)
    out = {"evidence": ev, "weight": lam}
    if not full:
        return out
    den = sf + lam[:, None]
    z = cc / den
    u = (Qf @ z[:, :, None])[:, :, 0]
    p_in = (u @ sh.Li) / np.sqrt(c)[:, None]  # p = Li^T u / sqrt(c)
    n_eff = np.sum(sf / den, axis=1) + (1.0 if fr.background else 0.0)
    dof = np.maximum(n - n_eff, 1.0)
    cov = None
    if full == "stats":  # I0, Rg and their posterior variances only (the Dmax scan)
        chi2 = yy - np.sum(cc2 * (sf + 2 * lam[:, None]) / den**2, axis=1)
    else:
        if nonnegative:
            p_in, cov, n_eff = _nonnegative(sh, Gs[where], c, b, lam, p_in)
            n_eff = n_eff + (1.0 if fr.background else 0.0)
            dof = np.maximum(n - n_eff, 1.0)
            var = np.einsum("fkk->fk", cov)
        else:
            # posterior covariance of p: Li^T Q diag(1/den) Q^T Li / c
            B = sh.Li.T @ Qf
            var = ((B * B) @ (1.0 / den)[:, :, None])[:, :, 0] / c[:, None]
        fit = p_in @ sh.A.T
        if fr.background:
            bg = np.einsum("fm,fm->f", fr.w[rows], fr.y[rows] - fit) / fr.sw[rows]
            fit = fit + bg[:, None]
        else:
            bg = np.zeros(len(rows))
        resid = fr.y[rows] - fit
        chi2 = np.einsum("fm,fm->f", fr.w[rows], resid * resid)
    noise = np.ones(len(rows)) if fr.known_sigma else np.maximum(chi2, 0.0) / dof
    h = sh.h
    tot = p_in.sum(axis=1)
    mom = p_in @ sh.m2
    with np.errstate(invalid="ignore", divide="ignore"):
        rg2 = np.where(tot > 0, mom / (2 * tot), np.nan)
        if cov is None:
            g1 = sh.li_one @ Qf  # (Li 1)^T Q, (F, K)
            g2 = sh.li_m2 @ Qf
            v_one = np.sum(g1 * g1 / den, axis=1) / c
            gr = (g2 - 2 * rg2[:, None] * g1) / (2 * tot)[:, None]
            v_rg2 = np.sum(gr * gr / den, axis=1) / c
        else:
            v_one = np.einsum("fij->f", cov)
            gr = (sh.m2[None, :] - 2 * rg2[:, None]) / (2 * tot)[:, None]
            v_rg2 = np.einsum("fi,fij,fj->f", gr, cov, gr)
        rg = np.sqrt(np.where(rg2 > 0, rg2, np.nan))
        rg_sigma = np.sqrt(np.maximum(v_rg2 * noise, 0)) / (2 * rg)
    out.update(
        i0=4 * np.pi * h * tot,
        i0_sigma=4 * np.pi * h * np.sqrt(np.maximum(v_one * noise, 0)),
        rg=rg,
        rg_sigma=rg_sigma,
    )
    if full == "stats":
        return out
    out.update(
        p_inner=p_in,
        p_var=var * noise[:, None],
        fit=fit,
        background=bg,
        chi2=chi2,
        chi2_reduced=chi2 / dof if fr.known_sigma else np.full(len(rows), np.nan),
        n_eff=n_eff,
    )
    return out


def _nonnegative(sh, Gs, c, b, lam, p0, max_iter=30):
    """p >= 0 by the primal-dual active-set method, all frames at once (module notes).

    Works in the p metric scaled by 1/c: H' = Lc (Gs + lam) Lc^T, b' = Lc b / sqrt(c);
    returns p, the posterior covariance of the free values (zero elsewhere) and the
    effective number of parameters.
    """
    F, K = p0.shape
    eye = np.eye(K)
    H = np.einsum("ij,fjk,lk->fil", sh.Lc, Gs + lam[:, None, None] * eye, sh.Lc)
    rhs = (b @ sh.Lc.T) / np.sqrt(c)[:, None]
    active = p0 < 0
    done = np.zeros(F, dtype=bool)
    p = p0.copy()
    for _ in range(max_iter):
        free = ~active
        Hm = np.where(free[:, :, None] & free[:, None, :], H, 0.0) + active[:, :, None] * eye
        p = np.linalg.solve(Hm, np.where(free, rhs, 0.0)[..., None])[..., 0]
        mu = np.einsum("fij,fj->fi", H, p) - rhs  # multipliers (zero on the free set)
        # an active value whose multiplier is negative is freed; a free value below zero is held
        new = (active & (mu > 0)) | (~active & (p < 0))
        done = np.all(new == active, axis=1)
        active = new
        if done.all():
            break
    p = np.where(active, 0.0, p)
    for f in np.flatnonzero(~done):  # rare: the active-set iteration has not settled
        R = np.linalg.cholesky(H[f]).T  # H' = R^T R
        d = np.linalg.solve(R.T, rhs[f])
        p[f] = nnls(R, d)[0]
        active[f] = p[f] <= 0
    free = ~active
    both = free[:, :, None] & free[:, None, :]
    Hm = np.where(both, H, 0.0) + active[:, :, None] * eye
    Hinv = np.linalg.inv(Hm) * both
    omega = sh.Lc @ sh.Lc.T
    n_eff = free.sum(axis=1) - lam * np.einsum("fij,ji->f", Hinv, omega)
    return p, Hinv / c[:, None, None], n_eff


# --------------------------------------------------------------------- public function
def distance_distribution(
    q,
    intensity,
    sigma=None,
    *,
    dmax=None,
    weight=None,
    q_range=None,
    n_r: int = 51,
    nonnegative: bool = False,
    background: bool = False,
    dmax_candidates=None,
    min_points: int = 10,
    min_channels: float = 3.0,
) -> dict:
    """p(r) of every frame by the regularised indirect Fourier transform (module notes).

    Parameters
    ----------
    q : array (n_q,), 1/nm, non-negative
    intensity : array (n_frames, n_q) or (n_q,)
        Non-finite points (masked points arrive as NaN) are ignored.
    sigma : array like ``intensity``, optional
        One-sigma errors: weights 1/sigma^2. Without it the points are weighted
        equally and the noise level is estimated (not advisable for curves spanning
        decades).
    dmax : None, float or array (n_frames,), nm
        Maximum dimension; None chooses it per frame by the evidence over
        ``dmax_candidates``.
    weight : None or float
        Dimensionless regularisation weight (module notes); None chooses it per frame
        by the evidence (Hansen 2000).
    q_range : None or (q_min, q_max), 1/nm
        Points outside are ignored (either bound may be None).
    n_r : int
        Points of each frame's r grid 0 .. Dmax (p = 0 at both ends); at least 5.
    nonnegative : bool
        Impose p >= 0 (weight and Dmax are chosen without the constraint).
    background : bool
        Fit a flat background b as well (I = A p + b; reported as ``background``).
    dmax_candidates : array, optional
        Increasing candidate Dmax for the automatic choice (default
        :func:`default_dmax_candidates`, 24 values); the choice is refined between them.
    min_points, min_channels :
        Thresholds of the statuses "too_few_points" and "too_few_shannon_channels".

    Returns
    -------
    dict of arrays, first axis frame (length 1 for a single curve):

    - ``r`` (n_frames, n_r) nm; ``p``, ``p_sigma`` (n_frames, n_r) intensity units/nm;
    - ``fit`` (n_frames, n_q) the back-calculated intensity at every q (NaN for a failed frame);
    - ``chi2_reduced``, ``n_effective`` (effective number of parameters), ``rg``,
      ``rg_sigma`` (nm), ``i0``, ``i0_sigma`` (intensity units), ``dmax`` (nm),
      ``dmax_sigma`` (nm; the spread of the Dmax posterior, 0 for a fixed Dmax),
      ``weight`` (dimensionless), ``log_evidence``, ``shannon_channels``,
      ``background``, ``n_points``, ``q_min``, ``q_max`` (1/nm), ``status`` (str);
    - ``dmax_candidates``, ``dmax_score`` (n_frames, n_candidates): the candidates
      and log evidence minus that of the chosen Dmax (<= 0; all NaN when ``dmax`` is
      given).

    Examples
    --------
    >>> q = np.linspace(0.05, 3.0, 300)
    >>> r = np.linspace(0, 10.0, 201)
    >>> I = forward_transform(q, r, sphere_distance_distribution(r, 5.0, i0=100.0))
    >>> res = distance_distribution(q, I, 0.01 * I, dmax=10.0)
    >>> res["status"].tolist(), round(float(res["rg"][0] / (np.sqrt(0.6) * 5.0)), 2)
    (['ok'], 1.0)
    >>> round(float(res["i0"][0]), 0)
    100.0
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    if np.any(~np.isfinite(q)) or np.any(q < 0):
        raise SaxsInputError("q must be finite and non-negative", parameter="q")
    n_r = int(n_r)
    if n_r < 5:
        raise SaxsInputError(f"n_r must be at least 5, got {n_r}", parameter="n_r")
    if weight is not None:
        weight = float(weight)
        if not np.isfinite(weight) or weight <= 0:
            raise SaxsInputError(f"weight must be a positive number, got {weight}", parameter="weight")
    F = I.shape[0]
    lo, hi = _range_bounds(q_range)
    inside = (q >= lo) & (q <= hi)
    finite = np.isfinite(I) & inside[None, :]
    if S is not None:
        finite &= np.isfinite(S)
    zero = finite & (S <= 0) if S is not None else np.zeros_like(finite)
    usable = finite & ~zero
    n_pts = np.count_nonzero(usable, axis=1)
    status = np.full(F, "ok", dtype=_STATUS_DTYPE)
    status[n_pts < int(min_points)] = "too_few_points"
    status[zero.any(axis=1)] = "zero_sigma"
    any_finite = np.isfinite(I).any(axis=1)
    status[any_finite & ~(np.isfinite(I) & inside[None, :]).any(axis=1)] = "range_outside_data"
    status[~any_finite] = "all_nan"
    good = np.flatnonzero(status == "ok")

    qcol = np.where(usable, q[None, :], np.nan)
    with np.errstate(invalid="ignore"):
        q_min = np.where(n_pts > 0, np.nanmin(np.where(usable, qcol, np.inf), axis=1), np.nan)
        q_max = np.where(n_pts > 0, np.nanmax(np.where(usable, qcol, -np.inf), axis=1), np.nan)

    auto = dmax is None
    if auto:
        cand = default_dmax_candidates(q, q_range) if dmax_candidates is None else _check_candidates(
            dmax_candidates)
    else:
        d = np.asarray(dmax, dtype=float)
        if d.ndim == 0:
            d = np.full(F, float(d))
        if d.shape != (F,):
            raise SaxsInputError(f"dmax must be a number or an array of {F} values", parameter="dmax")
        if np.any(~np.isfinite(d) | (d <= 0)):
            bad = int(np.flatnonzero(~np.isfinite(d) | (d <= 0))[0])
            raise SaxsInputError(f"dmax must be positive, got {d[bad]}", parameter="dmax", frame=bad)
        cand = np.array([np.nan])

    out = {
        "r": np.full((F, n_r), np.nan),
        "p": np.full((F, n_r), np.nan),
        "p_sigma": np.full((F, n_r), np.nan),
        "fit": np.full((F, q.size), np.nan),
    }
    for key in ("chi2_reduced", "n_effective", "rg", "rg_sigma", "i0", "i0_sigma", "dmax", "dmax_sigma",
                "weight", "log_evidence", "shannon_channels", "background"):
        out[key] = np.full(F, np.nan)
    out["dmax_candidates"] = np.broadcast_to(cand, (F, cand.size)).copy()
    out["dmax_score"] = np.full((F, cand.size), np.nan)

    if good.size:
        fr = _Frames(q, I[good], None if S is None else S[good], usable[good], background)
        idx = np.arange(good.size)
        if auto:
            d_sel, score, edge, spread = _scan_dmax(q, fr, cand, n_r, weight)
            out["dmax_score"][good] = score
            status[good[edge]] = "dmax_at_scan_edge"
        else:
            d_sel = d[good]
        res = _solve_grouped(q, fr, idx, d_sel, n_r, weight, nonnegative)
        _store(out, res, good, n_r)
        if fr.known_sigma:
            dof = np.maximum(fr.n - res["n_eff"], 1.0)
            red = res["chi2"] / dof
            poor = (red > 1.5) & (red > 1.0 + 5.0 * np.sqrt(2.0 / dof))
            status[good[poor & (status[good] == "ok")]] = "poor_fit"
        if not auto:
            small = _dmax_check(q, fr, res, d_sel, n_r, weight)
            status[good[small]] = "dmax_too_small"
        if auto:
            out["dmax_score"][good] -= res["evidence"][:, None]
            out["dmax_sigma"][good] = spread["dmax"]
            for key in ("i0", "rg"):
                s_key = key + "_sigma"
                out[s_key][good] = np.sqrt(out[s_key][good] ** 2 + spread[key] ** 2)
        else:
            out["dmax_sigma"][good] = 0.0
    out["n_points"] = n_pts
    out["q_min"], out["q_max"] = q_min, q_max
    out["shannon_channels"] = q_max * out["dmax"] / np.pi
    ok_like = ~np.isin(status, _FAILED)
    few = ok_like & (out["shannon_channels"] < float(min_channels))
    status[few & (status == "ok")] = "too_few_shannon_channels"
    neg = ok_like & ~(out["i0"] > 0)
    status[neg] = "negative_i0"
    out["rg"][neg] = np.nan
    out["rg_sigma"][neg] = np.nan
    out["status"] = status
    return out


def _check_candidates(values):
    c = np.asarray(values, dtype=float).ravel()
    if c.size < 3 or np.any(~np.isfinite(c)) or np.any(c <= 0) or np.any(np.diff(c) <= 0):
        raise SaxsInputError("dmax_candidates must be at least 3 increasing positive values",
                             parameter="dmax_candidates")
    return c


def _solve_grouped(q, fr, idx, d_sel, n_r, weight, nonnegative):
    """Full solution of frames ``idx`` with Dmax ``d_sel`` (frames sharing a value together)."""
    res: dict = {}
    values, inverse = np.unique(d_sel, return_inverse=True)
    for k, value in enumerate(values):  # one shared matrix per distinct Dmax
        rows = idx[inverse.ravel() == k]
        part = _evaluate(_shared(q, value, n_r), fr, rows, weight, full=True, nonnegative=nonnegative)
        for key, v in part.items():
            if key not in res:
                res[key] = np.empty((idx.size, *v.shape[1:]))
            res[key][rows] = v
    res["dmax"] = np.asarray(d_sel, dtype=float)
    return res


def _store(out, res, good, n_r):
    F = good.size
    d = res["dmax"]
    out["r"][good] = d[:, None] * np.linspace(0.0, 1.0, n_r)[None, :]
    p = np.zeros((F, n_r))
    p[:, 1:-1] = res["p_inner"]
    ps = np.zeros((F, n_r))
    ps[:, 1:-1] = np.sqrt(np.maximum(res["p_var"], 0.0))
    out["p"][good], out["p_sigma"][good] = p, ps
    out["fit"][good] = res["fit"]
    for key in ("chi2_reduced", "rg", "rg_sigma", "i0", "i0_sigma", "weight", "background"):
        out[key][good] = res[key]
    out["n_effective"][good] = res["n_eff"]
    out["dmax"][good] = d
    out["log_evidence"][good] = res["evidence"]


def _evaluate_at(q, fr, rows, dvals, n_r, weight, full):
    """Evaluate frames ``rows`` at Dmax ``dvals`` (one per frame; grouped by value)."""
    res: dict = {}
    values, inverse = np.unique(dvals, return_inverse=True)
    for k, value in enumerate(values):  # one shared matrix per distinct Dmax
        sel = inverse.ravel() == k
        part = _evaluate(_shared(q, value, n_r), fr, rows[sel], weight, full=full)
        for key, v in part.items():
            if key not in res:
                res[key] = np.empty((rows.size, *v.shape[1:]))
            res[key][sel] = v
    return res


def _scan_dmax(q, fr, cand, n_r, weight):
    """The automatic Dmax (module notes).

    1. every candidate for every frame (log evidence, I0, Rg);
    2. around each frame's best candidate c, the grid ``_N_SUB`` times finer (in log
       Dmax) from c - 1 to c + 1; the best of all evaluated values is the Dmax;
    3. the posterior over log Dmax (flat prior in log Dmax, the evidence as likelihood,
       a Riemann sum over the evaluated values) gives the spread of Dmax, I0 and Rg
       about their values at the chosen Dmax.

    Returns Dmax, the coarse score (F, n_c), the edge flags and the spreads
    (dmax, i0, rg)."""
    F = fr.w.shape[0]
    rows = np.arange(F)
    nc = cand.size
    coarse = {key: np.empty((F, nc)) for key in ("evidence", "i0", "rg")}
    for k, value in enumerate(cand):
        part = _evaluate(_shared(q, value, n_r), fr, rows, weight, full="stats")
        for key in coarse:
            coarse[key][:, k] = part[key]
    score = np.where(np.isfinite(coarse["evidence"]), coarse["evidence"], -np.inf)
    best_c = np.argmax(score, axis=1)
    edge = (best_c == 0) | (best_c == nc - 1)
    lc = np.log(cand)
    steps = np.arange(-_N_SUB, _N_SUB + 1)
    j = best_c[:, None] * _N_SUB + steps[None, :]  # fine indices, (F, 2 _N_SUB + 1)
    inside = (j >= 0) & (j <= (nc - 1) * _N_SUB)
    c0 = np.clip(j // _N_SUB, 0, nc - 2)
    t = (j - c0 * _N_SUB) / _N_SUB
    d_fine = np.exp(lc[c0] + t * (lc[c0 + 1] - lc[c0]))
    fine = {key: np.full(j.shape, np.nan) for key in coarse}
    on_coarse = inside & (j % _N_SUB == 0)
    cidx = np.clip(j // _N_SUB, 0, nc - 1)
    for key in coarse:
        fine[key][on_coarse] = coarse[key][np.nonzero(on_coarse)[0], cidx[on_coarse]]
    todo = inside & ~on_coarse
    f_idx, s_idx = np.nonzero(todo)
    part = _evaluate_at(q, fr, f_idx, d_fine[todo], n_r, weight, "stats")
    for key in coarse:
        fine[key][f_idx, s_idx] = part[key]
    ev_fine = np.where(np.isfinite(fine["evidence"]), fine["evidence"], -np.inf)
    pick = np.argmax(ev_fine, axis=1)
    d_best = d_fine[rows, pick]
    # posterior weights over log Dmax: fine window (trapezoid, step 1/_N_SUB of an
    # interval) and the coarse candidates outside it (step 1)
    w_fine = np.where(inside, 1.0 / _N_SUB, 0.0)
    w_fine[:, [0, -1]] = 0.5 / _N_SUB + 0.5
    dist = np.abs(np.arange(nc)[None, :] - best_c[:, None])
    w_coarse = np.where(dist >= 2, 1.0, 0.0)
    e_all = np.concatenate([ev_fine, score], axis=1)
    w_all = np.concatenate([w_fine, w_coarse], axis=1)
    vals = {key: np.concatenate([fine[key], coarse[key]], axis=1) for key in ("i0", "rg")}
    vals["dmax"] = np.concatenate([d_fine, np.broadcast_to(cand, (F, nc))], axis=1)
    ok = np.isfinite(e_all) & (w_all > 0) & np.isfinite(vals["rg"]) & np.isfinite(vals["i0"])
    e_max = np.max(np.where(ok, e_all, -np.inf), axis=1, keepdims=True)
    e_max = np.where(np.isfinite(e_max), e_max, 0.0)  # no usable value: no spread
    prob = np.where(ok, w_all * np.exp(np.where(ok, e_all - e_max, -np.inf)), 0.0)
    prob /= np.maximum(prob.sum(axis=1, keepdims=True), 1e-300)
    centre = {"dmax": d_best, "i0": fine["i0"][rows, pick], "rg": fine["rg"][rows, pick]}
    spread = {}
    for key, v in vals.items():
        dev = np.where(ok, v - centre[key][:, None], 0.0)
        spread[key] = np.sqrt(np.sum(prob * dev * dev, axis=1))
    return d_best, score, edge, spread


def _dmax_check(q, fr, res, d_sel, n_r, weight):
    """Frames whose fit misses the data (chi2 significantly above its expectation, or
    every frame without sigma) and for which 1.5 Dmax is decisively more probable."""
    F = d_sel.size
    rows = np.arange(F)
    if fr.known_sigma:
        dof = np.maximum(fr.n - res["n_eff"], 1.0)
        suspect = res["chi2"] / dof > 1.0 + 3.0 * np.sqrt(2.0 / dof)
    else:
        suspect = np.ones(F, dtype=bool)
    flag = np.zeros(F, dtype=bool)
    r_s = rows[suspect]
    if r_s.size:
        e_long = _evaluate_at(q, fr, r_s, 1.5 * d_sel[r_s], n_r, weight, False)["evidence"]
        flag[r_s] = e_long - res["evidence"][r_s] > _DECISIVE
    return flag
