"""Benchmark: a series of 100,000 frames x 1,000 q from a chunked Zarr store on a dask cluster.

Series: synthetic, written chunk by chunk to a Zarr store (never whole in memory):
each frame a sphere form factor (R drifting 2.5-3.5 nm) plus six Pn3m reflections
(cell edge drifting 9.5-10.5 nm) on a flat background with counting noise; a
temperature scan. Analyses, each lazy on the store and computed on the cluster:
Guinier with the automatic range, Porod, ``find_peaks`` + ``index_phases``, and
P(r) at a fixed Dmax (the automatic Dmax scan costs ~50x more per frame; ``--pr-auto``).
The statuses are printed too: the synthetic curves carry Bragg peaks, which a single
particle's P(r) does not describe ("poor_fit"), and Porod's q^-4 tail is hidden under
the peaks and background on most frames: the figures are about time and memory.

Printed, for LocalClusters of 1 and 2 workers (threads_per_worker=1, started with
:func:`saxsnb.cluster`): wall time per analysis, peak resident memory of each worker
(distributed's own monitor, sampled every 0.5 s) and of the client (sampled every 0.1 s
while the analysis runs), the 2-worker / 1-worker speed-up, and the load average so a
reader can judge (the speed-up needs two free cores). Targets (issue 13): <= 2 GB per
worker, <= 1 GB client, speed-up >= 1.7 where two cores are free.

The malloc setting (:mod:`saxsnb._cluster`): the same chunk analysis (Guinier automatic
+ Kratky summary) timed in the client process, on a worker with distributed's default
``MALLOC_TRIM_THRESHOLD_`` and on a worker started by ``saxsnb.cluster`` (ratios to the
in-process time, measured in the same run).

Usage::

    .venv/bin/python benchmarks/bench_scale.py [--frames 100000] [--chunk 2500] [--dir DIR]

Disk: about 16 bytes x frames x q compressed a little (1.5 GB at 10^5 x 1,000); the
store is removed at the end.
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

N_Q = 1000
Q = np.linspace(0.05, 5.0, N_Q)


def block(start: int, n: int, seed: int = 13):
    """Intensity and sigma of frames start .. start+n (deterministic per block)."""
    rng = np.random.default_rng([seed, start])
    f = start + np.arange(n)
    R = 3.0 + 0.5 * np.sin(f / 5000.0)
    x = Q[None] * R[:, None]
    I = 100.0 * (3 * (np.sin(x) - x * np.cos(x)) / x**3) ** 2 + 0.5
    a = 10.0 + 0.5 * np.cos(f / 7000.0)  # Pn3m cell edge (nm): q = 2 pi sqrt(s) / a
    for s in (2, 3, 4, 6, 8, 9):
        c = 2 * np.pi * np.sqrt(s) / a
        I += 20.0 / s * np.exp(-4 * np.log(2) * ((Q[None] - c[:, None]) / 0.015) ** 2)
    S = np.sqrt(I / 500.0)
    I += rng.standard_normal(I.shape) * S
    return I, S


def write_store(path: Path, n_frames: int, chunk: int) -> None:
    """The series as a Zarr store chunked along frame, written block by block."""
    import dask.array as da
    import xarray as xr

    import saxsnb

    template = saxsnb.from_arrays(Q, *block(0, 1), scan={"temperature": [20.0]}, sample="bench")
    chunks = ((min(chunk, n_frames - a) for a in range(0, n_frames, chunk)),)
    chunks = (tuple(chunks[0]), (N_Q,))

    def part(which, block_info=None):
        (a, b), _ = block_info[None]["array-location"]
        return block(a, b - a)[which]

    arrays = [da.map_blocks(part, w, chunks=chunks, dtype=float) for w in (0, 1)]
    ds = xr.Dataset(
        {"intensity": (("frame", "q"), arrays[0], template.intensity.attrs),
         "sigma": (("frame", "q"), arrays[1], template.sigma.attrs)},
        coords={"frame": np.arange(n_frames), "q": ("q", Q, template.q.attrs),
                "temperature": ("frame", 20.0 + 60.0 * np.arange(n_frames) / n_frames,
                                template.temperature.attrs)},
        attrs={k: v for k, v in template.attrs.items() if k != "history"},
    )
    ds.to_zarr(path, mode="w", compute=True, consolidated=False)


class ClientMemory:
    """Peak resident memory of this process while the block runs (sampled)."""

    def __init__(self, every: float = 0.1):
        import psutil

        self.proc, self.every, self.peak = psutil.Process(), every, 0

    def _loop(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, self.proc.memory_info().rss)
            self._stop.wait(self.every)

    def __enter__(self):
        self._stop = threading.Event()
        self.peak = self.proc.memory_info().rss
        self._t = threading.Thread(target=self._loop, daemon=True)
        self._t.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._t.join()


def worker_cpu(client) -> list[float]:
    """CPU seconds (user + system) each worker process has used so far."""

    def cpu(dask_worker):
        t = dask_worker.monitor.proc.cpu_times()
        return float(t.user + t.system)

    return [v for _, v in sorted(client.run(cpu).items())]


def worker_peaks(client, since: float) -> list[float]:
    """Peak RSS (bytes) of every worker since ``since`` (distributed's system monitor)."""

    def peak(dask_worker, since=since):
        m = dask_worker.monitor
        t, mem = np.asarray(m.quantities["time"]), np.asarray(m.quantities["memory"])
        sel = mem[t >= since]
        return float(sel.max() if sel.size else m.proc.memory_info().rss)

    return sorted(client.run(peak).values())


ANALYSES = {
    "guinier (automatic)": lambda ds, o: ds.saxs.guinier(),
    "porod": lambda ds, o: ds.saxs.porod(),
    "find_peaks + index_phases": lambda ds, o: ds.saxs.index_phases(ds.saxs.find_peaks()),
    "P(r)": lambda ds, o: ds.saxs.distance_distribution(None if o.pr_auto else o.pr_dmax).drop_vars("fit"),
}


def chunk_work(q, I, S):
    """What the malloc comparison times: one chunk, Guinier automatic + Kratky summary."""
    import time as _t

    from saxsnb.analysis import guinier, kratky_summary

    t = _t.perf_counter()
    for _ in range(2):
        g = guinier(q, I, S)
        kratky_summary(q, I, rg=g["rg"], i0=g["i0"])
    return (_t.perf_counter() - t) / 2


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--frames", type=int, default=int(os.environ.get("SAXSNB_BENCH_FRAMES", 100_000)))
    p.add_argument("--chunk", type=int, default=2500, help="frames per chunk of the store")
    p.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    p.add_argument("--dir", default=None, help="where to write the store (default: a temporary folder)")
    p.add_argument("--pr-dmax", type=float, default=25.0, help="fixed Dmax of P(r), nm")
    p.add_argument("--pr-auto", action="store_true", help="P(r) with the automatic Dmax scan")
    p.add_argument("--skip", nargs="*", default=[], help="analyses to leave out (porod, peaks, pr, guinier)")
    o = p.parse_args(argv)

    import xarray as xr

    import saxsnb

    def plain(text):
        return "".join(c for c in text.lower() if c.isalnum())

    skip = {k for k in ANALYSES if any(plain(s) in plain(k) for s in o.skip)}
    root = Path(tempfile.mkdtemp(prefix="saxsnb-bench-", dir=o.dir))
    store = root / "series.zarr"
    print(f"{o.frames} frames x {N_Q} q, chunks of {o.chunk} frames; load average at start "
          f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    try:
        t = time.perf_counter()
        write_store(store, o.frames, o.chunk)
        size = sum(f.stat().st_size for f in store.rglob("*") if f.is_file())
        print(f"store written in {time.perf_counter() - t:.1f} s, {size / 1e9:.2f} GB on disk "
              f"({16 * o.frames * N_Q / 1e9:.2f} GB of float64 intensity and sigma)")

        # ---- the malloc setting: one chunk in-process, on a default worker, on saxsnb.cluster's
        n = min(o.chunk, o.frames)
        I, S = block(0, n)
        chunk_work(Q, I[:50], S[:50])  # warm the imports
        clients = {fast: saxsnb.cluster(1, fast_malloc=fast, memory_limit="3GB")
                   for fast in (False, True)}
        times: dict = {"client": [], False: [], True: []}
        try:
            futs = {k: c.scatter((Q, I, S), broadcast=True) for k, c in clients.items()}
            for k, c in clients.items():  # warm-up
                c.submit(lambda a: chunk_work(a[0], a[1][:50], a[2][:50]), futs[k], pure=False).result()
            for _ in range(3):  # interleaved rounds, the best of each: robust to a drifting load
                times["client"].append(chunk_work(Q, I, S))
                for k, c in clients.items():
                    times[k].append(c.submit(lambda a: chunk_work(*a), futs[k], pure=False).result())
        finally:
            for c in clients.values():
                c.close()
        local, default, fast = min(times["client"]), min(times[False]), min(times[True])
        print(f"\none chunk ({n} frames), Guinier automatic + Kratky summary, best of 3: in-process "
              f"{local:.2f} s; worker with distributed's default malloc trim {default:.2f} s "
              f"(ratio {default / local:.2f}); worker from saxsnb.cluster {fast:.2f} s "
              f"(ratio {fast / local:.2f})")

        # ---- the analyses on 1 and 2 workers
        wall: dict[int, dict[str, float]] = {}
        # CPU seconds of the busiest worker: on a loaded machine the wall-clock speed-up says
        # little, CPU time says what two free cores would give (an upper bound: it leaves out
        # waits between tasks, which the wall-clock figure on a quiet machine includes)
        busiest: dict[int, dict[str, float]] = {}
        for nw in o.workers:
            print(f"\nLocalCluster: {nw} worker(s), threads_per_worker=1 (saxsnb.cluster)")
            client = saxsnb.cluster(nw, memory_limit="2.5GB")
            wall[nw], busiest[nw] = {}, {}
            try:
                # warm-up (imports on every worker), not timed
                first = xr.open_zarr(store, consolidated=False).isel(frame=slice(0, 4 * nw))
                first.chunk({"frame": 2}).saxs.guinier().compute()
                for name, run in ANALYSES.items():
                    if name in skip:
                        continue
                    ds = xr.open_zarr(store, consolidated=False)
                    since = time.time()
                    cpu0 = worker_cpu(client)
                    with ClientMemory() as cm:
                        t = time.perf_counter()
                        res = run(ds, o).compute()
                        dt = time.perf_counter() - t
                    wall[nw][name] = dt
                    cpu = [b - a for a, b in zip(cpu0, worker_cpu(client))]
                    busiest[nw][name] = max(cpu)
                    st = np.asarray(res["status"].values)
                    ok = float((st == "ok").mean())
                    codes, counts = np.unique(st[st != "ok"], return_counts=True)
                    other = f", else mostly {codes[np.argmax(counts)]}" if codes.size else ""
                    wp = worker_peaks(client, since)
                    print(f"  {name:27s} {dt:8.1f} s  ({o.frames / dt:7.0f} frames/s)  workers peak "
                          f"{', '.join(f'{m / 1e9:.2f}' for m in wp)} GB  client peak {cm.peak / 1e9:.2f} GB"
                          f"  ok {100 * ok:.1f} %{other}  worker CPU {', '.join(f'{c:.1f}' for c in cpu)} s"
                          f"  load {os.getloadavg()[0]:.1f}")
            finally:
                client.close()
        if len(wall) >= 2:
            a, b = sorted(wall)[:2]
            print(f"\nspeed-up {b} workers / {a} worker (target >= 1.7 with two free cores): wall clock, "
                  "and from the busiest worker's CPU time (what free cores would give, waits left out)")
            for name in wall[a]:
                print(f"  {name:27s} wall {wall[a][name] / wall[b][name]:.2f}x   "
                      f"CPU {busiest[a][name] / busiest[b][name]:.2f}x")
        print(f"load average at the end: {' '.join(f'{x:.1f}' for x in os.getloadavg())}")
    finally:
        shutil.rmtree(root, ignore_errors=True)


if __name__ == "__main__":
    main()
