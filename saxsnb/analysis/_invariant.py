"""The invariant Q = int q^2 I dq with Guinier and Porod extrapolations, Porod volume and
surface (see saxsnb.analysis._porod for the Porod fits).
"""

from __future__ import annotations

import numpy as np
from scipy import special

from ..errors import SaxsInputError
from ._arrays import as_frames
from ._linear import index_range
from ._status import STATUS_DTYPE

__all__ = ["guinier_integrals", "invariant"]

_STATUS_DTYPE = STATUS_DTYPE


def guinier_integrals(a, s):
    """J2 = int_0^a q^2 e^(-s q^2) dq and J4 = int_0^a q^4 e^(-s q^2) dq (s >= 0).

    Closed forms: J2 = sqrt(pi) erf(sqrt(s) a) / (4 s^1.5) - a e^(-s a^2) / (2 s),
    J4 = 3 J2 / (2 s) - a^3 e^(-s a^2) / (2 s) (integration by parts); a Taylor
    series where s a^2 < 1e-2 avoids their cancellation.

    >>> j2, j4 = guinier_integrals(np.array([1.0]), np.array([0.0]))
    >>> float(j2[0]), float(j4[0])
    (0.3333333333333333, 0.2)
    """
    a = np.asarray(a, dtype=float)
    s = np.asarray(s, dtype=float)
    t = s * a * a
    small = t < 1e-2
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ss = np.where(small, 1.0, s)
        e = np.exp(-ss * a * a)
        j2 = np.sqrt(np.pi) * special.erf(np.sqrt(ss) * a) / (4 * ss**1.5) - a * e / (2 * ss)
        j4 = 3 * j2 / (2 * ss) - a**3 * e / (2 * ss)
    # series: int q^(2m) (1 - s q^2 + s^2 q^4 / 2 - s^3 q^6 / 6) dq
    a3, a5 = a**3, a**5
    j2s = a3 * (1 / 3 - t / 5 + t * t / 14 - t**3 / 54)
    j4s = a5 * (1 / 5 - t / 7 + t * t / 18 - t**3 / 66)
    return np.where(small, j2s, j2), np.where(small, j4s, j4)


def _trapezoid_weights(q, usable):
    """Weights of the trapezoidal rule over each row's usable points (others 0)."""
    n = usable.shape[1]
    idx = np.arange(n)[None, :]
    prev = np.maximum.accumulate(np.where(usable, idx, -1), axis=1)
    prev = np.concatenate([np.full((usable.shape[0], 1), -1), prev[:, :-1]], axis=1)
    nxt = np.minimum.accumulate(np.where(usable, idx, n)[:, ::-1], axis=1)[:, ::-1]
    nxt = np.concatenate([nxt[:, 1:], np.full((usable.shape[0], 1), n)], axis=1)
    qq = np.append(q, np.nan)
    q_prev = np.where(prev >= 0, qq[np.maximum(prev, 0)], q[None, :])
    q_next = np.where(nxt < n, qq[np.minimum(nxt, n)], q[None, :])
    return np.where(usable, 0.5 * (q_next - q_prev), 0.0)


#: largest share of the invariant the flat low-q estimate may carry (no Guinier result)
_LOW_ESTIMATE_MAX = 0.01


