"""No data lost: processing killed at random points, and damaged caches.

``aspectus process`` runs in a real subprocess on several clips into one
OUTDIR and is killed with SIGKILL at seeded random times, again and again into
the same OUTDIR. After every kill:

* each clip folder holding ``run.json`` has every output it lists, with the
  SHA-256 run.json records, and its tables read;
* every file with a final name reads completely (writes are atomic); only
  temporary ``.*.part`` names may be left half-written;
* folders that were complete before the kill are still complete.

A final uninterrupted run finishes every clip, whatever the kills left.
"""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from aspectus.atomic import sha256_file
from aspectus.webcam.pipeline import STAGING_DIR

REPO = Path(__file__).resolve().parents[2]
N_KILLS = 6
SEED = 20240607


@pytest.fixture(scope="module")
def clips(tmp_path_factory) -> list[Path]:
    from aspectus.synth.render import render_clip, synth_trajectory

    d = tmp_path_factory.mktemp("interrupt_clips")
    out = []
    for i, name in enumerate(("linden_brook_p01_s01", "linden_brook_p02_s01", "linden_brook_p03_s01")):
        tr = synth_trajectory(duration_s=2.0 + 0.5 / 30, seed=40 + i, blink_rate_per_min=0.0)
        out.append(render_clip(d / f"{name}.mp4", tr, size_px=(320, 240), fps=30.0, seed=40 + i).path)
    return out


def _start(clips, out_dir: Path, *extra) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=str(REPO), GLOG_minloglevel="2")
    return subprocess.Popen([sys.executable, "-m", "aspectus", "process", *map(str, clips), "-o", str(out_dir),
                             "--quiet", *extra], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)


def _readable(p: Path) -> None:
    if p.suffix == ".parquet":
        pd.read_parquet(p)
    elif p.suffix == ".csv":
        pd.read_csv(p)
    elif p.suffix == ".json":
        json.loads(p.read_text())


def check_clip_folder(d: Path) -> bool:
    """Assert the invariants of one clip folder; return whether it is complete (has run.json)."""
    names = {p.name for p in d.iterdir()}
    for name in names:
        if name.startswith("."):
            # a temporary file of an interrupted write, or the staging folder an interrupted re-run was
            # building its new result in (the earlier result beside it stays valid until the swap)
            assert name.endswith(".part") or name == STAGING_DIR, f"unexpected hidden file {d / name}"
            continue
        _readable(d / name)  # every final name is a complete file
    if "run.json" not in names:
        return False
    run = json.loads((d / "run.json").read_text())
    outputs = run["outputs"]
    for required in ("samples.parquet", "samples.csv", "events.csv", "events.parquet", "features.csv",
                     "features.parquet"):
        assert required in outputs, f"{d}: run.json does not list {required}"
    for name, info in outputs.items():
        p = d / name
        assert p.is_file(), f"{p} listed in run.json but missing"
        assert sha256_file(p) == info["sha256"], f"{p} does not match its checksum in run.json"
        assert p.stat().st_size == info["bytes"]
    s = pd.read_parquet(d / "samples.parquet")
    assert len(s) == run["quality"]["frames"]
    assert s["t_s"].is_monotonic_increasing
    return True


def _snapshot(out_dir: Path) -> dict[str, dict]:
    """run.json of each complete folder."""
    snap = {}
    if out_dir.is_dir():
        for d in sorted(out_dir.iterdir()):
            if (d / "run.json").is_file():
                snap[d.name] = json.loads((d / "run.json").read_text())
    return snap


@pytest.mark.slow
@pytest.mark.timeout(600)
def test_kill_at_random_points_leaves_every_output_intact(clips, tmp_path):
    out_dir = tmp_path / "out"
    rng = np.random.default_rng(SEED)
    # how long one uninterrupted run takes here (start-up included), to spread the kills over it
    t0 = time.monotonic()
    p = _start(clips, tmp_path / "timing")
    assert p.wait(timeout=300) == 0, p.stderr.read().decode()
    full_s = time.monotonic() - t0
    kills = 0
    for round_ in range(N_KILLS):
        before = _snapshot(out_dir)
        extra = ("--no-reuse",) if round_ % 2 else ()  # also interrupt a full rewrite of finished clips
        proc = _start(clips, out_dir, *extra)
        delay = float(rng.uniform(0.2, 1.0) * full_s)
        try:
            proc.wait(timeout=delay)
        except subprocess.TimeoutExpired:
            proc.send_signal(signal.SIGKILL)
            proc.wait(timeout=30)
            kills += 1
        proc.stderr.close()
        if not out_dir.is_dir():
            continue
        for d in sorted(out_dir.iterdir()):
            check_clip_folder(d)
        after = _snapshot(out_dir)
        for name in before:
            # a finished clip may be replaced by a newer finished result or be mid-rewrite, never left damaged;
            # the files it lists are checked above whenever run.json is present
            if name in after:
                assert after[name]["input_sha256"] == before[name]["input_sha256"]
    assert kills >= N_KILLS // 2, "the kills came too late to interrupt anything; the test proves nothing"
    # a clean run afterwards finishes every clip and leaves no temporary file behind in use
    proc = _start(clips, out_dir)
    assert proc.wait(timeout=300) == 0, proc.stderr.read().decode()
    proc.stderr.close()
    for c in clips:
        d = out_dir / c.stem
        assert check_clip_folder(d), f"{d} not finished after the clean run"
        assert not (d / STAGING_DIR).exists(), f"{d}: the clean run left the staging folder behind"


