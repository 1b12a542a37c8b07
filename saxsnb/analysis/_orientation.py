"""Orientation from azimuthal profiles I(chi), vectorised over frames.

Inputs are ``chi`` (degrees, bin centres, uniform width) and ``intensity`` /
``sigma`` of shape (n_frames, n_chi), e.g. the azimuthal profile of a q band from a cake
(:mod:`saxsnb.analysis._integrate`). NaN bins (masked, off the detector) are ignored.

Hermans' orientation parameter (Hermans & Platzek 1939, Kolloid-Z. 88, 68)
    ``f = (3 <cos^2 phi> - 1) / 2`` with ``phi = chi - director`` and, for a distribution
    with rotational symmetry about the director, the sin-weighted average
    ``<cos^2 phi> = int I cos^2(phi) |sin phi| dphi / int I |sin phi| dphi`` (over the
    full circle; the detector azimuth stands for the polar angle from the director, the
    small-angle approximation, common practice). f = 1 for perfect alignment along the
    director, 0 for an isotropic sample, -1/2 for perfect alignment perpendicular to it.
    Each bin's weights are the exact integrals of ``|sin|`` and ``cos^2 |sin|`` over the
    bin, I being taken constant within it.
2D order parameter (common practice)
    ``S_2D = <cos 2 phi> = int I cos(2 phi) dphi / int I dphi`` (no sin weighting): 1 for
    alignment along the director, 0 isotropic. ``director="auto"`` takes the direction
    that maximises it, ``0.5 atan2(<sin 2chi>, <cos 2chi>)``.
Uncertainties
    propagated linearly from ``sigma`` (bins independent).
Caveat
    f and S_2D describe the whole profile given: an isotropic part (background under the
    reflection) pulls both towards 0; subtract it first (``baseline=``, or background q
    bands in ``ds.saxs.orientation``).

Examples
--------
>>> chi = np.arange(-179.5, 180, 1.0)
>>> out = hermans_orientation(chi, np.cos(np.radians(chi))[None] ** 2, director_deg=0.0)
>>> round(float(out["hermans"][0]), 4)          # 2n / (2n + 3) for n = 1
0.4
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._status import STATUS_DTYPE

__all__ = ["hermans_orientation", "azimuthal_peak_width", "estimate_director"]


def _check(chi, intensity, sigma):
    chi = np.asarray(chi, float)
    I = np.asarray(intensity, float)
    if I.ndim == 1:
        I = I[None]
    if chi.ndim != 1 or I.ndim != 2 or I.shape[1] != chi.size:
        raise SaxsInputError(f"intensity must be (frames, {chi.size}), got {np.shape(intensity)}",
                             parameter="intensity")
    if chi.size < 4:
        raise SaxsInputError("needs at least 4 chi bins", parameter="chi")
    d = np.diff(chi)
    if not np.allclose(d, d[0], rtol=1e-6, atol=1e-9) or d[0] <= 0:
        raise SaxsInputError("chi bins must be uniform and increasing", parameter="chi")
    S = None if sigma is None else np.broadcast_to(np.asarray(sigma, float), I.shape)
    return chi, I, S, float(d[0])


def _cum_abs_sin(phi):
    k = np.floor(phi / np.pi)
    return 2 * k + (1 - np.cos(phi - k * np.pi))


def _cum_cos2_abs_sin(phi):
    k = np.floor(phi / np.pi)
    return 2 * k / 3 + (1 - np.cos(phi - k * np.pi) ** 3) / 3


def estimate_director(chi, intensity) -> np.ndarray:
    """Direction (degrees, in (-90, 90]) of maximum intensity per frame, from the second
    circular moment ``0.5 atan2(sum I sin 2chi, sum I cos 2chi)`` (common practice).

    >>> chi = np.arange(-179.5, 180, 1.0)
    >>> estimate_director(chi, np.cos(np.radians(chi - 30))[None] ** 4).round(6).tolist()
    [30.0]
    """
    chi, I, _, _ = _check(chi, intensity, None)
    I = np.where(np.isfinite(I), I, 0.0)
    c = np.radians(chi)
    d = 0.5 * np.degrees(np.arctan2(I @ np.sin(2 * c), I @ np.cos(2 * c)))
    return np.where(d <= -90, d + 180, d)


def hermans_orientation(chi, intensity, sigma=None, *, director_deg=0.0, baseline=None) -> dict:
    """Hermans' orientation parameter and the 2D order parameter per frame (module doc).

    Parameters
    ----------
    chi : (n_chi,) bin centres, degrees, uniform.
    intensity, sigma : (n_frames, n_chi).
    director_deg : float, per-frame array, or ``"auto"`` (:func:`estimate_director`).
    baseline : None, ``"min"`` (subtract each frame's minimum: an isotropic part taken as
        background) or a per-frame array (or (frames, n_chi)) subtracted first.

    Returns
    -------
    dict of per-frame arrays: ``hermans`` (f) and ``hermans_sigma``, ``cos2`` (<cos^2 phi>),
    ``order_2d`` and ``order_2d_sigma``, ``director_deg``, ``status`` ("ok", "no_data").

    Examples
    --------
    >>> chi = np.arange(-175.0, 180, 10.0)
    >>> out = hermans_orientation(chi, np.ones((1, chi.size)), np.full((1, chi.size), 0.1))
    >>> round(float(out["hermans"][0]), 12), out["status"].tolist()   # isotropic
    (0.0, ['ok'])
    """
    chi, I, S, width = _check(chi, intensity, sigma)
    n_f = I.shape[0]
    if isinstance(director_deg, str):
        if director_deg != "auto":
            raise SaxsInputError(f"must be a number or 'auto', got {director_deg!r}",
                                 parameter="director_deg")
        director = estimate_director(chi, I)
    else:
        director = np.broadcast_to(np.asarray(director_deg, float), (n_f,)).copy()
    if baseline is not None:
        if isinstance(baseline, str):
            if baseline != "min":
                raise SaxsInputError(f"must be None, 'min' or an array, got {baseline!r}",
                                     parameter="baseline")
            fin = np.isfinite(I)
            b = np.where(fin.any(axis=1, keepdims=True),
                         np.min(np.where(fin, I, np.inf), axis=1, keepdims=True), 0.0)
        else:
            b = np.asarray(baseline, float)
            b = b[:, None] if b.ndim == 1 else b
        I = I - b
    good = np.isfinite(I) & (np.isfinite(S) if S is not None else True)
    I0 = np.where(good, I, 0.0)
    lo = np.radians(chi - width / 2)[None, :] - np.radians(director)[:, None]
    hi = lo + np.radians(width)
    ws = (_cum_abs_sin(hi) - _cum_abs_sin(lo)) * good
    wc = (_cum_cos2_abs_sin(hi) - _cum_cos2_abs_sin(lo)) * good
    w2 = 0.5 * (np.sin(2 * hi) - np.sin(2 * lo)) * good
    w1 = (hi - lo) * good
    D, N = np.sum(ws * I0, 1), np.sum(wc * I0, 1)
    D2, N2 = np.sum(w1 * I0, 1), np.sum(w2 * I0, 1)
    ok = good.any(axis=1) & (D > 0) & (D2 > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        cos2 = np.where(ok, N / D, np.nan)
        f = 1.5 * cos2 - 0.5
        s2d = np.where(ok, N2 / D2, np.nan)
        if S is not None:
            S0 = np.where(good, S, 0.0)
            df = 1.5 * (wc * D[:, None] - N[:, None] * ws) / D[:, None] ** 2
            ds = (w2 * D2[:, None] - N2[:, None] * w1) / D2[:, None] ** 2
            f_sig = np.where(ok, np.sqrt(np.sum((df * S0) ** 2, 1)), np.nan)
            s_sig = np.where(ok, np.sqrt(np.sum((ds * S0) ** 2, 1)), np.nan)
        else:
            f_sig = s_sig = np.full(n_f, np.nan)
    status = np.where(ok, "ok", "no_data").astype(STATUS_DTYPE)
    return {"hermans": f, "hermans_sigma": f_sig, "cos2": cos2, "order_2d": s2d, "order_2d_sigma": s_sig,
            "director_deg": director, "status": status}


def _model(chi, p, period):
    b, a, c0, w = (p[:, k:k + 1] for k in range(4))
    delta = (chi[None, :] - c0 + period / 2) % period - period / 2
    E = np.zeros((p.shape[0], chi.size))
    dc = np.zeros_like(E)
    dw = np.zeros_like(E)
    for m in (-1, 0, 1):
        x = delta + m * period
        e = np.exp(-0.5 * (x / w) ** 2)
        E += e
        dc += e * x / w**2
        dw += e * x**2 / w**3
    f = b + a * E
    J = np.stack([np.ones_like(E), E, a * dc, a * dw], axis=-1)
    return f, J


def azimuthal_peak_width(chi, intensity, sigma=None, *, symmetry: int = 2, center_deg=None,
                         max_iter: int = 100) -> dict:
    """Width (FWHM, degrees) of the azimuthal peak(s), by a Gaussian fit of every frame at once.

    The model is a constant plus Gaussians of one width repeating every ``360 / symmetry``
    degrees (``symmetry=2``: the two opposite arcs of a fibre reflection; ``1``: one peak),
    each with its neighbouring periodic images: ``I = b + a sum_m exp(-(chi - chi0 + m P)^2 /
    (2 w^2))``. A Levenberg-Marquardt iteration (Marquardt 1963, J. SIAM 11, 431) runs on
    all frames together (batched normal equations); the covariance is ``(J^T W J)^-1``
    scaled by the reduced chi-square (as scipy's ``curve_fit`` with ``absolute_sigma=False``).
    ``FWHM = 2 sqrt(2 ln 2) w`` (Gaussian, common practice).

    Returns
    -------
    dict of per-frame arrays: ``fwhm_deg``, ``fwhm_sigma``, ``center_deg``, ``center_sigma``,
    ``amplitude``, ``baseline``, ``chi2_reduced``, ``status`` ("ok", "no_data", "not_converged",
    "no_peaks": amplitude below 3 sigma, FWHM below one bin or above the repeat period; numbers
    kept).

    >>> chi = np.arange(-179.0, 180, 2.0)
    >>> I = 5 + 100 * np.exp(-0.5 * (((chi - 20 + 90) % 180 - 90) / 10.0) ** 2)
    >>> out = azimuthal_peak_width(chi, I[None])
    >>> round(float(out["fwhm_deg"][0]), 3), round(float(out["center_deg"][0]), 3)
    (23.548, 20.0)
    """
    chi, I, S, width = _check(chi, intensity, sigma)
    if int(symmetry) not in (1, 2, 3, 4, 6):
        raise SaxsInputError(f"must be 1, 2, 3, 4 or 6, got {symmetry}", parameter="symmetry")
    period = 360.0 / int(symmetry)
    n_f = I.shape[0]
    good = np.isfinite(I) & (np.isfinite(S) & (S > 0) if S is not None else True)
    wgt = np.where(good, 1.0 / S if S is not None else 1.0, 0.0)
    I0 = np.where(good, I, 0.0)
    n_good = good.sum(axis=1)
    any_good = good.any(axis=1)
    lo = np.where(any_good, np.min(np.where(good, I, np.inf), axis=1), np.nan)
    hi = np.where(any_good, np.max(np.where(good, I, -np.inf), axis=1), np.nan)
    if center_deg is None:
        c = np.radians(chi) * int(symmetry)
        c0 = np.degrees(np.arctan2(I0 @ np.sin(c), I0 @ np.cos(c))) / int(symmetry)
    else:
        c0 = np.broadcast_to(np.asarray(center_deg, float), (n_f,)).copy()
    above = (I0 > (lo + 0.5 * (hi - lo))[:, None]) & good
    frac = above.sum(1) / np.maximum(n_good, 1)
    w0 = np.clip(frac * period, 2 * width, period / 2) / 2.3548
    p = np.stack([np.nan_to_num(lo), np.nan_to_num(hi - lo), c0, w0], axis=1)
    lam = np.full(n_f, 1e-3)

    def cost_of(p_):
        f_, J_ = _model(chi, p_, period)
        r_ = (I0 - f_) * wgt
        return np.sum(r_**2, 1), r_, J_ * wgt[..., None]

    cost, r, J = cost_of(p)
    converged = np.zeros(n_f, bool)
    for _ in range(int(max_iter)):
        JTJ = np.einsum("fni,fnj->fij", J, J)
        g = np.einsum("fni,fn->fi", J, r)
        A = JTJ + lam[:, None, None] * (JTJ * np.eye(4)) + 1e-12 * np.eye(4)
        try:
            step = np.linalg.solve(A, g[..., None])[..., 0]
        except np.linalg.LinAlgError:
            step = np.stack([np.linalg.lstsq(a, b, rcond=None)[0] for a, b in zip(A, g)])
        trial = p + np.where(converged[:, None], 0.0, step)
        trial[:, 3] = np.abs(trial[:, 3])
        c_new, r_new, J_new = cost_of(trial)
        better = np.isfinite(c_new) & (c_new <= cost)
        small = np.abs(cost - c_new) <= 1e-10 * np.maximum(cost, 1e-300)
        p = np.where(better[:, None], trial, p)
        r = np.where(better[:, None], r_new, r)
        J = np.where(better[:, None, None], J_new, J)
        converged |= better & small
        cost = np.where(better, c_new, cost)
        lam = np.where(better, lam / 3, lam * 4)
        converged |= lam > 1e12
        if converged.all():
            break
    dof = np.maximum(n_good - 4, 1)
    chi2r = cost / dof
    JTJ = np.einsum("fni,fnj->fij", J, J)
    cov = np.linalg.pinv(JTJ) * chi2r[:, None, None]
    sd = np.sqrt(np.clip(np.diagonal(cov, axis1=1, axis2=2), 0, None))
    k = 2 * np.sqrt(2 * np.log(2))
    status = np.where(converged, "ok", "not_converged").astype(object)
    fw = k * p[:, 3]
    # not a resolved peak: negative or below 3 sigma, narrower than a bin, or wider than the
    # repeat period (then the "peak" is a slope of the baseline)
    weak = ~(p[:, 1] > 3 * sd[:, 1]) | ~(fw >= width) | ~(fw <= period)
    status[weak] = "no_peaks"
    status[n_good < 5] = "no_data"
    bad = status == "no_data"
    p[bad] = np.nan
    sd[bad] = np.nan
    center = (p[:, 2] + period / 2) % period - period / 2
    return {"fwhm_deg": k * p[:, 3], "fwhm_sigma": k * sd[:, 3], "center_deg": center,
            "center_sigma": sd[:, 2], "amplitude": p[:, 1], "baseline": p[:, 0], "chi2_reduced": chi2r,
            "status": status.astype(STATUS_DTYPE)}
