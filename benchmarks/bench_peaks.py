"""Benchmark: find + fit + track + index Bragg peaks over a series, against a plain loop.

Series: N frames x 1,000 q points (default N = 10,000), each frame one mesophase with
3-8 Bragg peaks (Gaussian, random heights) on a power-law background with counting
noise. Ours: ``ds.saxs.find_peaks(profile="gaussian")`` (baseline, detection, batched fit
of the same Gaussian + line model as the baseline, backfitting of overlaps, tracking)
then ``ds.saxs.index_phases()``. Baseline: per frame ``scipy.signal.find_peaks`` and
one ``lmfit`` Gaussian + line fit per detected peak (no tracking, no indexing), timed
on a subset of frames and scaled linearly to N (said in the output).

Second baseline (issue 14): a ``scipy.signal.find_peaks`` loop over all N frames doing
detection only (no fit), against ``ds.saxs.find_peaks()`` with its defaults (pseudo-Voigt;
detect + fit + track; target: ours >= 3x faster, fits included), and against
``saxsnb.analysis.find_peaks`` with the pseudo-Voigt and the Gaussian profile, with the
Levenberg-Marquardt iterations per peak.

Usage::

    .venv/bin/python benchmarks/bench_peaks.py [n_frames] [n_baseline_frames]

or set SAXSNB_BENCH_FRAMES / SAXSNB_BENCH_BASELINE_FRAMES. Target: ratio >= 100.
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np

import saxsnb
from saxsnb.analysis import PHASES, spacing_ratios

N_Q = 1000


def make_series(n_frames: int, seed: int = 1234):
    rng = np.random.default_rng(seed)
    q = np.linspace(0.3, 5.0, N_Q)
    phase = rng.integers(0, len(PHASES), n_frames)
    n_peaks = rng.integers(3, 9, n_frames)
    ratios = np.stack([spacing_ratios(p, 8) for p in PHASES])  # (8, 8)
    r = ratios[phase]  # (F, 8)
    r_last = np.take_along_axis(r, (n_peaks - 1)[:, None], 1)[:, 0]
    q1 = rng.uniform(0.5, 1.0, n_frames) * np.minimum(1.0, 4.6 / (r_last * 1.0))
    q1 = np.minimum(q1, 4.6 / r_last)
    pos = q1[:, None] * r
    pos[np.arange(8)[None, :] >= n_peaks[:, None]] = np.nan
    heights = 200.0 * rng.uniform(0.3, 1.0, (n_frames, 8)) * 0.75 ** np.arange(8)
    bg = 2.0 * q**-2.0 + 5.0
    I = np.broadcast_to(bg, (n_frames, N_Q)).copy()
    for j in range(8):
        ok = np.isfinite(pos[:, j])
        c = np.where(ok, pos[:, j], 0.0)[:, None]
        I += np.where(ok[:, None], heights[:, j, None] * np.exp(-4 * np.log(2) * ((q - c) / 0.02) ** 2), 0.0)
    S = np.sqrt(I / 2000.0)
    I += rng.standard_normal(I.shape) * S
    T = 20.0 + 0.01 * np.arange(n_frames)
    ds = saxsnb.from_arrays(q, I, S, scan={"temperature": T})
    return ds, pos, np.array(PHASES)[phase]


def ours(ds):
    t0, c0 = time.perf_counter(), time.process_time()
    pk = ds.saxs.find_peaks(profile="gaussian")  # the peak model of the baseline
    t1, c1 = time.perf_counter(), time.process_time()
    idx = ds.saxs.index_phases(pk, use_scan_prior=True)
    t2, c2 = time.perf_counter(), time.process_time()
    return pk, idx, (t1 - t0, t2 - t1), (c1 - c0, c2 - c1)


def baseline(ds, n_frames: int):
    import lmfit
    from scipy.signal import find_peaks

    model = lmfit.models.GaussianModel() + lmfit.models.LinearModel()
    q = ds["q"].values
    I = ds["intensity"].values[:n_frames]
    S = ds["sigma"].values[:n_frames]
    n_fits = 0
    t0, c0 = time.perf_counter(), time.process_time()
    for i in range(n_frames):
        idx, _ = find_peaks(I[i], prominence=6 * np.median(S[i]), distance=3)
        for j in idx:
            sl = slice(max(j - 12, 0), min(j + 13, q.size))
            pars = model.make_params(
                center=q[j], sigma=0.0085, amplitude=I[i, j] * 0.02, slope=0.0, intercept=0.0
            )
            model.fit(I[i, sl], pars, x=q[sl], weights=1.0 / S[i, sl])
            n_fits += 1
    return time.perf_counter() - t0, time.process_time() - c0, n_fits


def scipy_detection_loop(q, I, S):
    """The plain per-frame detection loop: scipy.signal.find_peaks, no fit."""
    from scipy.signal import find_peaks

    t0, c0 = time.perf_counter(), time.process_time()
    for i in range(I.shape[0]):
        find_peaks(I[i], prominence=6 * np.median(S[i]), distance=3)
    return time.perf_counter() - t0, time.process_time() - c0


def ours_analysis(q, I, S, profile):
    from saxsnb.analysis import find_peaks

    t0, c0 = time.perf_counter(), time.process_time()
    res = find_peaks(q, I, S, profile=profile, iterations=True)
    return res, time.perf_counter() - t0, time.process_time() - c0


def main(argv):
    n = int(argv[1]) if len(argv) > 1 else int(os.environ.get("SAXSNB_BENCH_FRAMES", 10_000))
    nb = int(argv[2]) if len(argv) > 2 else int(os.environ.get("SAXSNB_BENCH_BASELINE_FRAMES", 100))
    nb = min(nb, n)
    print(f"load average at the start: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    ds, pos, truth = make_series(n)
    ours(make_series(4)[0])  # warm-up (imports)
    pk, idx, (w_find, w_index), (c_find, c_index) = ours(ds)
    w_base_sub, c_base_sub, n_fits = baseline(ds, nb)
    w_base, c_base = w_base_sub * n / nb, c_base_sub * n / nb
    n_true = int(np.isfinite(pos).sum())
    found = int(pk["n_peaks"].sum())
    correct = float(np.mean(idx["phase"].values[:, 0] == truth))
    print(f"series: {n} frames x {N_Q} q, {n_true} true peaks; found {found}")
    print(f"ours: find+fit+track {w_find:.2f} s, index (+ scan prior, re-tracking) {w_index:.2f} s, "
          f"total {w_find + w_index:.2f} s wall, {c_find + c_index:.2f} s CPU")
    print(f"baseline: scipy find_peaks + one lmfit fit per peak, timed on {nb} frames ({n_fits} fits, "
          f"{w_base_sub:.2f} s), scaled linearly to {n} frames: {w_base:.1f} s wall, {c_base:.1f} s CPU "
          "(no tracking, no indexing)")
    print(f"ratio baseline / ours: {w_base / (w_find + w_index):.0f}x wall, "
          f"{c_base / (c_find + c_index):.0f}x CPU (target >= 100x)")
    print(f"find+fit+track alone vs the baseline: {c_base / c_find:.0f}x CPU")
    print(f"phase label correct on {100 * correct:.1f} % of frames")
    q, I, S = ds["q"].values, ds["intensity"].values, ds["sigma"].values
    w_sc, c_sc = scipy_detection_loop(q, I, S)
    print(f"scipy.signal.find_peaks loop, detection only, {n} frames: {w_sc:.2f} s wall, {c_sc:.2f} s CPU")
    t0, c0 = time.perf_counter(), time.process_time()
    ds.saxs.find_peaks()  # the issue-14 target: defaults (pseudo-Voigt), detect + fit + track
    w_acc, c_acc = time.perf_counter() - t0, time.process_time() - c0
    print(f"ds.saxs.find_peaks() (defaults: pseudo-Voigt; detect + fit + track): {w_acc:.2f} s wall, "
          f"{c_acc:.2f} s CPU; ratio scipy detection loop / ours {w_sc / w_acc:.2f}x wall, "
          f"{c_sc / c_acc:.2f}x CPU (target >= 3x)")
    for profile in ("pseudo_voigt", "gaussian"):
        res, w_o, c_o = ours_analysis(q, I, S, profile)
        it = res["n_iterations"][np.isfinite(res["position"])]
        print(f"find_peaks (detect + fit + track), {profile}: {w_o:.2f} s wall, {c_o:.2f} s CPU; "
              f"ratio scipy detection loop / ours {w_sc / w_o:.2f}x wall, {c_sc / c_o:.2f}x CPU "
              f"(target >= 3x); iterations per peak mean {it.mean():.1f}, median {np.median(it):.0f}, "
              f"max {it.max():.0f}")
    print(f"load average during the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main(sys.argv)
