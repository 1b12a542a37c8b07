"""Calibration: absolute intensity from water or a reference curve, q from a lamellar
powder standard.

Absolute scale from water (Orthaber, Bergmann & Glatter 2000, J. Appl. Cryst. 33, 218):
the forward scattering of a liquid is set by its density fluctuations,
``dSigma/dOmega(0) = r_e^2 rho_e^2 k_B T kappa_T``, with ``rho_e`` the electron density
and ``kappa_T`` the isothermal compressibility; for water it is flat in q over the SAXS
range. The density and compressibility of water as functions of temperature are Kell's
(1975, J. Chem. Eng. Data 20, 97) rational fits (IPTS-68, 0-100 degC).

q calibration from a lamellar powder standard: the orders ``q_n = 2 pi n / d`` of silver
behenate (d001 = 5.8380 nm, Huang, Toraya, Blanton & Wu 1993, J. Appl. Cryst. 26, 180).
"""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import SaxsFitError, SaxsInputError

__all__ = ["water_cross_section", "calibration_factor", "calibrate_q", "SILVER_BEHENATE_D"]

#: d001 of silver behenate in nm (Huang, Toraya, Blanton & Wu 1993, J. Appl. Cryst. 26, 180).
SILVER_BEHENATE_D = 5.8380

# CODATA 2018 exact / recommended values
_R_E = 2.8179403262e-15  # classical electron radius, m
_K_B = 1.380649e-23  # J/K
_N_A = 6.02214076e23  # 1/mol
_M_WATER = 18.01528e-3  # kg/mol (IUPAC atomic weights)
_ELECTRONS = 10  # electrons per H2O molecule


def _kell_density(t):
    """Density of water, kg/m^3, at t degC (Kell 1975, J. Chem. Eng. Data 20, 97, eq. 16;
    coefficients from memory; 998.204 at 20 degC, 999.972 at 4 degC)."""
    num = (999.83952 + 16.945176 * t - 7.9870401e-3 * t**2 - 46.170461e-6 * t**3
           + 105.56302e-9 * t**4 - 280.54253e-12 * t**5)
    return num / (1 + 16.879850e-3 * t)


def _kell_compressibility(t):
    """Isothermal compressibility of water, 1/Pa, at t degC (Kell 1975, J. Chem. Eng. Data
    20, 97; coefficients from memory, in 1e-6/bar; 45.89e-6/bar at 20 degC)."""
    num = (50.88496 + 0.6163813 * t + 1.459187e-3 * t**2 + 20.08438e-6 * t**3
           - 58.47727e-9 * t**4 + 410.4110e-12 * t**5)
    return num / (1 + 19.67348e-3 * t) * 1e-6 / 1e5


def water_cross_section(temperature_c=20.0):
    """Differential scattering cross-section of water at q -> 0, in 1/cm.

    Parameters
    ----------
    temperature_c : float or array, degC, 0..100

    Returns
    -------
    float or array, 1/cm: ``r_e^2 rho_e^2 k_B T kappa_T``.

    Notes
    -----
    Orthaber, Bergmann & Glatter (2000, J. Appl. Cryst. 33, 218) give 0.01632 1/cm at
    20 degC; this formula with Kell's (1975, J. Chem. Eng. Data 20, 97) density and
    compressibility gives 0.01642 1/cm (0.6 % higher; the difference is in the
    property values used). The value falls by about 5 % from 20 to 40 degC, following
    ``T kappa_T rho^2``.

    Examples
    --------
    >>> round(float(water_cross_section(20.0)), 5)
    0.01642
    """
    t = np.asarray(temperature_c, dtype=float)
    if not np.all(np.isfinite(t)) or np.any((t < 0) | (t > 100)):
        raise SaxsInputError(f"temperature_c must be within 0..100 degC (Kell 1975 range), "
                             f"got {temperature_c!r}", parameter="temperature")
    rho_e = _kell_density(t) / _M_WATER * _N_A * _ELECTRONS  # electrons / m^3
    value = _R_E**2 * rho_e**2 * _K_B * (t + 273.15) * _kell_compressibility(t)  # 1/m
    value = value / 100.0  # 1/cm
    return float(value) if np.ndim(value) == 0 else value


