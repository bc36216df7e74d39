"""The bundled demo clips, processed end to end as a user would (camgaze process)."""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo_out(repo_root, tmp_path_factory):
    clips = sorted((repo_root / "sample_clips").glob("*.mp4"))
    assert clips, "sample_clips/ holds no clips - run scripts/make_sample_clips.py"
    out = tmp_path_factory.mktemp("demo")
    r = subprocess.run([sys.executable, "-m", "camgaze", "process", *map(str, clips), "-o", str(out), "--quiet"],
                       capture_output=True, text=True, timeout=900)
    assert r.returncode == 0, r.stderr
    return out, clips, r.stdout


def test_every_demo_clip_is_usable(demo_out):
    out, clips, stdout = demo_out
    for clip in clips:
        assert (out / clip.stem / "run.json").exists()
        assert f"{clip.name}:" in stdout
    assert stdout.count("Usable:") == len(clips)


def test_median_fixation_duration_is_plausible(demo_out):
    """Typical fixations last about 250 ms (Rayner 1998 - from memory; also common practice): 150-400 ms."""
    out, clips, _ = demo_out
    for clip in clips:
        ev = pd.read_csv(out / clip.stem / "events.csv")
        fix = ev[ev["type"] == "fixation"]
        assert len(fix) >= 10
        assert 150.0 <= fix["duration_ms"].median() <= 400.0, clip.name


def test_fixation_and_blink_counts_near_the_rendered_truth(demo_out, repo_root):
    out, clips, _ = demo_out
    for clip in clips:
        truth = pd.read_csv(repo_root / "sample_clips" / f"{clip.stem}_truth_events.csv")
        ev = pd.read_csv(out / clip.stem / "events.csv")
        n_true = (truth["type"] == "fixation").sum()
        n_est = (ev["type"] == "fixation").sum()
        assert abs(n_est - n_true) <= 0.3 * n_true, (clip.name, n_est, n_true)
        assert (ev["type"] == "blink").sum() == (truth["type"] == "blink").sum()


def test_segments_give_per_segment_features(demo_out, repo_root, tmp_path):
    out, clips, _ = demo_out
    p01 = [c for c in clips if "p01" in c.name][0]
    seg = repo_root / "sample_clips" / "segments_p01_s01.csv"
    r = subprocess.run([sys.executable, "-m", "camgaze", "process", str(p01), "-o", str(out), "--segments", str(seg),
                        "--quiet"], capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    f = pd.read_csv(out / p01.stem / "features.csv")
    labels = pd.read_csv(seg)["label"].tolist()
    assert f.loc[f["scope"] == "segment", "label"].tolist() == labels
    assert np.isfinite(f.loc[f["scope"] == "segment", "fixation_count"]).all()
