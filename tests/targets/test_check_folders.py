"""Where a clip's known-target check lands: the folder the batch names for the clip (one rule,
:func:`aspectus.studies.clips.clip_output_key`), whatever the clip's sub-folder.

A study with two clips of the same file name in two sub-folders (``classA/p01.mp4``, ``classB/p01.mp4``):
the batch keys them ``classA__p01`` and ``classB__p01``; the check of each must land in its own folder, the
study table must carry each clip's own figures, and no command may overwrite one clip's results with the
other's.
"""
from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from aspectus.studies.batch import run_batch
from aspectus.studies.clips import clip_output_dir, clip_output_key, output_folder_holds_another_clip

STANDIN = "tests.studies.test_batch:standin_process_clip"


def _sha(p) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def _two_classes(root, a=b"clip of class A", b=b"clip of class B, longer"):
    for cls, data in (("classA", a), ("classB", b)):
        (root / cls).mkdir(parents=True, exist_ok=True)
        (root / cls / "p01.mp4").write_bytes(data)
    return root


def test_key_is_the_batchs_before_and_after_the_batch(tmp_path):
    from tests.studies.test_batch import StandinParams

    src = _two_classes(tmp_path / "study")
    out = tmp_path / "results"
    a, b = src / "classA" / "p01.mp4", src / "classB" / "p01.mp4"
    # before any batch: the study names the keys; without it the one-clip key is the stem
    assert clip_output_key(a, out, study=src) == "classA__p01"
    assert clip_output_key(b, out, study=src) == "classB__p01"
    assert clip_output_key(a, out) == "p01"
    res = run_batch(src, out, params=StandinParams(), workers=1, clip_fn=STANDIN)
    assert sorted(res.status["key"]) == ["classA__p01", "classB__p01"]
    # after the batch: its record in OUTDIR gives each clip its folder, also from another working folder
    assert clip_output_dir(out, a) == out / "classA__p01"
    assert clip_output_dir(out, b) == out / "classB__p01"
    assert output_folder_holds_another_clip(out / "classA__p01", a) is None
    assert "another clip" in output_folder_holds_another_clip(out / "classA__p01", b)
    # a clip the batch did not cover keeps its stem; a clip outside the given study is an error
    other = tmp_path / "elsewhere" / "p02.mp4"
    other.parent.mkdir()
    other.write_bytes(b"x")
    assert clip_output_key(other, out) == "p02"
    from aspectus.errors import AspectusInputError

    with pytest.raises(AspectusInputError, match="not one of the study's clips"):
        clip_output_key(other, out, study=src)
    # a manifest study: keys as the batch gives them to the manifest's rows
    man = tmp_path / "study.csv"
    man.write_text("clip,participant\nstudy/classA/p01.mp4,p01\nstudy/classB/p01.mp4,p01\n")
    assert clip_output_key(b, None, study=man) == "classB__p01"
    # and the record of a batch run on that manifest (clip paths relative to the manifest's folder)
    out_m = tmp_path / "results_manifest"
    run_batch(man, out_m, params=StandinParams(), workers=1, clip_fn=STANDIN)
    assert clip_output_dir(out_m, a) == out_m / "classA__p01" and clip_output_dir(out_m, b) == out_m / "classB__p01"


