"""Runs of the public functions on the independent truth of :mod:`truth`, and the
accuracy figures the validation tests assert and benchmarks/validate_accuracy.py prints.

Only public API: ``saxsnb.analysis.guinier``, ``saxsnb.analysis.porod``,
``saxsnb.analysis.find_peaks`` and ``saxsnb.analysis.index_peaks``.
"""

from __future__ import annotations

import numpy as np

try:  # imported as a package module (pytest) or from a script with tests/validation on sys.path
    from . import truth as t
except ImportError:  # pragma: no cover
    import truth as t

from saxsnb.analysis import find_peaks, guinier, index_peaks

# --------------------------------------------------------------------------- shapes


def shape_cases(quick=True):
    """name -> (function of q giving (I, Rg_true), q grid). Grids start at q Rg ~ 0.05."""
    cases = {
        "sphere R5": lambda q: t.sphere(q, 5.0),
        "Schulz z4": lambda q: t.schulz_spheres(q, 4.0, 4),
        "Schulz z20": lambda q: t.schulz_spheres(q, 5.0, 20),
        "Schulz z100": lambda q: t.schulz_spheres(q, 5.0, 100),
        "prolate 3x3x9": lambda q: t.ellipsoid(q, 3.0, 9.0),
        "oblate 6x6x2": lambda q: t.ellipsoid(q, 6.0, 2.0),
        "core-shell": lambda q: t.core_shell(q, 4.0, 6.0, -1.0, 2.0),
        "vesicle R20 t4": lambda q: t.vesicle(q, 20.0, 4.0),
        "Gaussian chain": lambda q: t.gaussian_chain(q, 5.0),
    }
    if not quick:
        cases["cylinder R2 L30"] = lambda q: t.cylinder(q, 2.0, 30.0)
    return cases


def _grid(rg, n=300):
    return np.linspace(0.05 / rg, 5.0 / rg, n)


_CLOUD = {}


def debye_cloud_case(n_points=800, seed=11):
    """Brute-force Debye curve of a random ellipsoidal point cloud (cached)."""
    key = (n_points, seed)
    if key not in _CLOUD:
        pts = t.point_cloud_ellipsoid(n_points, (3.0, 4.0, 6.0), seed)
        rg = np.sqrt(((pts - pts.mean(0)) ** 2).sum(1).mean())
        q = _grid(rg, 200)
        I, rg = t.debye_curve(q, pts)
        _CLOUD[key] = (q, I, rg)
    return _CLOUD[key]


def guinier_accuracy(I, q, rg_true, noise, n_draws, seed, **options):
    """Automatic-range Guinier over ``n_draws`` noise draws: dict of figures."""
    rng = np.random.default_rng(seed)
    Iobs, S = t.noisy(I * 1000.0, noise, rng, n_draws)
    r = guinier(q, Iobs, S, **options)
    ok = r["status"] == "ok"
    rg, sg = r["rg"][ok], r["rg_sigma"][ok]
    err = rg / rg_true - 1.0
    out = {
        "n_ok": int(ok.sum()),
        "median_abs_err": float(np.median(np.abs(err))) if ok.any() else np.nan,
        "within_1sigma": float(np.mean(np.abs(rg - rg_true) <= sg)) if ok.any() else np.nan,
        "spread_over_sigma": float(np.std(rg) / np.median(sg)) if ok.sum() > 2 else np.nan,
        "i0_spread_over_sigma": float(np.std(r["i0"][ok]) / np.median(r["i0_sigma"][ok]))
        if ok.sum() > 2 else np.nan,
        "statuses": sorted(set(r["status"].tolist())),
        "qrg_max": float(np.nanmedian(r["qrg_max"])) if ok.any() else np.nan,
    }
    # the Guinier-approximation bias of the chosen ranges: a plain unweighted least-squares
    # line (numpy.polyfit) through the noise-free curve on each frame's range
    bias = np.full(ok.sum(), np.nan)
    for j, (a, b) in enumerate(zip(r["q_min"][ok], r["q_max"][ok])):
        m = (q >= a) & (q <= b)
        bias[j] = np.sqrt(-3.0 * np.polyfit(q[m] ** 2, np.log(I[m]), 1)[0]) / rg_true - 1.0
    out["bias"] = bias
    out["worst_excess"] = (
        float(np.max((np.abs(err) - np.abs(bias)) * rg_true / sg)) if ok.any() else np.nan
    )
    return out


# --------------------------------------------------------------------------- mesophases

#: lattice (d for lamellar, a otherwise), nm; chosen so that no two phases of a
#: coexistence case share a reflection by accident
LATTICE = {"lamellar": 4.4, "hexagonal": 6.0, "Pn3m": 10.0, "Im3m": 12.8, "Ia3d": 15.8,
           "Fd3m": 16.0, "Pm3n": 12.0, "Fm3m": 12.0}
Q_GRID = np.linspace(0.3, 3.0, 1400)


def ramp_curves(phases, n_frames, *, fwhm=0.012, background=0.3, shift=0.02, second_scale=0.7, rel=None):
    """Frames of one phase or a coexisting pair with a lattice drifting by +-``shift``."""
    f = np.linspace(1 - shift, 1 + shift, n_frames)
    q = Q_GRID
    I = np.zeros((n_frames, q.size)) + t.diffuse(q, background)[None]
    lat = np.zeros((n_frames, len(phases)))
    for k, ph in enumerate(phases):
        a = LATTICE[ph] * f * (1.0 + 0.01 * k)
        lat[:, k] = a
        scale = 1.0 if k == 0 else second_scale
        for i in range(n_frames):
            I[i] += scale * t.mesophase_curve(q, ph, a[i], fwhm=fwhm, rel=rel if k == 0 else None)
    return q, I, lat


