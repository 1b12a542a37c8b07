"""Benchmark: reading a folder of text curves with saxsnb.read_series versus a plain
per-file ``np.loadtxt`` loop followed by ``np.stack``, timed in the same run.

Usage::

    python benchmarks/bench_read.py [N_FILES [N_Q]]

or set SAXSNB_BENCH_FILES / SAXSNB_BENCH_Q (defaults 2000 files x 1000 points).
Targets (issue 14), on both layouts: read_series >= 3x faster than the loop, and
<= 5x the time of reading the files' raw bytes (``os.read`` of every file, the floor
of any reader), both ratios printed per layout from the same run.

Two folders are timed:
- "fixed layout": the usual output of a reduction program, every row printed with the
  same format (``%.8e``, positive numbers), header lines as saxsnb's demo writes them;
- "variable layout": rows of varying width (``%.6g``, intensities of both signs), which
  takes the general token path of the parser.
Wall-clock times are the figure of merit; the CPU-time ratio (our CPU time summed
over both reading threads) is printed too, as it depends less on other load on the
machine. The baseline reads only the numbers; read_series also reads the headers (scan values,
units), checks the q grids and builds the Dataset.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import saxsnb


def _sizes() -> tuple[int, int]:
    n_files = int(os.environ.get("SAXSNB_BENCH_FILES", 2000))
    n_q = int(os.environ.get("SAXSNB_BENCH_Q", 1000))
    if len(sys.argv) > 1:
        n_files = int(sys.argv[1])
    if len(sys.argv) > 2:
        n_q = int(sys.argv[2])
    return n_files, n_q


def make_folder(folder: Path, n_files: int, n_q: int, *, variable: bool) -> list[str]:
    rng = np.random.default_rng(1234)
    q = np.linspace(0.05, 5.0, n_q)
    paths = []
    for i in range(n_files):
        T = 20.0 + 0.05 * i
        I = 1e3 * np.exp(-((q * (2.0 + 0.001 * i)) ** 2) / 3) + 1.0
        I = I + rng.normal(0, 0.02, n_q) * I
        if variable:
            I = I - 1.5
        S = 0.02 * np.abs(I) + 1e-3
        head = (
            f"saxsnb series frame {i}\nsample = benchmark mix\nq_unit = 1/nm\n"
            f"intensity_unit = arb\ntemperature = {T!r}\ntemperature_units = degC\nq I sigma"
        )
        p = folder / f"frame_{i:05d}.dat"
        np.savetxt(
            p, np.column_stack([q, I, S]), fmt="%.6g" if variable else "%.8e", header=head, comments="# "
        )
        paths.append(str(p))
    return paths


def run(n_files: int, n_q: int, *, variable: bool, repeat: int = 3) -> dict:
    """Time both readers ``repeat`` times, interleaved (the machine's load changes
    over time; interleaving exposes both to it alike), and keep each one's best."""
    from saxsnb.io.text import _read_bytes

    t_loop, t_ours, t_raw = np.inf, np.inf, np.inf
    c_loop, c_ours = np.inf, np.inf
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        paths = make_folder(folder, n_files, n_q, variable=variable)
        saxsnb.read_series(paths[:2], progress=False)  # imports, warm-up
        for _ in range(repeat):
            t0, c0 = time.perf_counter(), time.process_time()
            stacked = np.stack([np.loadtxt(p) for p in paths])
            t_loop = min(t_loop, time.perf_counter() - t0)
            c_loop = min(c_loop, time.process_time() - c0)
            t0 = time.perf_counter()
            for p in paths:
                _read_bytes(p)
            t_raw = min(t_raw, time.perf_counter() - t0)
            t0, c0 = time.perf_counter(), time.process_time()
            ds = saxsnb.read_series(folder, progress=False)
            t_ours = min(t_ours, time.perf_counter() - t0)
            c_ours = min(c_ours, time.process_time() - c0)
    assert ds.sizes["frame"] == n_files and ds.sizes["q"] == n_q
    np.testing.assert_array_equal(ds["intensity"].values, stacked[:, :, 1])
    return {
        "loop": t_loop,
        "ours": t_ours,
        "ratio": t_loop / t_ours,
        "raw": t_raw,
        "raw_ratio": t_ours / t_raw,
        "cpu_loop": c_loop,
        "cpu_ours": c_ours,
        "cpu_ratio": c_loop / c_ours,
    }


def main() -> None:
    n_files, n_q = _sizes()
    print(f"read {n_files} files x {n_q} points (3 columns), best of 3 interleaved runs")
    for label, variable in (("fixed layout", False), ("variable layout", True)):
        r = run(n_files, n_q, variable=variable)
        print(
            f"  {label:16s} np.loadtxt loop + stack: {r['loop']:7.3f} s   "
            f"read_series: {r['ours']:7.3f} s   speed-up: {r['ratio']:5.1f}x (target >= 3x)   "
            f"raw bytes: {r['raw']:6.3f} s   read_series / raw: {r['raw_ratio']:5.1f}x (target <= 5x)   "
            f"(CPU time {r['cpu_loop']:.3f} s vs {r['cpu_ours']:.3f} s, all threads: {r['cpu_ratio']:4.1f}x)"
        )
    print(f"  load average: {', '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