def invariant(
    q,
    intensity,
    sigma=None,
    *,
    rg,
    i0,
    porod_constant,
    rg_sigma=0.0,
    i0_sigma=0.0,
    porod_constant_sigma=0.0,
    background=0.0,
    background_sigma=0.0,
    porod_background_cov=0.0,
    q_range=None,
    volume_fraction=None,
) -> dict:
    """Scattering invariant Q = int_0^inf q^2 I dq with its extrapolations, per frame.

    Parameters
    ----------
    q : array (n_q,), 1/nm
    intensity, sigma : arrays (n_frames, n_q) or (n_q,)
    rg, i0 : arrays (n_frames,)
        Guinier Rg (nm) and I(0) for the extrapolation from q = 0 to the first point.
    porod_constant : array (n_frames,)
        Kp for the tail Kp / q_last beyond the last point.
    rg_sigma, i0_sigma, porod_constant_sigma, background_sigma, porod_background_cov
        Uncertainties (0 when unknown); Rg and I(0) are treated as independent.
    background : float or array (n_frames,)
        Flat background subtracted from the measured part.
    q_range : (q_min, q_max), optional
        The measured part integrates the usable points inside it (default: all).
    volume_fraction : float or array (n_frames,), optional
        phi, for ``specific_surface``; without it, ``specific_surface`` is NaN and
        ``surface_to_volume`` uses the dilute limit phi -> 0.

    Returns
    -------
    dict of arrays (n_frames,): ``invariant`` ([I] nm^-3) = ``invariant_low`` +
    ``invariant_measured`` + ``invariant_high``, each with ``_sigma``;
    ``porod_volume`` (nm^3, 2 pi^2 I0 / Q), ``surface_to_volume`` (1/nm,
    pi (1 - phi) Kp / Q), ``specific_surface`` (1/nm, pi phi (1 - phi) Kp / Q), each
    with ``_sigma``; ``low_fraction``, ``high_fraction`` (shares of Q that are
    extrapolated: large values mean a model-dependent invariant); ``status``.

    Notes
    -----
    Convention Q = int_0^inf q^2 I(q) dq (Porod 1951; Glatter & Kratky 1982); some
    texts multiply by 4 pi or divide by 2 pi^2. Low q: I0 exp(-q^2 Rg^2 / 3) integrated
    in closed form (:func:`guinier_integrals`) from 0 to the first usable point;
    measured part: trapezoidal rule over the usable points of I - B; high q: Kp / q_last
    (Porod law). Uncertainties: first-order propagation with the point sigmas
    independent; Rg, I(0) independent; B and Kp with their covariance;
    ``porod_volume`` and the surfaces treat I(0), Kp and Q as independent, which
    overstates their sigma slightly (they are positively correlated through the
    extrapolations).

    Examples
    --------
    >>> q = np.linspace(0.01, 40.0, 20001)
    >>> I = np.exp(-q**2 / 3)                    # Guinier form, Rg = 1, I0 = 1
    >>> r = invariant(q, I, rg=1.0, i0=1.0, porod_constant=0.0)
    >>> round(float(r["invariant"][0]), 5), round(float(3 * np.sqrt(3 * np.pi) / 4), 5)
    (2.30249, 2.30249)
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    F = I.shape[0]

    def per_frame(v):
        return np.broadcast_to(np.asarray(v, dtype=float), (F,)).astype(float)

    rg, i0, Kp = per_frame(rg), per_frame(i0), per_frame(porod_constant)
    rg_s, i0_s, Kp_s = per_frame(rg_sigma), per_frame(i0_sigma), per_frame(porod_constant_sigma)
    B, B_s, cov_BK = per_frame(background), per_frame(background_sigma), per_frame(porod_background_cov)
    finite = np.isfinite(I) & (np.isfinite(S) if S is not None else True)
    if q_range is not None:
        start, stop = index_range(q, q_range, F)
        cols = np.arange(q.size)[None, :]
        finite = finite & (cols >= start[:, None]) & (cols < stop[:, None])
    usable = finite
    wts = _trapezoid_weights(q, usable)
    q2 = (q * q)[None, :]
    f = np.where(usable, q2 * (I - B[:, None]), 0.0)
    measured = (wts * f).sum(-1)
    var_meas = (wts * q2 * np.where(usable, S, 0.0)) ** 2 if S is not None else np.zeros_like(wts)
    var_meas = var_meas.sum(-1)
    dQ_dB = -(wts * q2).sum(-1)
    has = usable.any(-1)
    q_first = np.where(has, q[np.argmax(usable, -1)], np.nan)
    q_last = np.where(has, q[q.size - 1 - np.argmax(usable[:, ::-1], -1)], np.nan)
    s = rg * rg / 3.0
    j2, j4 = guinier_integrals(q_first, s)
    low = i0 * j2
    var_low = (j2 * i0_s) ** 2 + (i0 * j4 * 2.0 * rg / 3.0 * rg_s) ** 2
    # without a Guinier result: the low-q part as a flat extrapolation at the mean of the
    # first three measured points, q_first^3 I / 3, with 100 % uncertainty; kept (status
    # "low_q_estimated") when it is at most _LOW_ESTIMATE_MAX of the total
    no_g = ~np.isfinite(low) & usable.any(-1)
    if no_g.any():
        first3 = usable & (np.cumsum(usable, -1) <= 3)
        with np.errstate(divide="ignore", invalid="ignore"):
            i_first = np.where(first3, I - B[:, None], 0.0).sum(-1) / first3.sum(-1)
            est = np.maximum(i_first, 0.0) * q_first**3 / 3.0
        low = np.where(no_g, est, low)
        var_low = np.where(no_g, est * est, var_low)
    with np.errstate(divide="ignore", invalid="ignore"):
        high = Kp / q_last
        dQ_dK = 1.0 / q_last
    total = low + measured + high
    var_total = var_low + var_meas + (dQ_dB * B_s) ** 2 + (dQ_dK * Kp_s) ** 2 + 2 * dQ_dB * dQ_dK * cov_BK
    var_high = (dQ_dK * Kp_s) ** 2
    var_meas_b = var_meas + (dQ_dB * B_s) ** 2
    Q_s = np.sqrt(np.maximum(var_total, 0.0))
    if volume_fraction is None:
        phi = np.zeros(F)
        spec_known = np.zeros(F, dtype=bool)
    else:
        phi = per_frame(volume_fraction)
        spec_known = np.isfinite(phi)
        if np.any((phi < 0) | (phi >= 1)):
            raise SaxsInputError("volume_fraction must lie in [0, 1)", parameter="volume_fraction")
    with np.errstate(divide="ignore", invalid="ignore"):
        rel_Q = Q_s / total
        vol = 2.0 * np.pi**2 * i0 / total
        vol_s = np.abs(vol) * np.sqrt((i0_s / i0) ** 2 + rel_Q**2)
        s2v = np.pi * (1.0 - phi) * Kp / total
        rel_K = np.where(Kp != 0, Kp_s / np.abs(Kp), np.nan)
        s2v_s = np.abs(s2v) * np.sqrt(rel_K**2 + rel_Q**2)
        spec = np.where(spec_known, phi * s2v, np.nan)
        spec_s = np.where(spec_known, phi * s2v_s, np.nan)
        low_frac = low / total
        high_frac = high / total
    status = np.full(F, "ok", dtype=_STATUS_DTYPE)
    status[~np.isfinite(low)] = "no_guinier"
    with np.errstate(invalid="ignore"):
        status[no_g & np.isfinite(low) & ~(low_frac <= _LOW_ESTIMATE_MAX)] = "no_guinier"
    status[no_g & (status == "ok")] = "low_q_estimated"
    status[~np.isfinite(high)] = "no_porod_constant"
    status[~has] = "no_data"
    good = (status == "ok") | (status == "low_q_estimated")
    nan = np.nan

    def keep(a):
        return np.where(good, a, nan)

    return {
        "invariant": keep(total),
        "invariant_sigma": keep(Q_s),
        "invariant_low": keep(low),
        "invariant_low_sigma": keep(np.sqrt(var_low)),
        "invariant_measured": keep(measured),
        "invariant_measured_sigma": keep(np.sqrt(var_meas_b)),
        "invariant_high": keep(high),
        "invariant_high_sigma": keep(np.sqrt(var_high)),
        "low_fraction": keep(low_frac),
        "high_fraction": keep(high_frac),
        "porod_volume": keep(vol),
        "porod_volume_sigma": keep(vol_s),
        "surface_to_volume": keep(s2v),
        "surface_to_volume_sigma": keep(s2v_s),
        "specific_surface": keep(spec),
        "specific_surface_sigma": keep(spec_s),
        "q_min": keep(q_first),
        "q_max": keep(q_last),
        "status": status,
    }
