"""Smoke run of benchmarks/bench_widgets.py on a small series; bytes per step are
deterministic, so the 100 kB budget is checked here (times are only printed)."""

import sys
from pathlib import Path

import comm

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))


def test_bench_widgets_smoke(capsys):
    import bench_widgets

    original = comm.create_comm
    try:
        out = bench_widgets.main(["--frames", "30", "--steps", "3"])
    finally:
        comm.create_comm = original
        sys.path.remove(str(Path(__file__).resolve().parents[1] / "benchmarks"))
    printed = capsys.readouterr().out
    assert "frame step" in printed and "brush change" in printed
    # the memory figure is printed (at 30 frames the widgets themselves dominate it)
    assert "memory kept by explore()" in printed and out["memory_ratio"] > 0
    # the per-step payload does not depend on the number of frames: only the current
    # frame's marks are resent (binary buffers), never the series or the map
    assert 0 < out["step_kb"] <= 100
