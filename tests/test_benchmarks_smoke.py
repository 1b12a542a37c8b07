"""Each benchmark runs at a tiny size, so a benchmark cannot rot between full runs.

No timing is asserted here (STYLE.md: performance lives in benchmarks/ as ratios).
"""

import os
import subprocess
import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"


@pytest.mark.parametrize(
    ("script", "env"),
    [
        ("bench_read.py", {"SAXSNB_BENCH_FILES": "20", "SAXSNB_BENCH_Q": "50"}),
        ("bench_linear.py", {"SAXSNB_BENCH_FRAMES": "40"}),
        ("bench_peaks.py", {"SAXSNB_BENCH_FRAMES": "20", "SAXSNB_BENCH_BASELINE_FRAMES": "4"}),
        ("bench_distance.py", {"SAXSNB_BENCH_FRAMES": "12"}),
        ("bench_preparation.py", {"SAXSNB_BENCH_FRAMES": "30"}),
        ("bench_porod.py", {"SAXSNB_BENCH_FRAMES": "40", "SAXSNB_BENCH_BASELINE_FRAMES": "5"}),
        ("bench_index.py", {"SAXSNB_BENCH_FRAMES": "200"}),
        ("bench_temporaries.py", {"SAXSNB_BENCH_FRAMES": "12", "SAXSNB_BENCH_ONLY": "porod subtract"}),
    ],
)
def test_benchmark_runs_small(script, env):
    run = subprocess.run(
        [sys.executable, str(BENCH / script)],
        env={**os.environ, **env},
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert run.returncode == 0, run.stderr[-2000:]
    assert "ratio" in run.stdout.lower() or "x" in run.stdout
