"""Batched fitting of Bragg peaks: every peak of every frame in one Levenberg-Marquardt solve.

Used by :func:`saxsnb.analysis._peaks.find_peaks`; pure numpy.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError

__all__ = ["PROFILES", "peak_profile", "guess_peaks", "fit_peaks"]

#: Peak shapes known to :func:`fit_peaks`.
PROFILES = ("gaussian", "lorentzian", "pseudo_voigt")

_G = 4.0 * np.log(2.0)  # Gaussian written with its FWHM w: exp(-4 ln2 (x-c)^2 / w^2)


def peak_profile(x, center, fwhm, height, eta=None, *, profile: str = "gaussian"):
    """Peak shape of height ``height`` and full width at half maximum ``fwhm``.

    Gaussian ``h exp(-4 ln2 u^2)``, Lorentzian ``h / (1 + 4 u^2)`` with
    ``u = (x - c) / w``; pseudo-Voigt ``eta L + (1 - eta) G`` with the same FWHM
    (Wertheim et al. 1974, J. Electron Spectrosc. 3, 237).

    >>> float(peak_profile(1.05, 1.0, 0.1, 2.0))  # half maximum at c + w/2
    1.0
    """
    u = (np.asarray(x, dtype=float) - center) / fwhm
    g = np.exp(-_G * u * u)
    lo = 1.0 / (1.0 + 4.0 * u * u)
    if profile == "gaussian":
        return height * g
    if profile == "lorentzian":
        return height * lo
    if profile == "pseudo_voigt":
        e = 0.5 if eta is None else eta
        return height * (e * lo + (1.0 - e) * g)
    raise SaxsInputError(f"unknown profile {profile!r}; use one of {PROFILES}", parameter="profile")


def _model(x, p, profile, dx, wgt, J=None, line=True):
    """Peak + local line at parameters ``p`` (n, k): the weighted residual basis.

    Returns the model (n, m) and the weighted Jacobian ``J`` (k, n, m) (analytic;
    written into ``J`` when given, a buffer reused across iterations); ``dx`` is
    ``x - q0`` of the local line, ``wgt`` the weights 1/sigma (0 on padding). The
    columns of the line, ``wgt`` and ``dx wgt``, do not depend on ``p``: with
    ``line=False`` they are left as they are in ``J``."""
    c, w, h, b0, b1 = (p[:, i : i + 1] for i in range(5))
    k = 6 if profile == "pseudo_voigt" else 5
    if J is None:
        J = np.empty((k,) + x.shape)
    u = x - c
    u /= w
    u2 = u * u
    if profile == "gaussian":
        s = np.exp(-_G * u2)
        ds = (-2.0 * _G) * u * s
    else:
        lo = 1.0 / (1.0 + 4.0 * u2)
        if profile == "lorentzian":
            s, ds = lo, -8.0 * u * lo * lo
        else:
            g = np.exp(-_G * u2)
            e = np.clip(p[:, 5:6], 0.0, 1.0)
            s = e * lo + (1 - e) * g
            ds = e * (-8.0 * u * lo * lo) + (1 - e) * (-2.0 * _G * u * g)
            np.multiply(lo - g, h * wgt, out=J[5])
    f = h * s + b0 + b1 * dx
    np.multiply(ds, (-h / w) * wgt, out=J[0])
    np.multiply(J[0], u, out=J[1])
    np.multiply(s, wgt, out=J[2])
    if line:
        J[3] = wgt
        np.multiply(dx, wgt, out=J[4])
    return f, J


def _normal(J, r, line=None):
    """Normal matrix J^T J (n, k, k) and gradient J^T r (n, k), J of shape (k, n, m).
    ``line``: the block of the line columns 3, 4 (n, 2, 2), constant across
    iterations, when already known."""
    k, n = J.shape[:2]
    A = np.empty((n, k, k))
    for a in range(k):
        for b in range(a, k):
            if line is not None and 3 <= a <= 4 and 3 <= b <= 4:
                A[:, a, b] = A[:, b, a] = line[:, a - 3, b - 3]
                continue
            A[:, a, b] = A[:, b, a] = np.einsum("nm,nm->n", J[a], J[b])
    g = np.einsum("knm,nm->nk", J, r)
    return A, g


def _cholesky(A):
    """Cholesky factors of many small symmetric matrices A (n, k, k), as L (k, k, n)
    (loops over k only), and a mask of the ones that were positive definite."""
    n, k = A.shape[:2]
    L = np.zeros((k, k, n))
    At = A.transpose(1, 2, 0)
    ok = np.ones(n, dtype=bool)
    for j in range(k):
        d2 = At[j, j] - (L[j, :j] ** 2).sum(0)
        ok &= d2 > 0
        d = np.sqrt(np.where(d2 > 0, d2, 1.0))
        L[j, j] = d
        for i in range(j + 1, k):
            L[i, j] = (At[i, j] - (L[i, :j] * L[j, :j]).sum(0)) / d
    return L, ok


def _cholesky_subst(L, ok, b):
    """Solve L L^T x = b (b (n, k)) by forward and back substitution; x = 0 where not ok."""
    n, k = b.shape
    z = np.empty((k, n))
    bt = b.T
    for i in range(k):
        z[i] = (bt[i] - (L[i, :i] * z[:i]).sum(0)) / L[i, i]
    x = np.empty((k, n))
    for i in range(k - 1, -1, -1):
        x[i] = (z[i] - (L[i + 1 :, i] * x[i + 1 :]).sum(0)) / L[i, i]
    return np.where(ok, x, 0.0).T


def _cholesky_solve(A, b):
    """Solve A x = b for many small symmetric positive-definite systems at once
    (A (n, k, k), b (n, k); Cholesky, loops over k only). Returns x and a mask of the
    systems that were positive definite (x = 0 elsewhere)."""
    L, ok = _cholesky(A)
    return _cholesky_subst(L, ok, b), ok


def _inverse(A):
    """Inverses of many small symmetric matrices (n, k, k): by Cholesky, by LU
    (``numpy.linalg.inv``) for the few that are not numerically positive definite;
    NaN for singular or non-finite ones."""
    n, k = A.shape[:2]
    cov = np.full_like(A, np.nan)
    fin = np.isfinite(A).all(axis=(1, 2))
    Af = np.where(fin[:, None, None], A, np.eye(k))
    L, okc = _cholesky(Af)  # one factorisation, k right-hand sides
    ok = fin & okc
    for j in range(k):
        e = np.zeros((n, k))
        e[:, j] = 1.0
        cov[:, :, j] = _cholesky_subst(L, okc, e)
    cov[~ok] = np.nan
    rest = np.nonzero(fin & ~ok)[0]
    if rest.size:
        Ar = A[rest]
        inv_ok = np.abs(np.linalg.det(Ar)) > 0
        if inv_ok.any():
            cov[rest[inv_ok]] = np.linalg.inv(Ar[inv_ok])
    return cov


def _hold(A, g, col, sel, delta=None):
    """Fix parameter ``col`` of the systems ``sel`` in place: its step is ``delta``
    (0 when None), the others solve the reduced system."""
    if delta is not None:
        g[sel] -= A[sel][:, :, col] * delta[:, None]
    A[sel, col, :] = 0.0
    A[sel, :, col] = 0.0
    A[sel, col, col] = 1.0
    g[sel, col] = 0.0 if delta is None else delta


def _levenberg_marquardt(x, y, wgt, dx, p, profile, wmin, max_iter, *, xtol=1e-9, ftol=1e-10):
    """Levenberg-Marquardt for every window at once; parameters ``p`` (n, k) updated.

    A peak stops when its step is small (the step is then not tried): the predicted
    chi-square decrease ``dp^T g`` below ``1e-8 max(chi2_red, 1)`` (a step under 1e-4
    of the uncertainties) or every relative step ``|dp_i| <= xtol |p_i|``; or when a taken
    step lowers the chi-square by less than ``ftol`` relatively; or when lambda passes
    1e8 (no step lowers the chi-square). Bounds (``w >= wmin``, ``0 <= eta <= 1``): a parameter
    at its bound with the gradient pointing out is held there for the step, and a
    step that would cross a bound stops at it, the other parameters solving the
    reduced system (an active set). Peaks still running are packed together when
    half of them have stopped, so the work follows the active peaks. Returns the
    normal matrix ``J^T W J`` (n, k, k) at the final parameters (for the covariance),
    the chi-square and the iterations per peak."""
    n, k = p.shape
    m = x.shape[1]
    dof = np.maximum((wgt > 0).sum(axis=1) - k, 1)
    J = np.empty((k, n, m))
    f, J = _model(x, p, profile, dx, wgt, J)
    res = (y - f) * wgt
    chi = np.einsum("nm,nm->n", res, res)
    iters = np.zeros(n, dtype=np.int64)
    lo_b = np.stack([wmin] + ([np.zeros(n)] if k == 6 else []), axis=1)
    hi_b = np.stack([np.full(n, np.inf)] + ([np.ones(n)] if k == 6 else []), axis=1)
    bcols = [1, 5] if k == 6 else [1]
    # the working set: every array below is for the peaks in ``ids``
    w = {"ids": np.arange(n), "x": x, "y": y, "wgt": wgt, "dx": dx, "p": p.copy(), "J": J, "r": res,
         "chi": chi.copy(), "lo": lo_b, "hi": hi_b, "dof": dof, "lam": np.full(n, 1e-3),
         "done": np.zeros(n, dtype=bool), "line": None, "pending": np.zeros(n, dtype=bool)}
    # normal matrix at each peak's final parameters (for the covariance), recorded when
    # the peak stops; "pending": stopped after a taken step, recorded at the next pass
    A_fin = np.full((n, k, k), np.nan)
    w["line"] = np.empty((n, 2, 2))  # constant: the block of the line's columns
    for a in (3, 4):
        for b in range(a, 5):
            w["line"][:, a - 3, b - 3] = w["line"][:, b - 3, a - 3] = np.einsum("nm,nm->n", J[a], J[b])
    Jn = np.empty_like(J)
    Jn[3:5] = J[3:5]
    diag = np.arange(k)

    def pack(extra=()):
        """Write back the finished peaks and keep the running ones (also in ``extra``)."""
        keep = ~w["done"] | w["pending"]
        fin = w["ids"][~keep]
        p[fin], chi[fin] = w["p"][~keep], w["chi"][~keep]
        for key in w:
            if key != "J":
                w[key] = w[key][keep]
        w["J"] = np.ascontiguousarray(w["J"][:, keep])
        buf = np.empty_like(w["J"])
        buf[3:5] = w["J"][3:5]
        return buf, [e[keep] for e in extra]

    for _ in range(int(max_iter)):
        if w["done"].all():
            break
        if w["done"].mean() > 0.5:  # pack the running peaks; write back the finished ones
            Jn, _ = pack()
        wp, wlo, whi, wc, done = w["p"], w["lo"], w["hi"], w["chi"], w["done"]
        run = ~done
        iters[w["ids"][run]] += 1
        A, g = _normal(w["J"], w["r"], w["line"])
        A0 = A.copy()  # at the current parameters, before holds and damping
        if w["pending"].any():
            A_fin[w["ids"][w["pending"]]] = A0[w["pending"]]
            w["pending"][:] = False
        for b, col in enumerate(bcols):  # at a bound, gradient pointing out: held
            v, gc = wp[:, col], g[:, col]
            hold = ((v <= wlo[:, b]) & (gc <= 0)) | ((v >= whi[:, b]) & (gc >= 0))
            if hold.any():
                _hold(A, g, col, np.nonzero(hold)[0])
        D = A.diagonal(axis1=1, axis2=2).copy()
        Ad = A
        Ad[:, diag, diag] += w["lam"][:, None] * (D + 1e-12 * D.max(axis=1, keepdims=True) + 1e-300)
        with np.errstate(all="ignore"):
            dp, pd = _cholesky_solve(Ad, g)
            for b, col in enumerate(bcols):  # a step crossing a bound stops at it
                to = wp[:, col] + dp[:, col]
                cross = np.nonzero((to < wlo[:, b]) | (to > whi[:, b]))[0]
                if cross.size:
                    de = np.clip(to[cross], wlo[cross, b], whi[cross, b]) - wp[cross, col]
                    _hold(Ad, g, col, cross, de)
                    d2, ok2 = _cholesky_solve(Ad[cross], g[cross])
                    d2[:, col] = de
                    dp[cross], pd[cross] = d2, pd[cross] & ok2
        dp = np.where(np.isfinite(dp), dp, 0.0)
        pn = wp + dp
        pn[:, bcols] = np.clip(pn[:, bcols], wlo, whi)
        with np.errstate(all="ignore"):
            pred = np.einsum("nk,nk->n", dp, g)
            # a step this small changes nothing that matters: the peak has converged, and
            # the step is neither tried nor taken (its trial would cost a model evaluation)
            tiny = pred <= 1e-8 * np.maximum(wc / w["dof"], 1.0)
            tiny |= np.all(np.abs(dp) <= xtol * np.abs(pn), axis=1)
        stop = pd & tiny & ~done
        A_fin[w["ids"][stop]] = A0[stop]
        done |= stop
        if done.all():
            continue
        if done.mean() > 0.5:
            Jn, (pn, pd, A0) = pack((pn, pd, A0))
        wx, wy, ww, wd, wJ, wr = w["x"], w["y"], w["wgt"], w["dx"], w["J"], w["r"]
        wp, wc, done, lam = w["p"], w["chi"], w["done"], w["lam"]
        run = ~done
        with np.errstate(all="ignore"):
            fn, Jn = _model(wx, pn, profile, wd, ww, Jn, line=False)
            fn = _weighted_residual(wy, fn, ww)
            chin = np.einsum("nm,nm->n", fn, fn)
        better = (chin < wc) & pd & run
        # keep the trial arrays where the step is taken (swap buffers, copy back the rest)
        worse = np.nonzero(~better)[0]
        Jn[:, worse] = wJ[:, worse]
        fn[worse] = wr[worse]
        w["J"], Jn = Jn, wJ
        w["r"] = fn
        with np.errstate(all="ignore"):
            flat = (wc - chin) <= ftol * wc
        wp[better] = pn[better]
        w["chi"] = np.where(better, chin, wc)
        w["lam"] = lam = np.where(better, np.maximum(lam / 3.0, 1e-9), np.where(run, lam * 4.0, lam))
        stuck = (lam > 1e8) & ~done  # no step taken: the current parameters are final
        A_fin[w["ids"][stuck]] = A0[stuck]
        w["pending"] |= better & flat
        done |= (better & flat) | stuck
    ids = w["ids"]
    p[ids], chi[ids] = w["p"], w["chi"]
    left = ~w["done"] | w["pending"]
    if left.any():
        A_fin[ids[left]] = _normal(w["J"][:, left], w["r"][left], w["line"][left])[0]
    return A_fin, chi, iters


def _weighted_residual(y, f, wgt):
    """Weighted residual (y - f) wgt, in the buffer of ``f``."""
    np.subtract(y, f, out=f)
    f *= wgt
    return f


def guess_peaks(q, residual, index, width_points):
    """Starting values for :func:`fit_peaks` from detected peaks.

    Parameters
    ----------
    q : array (n_q,)
    residual : array (n_frames, n_q), baseline-subtracted intensity.
    index, width_points : arrays (n_frames, n_peaks) from :func:`detect_peaks`.

    Returns
    -------
    dict of arrays (n_frames, n_peaks): ``center`` (1/nm), ``fwhm`` (1/nm),
    ``height`` (intensity units); NaN where there is no peak.

    >>> q = np.linspace(0, 2, 201)
    >>> r = np.exp(-4 * np.log(2) * ((q - 1) / 0.1) ** 2)[None]
    >>> g = guess_peaks(q, r, np.array([[100]]), np.array([[10.0]]))
    >>> round(float(g["center"][0, 0]), 3), round(float(g["fwhm"][0, 0]), 3)
    (1.0, 0.1)
    """
    q = np.asarray(q, dtype=float)
    idx = np.asarray(index)
    good = idx >= 0
    i = np.where(good, idx, 0)
    dq = np.gradient(q)[i]
    h = np.take_along_axis(np.asarray(residual, dtype=float), i, axis=-1)
    return {
        "center": np.where(good, q[i], np.nan),
        "fwhm": np.where(good, np.asarray(width_points, dtype=float) * dq, np.nan),
        "height": np.where(good, h, np.nan),
    }


def fit_peaks(
    q,
    residual,
    noise,
    index,
    width_points,
    *,
    profile: str = "pseudo_voigt",
    max_iter: int = 50,
    half_window: int | None = None,
    start: dict | None = None,
    others=None,
):
    """Fit every detected peak of every frame at once (batched Levenberg-Marquardt).

    Parameters
    ----------
    q : array (n_q,), 1/nm.
    residual : array (n_frames, n_q), intensity minus baseline, NaN allowed.
    noise : array broadcastable to residual, one-sigma errors (the fit weights).
    index, width_points : arrays (n_frames, n_peaks) from :func:`detect_peaks`.
    profile : "gaussian", "lorentzian" or "pseudo_voigt" (eta fitted in [0, 1]).
    max_iter : int
    half_window : int, optional
        Largest half-width (points) of a fit window; default 40.
    start : dict of arrays (n_frames, n_peaks), optional
        ``position``, ``fwhm``, ``height`` (and ``eta``) of a previous fit, used as
        starting values; with ``others``, a backfitting pass (see Notes).
    others : array (n_frames, n_q), optional
        Sum of the previously fitted peak profiles of each frame. Each peak is then
        refitted on ``residual - others + own previous profile`` over its full
        window, i.e. with its neighbours' fitted profiles removed.

    Returns
    -------
    dict of arrays (n_frames, n_peaks), NaN where no peak or the fit failed:
    ``position``, ``fwhm`` (1/nm), ``height``, ``area`` (intensity x 1/nm) and their
    ``*_sigma``; ``eta`` (pseudo-Voigt mixing, NaN otherwise); ``chi2_reduced``;
    ``n_iterations`` (Levenberg-Marquardt iterations of the peak, all passes).

    Notes
    -----
    Each peak is fitted on its own window, ``+-2 FWHM`` from the detection estimate
    (at least 4 points, at most ``half_window``) and cut at the midpoint to a
    neighbouring peak, with the model ``peak(q) + b0 + b1 (q - q0)``: the local line
    absorbs what the smooth baseline left. All windows are padded to one length
    (padding has weight zero) and solved together with Levenberg-Marquardt steps
    (Levenberg 1944; Marquardt 1963, J. SIAM 11, 431): ``(J^T J + lambda diag J^T J)
    dp = J^T r`` for all peaks at once (analytic Jacobian, one batched Cholesky
    solve), lambda adapted per peak. Each peak stops when its step is small (predicted
    chi-square decrease under 1e-8 chi2_red, i.e. under 1e-4 of its uncertainties, or
    relative steps under 1e-9) or its chi-square stops falling (relative change under
    1e-10): typically 5 iterations for a Gaussian. A pseudo-Voigt is started from a
    Gaussian fit (eta = 0), with eta held at a bound while its gradient points out
    (active set): about 2 more iterations. ``n_iterations`` reports the count.
    Uncertainties are ``sqrt(diag((J^T W J)^-1) * chi2_red)``, the covariance
    scaled by the reduced chi-square (as ``scipy.optimize.curve_fit`` with
    ``absolute_sigma=False``). Overlapping peaks are refined by backfitting
    (Hastie & Tibshirani 1986, Stat. Sci. 1, 297): each peak is refitted on the data
    minus its neighbours' current profiles. Areas: Gaussian ``h w sqrt(pi / (4 ln 2))``,
    Lorentzian ``h w pi / 2``, pseudo-Voigt the eta-weighted mix.

    Examples
    --------
    >>> q = np.linspace(0.5, 1.5, 201)
    >>> y = np.exp(-4 * np.log(2) * ((q - 1.0) / 0.05) ** 2)[None]
    >>> fit = fit_peaks(q, y, 0.01, np.array([[100]]), np.array([[10.0]]), profile="gaussian")
    >>> round(float(fit["position"][0, 0]), 4), round(float(fit["fwhm"][0, 0]), 4)
    (1.0, 0.05)
    """
    if profile not in PROFILES:
        raise SaxsInputError(f"unknown profile {profile!r}; use one of {PROFILES}", parameter="profile")
    q = np.asarray(q, dtype=float)
    r = np.asarray(residual, dtype=float)
    nz = np.broadcast_to(np.asarray(noise, dtype=float), r.shape)
    idx = np.asarray(index)
    n_f, n_p = idx.shape
    n_q = q.size
    names = ["position", "fwhm", "height", "area"]
    out = {n: np.full((n_f, n_p), np.nan) for n in names}
    out.update({n + "_sigma": np.full((n_f, n_p), np.nan) for n in names})
    out["eta"] = np.full((n_f, n_p), np.nan)
    out["chi2_reduced"] = np.full((n_f, n_p), np.nan)
    out["n_iterations"] = np.full((n_f, n_p), np.nan)
    good = idx >= 0
    if not good.any():
        return out
    fi, pi = np.nonzero(good)
    ci = idx[fi, pi]
    hmax = 40 if half_window is None else int(half_window)
    wpts = np.nan_to_num(np.asarray(width_points, dtype=float)[fi, pi], nan=4.0)
    hw = np.clip(np.round(2.0 * wpts), 4, hmax).astype(int)
    # neighbours in the same frame (peaks are sorted by index, -1 padding at the end)
    idx_f = np.where(good, idx, np.iinfo(np.int64).max // 4)
    prev = np.full((n_f, n_p), -(10**9))
    prev[:, 1:] = idx_f[:, :-1]
    nxt = np.full((n_f, n_p), 10**9)
    nxt[:, :-1] = np.where(good[:, 1:], idx[:, 1:], 10**9)
    lo_lim = np.maximum(ci - hw, (ci + prev[fi, pi]) // 2 + 1)
    hi_lim = np.minimum(ci + hw, (ci + nxt[fi, pi] + 1) // 2 - 1)
    if others is not None:
        others = np.asarray(others, dtype=float)
    if start is not None:
        st_c, st_w, st_h = (np.asarray(start[k], dtype=float)[fi, pi] for k in ("position", "fwhm", "height"))
        st_e = np.asarray(start["eta"], dtype=float)[fi, pi] if "eta" in start else np.full(ci.size, 0.5)
        st_e = np.where(np.isfinite(st_e), st_e, 0.5)
    # peaks are solved in groups of similar window size, so padding stays small
    all_f, all_p, all_c, all_w, all_h, all_lo, all_hi = fi, pi, ci, wpts, hw, lo_lim, hi_lim
    cuts = np.minimum(np.percentile(all_h, [60, 95]).astype(int), hmax)
    edges = np.unique(np.concatenate([[0], cuts, [hmax]]))
    for g_lo, g_hi in zip(edges[:-1], edges[1:]):
        g = np.nonzero((all_h > g_lo) & (all_h <= g_hi))[0]
        if g.size == 0:
            continue
        fi, pi, ci, wpts, hw = all_f[g], all_p[g], all_c[g], all_w[g], all_h[g]
        lo_lim, hi_lim = all_lo[g], all_hi[g]
        if start is not None:
            sc, sw, sh, se = st_c[g], st_w[g], st_h[g], st_e[g]
        hpad = int(hw.max())
        cols = ci[:, None] + np.arange(-hpad, hpad + 1)[None, :]
        inside = (cols >= lo_lim[:, None]) & (cols <= hi_lim[:, None]) & (cols >= 0) & (cols < n_q)
        cols_c = np.clip(cols, 0, n_q - 1)
        x = q[cols_c]
        y = r[fi[:, None], cols_c]
        if others is not None:
            own = peak_profile(x, sc[:, None], sw[:, None], sh[:, None], se[:, None], profile=profile)
            y = y - others[fi[:, None], cols_c] + own
        s = nz[fi[:, None], cols_c]
        inside &= np.isfinite(y) & np.isfinite(s) & (s > 0)
        wgt = np.where(inside, 1.0 / np.where(inside, s, 1.0), 0.0)
        y = np.where(inside, y, 0.0)
        n_pts = inside.sum(axis=1)
        # starting values
        c0 = q[ci]
        dq = np.gradient(q)[ci] if n_q > 1 else np.ones_like(c0)
        w0 = np.maximum(wpts * dq, 2 * dq)
        edge = np.where(inside, y, np.inf).min(axis=1)
        edge = np.where(np.isfinite(edge), edge, 0.0)
        h0 = np.maximum(r[fi, ci] - edge, 1e-12)
        if start is not None:
            c0, w0, h0 = sc, np.maximum(sw, 2 * dq), np.maximum(sh, 1e-12)
        k = 6 if profile == "pseudo_voigt" else 5
        p = np.zeros((ci.size, k))
        p[:, 0], p[:, 1], p[:, 2], p[:, 3] = c0, w0, h0, edge
        if k == 6:
            p[:, 5] = 0.5 if start is None else se
        dxw = x - c0[:, None]
        wmin = 0.25 * dq
        it_g = 0
        if k == 6 and start is None:  # a Gaussian first pass seeds the pseudo-Voigt at eta = 0
            pg = np.ascontiguousarray(p[:, :5])
            it_g = _levenberg_marquardt(x, y, wgt, dxw, pg, "gaussian", wmin, max_iter)[2]
            p[:, :5] = pg
            p[:, 5] = 0.0
        A, chi, it = _levenberg_marquardt(x, y, wgt, dxw, p, profile, wmin, max_iter)
        dof = np.maximum(n_pts - k, 1)
        redchi = chi / dof
        with np.errstate(all="ignore"):
            cov = _inverse(A)
            cov *= redchi[:, None, None]
            err = np.sqrt(np.einsum("nkk->nk", cov))
        c, w, h = p[:, 0], np.abs(p[:, 1]), p[:, 2]
        if profile == "gaussian":
            af = np.full_like(c, np.sqrt(np.pi / _G))
            deta = np.zeros_like(c)
        elif profile == "lorentzian":
            af = np.full_like(c, np.pi / 2.0)
            deta = np.zeros_like(c)
        else:
            e = p[:, 5]
            af = e * np.pi / 2.0 + (1 - e) * np.sqrt(np.pi / _G)
            deta = h * w * (np.pi / 2.0 - np.sqrt(np.pi / _G))
        area = af * h * w
        grad = np.zeros((ci.size, k))
        grad[:, 1] = af * h
        grad[:, 2] = af * w
        if k == 6:
            grad[:, 5] = deta
        with np.errstate(all="ignore"):
            area_sig = np.sqrt(np.einsum("nk,nkl,nl->n", grad, cov, grad))
        span = hmax * dq
        valid = (
            np.isfinite(p).all(axis=1)
            & (h > 0)
            & (np.abs(c - c0) < np.maximum(hw, 2) * dq)
            & (w < 2 * span + 4 * dq)
            & (n_pts > k)
            & np.isfinite(err[:, 0])
        )
        for name, val in (
            ("position", c),
            ("fwhm", w),
            ("height", h),
            ("area", area),
            ("position_sigma", err[:, 0]),
            ("fwhm_sigma", err[:, 1]),
            ("height_sigma", err[:, 2]),
            ("area_sigma", area_sig),
            ("chi2_reduced", redchi),
            ("n_iterations", it + it_g),
        ):
            out[name][fi, pi] = np.where(valid, val, np.nan)
        if k == 6:
            out["eta"][fi, pi] = np.where(valid, p[:, 5], np.nan)
    return out


def _profile_sum(q, fit, profile, shape, reach: float = 4.0):
    """Sum over peaks of the fitted profiles, per frame, on ``q`` (out to ``reach`` FWHM)."""
    total = np.zeros(shape)
    pos, w, h = fit["position"], fit["fwhm"], fit["height"]
    ok = np.isfinite(pos) & np.isfinite(w) & np.isfinite(h)
    if not ok.any():
        return total
    fi, pi = np.nonzero(ok)
    n_q = q.size
    dq = float(np.median(np.diff(q)))
    c, ww, hh = pos[fi, pi], w[fi, pi], h[fi, pi]
    e = fit["eta"][fi, pi] if "eta" in fit else np.full(c.size, np.nan)
    e = np.where(np.isfinite(e), e, 0.5)
    ci = np.clip(np.searchsorted(q, c), 0, n_q - 1)
    half = int(min(np.ceil(reach * ww.max() / dq), n_q))
    cols = ci[:, None] + np.arange(-half, half + 1)
    inside = (cols >= 0) & (cols < n_q) & (np.abs(cols - ci[:, None]) <= reach * ww[:, None] / dq)
    cols_c = np.clip(cols, 0, n_q - 1)
    vals = peak_profile(q[cols_c], c[:, None], ww[:, None], hh[:, None], e[:, None], profile=profile)
    flat = (fi[:, None] * n_q + cols_c)[inside]
    total += np.bincount(flat, weights=vals[inside], minlength=total.size).reshape(shape)
    return total