def test_check_refuses_to_write_over_another_clips_results(tmp_path, capsys):
    """Without the study, both clips would go to OUTDIR/p01: the second check stops with a message naming
    the folder and what to do, and the first clip's results are untouched."""
    from aspectus.atomic import write_json
    from aspectus.cli import main

    src = _two_classes(tmp_path / "study")
    out = tmp_path / "results"
    (out / "p01").mkdir(parents=True)
    write_json(out / "p01" / "run.json", {"clip": "../../study/classA/p01.mp4", "clip_name": "p01.mp4",
                                          "input_sha256": _sha(src / "classA" / "p01.mp4")})
    before = (out / "p01" / "run.json").read_bytes()
    (tmp_path / "schedule.json").write_text("{}")
    rc = main(["targets", "check", str(src / "classB" / "p01.mp4"), "--schedule", str(tmp_path / "schedule.json"),
               "-o", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert rc == 2
    assert "holds the results of another clip" in err and "--study" in err and "p01.mp4" in err
    assert (out / "p01" / "run.json").read_bytes() == before
    assert sorted(p.name for p in (out / "p01").iterdir()) == ["run.json"]


@pytest.mark.slow
def test_two_same_named_clips_in_two_folders_each_get_their_own_check(tmp_path, capsys):
    """Real clips (rendered, eyes following the schedule; runs the face mesh): class A's student follows the
    dots with gain 1, class B's with gain 0.6. Batch, then ``aspectus targets check -o results`` on each,
    then the batch again: each check lands beside its own results and the study table carries each clip's
    own figures (not swapped, not lost), and nothing was processed twice or overwritten."""
    from aspectus.cli import main
    from aspectus.synth.target_gaze import render_target_clip
    from aspectus.targets.schedule import Screen, make_schedule

    sched = make_schedule(Screen(1280, 720, 344.0, 193.5, 600.0), seed=5, fixation_s=1.2, n_fixations=6,
                          pursuit_sweeps=0)
    sched.write(tmp_path / "schedule.json")
    src = tmp_path / "study"
    for cls, gain, seed in (("classA", 1.0, 3), ("classB", 0.6, 4)):
        (src / cls).mkdir(parents=True)
        render_target_clip(src / cls / "p01.mp4", sched, lead_in_s=1.0, tail_s=0.5, gain=(gain, gain),
                           offset_deg=(2.0, -2.0), size_px=(640, 480), fov_deg=45.0, seed=seed, face="astronaut")
    out = tmp_path / "results"
    first = run_batch(src, out, workers=1)
    assert first.counts.get("done") == 2, first.status
    runs = {k: json.loads((out / k / "run.json").read_text()) for k in ("classA__p01", "classB__p01")}
    for cls in ("classA", "classB"):
        assert main(["targets", "check", str(src / cls / "p01.mp4"), "--schedule", str(tmp_path / "schedule.json"),
                     "-o", str(out), "--quiet"]) == 0
        assert f"{cls}__p01" in capsys.readouterr().out
    assert not (out / "p01").exists()
    for cls in ("classA", "classB"):
        d = out / f"{cls}__p01"
        doc = json.loads((d / "target_check.json").read_text())
        assert doc["clip_sha256"] == _sha(src / cls / "p01.mp4")
        run = json.loads((d / "run.json").read_text())
        # the check reused the batch's samples of the same clip (same input, same samples) and added its block
        assert run["input_sha256"] == runs[f"{cls}__p01"]["input_sha256"] == _sha(src / cls / "p01.mp4")
        assert run["outputs"]["samples.parquet"] == runs[f"{cls}__p01"]["outputs"]["samples.parquet"]
        assert "target_check" in run
    again = run_batch(src, out, workers=1)
    assert again.counts.get("skipped") == 2, again.status
    study = pd.read_csv(out / "study_features.csv")
    per = study.drop_duplicates("key").set_index("key")
    assert sorted(per.index) == ["classA__p01", "classB__p01"]
    ga, gb = per.loc["classA__p01", "target_gain_yaw"], per.loc["classB__p01", "target_gain_yaw"]
    print(f"gain yaw: classA {ga:.3f} (rendered 1.0), classB {gb:.3f} (rendered 0.6)")
    assert np.isfinite(ga) and np.isfinite(gb)
    # each clip's own figures: the rendered gains 1.0 and 0.6, told apart (tests/targets/test_rendered_targets
    # measures the chain's gain on such clips within 0.2 of the rendered one)
    assert ga > 0.8 and gb < 0.75 and ga - gb > 0.25
    assert per.loc["classB__p01", "target_excluded"] and "yaw gain" in per.loc["classB__p01",
                                                                            "target_exclusion_reasons"]
    for k in ("classA__p01", "classB__p01"):
        doc = json.loads((out / k / "target_check.json").read_text())
        assert per.loc[k, "target_gain_yaw"] == pytest.approx(doc["mapping"]["gain_yaw"], abs=1e-6)


@pytest.mark.slow
def test_process_after_a_batch_updates_the_batchs_folder(tmp_path):
    """``aspectus process CLIP -o results/`` names the folder by the same rule: after a batch into results/,
    classA/p01.mp4 is processed into results/classA__p01 (runs the pipeline on the shorter demo clip)."""
    from aspectus.cli import main
    from tests.studies.test_batch import StandinParams

    demo = Path(__file__).resolve().parents[2] / "sample_clips" / "linden_brook_p02_s01.mp4"
    src = tmp_path / "study"
    for cls in ("classA", "classB"):
        (src / cls).mkdir(parents=True)
        shutil.copy(demo, src / cls / "p01.mp4")
    out = tmp_path / "results"
    run_batch(src, out, params=StandinParams(), workers=1, clip_fn=STANDIN)  # stand-in outputs, real keys
    standin_b = (out / "classB__p01" / "samples.parquet").read_bytes()
    # the stand-in's files are not a run of aspectus (processing refuses to overwrite such files): class A's
    # folder is cleared, the batch's record (status.csv) still names its key
    shutil.rmtree(out / "classA__p01")
    assert main(["process", str(src / "classA" / "p01.mp4"), "-o", str(out), "--quiet"]) == 0
    assert not (out / "p01").exists()
    run = json.loads((out / "classA__p01" / "run.json").read_text())
    assert run["input_sha256"] == _sha(src / "classA" / "p01.mp4") and "params_sha256" in run
    assert (out / "classB__p01" / "samples.parquet").read_bytes() == standin_b  # the other clip untouched
