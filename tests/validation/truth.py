"""Independent truth for the validation suite (issue 15).

Written from the closed forms and space-group conditions in docs/REFERENCES.md,
without reading the implementation: every curve here comes from a formula, a
numerical quadrature (orientation, size distribution) or a brute-force Debye sum on a
random point cloud. Nothing in this module imports saxsnb.

Units: q in 1/nm, sizes in nm.
"""

from __future__ import annotations

import itertools

import numpy as np
from scipy import special
from scipy.spatial.distance import pdist

# --------------------------------------------------------------------------- particles


def sphere_amplitude(x):
    """3 (sin x - x cos x) / x^3, the sphere amplitude (Guinier & Fournet 1955); 1 at x = 0."""
    x = np.asarray(x, dtype=float)
    out = np.ones_like(x)
    big = np.abs(x) > 1e-3
    xb = x[big]
    out[big] = 3.0 * (np.sin(xb) - xb * np.cos(xb)) / xb**3
    xs = x[~big]
    out[~big] = 1.0 - xs**2 / 10.0 + xs**4 / 280.0  # Taylor series of the same
    return out


def sphere(q, R):
    """I(q) / I(0) of a homogeneous sphere; Rg^2 = 3/5 R^2 (docs/REFERENCES.md, der)."""
    return sphere_amplitude(q * R) ** 2, np.sqrt(0.6) * R


def schulz_spheres(q, Rm, z, n_nodes=400):
    """Schulz-distributed spheres (Schulz 1939; Kotlarchyk & Chen 1983), by quadrature
    over R weighted by number x V^2. Apparent Guinier Rg^2 = 3/5 Rm^2 (z+7)(z+8)/(z+1)^2."""
    # Schulz number density p(R) ~ R^z exp(-(z+1) R / Rm); the integrand R^(z+6) e^(...) is
    # a gamma density: integrate on a grid covering its bulk
    shape = z + 7.0
    scale = Rm / (z + 1.0)
    lo = max(0.0, (shape - 12 * np.sqrt(shape)) * scale)
    hi = (shape + 14 * np.sqrt(shape)) * scale
    R = np.linspace(max(lo, 1e-6 * Rm), hi, n_nodes)
    logw = z * np.log(R) - (z + 1.0) * R / Rm + 6.0 * np.log(R)
    w = np.exp(logw - logw.max())
    w /= np.trapezoid(w, R)
    I = np.trapezoid(w[None, :] * sphere_amplitude(q[:, None] * R[None, :]) ** 2, R, axis=1)
    rg = np.sqrt(0.6) * Rm * np.sqrt((z + 7.0) * (z + 8.0)) / (z + 1.0)
    return I, rg


def _gauss_legendre_01(n):
    x, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (x + 1.0), 0.5 * w


def ellipsoid(q, a, c, n_mu=200):
    """Ellipsoid of revolution, semi-axes a, a, c, orientation-averaged by Gauss-Legendre
    quadrature over mu = cos(angle) (Pedersen 1997); Rg^2 = (2 a^2 + c^2) / 5."""
    mu, w = _gauss_legendre_01(n_mu)
    r = np.sqrt(a**2 * (1 - mu**2) + c**2 * mu**2)
    I = (sphere_amplitude(q[:, None] * r[None, :]) ** 2 * w[None, :]).sum(1)
    return I, np.sqrt((2 * a**2 + c**2) / 5.0)


def _j1x(x):
    """2 J1(x) / x, 1 at 0."""
    x = np.asarray(x, dtype=float)
    out = np.ones_like(x)
    big = np.abs(x) > 1e-6
    out[big] = 2.0 * special.j1(x[big]) / x[big]
    return out


def cylinder(q, R, L, n_mu=400):
    """Solid cylinder of radius R and length L, orientation-averaged by Gauss-Legendre
    quadrature (Pedersen 1997): F = 2 J1(qR sin) / (qR sin) * sinc(q L cos / 2).
    Rg^2 = R^2/2 + L^2/12; cross-section Rc^2 = R^2/2; sheet Rt^2 = L^2/12."""
    mu, w = _gauss_legendre_01(n_mu)
    s = np.sqrt(1 - mu**2)
    a = _j1x(q[:, None] * R * s[None, :])
    b = np.sinc(q[:, None] * L * mu[None, :] / (2 * np.pi))  # np.sinc(x) = sin(pi x)/(pi x)
    I = ((a * b) ** 2 * w[None, :]).sum(1)
    return I, np.sqrt(R**2 / 2 + L**2 / 12)


