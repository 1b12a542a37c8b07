"""Benchmark: the peak extra memory of each accessor analysis on one dask chunk (issue 13).

Every accessor method runs on a dask-chunked series as one task per chunk (plus the
small steps across frames). What bounds a worker's memory is the peak a task allocates
above what it was given: its temporaries and its outputs. Here each method is computed
on a series of two chunks (``--frames`` frames each x 1,000 q, the synthetic curves of
``bench_scale.py``: a sphere form factor, Pn3m reflections, a flat background, counting
noise) with dask's synchronous scheduler; a dask callback reads :mod:`tracemalloc`
(numpy reports its array buffers to it) around every task and keeps the largest peak
above the memory at the task's start. Printed, in units of one chunk (the intensity
block, frames x q x 8 bytes): that peak, the task's output and their difference (the
temporaries), and the task. Target (issue 13): a peak <= 3 chunks, the output included.

Usage::

    .venv/bin/python benchmarks/bench_temporaries.py [--frames 600] [--only porod kratky]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_scale import N_Q, Q, block  # noqa: E402


def methods(bg, ref):
    """name -> callable(ds) giving the lazy result (the accessor methods on a chunk)."""
    return {
        "guinier (automatic)": lambda ds: ds.saxs.guinier(),
        "guinier (fixed range)": lambda ds: ds.saxs.guinier((0.1, 0.35)),
        "porod": lambda ds: ds.saxs.porod(),
        "invariant": lambda ds: ds.saxs.invariant(),
        "kratky": lambda ds: ds.saxs.kratky(),
        "kratky_summary": lambda ds: ds.saxs.kratky_summary(),  # its Guinier fit included
        # the Guinier fit persisted first: the summary's own task
        "kratky_summary (Guinier given)":
            lambda ds: ds.saxs.kratky_summary(guinier=ds.saxs.guinier().persist()),
        "P(r) fixed Dmax": lambda ds: ds.saxs.distance_distribution(25.0),
        "P(r) automatic Dmax":
            lambda ds: ds.saxs.distance_distribution(dmax_candidates=np.linspace(10, 40, 8)),
        "find_peaks": lambda ds: ds.saxs.find_peaks(),
        "find_peaks + index_phases": lambda ds: ds.saxs.index_phases(ds.saxs.find_peaks()),
        "subtract": lambda ds: ds.saxs.subtract(bg, scale=0.5),
        "subtract (auto scale)": lambda ds: ds.saxs.subtract(bg, scale="auto"),
        "absolute_scale": lambda ds: ds.saxs.absolute_scale(ref, kind="curve", known=np.ones(N_Q)),
        "per_concentration": lambda ds: ds.saxs.per_concentration(2.0),
        "rebin": lambda ds: ds.saxs.rebin(200),
        "to_q_unit": lambda ds: ds.saxs.to_q_unit("1/A"),
        "compare_frames": lambda ds: ds.saxs.compare_frames(pairwise=False),
        "average": lambda ds: ds.saxs.average(exclude=None),
        "extrapolate_concentration": lambda ds: ds.saxs.extrapolate_concentration(
            np.linspace(1.0, 4.0, ds.sizes["frame"]), i0="lowest_q"),
    }


def _nbytes(result) -> int:
    if isinstance(result, (tuple, list)):
        return sum(_nbytes(r) for r in result)
    if isinstance(result, dict):
        return sum(_nbytes(r) for r in result.values())
    return int(getattr(result, "nbytes", 0))


def task_peaks(lazy) -> tuple[int, int, str]:
    """The task of ``lazy``'s graph with the largest peak traced bytes above its start:
    (peak, bytes of its output, its name). The finalize step (the client joining the
    computed chunks into the answer) is not a chunk task and is left out."""
    import dask
    from dask.callbacks import Callback

    peaks: list[tuple[int, int, str]] = []

    class Peak(Callback):
        def _pretask(self, key, dsk, state):
            tracemalloc.reset_peak()
            self.start = tracemalloc.get_traced_memory()[0]

        def _posttask(self, key, result, dsk, state, id):
            name = str(key[0] if isinstance(key, tuple) else key)
            if "finalize" in name:
                return
            peak = tracemalloc.get_traced_memory()[1] - self.start
            peaks.append((peak, _nbytes(result), name.rsplit("-", 1)[0]))

    with dask.config.set(scheduler="synchronous"), Peak():
        lazy.compute()
    return max(peaks) if peaks else (0, 0, "(no task: coordinates only)")


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--frames", type=int, default=int(os.environ.get("SAXSNB_BENCH_FRAMES", 600)),
                   help="frames in the chunk")
    p.add_argument("--only", nargs="*", default=os.environ.get("SAXSNB_BENCH_ONLY", "").split(),
                   help="methods to run (substrings of their names)")
    o = p.parse_args(argv)

    import saxsnb

    n = o.frames
    I, S = block(0, 2 * n)  # two chunks: the client's join of them is a task of its own
    ds = saxsnb.from_arrays(Q, I, S, scan={"temperature": np.linspace(20.0, 80.0, 2 * n)}, sample="bench")
    bg = saxsnb.from_arrays(Q, np.full((1, N_Q), 0.4), np.full((1, N_Q), 0.01))
    ref = saxsnb.from_arrays(Q, I[:1], S[:1])
    lazy = ds.chunk({"frame": n}).persist()  # the chunks in memory: the tasks start from them
    chunk = I[:n].nbytes
    print(f"one chunk of {n} frames x {N_Q} q ({chunk / 1e6:.1f} MB of intensity); "
          f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    print(f"{'method':28s} {'peak':>6s} {'output':>7s} {'temporaries':>12s} (chunks)  {'time':>6s}  task")
    tracemalloc.start()
    try:
        for name, run in methods(bg, ref).items():
            if o.only and not any(s.lower() in name.lower() for s in o.only):
                continue
            t = time.perf_counter()
            peak, out, task = task_peaks(run(lazy))
            dt = time.perf_counter() - t
            flag = "" if peak <= 3 * chunk else "  > 3x"
            print(f"{name:28s} {peak / chunk:6.2f} {out / chunk:7.2f} {(peak - out) / chunk:12.2f}"
                  f"           {dt:5.1f}s  {task}{flag}")
    finally:
        tracemalloc.stop()
    print(f"load average at the end: {' '.join(f'{x:.1f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
