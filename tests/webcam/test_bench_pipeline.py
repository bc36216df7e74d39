"""The pipeline benchmark runs and prints its figures (it is not a timed test: no speed is asserted)."""
from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.slow


def test_benchmark_prints_rounds_and_the_ratio(rendered_clip, repo_root):
    clip = rendered_clip(duration_s=1.0, seed=2, size_px=(320, 180), name="p07_s01_reading.mp4").path
    r = subprocess.run([sys.executable, str(Path(repo_root) / "bench" / "bench_pipeline.py"), "--clip", str(clip),
                        "--rounds", "2"], capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr[-2000:]
    out = r.stdout
    assert "clip: 30 frames, 320x180" in out
    rounds = [line for line in out.splitlines() if re.match(r"\s+[12]\s+\d", line)]
    assert len(rounds) == 2, out
    m = re.search(r"median of 2 rounds = ([\d.]+)%", out)
    assert m and 0 < float(m.group(1)) < 1000, out
    bad = subprocess.run([sys.executable, str(Path(repo_root) / "bench" / "bench_pipeline.py"), "--rounds", "0"],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "--rounds must be at least 1" in bad.stderr
