"""Closed-form and numerically averaged scattering curves for the linear-region tests.

Every formula names its source (see docs/REFERENCES.md). Orientation averages
are computed here with scipy / numpy quadrature, independently of saxsnb.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate, special


def sphere(x):
    """Sphere form factor P(x), x = qR (Guinier & Fournet 1955); P(0) = 1."""
    x = np.asarray(x, dtype=float)
    out = np.ones_like(x)
    m = x > 1e-4
    xm = x[m]
    out[m] = (3.0 * (np.sin(xm) - xm * np.cos(xm)) / xm**3) ** 2
    small = ~m
    out[small] = 1.0 - x[small] ** 2 / 5.0  # series, |x| < 1e-4
    return out


def debye(x):
    """Gaussian chain P = 2 (e^-x + x - 1) / x^2, x = (q Rg)^2 (Debye 1947)."""
    x = np.asarray(x, dtype=float)
    out = np.ones_like(x)
    m = x > 1e-6
    out[m] = 2.0 * (np.expm1(-x[m]) + x[m]) / x[m] ** 2
    return out


def thin_rod(x):
    """Thin rod P = 2 Si(x)/x - 4 sin^2(x/2)/x^2, x = qL (Neugebauer 1943)."""
    x = np.asarray(x, dtype=float)
    si, _ = special.sici(x)
    return 2.0 * si / x - 4.0 * np.sin(x / 2.0) ** 2 / x**2


def schulz_spheres(q, radius_mean, z, n=801):
    """Schulz-distributed spheres, intensity weighted by V^2, normalised to 1 at q = 0
    (Schulz 1939; Kotlarchyk & Chen 1983), averaged with the trapezoidal rule."""
    s = 1.0 / np.sqrt(z + 1.0)
    R = np.linspace(max(radius_mean * (1 - 8 * s), 1e-3), radius_mean * (1 + 12 * s), n)
    logp = (
        (z + 1) * np.log((z + 1) / radius_mean)
        + z * np.log(R)
        - (z + 1) * R / radius_mean
        - special.gammaln(z + 1)
    )
    wgt = np.exp(logp) * R**6
    I = integrate.trapezoid(wgt[None, :] * sphere(np.outer(q, R)), R, axis=1)
    return I / integrate.trapezoid(wgt, R)


def rg_schulz(radius_mean, z):
    """Apparent Guinier Rg of Schulz spheres: sqrt(3/5 Rm^2 (z+7)(z+8)/(z+1)^2)
    (Kotlarchyk & Chen 1983, J. Chem. Phys. 79, 2461)."""
    return np.sqrt(0.6 * radius_mean**2 * (z + 7) * (z + 8) / (z + 1) ** 2)


def _disc_amp(x):
    x = np.asarray(x, dtype=float)
    out = np.ones_like(x)
    m = x > 1e-8
    out[m] = 2.0 * special.j1(x[m]) / x[m]
    return out


def _sinc(x):
    return np.sinc(np.asarray(x) / np.pi)  # sin(x)/x


def cylinder(q, radius, length, n=40001):
    """Randomly oriented solid cylinder, P(q) normalised to 1 at q = 0 (Pedersen 1997):
    P = int_0^1 [2 J1(qR sqrt(1-u^2)) / (qR sqrt(1-u^2))]^2 sinc^2(q L u / 2) du,
    u the cosine between q and the axis; Simpson's rule on a fine grid in u."""
    u = np.linspace(0.0, 1.0, n)
    out = np.empty(len(q))
    for i, qi in enumerate(q):  # test helper: q by q keeps the memory small
        f = _disc_amp(qi * radius * np.sqrt(1 - u * u)) ** 2 * _sinc(qi * length * u / 2) ** 2
        out[i] = integrate.simpson(f, x=u)
    return out


def flat_disc(q, radius, thickness, n=40001):
    """Randomly oriented flat disc (a cylinder much wider than thick), P(q) from the
    same orientation average with theta the angle between q and the disc normal:
    P = int_0^(pi/2) sinc^2(q T cos(theta) / 2) [2 J1(qR sin theta)/(qR sin theta)]^2
    sin(theta) d theta; Simpson's rule on a fine grid in theta."""
    th = np.linspace(0.0, np.pi / 2, n)
    out = np.empty(len(q))
    for i, qi in enumerate(q):
        f = _sinc(qi * thickness * np.cos(th) / 2) ** 2 * _disc_amp(qi * radius * np.sin(th)) ** 2
        f *= np.sin(th)
        out[i] = integrate.simpson(f, x=th)
    return out