def index_curves(q, N, S):
    """find_peaks then index_peaks with the whole peak table (the evidence tests on)."""
    pk = find_peaks(q, N, S)
    r = index_peaks(pk["position"], pk["position_sigma"], pk["prominence"], q_min=q[0],
                    fwhm=pk["fwhm"], q_step=float(np.median(np.diff(q))))
    return pk, r


def labels(r):
    return np.array(["+".join(sorted(p for p in row if p)) for row in r["phase"]])


def identifiable(q, I_max, S, phases, lat, *, second_scale=0.7, rel=None, counts=1.0, factor=3.0):
    """Per frame: does every phase have enough reflections whose noise-free height (over
    the background) stands above ``factor`` times the local sigma: three for a cubic
    phase, two for lamellar or hexagonal (the issue-15 target applies to such frames)."""
    rows = np.arange(len(lat))
    ok = np.ones(len(lat), dtype=bool)
    for k, ph in enumerate(phases):
        r = t.RELATIVE[ph] if rel is None or k else rel
        n = np.zeros(len(lat), dtype=int)
        for (s, _), rr in zip(t.reflections(ph, len(r)), r):
            qs = t.q_of(ph, lat[:, k], s)
            j = np.clip(np.searchsorted(q, qs), 0, q.size - 1)
            height = rr * (1.0 if k == 0 else second_scale) * counts / I_max
            n += (qs < q[-1]) & (height > factor * S[rows, j])
        ok &= n >= (2 if ph in ("lamellar", "hexagonal") else 3)
    return ok


def ramp_accuracy(phases, counts, n_frames, seed, spikes=0, **options):
    rng = np.random.default_rng(seed)
    q, I, lat = ramp_curves(phases, n_frames, **options)
    N, S = t.counts_noise(I, counts, rng)
    for i in range(n_frames):
        for j in rng.integers(20, q.size - 20, size=spikes):
            N[i, j] += 40.0 * S[i, j]
    pk, r = index_curves(q, N, S)
    lab = labels(r)
    truth = "+".join(sorted(phases))
    right = lab == truth
    lat_err = []
    for k, ph in enumerate(phases):
        col = np.where(r["phase"] == ph, r["lattice"], np.nan)
        got = np.nanmax(np.where(np.isnan(col), -np.inf, col), axis=1)
        got = np.where(np.isfinite(got), got, np.nan)
        lat_err.append(np.abs(got / lat[:, k] - 1.0))
    lat_err = np.nanmedian(np.stack(lat_err)[:, right]) if right.any() else np.nan
    ident = identifiable(q, I.max(-1), S, phases, lat, second_scale=options.get("second_scale", 0.7),
                         rel=options.get("rel"), counts=counts)
    return {"right": right, "labels": lab, "lattice_err": float(lat_err), "status": r["status"],
            "alternative": r["alternative"], "identifiable": ident}


def no_lattice_series(kind, n_frames, seed):
    """Curves with no lattice: returns (q, I, sigma)."""
    rng = np.random.default_rng(seed)
    q = np.linspace(0.02, 3.0, 1500)
    if kind == "spikes":
        I = np.broadcast_to(t.diffuse(q, 1.0), (n_frames, q.size))
        N, S = t.counts_noise(I, 1000, rng)
        for i in range(n_frames):
            for j in rng.integers(20, q.size - 20, size=3):
                N[i, j] += 30.0 * S[i, j]
        return q, N, S
    if kind == "featureless":
        I = np.broadcast_to(t.diffuse(q, 1.0), (n_frames, q.size))
        N, S = t.counts_noise(I, 1000, rng)
        return q, N, S
    I = {
        "spheres z100": lambda: t.schulz_spheres(q, 5.0, 100)[0],
        "spheres z30": lambda: t.schulz_spheres(q, 10.0, 30)[0],
        "vesicles z100": lambda: t.schulz_vesicles(q, 25.0, 4.0, 100)[0],
        "vesicles z50": lambda: t.schulz_vesicles(q, 40.0, 4.0, 50)[0],
    }[kind]()
    I = I / I[0] * 1e4 + 0.05
    Iobs, S = t.noisy(I, 3e-4, rng, n_frames)
    return q, Iobs, S


# ------------------------------------------------------- the user route (index_phases)

def index_curves_user(q, N, S):
    """find_peaks then index_phases, as ds.saxs.index_phases runs them: the prominence
    (noise units) is also the signal-to-noise ratio that weighs absent reflections."""
    from saxsnb.analysis import index_phases

    pk = find_peaks(q, N, S)
    r = index_phases(pk["position"], pk["position_sigma"], pk["fwhm"], pk["prominence"],
                     q_min=q[0], q_step=float(np.median(np.diff(q))))
    return pk, r


def ramp_accuracy_user(phases, counts, n_frames, seed, **options):
    """:func:`ramp_accuracy` on the user route (:func:`index_curves_user`)."""
    global index_curves
    plain = index_curves
    index_curves = index_curves_user
    try:
        return ramp_accuracy(phases, counts, n_frames, seed, **options)
    finally:
        index_curves = plain
