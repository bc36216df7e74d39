"""Batches of real rendered clips through the real decoder, face mesh and pipeline.

Checks from the issue: a folder with one corrupt clip, one clip without a
face and one non-video file finishes with those three failed (with reasons)
and all others done; a batch killed with SIGKILL midway and restarted has
every clip done exactly once, none missing and no output truncated.
"""
from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from aspectus.atomic import sha256_file
from aspectus.studies.batch import AttemptLog, run_batch

pytestmark = pytest.mark.slow

REPO = Path(__file__).resolve().parents[2]
GOOD = ("p01_s01", "p02_s01", "p03_s01", "p04_s01", "p05_s01")


def render_study_clips(base: Path) -> Path:
    """Render the Linden Brook reading-pilot test clips once per test session (640x360, 1.5 s, 30 fps).

    ``good/`` holds five clips with a face; ``bad/`` holds one clip without
    a face, one truncated clip and one text file named ``.mp4``.
    """
    root = base / "linden_brook_clips"
    marker = root / ".complete"
    if marker.exists():
        return root
    from aspectus.synth.render import render_clip, synth_trajectory

    shutil.rmtree(root, ignore_errors=True)
    (root / "good").mkdir(parents=True)
    (root / "bad").mkdir()
    for i, stem in enumerate(GOOD):
        tr = synth_trajectory(duration_s=1.5, seed=10 + i)
        render_clip(root / "good" / f"{stem}.mp4", tr, size_px=(640, 360), fps=30.0, seed=10 + i)
    tr = synth_trajectory(duration_s=1.0, seed=3)
    render_clip(root / "bad" / "p06_s01_noface.mp4", tr, size_px=(640, 360), fps=30.0, seed=3,
                face_visible=[False] * 30)
    data = (root / "good" / "p01_s01.mp4").read_bytes()
    (root / "bad" / "p07_s01_truncated.mp4").write_bytes(data[: len(data) // 2])
    (root / "bad" / "p08_s01_notes.mp4").write_text("Linden Brook Primary School reading pilot: notes, not a video\n")
    for p in root.rglob("*_truth.csv"):
        p.unlink()
    marker.write_text("ok")
    return root


@pytest.fixture(scope="session")
def study_clips(tmp_path_factory) -> Path:
    return render_study_clips(tmp_path_factory.getbasetemp())


def _outputs_intact(clip_dir: Path) -> None:
    """Every output listed in run.json exists with the recorded size and checksum, no temporary file is left."""
    run = json.loads((clip_dir / "run.json").read_text())
    assert run["outputs"], clip_dir
    for name, info in run["outputs"].items():
        p = clip_dir / name
        assert p.stat().st_size == info["bytes"], p
        assert sha256_file(p) == info["sha256"], p
    assert not list(clip_dir.glob(".*.part"))
    pd.read_parquet(clip_dir / "samples.parquet")
    pd.read_parquet(clip_dir / "features.parquet")


def test_folder_with_bad_files_reports_them_and_finishes_the_rest(study_clips, tmp_path):
    src = tmp_path / "study"
    shutil.copytree(study_clips / "good", src / "classA")
    shutil.copytree(study_clips / "bad", src / "classA", dirs_exist_ok=True)
    for stem in GOOD[2:]:  # a lean run: two good clips and the three bad files
        (src / "classA" / f"{stem}.mp4").unlink()
    out = tmp_path / "out"
    res = run_batch(src, out, workers=2)
    st = res.status.set_index("key")
    assert st.loc["p01_s01", "status"] == "done" and st.loc["p02_s01", "status"] == "done"
    bad = st.loc[["p06_s01_noface", "p07_s01_truncated", "p08_s01_notes"]]
    assert set(bad["status"]) == {"failed"}
    assert "no face" in bad.loc["p06_s01_noface", "reason"]
    for key in bad.index:
        assert f"{key}.mp4" in bad.loc[key, "reason"], bad.loc[key, "reason"]  # the reason names the file
        assert not bad.loc[key, "reason"].startswith("internal error"), bad.loc[key, "reason"]
    assert res.counts == {"done": 2, "skipped": 0, "failed": 3, "pending": 0}
    on_disk = pd.read_csv(out / "status.csv")
    assert list(on_disk.columns[:4]) == ["clip", "key", "status", "reason"]
    assert sorted(on_disk["status"]) == ["done", "done", "failed", "failed", "failed"]
    study = pd.read_csv(out / "study_features.csv")
    assert set(study["key"]) == {"p01_s01", "p02_s01"}
    assert (study.groupby("key")["scope"].apply(lambda s: (s == "clip").sum()) == 1).all()
    assert set(study["participant"]) == {None} or study["participant"].isna().all()
    # the study table carries each clip's own features unchanged
    own = pd.read_parquet(out / "p01_s01" / "features.parquet")
    mine = pd.read_parquet(out / "study_features.parquet")
    mine = mine[mine["key"] == "p01_s01"].reset_index(drop=True)
    pd.testing.assert_frame_equal(mine[list(own.columns)], own, check_dtype=False)
    for key in ("p01_s01", "p02_s01"):
        _outputs_intact(out / key)
        s = pd.read_parquet(out / key / "samples.parquet")
        assert len(s) == 45 and s["valid"].mean() > 0.8
    # a second run skips the done clips and does not retry the bad files
    again = run_batch(src, out, workers=2)
    st2 = again.status.set_index("key")
    assert set(st2.loc[["p01_s01", "p02_s01"], "status"]) == {"skipped"}
    assert set(st2.loc[bad.index, "status"]) == {"failed"}
    attempts = [r for r in AttemptLog(out / ".batch" / "attempts.jsonl").read() if r["status"] in ("done", "failed")]
    assert len(attempts) == 5  # nothing was tried twice


def _wait_for(pred, *, limit_s: float, what: str) -> None:
    """Poll until ``pred()``; fail the test with ``what`` if it never happens (a hang guard, not a timing check)."""
    end = time.monotonic() + limit_s
    while time.monotonic() < end:
        if pred():
            return
        time.sleep(0.1)
    raise AssertionError(f"gave up waiting: {what}")


def test_killed_batch_restarts_without_redoing_or_losing_clips(study_clips, tmp_path):
    import psutil

    src = tmp_path / "study"
    shutil.copytree(study_clips / "good", src)
    out = tmp_path / "out"
    log_path = out / ".batch" / "attempts.jsonl"
    env = dict(os.environ, PYTHONPATH=str(REPO))
    cmd = [sys.executable, "-m", "aspectus", "batch", str(src), "-o", str(out), "--workers", "2", "--quiet"]
    proc = subprocess.Popen(cmd, cwd=REPO, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        def one_done():
            return log_path.exists() and any(r["status"] == "done" for r in AttemptLog(log_path).read())

        _wait_for(lambda: one_done() or proc.poll() is not None, limit_s=600, what="first clip finished")
        assert proc.poll() is None, "the batch finished before it could be killed"
        workers = [c for c in psutil.Process(proc.pid).children(recursive=True)]
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=60)
        if proc.stderr:
            proc.stderr.close()
    # the worker processes notice that the coordinator is gone and exit by themselves
    _wait_for(lambda: not any(w.is_running() and w.status() != psutil.STATUS_ZOMBIE for w in workers),
              limit_s=60, what="orphaned workers to exit")
    before = {p.parent.name: (p.stat().st_mtime_ns, p.read_bytes()) for p in out.glob("*/run.json")}
    assert 1 <= len(before) < len(GOOD)
    res = run_batch(src, out, workers=2)
    st = res.status.set_index("key")["status"].to_dict()
    assert set(st) == set(GOOD)  # none missing
    assert all(st[k] == "skipped" for k in before)
    assert all(st[k] == "done" for k in GOOD if k not in before)
    for key, (mtime, data) in before.items():  # finished clips were not recomputed
        p = out / key / "run.json"
        assert p.stat().st_mtime_ns == mtime and p.read_bytes() == data
    # each clip finished exactly once across both runs ("recovered" = finished just before the kill, logged after)
    finished = [r["key"] for r in AttemptLog(log_path).read() if r["status"] in ("done", "recovered")]
    assert sorted(finished) == sorted(GOOD)
    for key in GOOD:
        _outputs_intact(out / key)
    study = pd.read_csv(out / "study_features.csv")
    assert sorted(study["key"].unique()) == sorted(GOOD)


def test_cli_batch_manifest_labels_and_exit_codes(study_clips, tmp_path, capsys):
    from aspectus.cli import main

    man = tmp_path / "pilot.csv"
    good = study_clips / "good"
    man.write_text("clip,participant,session,school\n"
                   f"{good / 'p01_s01.mp4'},p01,s01,Linden Brook\n"
                   f"{study_clips / 'bad' / 'p08_s01_notes.mp4'},p08,s01,Linden Brook\n")
    out = tmp_path / "out"
    assert main(["batch", str(man), "-o", str(out), "--workers", "1", "--quiet", "--window-s", "0.5",
                 "--step-s", "0.5"]) == 1
    text = capsys.readouterr()
    assert "1 done, 0 skipped (already done), 1 failed" in text.out
    # the processed clip's verdict is counted in words (the failed one has none)
    import re

    m = re.search(r"verdicts: (\d+) usable, (\d+) partly usable \(coarser features only\), (\d+) not usable", text.out)
    assert m and sum(map(int, m.groups())) == 1, text.out
    st = pd.read_csv(out / "status.csv").query("status == 'done'").iloc[0]
    word = "not usable" if not st["usable"] else ("partly usable" if st["verdict"].startswith("Partly") else "usable")
    assert int(m.group({"usable": 1, "partly usable": 2, "not usable": 3}[word])) == 1
    assert "p08_s01_notes.mp4" in text.err
    study = pd.read_csv(out / "study_features.csv")
    assert set(study["participant"]) == {"p01"} and set(study["school"]) == {"Linden Brook"}
    assert (study["scope"] == "window").sum() >= 2  # 1.5 s in 0.5 s windows
    side = json.loads((out / "study.json").read_text())
    assert side["params"]["analysis"]["window_s"] == 0.5
    assert main(["batch", str(man), "-o", str(out), "--dry-run", "--window-s", "0.5", "--step-s", "0.5"]) == 0
    assert "skip" in capsys.readouterr().out
    assert main(["batch", str(tmp_path / "nothing-here"), "-o", str(out)]) == 2
    assert "not found" in capsys.readouterr().err
    # a folder's failed clip is named once ("p08_s01_notes.mp4: p08_s01_notes.mp4: ..." before)
    assert main(["batch", str(study_clips / "bad"), "-o", str(tmp_path / "bad_out"), "--workers", "1", "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "failed: p08_s01_notes.mp4: not a readable video file" in err, err
