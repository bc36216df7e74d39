"""A batch task tells the per-clip function how to run the stages, and leaves the environment as it was."""
from __future__ import annotations

import os

from aspectus.studies.task import run_clip_task


def test_task_sets_the_stages_for_the_clip_only(tmp_path, monkeypatch):
    clip = tmp_path / "p01_s01.mp4"
    clip.write_bytes(b"x")
    seen = []

    def clip_fn(clip, out, **kw):
        seen.append(os.environ.get("ASPECTUS_STAGES"))

    monkeypatch.delenv("ASPECTUS_STAGES", raising=False)
    base = {"clip": str(clip), "out_dir": str(tmp_path / "o"), "params": None, "clip_fn": clip_fn}
    assert run_clip_task(base, lambda f, m: None, None)["status"] == "done"
    assert "ASPECTUS_STAGES" not in os.environ  # put back: a task run in this process changes nothing after it
    monkeypatch.setenv("ASPECTUS_STAGES", "overlapped")
    run_clip_task(base | {"stages": "serial"}, lambda f, m: None, None)
    assert os.environ["ASPECTUS_STAGES"] == "overlapped"
    run_clip_task(base | {"stages": "overlapped"}, lambda f, m: None, None)
    assert seen == ["serial", "serial", "overlapped"]  # serial unless the batch asks otherwise
