"""benchmarks/bench_images.py runs at a tiny size (no timing asserted; STYLE.md)."""

import os
import subprocess
import sys
from pathlib import Path

BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "bench_images.py"


def test_bench_images_runs_small():
    env = {**os.environ, "SAXSNB_BENCH_FRAMES": "4", "SAXSNB_BENCH_PIXELS": "64", "SAXSNB_BENCH_BINS": "50"}
    run = subprocess.run([sys.executable, str(BENCH)], env=env, capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr[-2000:]
    assert "ratio loop / sparse" in run.stdout