def calibration_factor(q, measured, measured_sigma, known, known_sigma=None, *, q_range=None) -> dict:
    """Factor k with ``known = k * measured`` on a q range, and its uncertainty.

    Parameters
    ----------
    q : array (n_q,)
    measured, measured_sigma : arrays (n_q,) or (n_frames, n_q), averaged over frames
        The standard as measured (water after empty-cell subtraction, or a reference
        sample), in the units of the series.
    known : float or array (n_q,)
        Its known intensity in 1/cm (a constant for water).
    known_sigma : float or array, optional
    q_range : (q_min, q_max), optional; default the whole curve.

    Returns
    -------
    dict with ``factor``, ``factor_sigma`` (1/cm per unit of the series) and
    ``n_points``.

    Notes
    -----
    ``k = sum w K M / sum w M^2`` (weighted least squares through the origin, common
    practice) with ``w = 1 / (k0^2 sigma_M^2 + sigma_K^2)`` from a first estimate k0;
    ``factor_sigma`` includes the scatter about the fit (reduced chi-square > 1).

    Examples
    --------
    >>> q = np.linspace(0.5, 2.0, 20)
    >>> out = calibration_factor(q, np.full(20, 2.0), np.full(20, 0.02), 0.016)
    >>> round(float(out["factor"]), 6)
    0.008
    """
    q = np.asarray(q, dtype=float)
    M = np.asarray(measured, dtype=float)
    MS = np.asarray(measured_sigma, dtype=float)
    if M.ndim == 2:
        ok = np.isfinite(M) & np.isfinite(MS)
        k = ok.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            M = np.where(k > 0, np.where(ok, M, 0).sum(axis=0) / k, np.nan)
            MS = np.where(k > 0, np.sqrt(np.where(ok, MS**2, 0).sum(axis=0)) / k, np.nan)
    K = np.broadcast_to(np.asarray(known, dtype=float), M.shape)
    KS = np.broadcast_to(np.asarray(0.0 if known_sigma is None else known_sigma, dtype=float), M.shape)
    inr = np.ones(q.shape, bool) if q_range is None else (q >= q_range[0]) & (q <= q_range[1])
    ok = inr & np.isfinite(M) & np.isfinite(MS) & np.isfinite(K) & (MS > 0)
    n = int(ok.sum())
    if n < 3:
        raise SaxsInputError(f"{n} usable points of the reference in q_range; at least 3 are needed",
                             parameter="q_range")
    m, ms, kk, ks = M[ok], MS[ok], K[ok], KS[ok]
    if np.sum(m) <= 0:
        raise SaxsInputError("the measured reference is not positive on q_range (check the empty-cell "
                             "subtraction)", parameter="reference")
    k0 = np.sum(kk) / np.sum(m)
    for _ in range(2):
        w = 1.0 / (k0**2 * ms**2 + ks**2)
        smm = np.sum(w * m * m)
        k0 = np.sum(w * kk * m) / smm
    chi2 = np.sum(w * (kk - k0 * m) ** 2) / max(n - 1, 1)
    return {"factor": float(k0), "factor_sigma": float(np.sqrt(max(chi2, 1.0) / smm)), "n_points": n}


