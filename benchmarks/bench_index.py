"""Benchmark: ``index_phases`` on the peak table of a long mesophase ramp (issue 14).

Series: N frames (default 10,000) of a temperature ramp through lamellar -> hexagonal
-> Pn3m -> Pn3m + Im3m -> Im3m -> Ia3d + hexagonal -> Fd3m, with coexistence windows,
lattices drifting along the ramp, weak high orders dropped at random, position noise
and now and then an extra (unexplained) peak. The peak table is built directly (the
positions a peak finder would return, NaN padded), so only indexing is timed.

Prints microseconds per frame (target <= 20 us per frame), the load average and, in
the same run, the time of the plain computation (the candidate-search shortcuts off,
``saxsnb.analysis._latticematch.SHORTCUTS = False``: the same numbers bit for bit) and,
for scale, of one ``np.sort`` of the peak table.

Usage::

    .venv/bin/python benchmarks/bench_index.py [n_frames] [repeats]
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np

from saxsnb.analysis import _latticematch, index_phases
from saxsnb.analysis._reflections import q_positions

#: (phases, lattice at the start, lattice at the end, nm) of each stretch of the ramp
STRETCHES = [
    (("lamellar",), (4.6,), (4.4,)),
    (("hexagonal",), (6.2,), (6.0,)),
    (("Pn3m",), (10.4,), (10.0,)),
    (("Pn3m", "Im3m"), (10.0, 12.9), (9.8, 12.6)),
    (("Im3m",), (12.6,), (12.2,)),
    (("Ia3d", "hexagonal"), (15.8, 6.0), (15.5, 5.9)),
    (("Fd3m",), (16.0,), (15.6,)),
]
N_PEAKS = 12


def make_table(n_frames: int, seed: int = 7):
    """Peak table (position, sigma, fwhm, prominence) of the ramp, and the true labels."""
    rng = np.random.default_rng(seed)
    pos = np.full((n_frames, N_PEAKS), np.nan)
    prom = np.full((n_frames, N_PEAKS), np.nan)
    truth = np.empty(n_frames, dtype=object)
    edges = np.linspace(0, n_frames, len(STRETCHES) + 1).astype(int)
    for (phases, a0, a1), lo, hi in zip(STRETCHES, edges[:-1], edges[1:]):
        n = hi - lo
        cols = []
        for k, ph in enumerate(phases):
            a = np.linspace(a0[k], a1[k], n)
            q = q_positions(ph, a, 6 if len(phases) == 2 else 8)
            strength = 80.0 * (0.6 if k else 1.0) * 0.7 ** np.arange(q.shape[1])
            keep = rng.random(q.shape) < np.where(np.arange(q.shape[1]) < 3, 1.0, 0.7)
            cols.append((np.where(keep, q, np.nan), np.broadcast_to(strength, q.shape)))
        qq = np.concatenate([c[0] for c in cols], 1)
        ss = np.concatenate([c[1] for c in cols], 1)
        extra = rng.random(n) < 0.05  # an unexplained peak now and then
        qq = np.concatenate([qq, np.where(extra, rng.uniform(0.5, 2.5, n), np.nan)[:, None]], 1)
        ss = np.concatenate([ss, np.full((n, 1), 10.0)], 1)
        qq *= 1.0 + 2e-4 * rng.standard_normal(qq.shape)
        m = min(qq.shape[1], N_PEAKS)
        pos[lo:hi, :m], prom[lo:hi, :m] = qq[:, :m], ss[:, :m]
        truth[lo:hi] = "+".join(sorted(phases))
    sig = 2e-4 * pos
    fwhm = 0.01 * pos
    return pos, sig, fwhm, prom, truth


def main(argv=None):
    argv = sys.argv[1:] if argv is None else argv
    n = int(argv[0]) if argv else int(os.environ.get("SAXSNB_BENCH_FRAMES", 10_000))
    repeats = int(argv[1]) if len(argv) > 1 else 3
    pos, sig, fwhm, prom, truth = make_table(n)
    t0 = time.perf_counter()
    np.sort(pos, axis=1)
    t_sort = time.perf_counter() - t0
    times, cpu = [], []
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        res = index_phases(pos, sig, fwhm, prom, q_min=0.3, q_step=0.002)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    t, c = float(np.median(times)), float(np.median(cpu))
    _latticematch.SHORTCUTS = False  # the plain computation, once, for the ratio
    try:
        c0 = time.process_time()
        plain = index_phases(pos, sig, fwhm, prom, q_min=0.3, q_step=0.002)
        c_plain = time.process_time() - c0
    finally:
        _latticematch.SHORTCUTS = True
    same = all(np.array_equal(np.asarray(res[k]), np.asarray(plain[k]),
                              equal_nan=np.asarray(res[k]).dtype.kind == "f") for k in res)
    lab = np.array(["+".join(sorted(p for p in row if p)) for row in res["phase"]])
    print(f"index_phases, {n} frames x {N_PEAKS} peak columns, median of {repeats}")
    print(f"  {1e6 * t / n:8.1f} us per frame   (target <= 20)   total {t:.2f} s")
    print(f"  {1e6 * c / n:8.1f} us CPU per frame (process time: less sensitive to other load)")
    print(f"  plain computation (shortcuts off): {1e6 * c_plain / n:.1f} us CPU per frame, "
          f"{c_plain / c:.2f}x the time; same results: {same}")
    print(f"  np.sort of the table: {1e6 * t_sort / n:.3f} us per frame (same run, for scale)")
    print(f"  load average {os.getloadavg()[0]:.2f} (2-core machine shared with other work)")
    print(f"  labels right: {np.mean(lab == truth):.3f}")


if __name__ == "__main__":
    main()