def gaussian_chain(q, rg):
    """Debye (1947) function 2 (e^-x + x - 1) / x^2, x = (q Rg)^2."""
    x = (q * rg) ** 2
    out = np.ones_like(x)
    big = x > 1e-4
    xb = x[big]
    out[big] = 2.0 * (np.expm1(-xb) + xb) / xb**2
    out[~big] = 1.0 - x[~big] / 3.0
    return out, rg


def vesicle(q, R_out, thickness):
    """Hollow spherical shell (unilamellar vesicle): F ~ V_o Phi(q R_o) - V_i Phi(q R_i);
    Rg^2 = 3/5 (R_o^5 - R_i^5) / (R_o^3 - R_i^3) (moments of the shell, der)."""
    Ri = R_out - thickness
    F = R_out**3 * sphere_amplitude(q * R_out) - Ri**3 * sphere_amplitude(q * Ri)
    F0 = R_out**3 - Ri**3
    rg = np.sqrt(0.6 * (R_out**5 - Ri**5) / (R_out**3 - Ri**3))
    return (F / F0) ** 2, rg


def schulz_vesicles(q, R_out, thickness, z, n_nodes=200):
    """Vesicles whose outer radius follows a Schulz distribution (number x V_shell^2 weight)."""
    scale = R_out / (z + 1.0)
    spread = np.sqrt(z + 1) * scale
    R = np.linspace(max(thickness * 1.05, R_out - 8 * spread), R_out + 10 * spread, n_nodes)
    p = np.exp(z * np.log(R) - (z + 1) * R / R_out)
    Ri = R - thickness
    amp = R**3 * sphere_amplitude(q[:, None] * R) - Ri**3 * sphere_amplitude(q[:, None] * Ri)
    I = np.trapezoid(p[None, :] * amp**2, R, axis=1)
    # apparent Rg from the same weights: Rg^2 = 3/5 <sum c V R^2 x F0> / <F0^2>
    F0 = R**3 - Ri**3
    m2 = (R**5 - Ri**5) * 0.6
    rg = np.sqrt(np.trapezoid(p * F0 * m2, R) / np.trapezoid(p * F0**2, R))
    return I / np.trapezoid(p * F0**2, R), rg


def core_shell(q, R_core, R_total, d_core, d_shell):
    """Core-shell sphere (Pedersen 1997): F = (d_c - d_s) V_c Phi(q R_c) + d_s V_t Phi(q R_t);
    Rg^2 = 3/5 sum c_i R_i^5 / sum c_i R_i^3 with c = (d_c - d_s, d_s) (der)."""
    c1, c2 = d_core - d_shell, d_shell
    F = c1 * R_core**3 * sphere_amplitude(q * R_core) + c2 * R_total**3 * sphere_amplitude(q * R_total)
    F0 = c1 * R_core**3 + c2 * R_total**3
    rg = np.sqrt(0.6 * (c1 * R_core**5 + c2 * R_total**5) / F0)
    return (F / F0) ** 2, rg


def point_cloud_ellipsoid(n, axes, seed):
    """n random points filling an ellipsoid with semi-axes ``axes`` (rejection sampling)."""
    rng = np.random.default_rng(seed)
    pts = []
    while sum(len(p) for p in pts) < n:
        u = rng.uniform(-1, 1, size=(4 * n, 3))
        pts.append(u[(u**2).sum(1) <= 1.0])
    p = np.concatenate(pts)[:n] * np.asarray(axes, dtype=float)
    return p


def debye_curve(q, points):
    """Brute-force Debye (1915) sum I(q) = sum_ij sin(q r_ij) / (q r_ij) / N^2 for equal
    point scatterers; returns I / I(0) and the exact Rg of the cloud (about its centre)."""
    r = pdist(points)
    n = len(points)
    out = np.empty(q.size)
    for i, qi in enumerate(q):  # a loop over q, not frames: the reference computation
        out[i] = (n + 2.0 * np.sinc(qi * r / np.pi).sum()) / n**2
    rg = np.sqrt(((points - points.mean(0)) ** 2).sum(1).mean())
    return out, rg


