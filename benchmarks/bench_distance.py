"""Benchmark: p(r) of a whole series (indirect Fourier transform) vs a per-frame lstsq loop.

Usage: ``python benchmarks/bench_distance.py [n_frames]`` (or env ``SAXSNB_BENCH_FRAMES``);
default 10,000 frames x 500 q points, spheres of radius 3-6 nm with counting-like noise
(every frame has its own sigma, the general case).

1. Automatic weight, fixed Dmax, all frames: :func:`saxsnb.analysis.distance_distribution`
   against the plain way, each frame alone: for each of 20 weights (log-spaced), the
   regularised problem as one ``numpy.linalg.lstsq`` on the stacked system
   [A / sigma; sqrt(alpha) D2] (same basis and penalty), the evidence from the
   residual and the singular values lstsq returns, and the best weight kept. The
   baseline is timed on a subset (at most 100 frames) and scaled linearly. Target >= 50x.
2. The same with sigma in proportion across frames (one shared eigendecomposition).
3. Automatic Dmax: cost per frame (on at most 1,000 frames).
4. A single-frame recompute (what a slider move triggers: one frame, a new Dmax,
   automatic weight, the matrix not cached yet). Target <= 20 ms.
5. The same in the panel (``DistancePanel``, no browser): the whole callback of a
   frame step, a Dmax change and a weight change (solve, Dataset, marks), with fixed
   Dmax and with automatic Dmax.

Timings are wall-clock, best of a few runs; the machine may be shared, so the ratio of
two numbers measured in the same run is what counts.
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np


def make_series(n_frames: int, n_q: int = 500, seed: int = 0):
    """Homogeneous spheres (synthetic), I0 ~ R^6, counting-like noise per frame."""
    rng = np.random.default_rng(seed)
    q = np.linspace(0.05, 3.0, n_q)
    R = rng.uniform(3.0, 6.0, n_frames)
    I = np.empty((n_frames, n_q))
    for a in range(0, n_frames, 1000):  # bounded temporaries; data set-up, not timed
        x = q[None, :] * R[a : a + 1000, None]
        form = (3 * (np.sin(x) - x * np.cos(x)) / x**3) ** 2
        I[a : a + 1000] = 100.0 * form * (R[a : a + 1000, None] / 4.5) ** 6
    sigma = np.sqrt(I / 1e3 + (0.005 * I) ** 2) + 1e-4
    I += rng.normal(size=I.shape) * sigma
    return q, I, sigma, R


def baseline(q, I, S, dmax, n_r=51, n_weights=20):
    """Each frame alone: lstsq over a scan of weights, best by the same evidence."""
    from saxsnb.analysis import transform_matrix

    A, r = transform_matrix(q, dmax, n_r)
    K = n_r - 2
    D2 = np.diag(np.full(K, -2.0)) + np.diag(np.ones(K - 1), 1) + np.diag(np.ones(K - 1), -1)
    omega = D2.T @ D2
    logdet_omega = np.linalg.slogdet(omega)[1]
    weights = np.logspace(-8, 0, n_weights)
    rg = np.empty(I.shape[0])
    for f in range(I.shape[0]):  # the plain per-frame loop being compared against
        Aw = A / S[f, :, None]
        yw = I[f] / S[f]
        c = np.sum(Aw * Aw) / np.trace(omega)
        best, p_best = -np.inf, None
        for w in weights:
            M = np.vstack([Aw, np.sqrt(w * c) * D2])
            p, _, _, sv = np.linalg.lstsq(M, np.concatenate([yw, np.zeros(K)]), rcond=None)
            misfit = np.sum((M @ p - np.concatenate([yw, np.zeros(K)])) ** 2)
            ev = -0.5 * misfit + 0.5 * (K * np.log(w * c) + logdet_omega) - np.sum(np.log(sv))
            if ev > best:
                best, p_best = ev, p
        m2 = r[1:-1] ** 2 + r[1] ** 2 / 6
        rg[f] = np.sqrt(np.sum(p_best * m2) / (2 * np.sum(p_best)))
    return rg


def best_time(func, *args, repeats: int = 3, **kw):
    times = []
    for _ in range(repeats):
        t = time.perf_counter()
        out = func(*args, **kw)
        times.append(time.perf_counter() - t)
    return min(times), times, out


def main(argv=None) -> float:
    from saxsnb.analysis import distance_distribution
    from saxsnb.analysis._distance_basis import _CACHE

    argv = sys.argv[1:] if argv is None else argv
    n = int(argv[0]) if argv else int(os.environ.get("SAXSNB_BENCH_FRAMES", 10_000))
    q, I, S, R = make_series(n)
    dmax = 13.0
    rg_true = np.sqrt(0.6) * R
    distance_distribution(q, I[:20], S[:20], dmax=dmax)  # warm-up (imports, the matrix)
    t_vec, all_vec, res = best_time(distance_distribution, q, I, S, dmax=dmax)
    n_base = min(n, 100)
    t0 = time.perf_counter()
    rg_base = baseline(q, I[:n_base], S[:n_base], dmax)
    t_base_subset = time.perf_counter() - t0
    t_base = t_base_subset * n / n_base
    print(f"series: {n} frames x {q.size} q points, n_r = 51, Dmax fixed at {dmax} nm, automatic weight")
    print(f"vectorised, every frame its own sigma: {t_vec:.3f} s (best of {len(all_vec)}: "
          + ", ".join(f"{t:.3f}" for t in all_vec) + f"), {1e3 * t_vec / n:.3f} ms per frame")
    print(f"  status ok for {100 * np.mean(res['status'] == 'ok'):.1f} %, median |Rg error| "
          f"{100 * np.nanmedian(np.abs(res['rg'] / rg_true - 1)):.3f} %, median |Rg - baseline Rg| "
          f"{100 * np.median(np.abs(res['rg'][:n_base] / rg_base - 1)):.3f} %")
    print(f"baseline lstsq x 20 weights per frame: {t_base_subset:.3f} s for {n_base} frames, "
          f"scaled linearly to {n}: {t_base:.1f} s")
    ratio = t_base / t_vec
    print(f"ratio baseline / vectorised: {ratio:.0f}x (target >= 50x)")

    S_shared = np.broadcast_to(0.01 * I.mean(axis=0), I.shape) * np.linspace(0.5, 2.0, n)[:, None]
    t_sh, _, _ = best_time(distance_distribution, q, I, S_shared, dmax=dmax)
    print(f"vectorised, sigma in proportion across frames (one shared eigendecomposition): {t_sh:.3f} s, "
          f"ratio {t_base / t_sh:.0f}x")

    n_auto = min(n, 1000)
    t_auto, _, ra = best_time(distance_distribution, q, I[:n_auto], S[:n_auto], repeats=1)
    print(f"automatic Dmax ({n_auto} frames): {t_auto:.2f} s, {1e3 * t_auto / n_auto:.2f} ms per frame; "
          f"median |Dmax / 2R - 1| {100 * np.median(np.abs(ra['dmax'] / (2 * R[:n_auto]) - 1)):.2f} %, "
          f"median |Rg error| {100 * np.nanmedian(np.abs(ra['rg'] / rg_true[:n_auto] - 1)):.3f} %")

    single = []
    for k in range(10):
        _CACHE.clear()
        t = time.perf_counter()
        distance_distribution(q, I[k], S[k], dmax=11.0 + 0.37 * k)
        single.append(time.perf_counter() - t)
    warm = []
    for k in range(10):
        t = time.perf_counter()
        distance_distribution(q, I[k], S[k], dmax=11.0)
        warm.append(time.perf_counter() - t)
    print(f"single-frame recompute, new Dmax (matrix built): median {1e3 * np.median(single):.1f} ms, "
          f"max {1e3 * max(single):.1f} ms; same Dmax (cached): median {1e3 * np.median(warm):.1f} ms "
          "(target <= 20 ms)")
    panel_times(q, I[: min(n, 40)], S[: min(n, 40)])
    print(f"load average during the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores "
          "(other work on the machine slows both sides)")
    return ratio


def panel_times(q, I, S):
    """Median ms of the panel's callbacks (what a slider, a Dmax box or a frame step runs)."""
    try:
        import saxsnb
        from saxsnb.widgets import DistancePanel
    except ImportError:  # widgets extra not installed
        print("panel: widgets not installed, skipped")
        return
    n = I.shape[0]
    ds = saxsnb.from_arrays(q, I, S, scan={"time": np.arange(n) * 1.0}, intensity_unit="1/cm")

    def timed(panel, steps):
        out = []
        for name, value in steps:
            t = time.perf_counter()
            setattr(panel, name, value)
            out.append(time.perf_counter() - t)
        return 1e3 * np.median(out), 1e3 * max(out)

    p = DistancePanel(ds, dmax=13.0)
    p.frame = 1  # warm-up
    frames = [("frame", k % n) for k in range(2, 12)]
    rows = [("frame step", timed(p, frames)),
            ("Dmax change", timed(p, [("dmax", 11.0 + 0.37 * k) for k in range(10)])),
            ("weight change", timed(p, [("weight", 10.0 ** (-4 + 0.3 * k)) for k in range(10)]))]
    p.weight = None
    p.dmax = None
    rows.append(("frame step, automatic Dmax", timed(p, [("frame", (k + 3) % n) for k in range(10)])))
    for name, (med, worst) in rows:
        print(f"panel {name}: median {med:.1f} ms, max {worst:.1f} ms" + ("" if "automatic" in name
              else " (target <= 20 ms)"))


if __name__ == "__main__":
    main()
