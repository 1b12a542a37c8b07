"""Accuracy table on independent truth (issue 15): the larger run of tests/validation.

Usage: .venv/bin/python benchmarks/validate_accuracy.py [--draws 200] [--frames 30]
       [--route peaks|user] [--only-ramps] [--seeds 3 ...]

``--route user`` indexes the ramps as ``ds.saxs.index_phases`` does (index_phases with
the prominence as signal-to-noise ratio); ``peaks`` (default) calls index_peaks.

Prints, per shape and noise level, the automatic Guinier Rg median |error|, the share
of draws within the reported sigma and spread / median sigma (1 = calibrated); per
mesophase ramp and counting level, the label accuracy and the median lattice error;
per no-lattice series, the frames given a phase (target 0).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "validation"))
import runs  # noqa: E402
import truth as t  # noqa: E402


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--draws", type=int, default=200)
    ap.add_argument("--frames", type=int, default=30)
    ap.add_argument("--route", choices=("peaks", "user"), default="peaks")
    ap.add_argument("--only-ramps", action="store_true")
    ap.add_argument("--seeds", type=int, nargs="+", default=[3], help="noise seeds of the ramps")
    args = ap.parse_args(argv)
    if args.route == "user":
        runs.index_curves = runs.index_curves_user
    if args.only_ramps:
        return ramps(args)
    print("Guinier Rg (automatic range), truth from closed forms / quadrature / Debye sum")
    print(f"{'shape':18s} {'noise':>6s} {'ok':>4s} {'med|err|':>9s} {'bias':>8s} "
          f"{'in 1sig':>8s} {'spread/sig':>10s}")
    cases = dict(runs.shape_cases(quick=False))
    for name, f in cases.items():
        _, rg0 = f(np.array([1e-3]))
        q = runs._grid(rg0)
        I, rg = f(q)
        for noise in (0.0, 0.001, 0.01, 0.03, 0.1):
            a = runs.guinier_accuracy(I, q, rg, max(noise, 1e-6), args.draws, seed=1)
            print(f"{name:18s} {noise:6.3f} {a['n_ok']:4d} {a['median_abs_err']:9.4f} "
                  f"{np.nanmedian(a['bias']):8.4f} {a['within_1sigma']:8.2f} {a['spread_over_sigma']:10.2f}")
    q, I, rg = runs.debye_cloud_case()
    for noise in (0.001, 0.01):
        a = runs.guinier_accuracy(I, q, rg, noise, args.draws, seed=1)
        print(f"{'Debye cloud':18s} {noise:6.3f} {a['n_ok']:4d} {a['median_abs_err']:9.4f} "
              f"{np.nanmedian(a['bias']):8.4f} {a['within_1sigma']:8.2f} {a['spread_over_sigma']:10.2f}")
    print()
    ramps(args)


def ramps(args):
    print(f"Mesophase ramps (find_peaks + {'index_phases' if args.route == 'user' else 'index_peaks'}"
          " with the peak table)")
    print(f"{'phases':22s} {'counts':>6s} {'right':>6s} {'lattice err':>11s}  wrong labels")
    cases = [(p,) for p in t.PHASES] + [("Fd3m", "hexagonal"), ("Im3m", "Pm3n"), ("Ia3d", "Pn3m"),
                                         ("hexagonal", "Ia3d"), ("lamellar", "Pn3m"), ("Pn3m", "Im3m")]
    for counts in (3000, 600, 150):
        tot = right = tot_i = right_i = 0
        for ph, seed in ((ph, s) for ph in cases for s in args.seeds):
            a = runs.ramp_accuracy(ph, counts, args.frames, seed=seed)
            lab, c = np.unique(a["labels"][~a["right"]], return_counts=True)
            tot += a["right"].size
            right += a["right"].sum()
            tot_i += a["identifiable"].sum()
            right_i += (a["right"] & a["identifiable"]).sum()
            name = "+".join(ph) + f" s{seed}"
            print(f"{name:22s} {counts:6d} {a['right'].mean():6.2f} {a['lattice_err']:11.5f}  "
                  + ", ".join(f"{x or 'none'} x{n}" for x, n in zip(lab, c)))
        a = runs.ramp_accuracy(("Pn3m",), counts, args.frames, seed=4, spikes=3)
        print(f"{'Pn3m + 3 spikes':22s} {counts:6d} {a['right'].mean():6.2f} {a['lattice_err']:11.5f}")
        print(f"{'all ramps':22s} {counts:6d} {right / tot:6.3f}")
        share = right_i / max(tot_i, 1)
        print(f"{'identifiable frames':22s} {counts:6d} {share:6.3f}  ({tot_i} of {tot} frames: "
              "every phase with >= 3 (cubic) or 2 reflections above 3 sigma)")
    print()
    print("No-lattice series: frames given a phase (target 0)")
    for kind in ("spheres z100", "spheres z30", "vesicles z100", "vesicles z50", "spikes", "featureless"):
        q, I, S = runs.no_lattice_series(kind, args.frames, seed=2)
        _, r = runs.index_curves(q, I, S)
        print(f"{kind:22s} {int((r['phase'][:, 0] != '').sum()):3d} / {args.frames}")


if __name__ == "__main__":
    main()