# --------------------------------------------------------------------------- noise


def noisy(I, fraction, rng, n_frames=1, floor=1e-4):
    """Poisson-like noise: sigma = fraction * sqrt(I * I(0)) (so ``fraction`` is the
    relative noise at I(0)) plus a small floor; returns (I_noisy (F, n), sigma (F, n))."""
    I = np.asarray(I, dtype=float)
    sig = fraction * np.sqrt(np.maximum(I, 0) * I[0]) + floor * I[0] * max(fraction, 1e-6)
    if fraction == 0:
        sig = 1e-6 * I[0] + 1e-6 * I
    Iobs = I[None, :] + sig[None, :] * rng.standard_normal((n_frames, I.size))
    return Iobs, np.broadcast_to(sig, Iobs.shape).copy()


# --------------------------------------------------------------------------- lattices


def _cubic_allowed(phase, h, k, l):
    """Reflection conditions of International Tables Vol. A (docs/REFERENCES.md) for one hkl."""
    a = sorted((abs(h), abs(k), abs(l)))
    zeros = a.count(0)

    def zone_0kl():  # indices (0, k, l) in any order: the other two
        if zeros >= 1:
            rest = [x for x in (h, k, l)]
            rest.remove(0) if 0 in rest else None
            return [abs(x) for x in rest]
        return None

    def zone_hhl():  # two equal |indices| h, h and the third l
        for i, j, m in ((0, 1, 2), (0, 2, 1), (1, 2, 0)):
            v = (h, k, l)
            if abs(v[i]) == abs(v[j]):
                yield abs(v[i]), abs(v[m])

    def zone_h00():
        if zeros >= 2:
            return max(a)
        return None

    if phase == "Pn3m":  # 0kl: k + l = 2n
        z = zone_0kl()
        return z is None or (z[0] + z[1]) % 2 == 0
    if phase == "Im3m":
        return (h + k + l) % 2 == 0
    if phase == "Fm3m":
        return (h + k) % 2 == 0 and (h + l) % 2 == 0 and (k + l) % 2 == 0
    if phase == "Ia3d":
        if (h + k + l) % 2:
            return False
        z = zone_0kl()
        if z is not None and (z[0] % 2 or z[1] % 2):
            return False
        for hh, ll in zone_hhl():
            if (2 * hh + ll) % 4:
                return False
        z = zone_h00()
        return z is None or z % 4 == 0
    if phase == "Fd3m":
        if not ((h + k) % 2 == 0 and (h + l) % 2 == 0 and (k + l) % 2 == 0):
            return False
        z = zone_0kl()
        if z is not None and (z[0] + z[1]) % 4:
            return False
        for hh, ll in zone_hhl():
            if (hh + ll) % 2:
                return False
        z = zone_h00()
        return z is None or z % 4 == 0
    if phase == "Pm3n":  # hhl: l = 2n; h00: h = 2n
        for _hh, ll in zone_hhl():
            if ll % 2:
                return False
        z = zone_h00()
        return z is None or z % 2 == 0
    raise ValueError(phase)


def reflections(phase, n=12):
    """First ``n`` allowed (s, multiplicity) of a phase, s = h^2+k^2+l^2 (cubic),
    h^2+hk+k^2 (hexagonal) or l^2 (lamellar); the multiplicity counts allowed hkl."""
    if phase == "lamellar":
        return [(l * l, 2) for l in range(1, n + 1)]
    if phase == "hexagonal":
        cnt = {}
        for h, k in itertools.product(range(-12, 13), repeat=2):
            s = h * h + h * k + k * k
            if s:
                cnt[s] = cnt.get(s, 0) + 1
        return sorted(cnt.items())[:n]
    cnt = {}
    for h, k, l in itertools.product(range(-7, 8), repeat=3):
        s = h * h + k * k + l * l
        if s and _cubic_allowed(phase, h, k, l):
            cnt[s] = cnt.get(s, 0) + 1
    return sorted(cnt.items())[:n]