@pytest.mark.slow
@pytest.mark.timeout(300)
def test_damaged_cache_is_detected_and_rebuilt(clips, tmp_path):
    from aspectus.events.analysis import AnalysisParams
    from aspectus.webcam.pipeline import CacheError, load_samples, process_clip, reanalyse

    clip = clips[0]
    out = tmp_path / clip.stem
    first = process_clip(clip, out)
    good_sha = sha256_file(out / "samples.parquet")
    # flip bytes in the middle: same size, so only the checksum can tell
    data = bytearray((out / "samples.parquet").read_bytes())
    mid = len(data) // 2
    data[mid:mid + 16] = bytes(255 - b for b in data[mid:mid + 16])
    (out / "samples.parquet").write_bytes(bytes(data))
    with pytest.raises(CacheError, match="checksum"):
        load_samples(out)
    with pytest.raises(CacheError, match="samples.parquet"):
        reanalyse(out, AnalysisParams())
    again = process_clip(clip, out)  # reuse=True: must not trust the damaged cache
    assert again.reused_samples is False
    run = json.loads((out / "run.json").read_text())
    assert sha256_file(out / "samples.parquet") == run["outputs"]["samples.parquet"]["sha256"]
    pd.testing.assert_frame_equal(load_samples(out), first.samples, check_dtype=False)
    assert sha256_file(out / "samples.parquet") != sha256_file(clip)
    assert good_sha  # the first run wrote a checksum to compare against
    # a cache that cannot be read at all is rebuilt too
    (out / "samples.parquet").write_bytes(b"PAR1 not really")
    assert process_clip(clip, out).reused_samples is False
    check_clip_folder(out)


_KILL_AFTER_NTH_WRITE = r"""
import os, signal, sys
n = int(sys.argv[1])
real = os.replace
count = [0]
def replace(src, dst, *a, **kw):
    real(src, dst, *a, **kw)
    count[0] += 1
    if count[0] == n:
        os.kill(os.getpid(), signal.SIGKILL)
os.replace = replace
from aspectus.cli import main
sys.exit(main(sys.argv[2:]))
"""


def _writes_of_one_run(clip: Path, out_root: Path, extra) -> int:
    """Number of atomic renames one ``aspectus process`` run over ``out_root`` makes (same hook, never firing)."""
    env = dict(os.environ, PYTHONPATH=str(REPO), GLOG_minloglevel="2")
    code = _KILL_AFTER_NTH_WRITE.replace("if count[0] == n:", "if False:") + ""
    code = code.replace("sys.exit(main(sys.argv[2:]))",
                        "rc = main(sys.argv[2:]); print('WRITES', count[0]); sys.exit(rc)")
    p = subprocess.run([sys.executable, "-c", code, "0", "process", str(clip), "-o", str(out_root), "--quiet", *extra],
                       capture_output=True, text=True, env=env, timeout=120)
    assert p.returncode == 0, p.stderr
    return int(p.stdout.split("WRITES")[-1])


@pytest.mark.slow
@pytest.mark.timeout(600)
@pytest.mark.parametrize("extra", [("--set", "min_fixation_ms=120"), ("--no-reuse",)],
                         ids=["new-analysis-params", "full-rewrite"])
def test_kill_after_every_write_keeps_the_earlier_result_consistent(clips, tmp_path, extra):
    """Kill right after each atomic rename of a re-run over a finished clip: every state on disk is consistent."""
    import shutil

    clip = clips[1]
    base = tmp_path / "base"
    p = _start([clip], base)
    assert p.wait(timeout=120) == 0
    p.stderr.close()
    shutil.copytree(base, tmp_path / "count")
    n_writes = _writes_of_one_run(clip, tmp_path / "count", extra)
    assert n_writes >= 5  # events and features (csv + parquet), run.json; samples too on a full rewrite
    env = dict(os.environ, PYTHONPATH=str(REPO), GLOG_minloglevel="2")
    for k in range(1, n_writes + 1):
        out_root = tmp_path / f"kill{k}"
        shutil.copytree(base, out_root)
        proc = subprocess.run([sys.executable, "-c", _KILL_AFTER_NTH_WRITE, str(k), "process", str(clip), "-o",
                               str(out_root), "--quiet", *extra], capture_output=True, env=env, timeout=120)
        assert proc.returncode == -signal.SIGKILL, f"write {k}: not killed ({proc.returncode})"
        check_clip_folder(out_root / clip.stem)
    # and a rerun after the last kill finishes the clip
    p = _start([clip], tmp_path / f"kill{n_writes}", *extra)
    assert p.wait(timeout=120) == 0
    p.stderr.close()
    assert check_clip_folder(tmp_path / f"kill{n_writes}" / clip.stem)