def _find_peak_positions(q, I, S, min_prominence):
    """Candidate peak maxima refined by a Gaussian + line fit: (positions, sigmas)."""
    from scipy.optimize import OptimizeWarning, curve_fit
    from scipy.signal import find_peaks

    ok = np.isfinite(I) & (I > 0)
    qv, y = q[ok], I[ok]
    s = S[ok] if S is not None else None
    ly = np.log(y)
    idx, props = find_peaks(ly, prominence=min_prominence)
    pos, err = [], []
    for i, left, right in zip(idx, props["left_bases"], props["right_bases"]):
        # a window of a few points on either side of the maximum, within its bases
        half = max(3, min(i - left, right - i) // 2)
        a, b = max(i - half, 0), min(i + half + 1, qv.size)
        if b - a < 5:
            continue
        x, yy = qv[a:b], y[a:b]
        ss = None if s is None else s[a:b]

        def model(x, h, c, w, b0, b1, x0=qv[i]):
            return h * np.exp(-0.5 * ((x - c) / w) ** 2) + b0 + b1 * (x - x0)

        p0 = [y[i] - min(yy), qv[i], max((x[-1] - x[0]) / 6, 1e-6), min(yy), 0.0]
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", OptimizeWarning)  # exact data: no covariance
                popt, pcov = curve_fit(model, x, yy, p0=p0, sigma=ss, absolute_sigma=ss is not None,
                                       maxfev=4000)
        except (RuntimeError, ValueError):
            continue
        c = popt[1]
        # no covariance (noise-free data): a nominal 1 % of the grid step
        dc = np.sqrt(abs(pcov[1, 1])) if np.isfinite(pcov[1, 1]) else 0.01 * (x[1] - x[0])
        dc = max(dc, 1e-6 * abs(c))
        if x[0] < c < x[-1] and popt[0] > 0:
            pos.append(c)
            err.append(dc)
    return np.asarray(pos), np.asarray(err)


def calibrate_q(q, intensity, sigma=None, *, d_spacing: float = SILVER_BEHENATE_D, orders=None,
                wavelength=None, distance=None, min_prominence: float = 0.3, tolerance: float = 0.02) -> dict:
    """Fit the orders of a lamellar powder standard: the factor that corrects q.

    Parameters
    ----------
    q : array (n_q,), 1/nm as measured (with the assumed geometry)
    intensity, sigma : arrays (n_q,) (a 2-D input is averaged over frames first)
    d_spacing : float, nm
        Lamellar period of the standard (silver behenate 5.8380 nm, Huang et al. 1993).
    orders : sequence of int, optional
        The orders of the peaks found, in increasing q; default found from the peaks:
        the fundamental spacing explaining most peaks as integer multiples.
    wavelength : float, nm, optional; distance : float, optional (any length unit)
        With both, the corrected sample-detector distance is returned (flat detector,
        ``tan(2 theta) = r / L``, ``q = 4 pi sin(theta) / lambda``).
    min_prominence : float
        Peak prominence in ln I for detection.
    tolerance : float
        Largest relative distance of a peak from its integer order to count as an order.

    Returns
    -------
    dict with ``q_scale`` (true q = q_scale x measured q) and ``q_scale_sigma``,
    ``orders`` and ``positions`` (measured, 1/nm) of the fitted peaks, ``residuals``
    (relative), and with the geometry ``distance`` (corrected) and ``distance_sigma``.

    Notes
    -----
    Peak centres from a Gaussian plus linear background fitted around each maximum
    (scipy.optimize.curve_fit); ``q_meas,n = n (2 pi / d) / q_scale`` fitted through the
    origin, weighted by the centre uncertainties; ``q_scale_sigma`` includes the scatter
    between orders. A wrong distance is not exactly a q scale at wide angles; for SAXS
    angles the difference is far below the peak precision.

    Raises SaxsFitError when no peak is found or fewer than two peaks fit integer orders.

    Examples
    --------
    >>> q = np.linspace(0.5, 6.0, 1100)
    >>> q1 = 2 * np.pi / 5.838 / 1.03
    >>> I = 1 + sum(10 / n * np.exp(-0.5 * ((q - n * q1) / 0.02) ** 2) for n in range(1, 6))
    >>> round(calibrate_q(q, I)["q_scale"], 4)
    1.03
    """
    q = np.asarray(q, dtype=float)
    I = np.asarray(intensity, dtype=float)
    S = None if sigma is None else np.asarray(sigma, dtype=float)
    if I.ndim == 2:
        I = np.nanmean(I, axis=0)
        S = None if S is None else np.sqrt(np.nansum(S**2, axis=0)) / np.sum(np.isfinite(S), axis=0)
    if I.shape != q.shape:
        raise SaxsInputError(f"intensity has shape {I.shape}; expected {q.shape}", parameter="standard")
    if not (np.isfinite(d_spacing) and d_spacing > 0):
        raise SaxsInputError(f"d_spacing must be a positive length in nm, got {d_spacing!r}",
                             parameter="d_spacing")
    pos, err = _find_peak_positions(q, I, S, min_prominence)
    if pos.size == 0:
        raise SaxsFitError(f"no peaks found in the standard (prominence {min_prominence} in ln I)",
                           parameter="standard")
    order_ = np.argsort(pos)
    pos, err = pos[order_], err[order_]
    if orders is not None:
        n = np.asarray(orders, dtype=float)
        if n.size > pos.size:
            raise SaxsFitError(f"{n.size} orders given but only {pos.size} peaks found", parameter="orders")
        if n.size < 2:
            raise SaxsInputError("give at least two orders", parameter="orders")
        pos, err = pos[: n.size], err[: n.size]
        base = pos / n
        rel = np.abs(base / np.median(base) - 1)
        if np.any(rel > tolerance):
            raise SaxsFitError(f"the peaks at {np.round(pos, 4).tolist()} 1/nm do not fit orders "
                               f"{n.astype(int).tolist()} (spread {rel.max():.1%})", parameter="orders")
        keep = np.ones(pos.size, bool)
    else:
        best = None
        for a in range(min(pos.size, 4)):
            for m in range(1, 5):
                base = pos[a] / m
                nn = np.round(pos / base)
                good = (nn >= 1) & (np.abs(pos / (np.maximum(nn, 1) * base) - 1) < tolerance)
                # more orders explained first, then the larger spacing (fewer missing orders)
                key = (int(good.sum()), base)
                if best is None or key > best[0]:
                    best = (key, nn, good)
        (count, _), n, keep = best
        if count < 2:
            raise SaxsFitError(f"the {pos.size} peak(s) at {np.round(pos, 4).tolist()} 1/nm do not fit "
                               "integer orders of one spacing", parameter="orders")
    n, pos, err = n[keep], pos[keep], err[keep]
    w = 1.0 / np.maximum(err, 1e-12) ** 2
    a = np.sum(w * n * pos) / np.sum(w * n * n)  # measured q per order
    resid = pos - a * n
    chi2 = np.sum(w * resid**2) / max(n.size - 1, 1)
    a_sigma = np.sqrt(max(chi2, 1.0) / np.sum(w * n * n))
    q1_true = 2 * np.pi / d_spacing
    out = {
        "q_scale": float(q1_true / a),
        "q_scale_sigma": float(q1_true / a**2 * a_sigma),
        "orders": n.astype(np.int64),
        "positions": pos,
        "residuals": resid / (a * n),
    }
    if wavelength is not None and distance is not None:
        lam, L = float(wavelength), float(distance)
        if not (lam > 0 and L > 0):
            raise SaxsInputError("wavelength and distance must be positive", parameter="distance")
        two_theta = 2 * np.arcsin(np.clip(pos * lam / (4 * np.pi), -1, 1))
        r = L * np.tan(two_theta)
        q_true = out["q_scale"] * pos
        L_true = r / np.tan(2 * np.arcsin(np.clip(q_true * lam / (4 * np.pi), -1, 1)))
        out["distance"] = float(np.sum(w * L_true) / np.sum(w))
        out["distance_sigma"] = float(out["distance"] * out["q_scale_sigma"] / out["q_scale"])
    return out