def q_of(phase, a, s):
    """Peak position of reflection s for lattice a (d for lamellar), docs/REFERENCES.md."""
    s = np.asarray(s, dtype=float)
    if phase == "hexagonal":
        return 4 * np.pi * np.sqrt(s) / (np.sqrt(3) * a)
    return 2 * np.pi * np.sqrt(s) / a


PHASES = ("lamellar", "hexagonal", "Pn3m", "Im3m", "Ia3d", "Fd3m", "Pm3n", "Fm3m")

#: relative intensities of the first reflections (strongest first is not required),
#: chosen to resemble lipid mesophases: a few strong low orders, weak high orders
#: (the Ia3d 321 weak on purpose, as in the issue).
RELATIVE = {
    "lamellar": [1.0, 0.25, 0.08, 0.03],
    "hexagonal": [1.0, 0.3, 0.2, 0.06, 0.04],
    "Pn3m": [0.8, 1.0, 0.35, 0.3, 0.15, 0.12, 0.06, 0.05],
    "Im3m": [1.0, 0.45, 0.35, 0.12, 0.08, 0.05, 0.04],
    "Ia3d": [1.0, 0.6, 0.03, 0.08, 0.12, 0.1, 0.04, 0.03],
    "Fd3m": [0.6, 0.35, 1.0, 0.55, 0.2, 0.15, 0.1, 0.06],
    "Pm3n": [0.5, 0.8, 1.0, 0.9, 0.2, 0.15, 0.1, 0.08, 0.05],
    "Fm3m": [1.0, 0.6, 0.3, 0.2, 0.15, 0.06, 0.05],
}


def gaussian(q, c, fwhm):
    return np.exp(-4 * np.log(2) * ((q - c) / fwhm) ** 2)


def mesophase_curve(q, phase, a, *, fwhm, rel=None, peak=1.0):
    """Sum of Gaussian reflections of one phase (height ``peak`` x relative)."""
    rel = RELATIVE[phase] if rel is None else rel
    refl = reflections(phase, len(rel))
    I = np.zeros_like(q)
    for (s, _m), r in zip(refl, rel):
        I += peak * r * gaussian(q, q_of(phase, a, s), fwhm)
    return I


def diffuse(q, level):
    """A smooth diffuse background: a power law and a broad correlation bump."""
    return level * (0.02 * q**-2 + 0.6 * np.exp(-((q - 1.6) / 0.9) ** 2) + 0.2)


def counts_noise(I, counts, rng, max_I=None):
    """Scale I so its largest value is ``counts``, draw Poisson counts; sigma = sqrt(max(N, 1))."""
    scale = counts / (np.max(I, axis=-1, keepdims=True) if max_I is None else max_I)
    lam = I * scale
    N = rng.poisson(lam).astype(float)
    return N, np.sqrt(np.maximum(N, 1.0))


# --------------------------------------------------------------------------- mixtures, media


def sphere_mixture(q, R_small, R_large, weight_fraction):
    """Spheres of radius R_small with a weight fraction of spheres R_large (same density
    and contrast): I ~ sum_i w_i V_i P_i, since the intensity per unit mass scales with the
    particle volume (Guinier & Fournet 1955). Returns I / I(0) and the Rg of the small
    spheres alone, sqrt(3/5) R_small."""
    w = np.array([1.0 - weight_fraction, weight_fraction])
    v = np.array([R_small, R_large]) ** 3
    I = w[0] * v[0] * sphere(q, R_small)[0] + w[1] * v[1] * sphere(q, R_large)[0]
    return I / (w * v).sum(), np.sqrt(0.6) * R_small


def debye_bueche(q, xi):
    """Two-phase random medium with an exponential correlation function (Debye & Bueche
    1949, J. Appl. Phys. 20, 518): I ~ 1 / (1 + xi^2 q^2)^2; its Guinier Rg = sqrt(6) xi
    (the q^2 coefficient of ln I is -2 xi^2 = -Rg^2 / 3, der)."""
    return 1.0 / (1.0 + (xi * q) ** 2) ** 2, np.sqrt(6.0) * xi
