"""Benchmark: Porod fit with the exponent of I - B (background fitted) over a series,
against per-frame loops of scipy ``curve_fit`` and of lmfit.

Series: N frames x 1,000 q points (default N = 10,000) of power-law tails
I = A q^-p + B, p from 2.5 to 4.5, a flat background B, 1 % noise (synthetic). Ours:
``saxsnb.analysis.porod`` on the default range (upper quarter of q, 250 points): the
Porod constant with the background fitted and the joint fit of A, p and B, all frames
at once. Baselines, the plain per-frame way: ``scipy.optimize.curve_fit`` of
A q^-p + B (weights 1/sigma, absolute sigma), and lmfit (``PowerLawModel`` +
``ConstantModel``); each timed on a subset of frames and scaled linearly to N (said in
the output). The exponents of ours and of ``curve_fit`` on that subset are compared.

Usage::

    .venv/bin/python benchmarks/bench_porod.py [n_frames] [n_baseline_frames]

or set SAXSNB_BENCH_FRAMES / SAXSNB_BENCH_BASELINE_FRAMES. Timings are wall-clock (best
of 3 for ours) with the CPU time of this process; the machine may be shared, so the
ratio of two numbers measured in the same run is what counts.
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np

N_Q = 1000


def make_series(n_frames: int, seed: int = 7):
    rng = np.random.default_rng(seed)
    q = np.linspace(0.05, 5.0, N_Q)
    p = rng.uniform(2.5, 4.5, n_frames)
    A = rng.uniform(0.5, 2.0, n_frames)
    B = A * 5.0**-p * rng.uniform(0.1, 1.0, n_frames)
    I = np.empty((n_frames, N_Q))
    for a in range(0, n_frames, 1000):  # bounded temporaries; data set-up, not timed
        s = slice(a, a + 1000)
        I[s] = A[s, None] * q[None, :] ** -p[s, None] + B[s, None]
    S = 0.01 * I
    I += rng.standard_normal(I.shape) * S
    return q, I, S, p


def ours(q, I, S):
    from saxsnb.analysis import porod

    return porod(q, I, S)


def _range(q):
    from saxsnb.analysis import default_porod_range

    lo, hi = default_porod_range(q)
    return (q >= lo) & (q <= hi)


def loop_curve_fit(q, I, S):
    from scipy.optimize import curve_fit

    m = _range(q)
    x = q[m]
    out = np.full(I.shape[0], np.nan)
    for f in range(I.shape[0]):  # the plain per-frame loop being compared against
        y, s = I[f, m], S[f, m]
        p0 = [y[0] * x[0] ** 4, 4.0, 0.0]
        try:
            par, _ = curve_fit(lambda x, a, p, b: a * x**-p + b, x, y, p0=p0, sigma=s, absolute_sigma=True)
            out[f] = par[1]
        except RuntimeError:
            pass
    return out


def loop_lmfit(q, I, S):
    from lmfit.models import ConstantModel, PowerLawModel

    model = PowerLawModel() + ConstantModel()
    m = _range(q)
    x = q[m]
    out = np.full(I.shape[0], np.nan)
    for f in range(I.shape[0]):
        y, s = I[f, m], S[f, m]
        pars = model.make_params(amplitude=y[0] * x[0] ** 4, exponent=-4.0, c=0.0)
        out[f] = -model.fit(y, pars, x=x, weights=1.0 / s).params["exponent"].value
    return out


def timed(func, *args):
    t, c = time.perf_counter(), time.process_time()
    res = func(*args)
    return res, time.perf_counter() - t, time.process_time() - c


def main(argv):
    n = int(argv[1]) if len(argv) > 1 else int(os.environ.get("SAXSNB_BENCH_FRAMES", 10_000))
    nb = int(argv[2]) if len(argv) > 2 else int(os.environ.get("SAXSNB_BENCH_BASELINE_FRAMES", 200))
    nb = min(nb, n)
    q, I, S, p_true = make_series(n)
    ours(q, I[:20], S[:20])  # warm-up (imports, first allocations)
    runs = [timed(ours, q, I, S) for _ in range(3)]
    res, w_ours, c_ours = min(runs, key=lambda r: r[1])
    p_cf, w_cf, c_cf = timed(loop_curve_fit, q, I[:nb], S[:nb])
    _, w_lm, c_lm = timed(loop_lmfit, q, I[:nb], S[:nb])
    scale = n / nb
    ok = res["exponent_status"] == "ok"
    with np.errstate(invalid="ignore"):
        z = np.abs(res["exponent"][:nb] - p_cf) / res["exponent_sigma"][:nb]
    print(f"series: {n} frames x {N_Q} q, Porod range {int(_range(q).sum())} points; exponent found for "
          f"{100 * ok.mean():.1f} % of frames, median |p - p_true| "
          f"{np.nanmedian(np.abs(res['exponent'] - p_true)):.4f}")
    print(f"ours: porod() (Porod constant + background, joint A q^-p + B fit): {w_ours:.3f} s wall "
          f"(best of 3: {', '.join(f'{r[1]:.3f}' for r in runs)}), {c_ours:.3f} s CPU")
    print(f"scipy curve_fit loop, timed on {nb} frames ({w_cf:.2f} s), scaled to {n}: "
          f"{w_cf * scale:.1f} s wall")
    print(f"lmfit loop, timed on {nb} frames ({w_lm:.2f} s), scaled to {n}: {w_lm * scale:.1f} s wall")
    print(f"ratio curve_fit loop / ours: {w_cf * scale / w_ours:.0f}x wall, {c_cf * scale / c_ours:.0f}x CPU")
    print(f"ratio lmfit loop / ours: {w_lm * scale / w_ours:.0f}x wall, {c_lm * scale / c_ours:.0f}x CPU")
    print(f"exponent, ours vs curve_fit on those {nb} frames: median |difference| / sigma "
          f"{np.nanmedian(z):.2g}, max {np.nanmax(z):.2g} (ours: grid 0.01 refined by a parabola)")
    print(f"load average during the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main(sys.argv)
