"""Benchmark of the linked panels: memory kept, handler time and bytes sent per step.

A synthetic phase-ramp series (2,000 frames x 1,000 q points by default; set
``SAXSNB_BENCH_FRAMES`` or pass ``--frames N`` for a smaller run), background
subtracted and with 2 % of its points masked, is opened with all panels
(``saxsnb.explore``). Every widget gets a recording comm (a stand-in for the
kernel's, built on the ``comm`` package's DummyComm), so the bytes that would go to
the browser (JSON plus binary buffers) are counted message by message.

Measured:
- the memory ``explore()`` keeps (tracemalloc: allocated while building the
  dashboard and still held after ``gc.collect()``), as a multiple of the series'
  intensity + sigma bytes (target <= 1.2x; before the shared model each panel kept
  its own masked copy). Imports and first-use caches are warmed on a 5-frame
  dashboard first, so they are not counted;
- one frame step (``dashboard.frame += 1``): the time of all Python handlers and the
  bytes sent (targets: <= 30 ms, <= 100 kB);
- one brush change in the Guinier panel (a new q range: the whole series is refitted
  once, then a step only indexes it): time and bytes;
- the baseline a step is compared with: one plain per-frame accessor call
  ``ds.isel(frame=[i]).saxs.guinier()`` (what a panel without the series cache would
  do per step), and the size of one full resend of the series (what a naive panel
  would send).

Run: ``.venv/bin/python benchmarks/bench_widgets.py [--frames N] [--steps K]``.
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import statistics
import time
import tracemalloc

import comm
import numpy as np


class RecordingComm(comm.DummyComm):
    """A comm that keeps the size of every message instead of sending it."""

    log: list[int] = []

    def publish_msg(self, msg_type, data=None, metadata=None, buffers=None, **keys):
        size = len(json.dumps(data, default=str)) if data is not None else 0
        size += sum(memoryview(b).nbytes for b in (buffers or []))
        RecordingComm.log.append(size)


def _create(*args, **kwargs):
    return RecordingComm(*args, **kwargs)


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--frames", type=int, default=int(os.environ.get("SAXSNB_BENCH_FRAMES", 2000)))
    ap.add_argument("--steps", type=int, default=20)
    args = ap.parse_args(argv)

    comm.create_comm = _create  # every widget built from here on records its messages
    import saxsnb
    from saxsnb.demo import make_series
    from saxsnb.widgets.dashboard import DEFAULT_PANELS

    n = args.frames
    t0 = time.perf_counter()
    ds, bg = make_series("phase-ramp", temperature=np.linspace(20.0, 90.0, n))
    ds = ds.saxs.subtract(bg)
    ds["mask"] = (("frame", "q"), np.random.default_rng(1234).random(ds["intensity"].shape) < 0.02)
    t_data = time.perf_counter() - t0
    print(f"series: {ds.sizes['frame']} frames x {ds.sizes['q']} q points, 2 % masked "
          f"(made in {t_data:.1f} s)")

    # memory kept by explore(), against the series' intensity + sigma
    saxsnb.explore(ds.isel(frame=slice(0, 5)), panels=DEFAULT_PANELS)  # imports and caches of first use
    series_bytes = ds["intensity"].nbytes + ds["sigma"].nbytes
    gc.collect()
    tracemalloc.start()
    dash = saxsnb.explore(ds, panels=DEFAULT_PANELS)  # every default panel, whatever the data
    gc.collect()
    kept, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    del dash
    gc.collect()
    mem_ratio = kept / series_bytes
    print(
        f"memory kept by explore(): {kept / 1e6:.1f} MB = {mem_ratio:.2f}x the series' intensity + sigma "
        f"({series_bytes / 1e6:.1f} MB; peak while building {peak / series_bytes:.1f}x): "
        + ("ok" if mem_ratio <= 1.2 else "OVER TARGET") + " (target <= 1.2x)"
    )
    RecordingComm.log.clear()

    t0 = time.perf_counter()
    dash = saxsnb.explore(ds, panels=DEFAULT_PANELS)  # every default panel, whatever the data
    t_open = time.perf_counter() - t0
    opened = sum(RecordingComm.log)
    print(f"explore(): {t_open:.2f} s to open all panels, {opened / 1e6:.2f} MB sent once")

    # frame steps
    times, sizes = [], []
    start = n // 3
    for k in range(args.steps):
        RecordingComm.log.clear()
        t = time.perf_counter()
        dash.frame = start + k
        times.append(time.perf_counter() - t)
        sizes.append(sum(RecordingComm.log))
    step_ms = 1e3 * statistics.median(times)
    step_kb = statistics.median(sizes) / 1e3
    print(
        f"frame step: median {step_ms:.1f} ms (max {1e3 * max(times):.1f} ms), "
        f"median {step_kb:.1f} kB (max {max(sizes) / 1e3:.1f} kB) in {len(RecordingComm.log)} messages"
    )

    # brush changes in the Guinier panel (q^2 on the x axis)
    g = dash.panels["guinier"]
    btimes, bsizes = [], []
    for k in range(3):
        lo, hi = 0.31 + 0.01 * k, 0.6 + 0.02 * k
        RecordingComm.log.clear()
        t = time.perf_counter()
        g.selector.brushing = True
        g.selector.selected = np.array([lo**2, hi**2])
        g.selector.brushing = False
        btimes.append(time.perf_counter() - t)
        bsizes.append(sum(RecordingComm.log))
    brush_ms = 1e3 * statistics.median(btimes)
    print(
        f"brush change (whole-series refit): median {brush_ms:.1f} ms, "
        f"{statistics.median(bsizes) / 1e3:.1f} kB"
    )

    # a step with a fixed range (indexes the cached series fit)
    RecordingComm.log.clear()
    t = time.perf_counter()
    dash.frame = start + args.steps
    fixed_ms = 1e3 * (time.perf_counter() - t)
    print(f"frame step with a fixed Guinier range: {fixed_ms:.1f} ms, {sum(RecordingComm.log) / 1e3:.1f} kB")

    # baselines
    t = time.perf_counter()
    for k in range(5):
        ds.isel(frame=[start + k]).saxs.guinier()
    base_ms = 1e3 * (time.perf_counter() - t) / 5
    full_mb = ds["intensity"].nbytes / 1e6
    print(
        f"baseline: one per-frame accessor call {base_ms:.1f} ms (the step does all panels in "
        f"{step_ms / base_ms:.2f}x that); one resend of the series would be {full_mb:.1f} MB "
        f"({1e3 * full_mb / max(step_kb, 1e-9):.0f}x a step)"
    )
    verdict = "ok" if step_ms <= 30 and step_kb <= 100 else "OVER TARGET"
    print(f"targets <= 30 ms and <= 100 kB per step: {verdict}")
    return {"step_ms": step_ms, "step_kb": step_kb, "brush_ms": brush_ms, "open_s": t_open,
            "memory_ratio": mem_ratio}


if __name__ == "__main__":
    main()
