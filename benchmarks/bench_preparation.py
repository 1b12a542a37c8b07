"""Benchmark: preparation steps over a whole series vs the per-frame loop a user writes.

Usage: ``python benchmarks/bench_preparation.py [n_frames]`` (or env ``SAXSNB_BENCH_FRAMES``);
default 10,000 frames x 1,000 q points, and the pairwise similarity matrix of
``min(2000, n_frames)`` frames. Each baseline is the plain Python loop over frames with
numpy inside (the way one writes it without saxsnb), timed on at most 1,000 frames and
scaled linearly to the whole series, as the output says. Wall-clock, best of 3; the
machine may be shared, so the ratio of two numbers from the same run is what counts.
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np


def make_series(n_frames: int, n_q: int = 1000, seed: int = 0):
    """Repeats of a Guinier curve with counting-like noise (synthetic)."""
    rng = np.random.default_rng(seed)
    q = np.linspace(0.05, 5.0, n_q)
    base = 100 * np.exp(-(q * 2.5) ** 2 / 3) + 0.5
    sigma = np.sqrt(base / 100)
    I = base + rng.normal(size=(n_frames, n_q)) * sigma
    S = np.broadcast_to(sigma, I.shape).copy()
    B = 0.5 + rng.normal(size=(n_frames, n_q)) * 0.01
    return q, I, S, B, np.full_like(B, 0.01)


def best(f, repeats=3):
    t = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        f()
        t.append(time.perf_counter() - t0)
    return min(t)


def loop_compare(q, I):
    out = []
    for i in range(1, I.shape[0]):
        s = (I[i] - I[0]) >= 0
        change = np.flatnonzero(np.diff(np.r_[-1, s.astype(int), -1]) != 0)
        out.append(np.diff(change).max())
    return out


def loop_average(I, S):
    total, var = np.zeros(I.shape[1]), np.zeros(I.shape[1])
    for i in range(I.shape[0]):
        total += I[i]
        var += S[i] ** 2
    return total / I.shape[0], np.sqrt(var) / I.shape[0]


def loop_subtract(I, S, B, BS):
    out = np.empty_like(I)
    sig = np.empty_like(I)
    for i in range(I.shape[0]):
        out[i] = I[i] - B[i]
        sig[i] = np.sqrt(S[i] ** 2 + BS[i] ** 2)
    return out, sig


def loop_rebin(q, I, S, n=100):
    edges = np.geomspace(q.min(), q.max(), n + 1)
    which = np.minimum(np.searchsorted(edges, q, "right") - 1, n - 1)
    bins = [which == k for k in np.unique(which)]
    out = []
    for i in range(I.shape[0]):
        out.append([(I[i, m].mean(), np.sqrt((S[i, m] ** 2).sum()) / m.sum()) for m in bins])
    return out


def main(n_frames: int) -> None:
    from saxsnb import analysis

    q, I, S, B, BS = make_series(n_frames)
    sub = min(n_frames, 1000)
    scale = n_frames / sub
    rows = []

    t_v = best(lambda: analysis.compare_frames(q, I, S))
    t_l = best(lambda: loop_compare(q, I[:sub]), 1) * scale
    rows.append(("compare_frames (cormap vs frame 0)", t_v, t_l))
    t_v = best(lambda: analysis.average_frames(q, I, S, labels=np.arange(n_frames) // 10))
    t_l = best(lambda: [loop_average(I[a:a + 10], S[a:a + 10]) for a in range(0, sub, 10)], 1) * scale
    rows.append(("average (blocks of 10)", t_v, t_l))
    t_v = best(lambda: analysis.subtract_background(I, S, B, BS))
    t_l = best(lambda: loop_subtract(I[:sub], S[:sub], B[:sub], BS[:sub]), 1) * scale
    rows.append(("subtract (frame by frame background)", t_v, t_l))
    t_v = best(lambda: analysis.rebin(q, I, S, 100))
    small = min(sub, 200)
    t_l = best(lambda: loop_rebin(q, I[:small], S[:small]), 1) * n_frames / small
    rows.append(("rebin to 100 log bins", t_v, t_l))

    print(f"preparation benchmark: {n_frames} frames x {q.size} q points "
          f"(loops timed on {sub} frames, rebin loop on {small}, scaled linearly)")
    for name, tv, tl in rows:
        print(f"  {name:40s} vectorised {tv:8.3f} s   loop {tl:8.3f} s   ratio {tl / tv:7.1f}x")
    npair = min(2000, n_frames)
    t_pw = best(lambda: analysis.pairwise_similarity(q, I[:npair]), 1)
    pairs = npair * (npair - 1) // 2
    t_one = best(lambda: loop_compare(q, I[: min(npair, 500)]), 1) / max(min(npair, 500) - 1, 1)
    print(f"  pairwise cormap matrix of {npair} frames ({pairs} pairs): {t_pw:.2f} s; "
          f"per-pair loop estimate {t_one * pairs:.1f} s, ratio {t_one * pairs / t_pw:.1f}x")


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else int(os.environ.get("SAXSNB_BENCH_FRAMES", 10_000))
    main(n)
