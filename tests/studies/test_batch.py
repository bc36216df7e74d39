"""Batch coordinator logic: resume, hashing, status, study table, failures, worker crashes.

These tests drive the real coordinator and the real local process pool with a
small per-clip function of their own (below), so that resume and bookkeeping
can be checked on many clips in seconds. The real pipeline on real clips is
exercised in test_batch_pipeline.py and test_dask_batch.py.
"""
from __future__ import annotations

import json
import os
import threading
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from aspectus.atomic import sha256_file, write_csv, write_json, write_parquet
from aspectus.studies.batch import AttemptLog, HashIndex, clip_is_done, plan_batch, run_batch
from aspectus.studies.engines import LocalEngine, default_workers
from aspectus.errors import AspectusError, AspectusInputError, Cancelled, NoFaceError, VideoError
from aspectus.webcam.pipeline import params_fingerprint

HERE = Path(__file__).resolve().parent


@dataclass
class StandinParams:
    """Picklable stand-in for ProcessParams (same to_dict contract)."""

    fov_deg: float = 60.0

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass
class _Result:
    summary: dict


def standin_process_clip(clip, out_dir, *, params, segments=None, progress=None, cancel=None):
    """Per-clip function with process_clip's contract; its behaviour is steered by the clip's bytes."""
    clip, out_dir = Path(clip), Path(out_dir)
    seg_path = segments
    data = clip.read_bytes()
    if data.startswith(b"BROKEN"):
        raise VideoError("not a readable video file", path=clip, hint="check it")
    if data.startswith(b"NOFACE"):
        raise NoFaceError("no face found in any frame", path=clip)
    if data.startswith(b"CRASH"):
        os._exit(9)  # a worker dying like a segfault would
    if data.startswith(b"BUG"):
        raise RuntimeError("something unexpected")
    if data.startswith(b"WAIT"):  # runs until cancelled
        while not cancel.is_set():
            if progress:
                progress(0.1, "waiting")
            threading.Event().wait(0.05)
        raise Cancelled()
    n = 10 + len(data) % 7
    for i in range(3):
        if progress:
            progress((i + 1) / 3, f"step {i + 1}")
    t = np.arange(n) / 30.0
    samples = pd.DataFrame({"t_s": t, "valid": np.ones(n, bool), "yaw_deg": np.sin(t) * params.fov_deg / 60,
                            "pitch_deg": np.cos(t)})
    feats = pd.DataFrame({"scope": ["clip", "window"], "label": ["clip", "w0"], "start_s": [0.0, 0.0],
                          "end_s": [t[-1], t[-1]], "fixation_count": [n // 3, n // 4]})
    if segments is not None:
        segments = pd.read_csv(segments)
        feats = pd.concat([feats, pd.DataFrame({"scope": ["segment"] * len(segments), "label": segments["label"],
                                                "start_s": segments["onset_s"], "end_s": segments["offset_s"],
                                                "fixation_count": [1] * len(segments)})], ignore_index=True)
    write_parquet(out_dir / "samples.parquet", samples)
    write_csv(out_dir / "events.csv", pd.DataFrame({"type": ["fixation"], "onset_s": [0.0]}))
    write_csv(out_dir / "features.csv", feats)
    write_parquet(out_dir / "features.parquet", feats)
    summary = {"frames": n, "duration_s": float(t[-1]), "valid_frac": 1.0, "usable": True, "verdict": "fine"}
    outputs = {n: {"bytes": (out_dir / n).stat().st_size}
               for n in ("samples.parquet", "events.csv", "features.csv", "features.parquet")}
    write_json(out_dir / "run.json", {"input_sha256": sha256_file(clip), "params_sha256": params_fingerprint(params.to_dict()),
                                      "params": params.to_dict(), "quality": summary, "outputs": outputs,
                                      "segments": None if seg_path is None else str(seg_path)})
    return _Result(summary)


FN = "test_batch:standin_process_clip"


def _clips(folder: Path, spec: dict[str, bytes]) -> Path:
    for rel, data in spec.items():
        p = folder / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(data)
    return folder


def _run(src, out, **kw):
    kw.setdefault("params", StandinParams())
    kw.setdefault("workers", 2)
    return run_batch(src, out, clip_fn=FN, **kw)


def _log(out: Path) -> list[dict]:
    return AttemptLog(out / ".batch" / "attempts.jsonl").read()


def test_folder_batch_statuses_reasons_and_study_table(tmp_path):
    src = _clips(tmp_path / "clips", {
        "sub-p01/ses-s01/p01_s01.mp4": b"clip one",
        "sub-p02/ses-s01/p02_s01.mp4": b"clip two!",
        "sub-p03/ses-s01/p03_s01.mp4": b"BROKEN bytes",
        "sub-p04/ses-s01/p04_s01.mp4": b"NOFACE here",
        "sub-p05/ses-s01/p05_s01.mp4": b"BUG inside",
    })
    out = tmp_path / "out"
    res = _run(src, out)
    st = pd.read_csv(out / "status.csv").set_index("key")
    assert st.loc["p01_s01", "status"] == "done" and st.loc["p02_s01", "status"] == "done"
    assert st.loc["p03_s01", "status"] == "failed" and "not a readable video file" in st.loc["p03_s01", "reason"]
    assert "p03_s01.mp4" in st.loc["p03_s01", "reason"]  # the reason names the file
    assert st.loc["p04_s01", "status"] == "failed" and "no face" in st.loc["p04_s01", "reason"]
    assert st.loc["p05_s01", "reason"].startswith("internal error: RuntimeError: something unexpected")
    assert (out / ".batch" / "errors" / "p05_s01.txt").read_text().count("RuntimeError") >= 1
    assert res.counts == {"done": 2, "skipped": 0, "failed": 3, "pending": 0} and not res.ok
    assert st.loc["p01_s01", "participant"] == "p01" and st.loc["p01_s01", "session"] == "s01"
    assert st.loc["p01_s01", "frames"] == 10 + len(b"clip one") % 7
    study = pd.read_csv(out / "study_features.csv")
    assert list(study.columns[:5]) == ["clip", "key", "participant", "session", "usable"]
    assert study.groupby("key").size().to_dict() == {"p01_s01": 2, "p02_s01": 2}
    assert set(study["scope"]) == {"clip", "window"}
    pq = pd.read_parquet(out / "study_features.parquet")
    assert len(pq) == len(study) and list(pq["key"]) == list(study["key"])
    side = json.loads((out / "study.json").read_text())
    assert side["counts"] == res.counts and side["params"] == {"fov_deg": 60.0}
    assert "local process pool" in side["engine"]


def test_resume_skips_done_redoes_changed_input_and_params(tmp_path):
    src = _clips(tmp_path / "clips", {f"p0{i}.mp4": f"clip {i}".encode() for i in range(1, 5)})
    out = tmp_path / "out"
    first = _run(src, out)
    assert first.counts["done"] == 4
    mtimes = {p.parent.name: p.stat().st_mtime_ns for p in out.glob("*/run.json")}
    second = _run(src, out)
    assert second.counts == {"done": 0, "skipped": 4, "failed": 0, "pending": 0}
    assert {p.parent.name: p.stat().st_mtime_ns for p in out.glob("*/run.json")} == mtimes  # nothing recomputed
    assert len(second.study) == len(first.study)  # skipped clips still in the study table
    pd.testing.assert_frame_equal(second.study, first.study)
    # one clip's bytes change (same size, so only the hash can tell)
    (src / "p02.mp4").write_bytes(b"clip X")
    third = _run(src, out)
    st = third.status.set_index("key")["status"].to_dict()
    assert st == {"p01": "skipped", "p02": "done", "p03": "skipped", "p04": "skipped"}
    # parameters change: everything is redone
    fourth = _run(src, out, params=StandinParams(fov_deg=50.0))
    assert fourth.counts["done"] == 4
    done = [r for r in _log(out) if r["status"] == "done"]
    assert sorted(r["key"] for r in done) == sorted(["p01", "p02", "p03", "p04", "p02", "p01", "p02", "p03", "p04"])


def test_input_failures_are_not_retried_until_file_changes(tmp_path):
    src = _clips(tmp_path / "clips", {"p01.mp4": b"NOFACE 1", "p02.mp4": b"BUG 2", "p03.mp4": b"fine"})
    out = tmp_path / "out"
    _run(src, out, workers=1)
    again = _run(src, out, workers=1)
    st = again.status.set_index("key")
    assert st.loc["p01", "status"] == "failed" and "not retried" in st.loc["p01", "reason"]
    assert st.loc["p02", "status"] == "failed" and "internal error" in st.loc["p02", "reason"]
    tries = [r["key"] for r in _log(out) if r["status"] == "failed"]
    assert tries.count("p01") == 1 and tries.count("p02") == 2  # internal errors are retried
    _run(src, out, workers=1, retry_failed=True)
    assert [r["key"] for r in _log(out) if r["status"] == "failed"].count("p01") == 2
    (src / "p01.mp4").write_bytes(b"now fine")
    last = _run(src, out, workers=1)
    assert last.status.set_index("key").loc["p01", "status"] == "done"


def test_manifest_batch_with_missing_files_segments_and_labels(tmp_path):
    _clips(tmp_path / "clips", {"a/p01.mp4": b"one", "b/p01.mp4": b"two", "p02.mp4": b"three"})
    seg = tmp_path / "segments.csv"
    seg.write_text("label,onset_s,offset_s\nstory,0.0,0.2\nquiz,0.2,0.3\n")
    man = tmp_path / "study.csv"
    (tmp_path / "ref").mkdir()
    (tmp_path / "ref" / "p01_s02.csv").write_text("t,x,y\n0,1,2\n")
    (tmp_path / "ref" / "p01_s02.json").write_text("{}")
    man.write_text("clip,participant,session,segments,reference,class,mapping\n"
                   "clips/a/p01.mp4,p01,s01,segments.csv,,3A,\n"
                   "clips/b/p01.mp4,p01,s02,,ref/p01_s02.csv,3A,ref/p01_s02.json\n"
                   "clips/p02.mp4,p02,s01,,ref/none.csv,3B,\n"
                   "clips/gone.mp4,p03,s01,,,3B,\n")
    out = tmp_path / "out"
    res = _run(man, out)
    st = res.status.set_index("key")
    assert list(st.index) == ["a__p01", "b__p01", "p02", "gone"]
    assert st.loc["b__p01", "status"] == "done"
    assert st.loc["p02", "status"] == "failed" and "reference file not found" in st.loc["p02", "reason"]
    assert st.loc["gone", "status"] == "failed" and "clip file not found" in st.loc["gone", "reason"]
    assert st.loc["a__p01", "class"] == "3A" and st.loc["b__p01", "session"] == "s02"
    assert st.loc["a__p01", "status"] == "done"
    seg_rows = res.study[(res.study["key"] == "a__p01") & (res.study["scope"] == "segment")]
    assert list(seg_rows["label"]) == ["story", "quiz"]
    assert set(res.study["class"]) == {"3A"}
    assert (out / "a__p01").is_dir() and (out / "b__p01").is_dir()
    # finished clips with a reference are paired for the validation mode
    from aspectus.validation.manifest import read_validation_manifest

    (pair,) = read_validation_manifest(out / "validation_manifest.csv")
    assert pair.webcam == out / "b__p01"  # the reference is recorded relative to OUTDIR (issue 17.2):
    assert pair.reference.resolve() == (tmp_path / "ref" / "p01_s02.csv").resolve()
    assert (pair.participant, pair.session, pair.mapping) == ("p01", "s02", tmp_path / "ref" / "p01_s02.json")
    # editing the segments file redoes only the clip that uses it
    again = _run(man, out).status.set_index("key")["status"].to_dict()
    assert again["a__p01"] == "skipped" and again["b__p01"] == "skipped"
    seg.write_text("label,onset_s,offset_s\nstory,0.0,0.25\n")
    os.utime(seg, ns=(seg.stat().st_atime_ns, (out / "a__p01" / "run.json").stat().st_mtime_ns + 1))
    third = _run(man, out)
    st3 = third.status.set_index("key")["status"].to_dict()
    assert st3["a__p01"] == "done" and st3["b__p01"] == "skipped"
    seg_rows = third.study[(third.study["key"] == "a__p01") & (third.study["scope"] == "segment")]
    assert list(seg_rows["end_s"]) == [0.25]


def test_worker_crash_is_retried_then_reported(tmp_path):
    src = _clips(tmp_path / "clips", {"p01.mp4": b"CRASH now", "p02.mp4": b"fine", "p03.mp4": b"fine too"})
    out = tmp_path / "out"
    res = _run(src, out, workers=1)
    st = res.status.set_index("key")
    assert st.loc["p01", "status"] == "failed" and "worker process died 2 times" in st.loc["p01", "reason"]
    assert st.loc["p02", "status"] == "done" and st.loc["p03", "status"] == "done"


def test_cancel_stops_running_clips_and_leaves_them_pending(tmp_path):
    src = _clips(tmp_path / "clips", {"p01.mp4": b"WAIT", "p02.mp4": b"WAIT", "p03.mp4": b"WAIT", "p04.mp4": b"x"})
    out = tmp_path / "out"
    stop = threading.Event()
    waiting = set()

    def progress(frac, msg):  # stop once both workers are inside a clip
        if msg.endswith("waiting"):
            waiting.add(msg.split(":")[0])
            if len(waiting) == 2:
                stop.set()

    res = _run(src, out, workers=2, cancel=stop, progress=progress)
    st = res.status.set_index("key")
    assert set(st["status"]) == {"pending"}
    assert set(st.loc[sorted(waiting), "reason"]) == {"stopped before it finished"}
    assert sorted(waiting) == ["p01", "p02"]
    assert set(st.loc[["p03", "p04"], "reason"]) == {"not processed: the run was stopped"}
    assert not any(r["status"] == "done" for r in _log(out))
    assert not list(out.glob("*/run.json"))
    for p in src.glob("*.mp4"):
        p.write_bytes(b"fine " + p.name.encode())
    rerun = _run(src, out, workers=2)  # nothing was marked done: all four are processed now
    assert rerun.counts["done"] == 4


def test_clip_is_done_checks_hashes_and_outputs(tmp_path):
    d = tmp_path / "c"
    d.mkdir()
    assert clip_is_done(d, input_sha256="a", params_sha256="b") == (False, "not finished")
    for n in ("samples.parquet", "events.csv", "features.csv", "features.parquet"):
        (d / n).write_text("x")
    write_json(d / "run.json", {"input_sha256": "a", "params_sha256": "b"})
    assert clip_is_done(d, input_sha256="a", params_sha256="b") == (True, "")
    assert clip_is_done(d, input_sha256="z", params_sha256="b")[1] == "clip file changed since it was processed"
    assert clip_is_done(d, input_sha256="a", params_sha256="z")[1] == "parameters changed since it was processed"
    (d / "events.csv").unlink()
    assert clip_is_done(d, input_sha256="a", params_sha256="b") == (False, "output(s) damaged: events.csv missing")
    write_json(d / "run.json", {"input_sha256": "a", "params_sha256": "b", "outputs": {"features.csv": {"bytes": 5}}})
    assert clip_is_done(d, input_sha256="a", params_sha256="b") == (
        False, "output(s) damaged: features.csv has 1 bytes, not 5")
    # damaged in place at the same size: the recorded SHA-256 tells
    (d / "features.csv").write_text("12345")
    write_json(d / "run.json", {"input_sha256": "a", "params_sha256": "b",
                                "outputs": {"features.csv": {"bytes": 5, "sha256": sha256_file(d / "features.csv")}}})
    assert clip_is_done(d, input_sha256="a", params_sha256="b") == (True, "")
    (d / "features.csv").write_text("12045")
    assert clip_is_done(d, input_sha256="a", params_sha256="b") == (
        False, "output(s) damaged: features.csv differs from what was written (SHA-256 changed)")
    (d / "run.json").write_text("{ torn")
    assert clip_is_done(d, input_sha256="a", params_sha256="b") == (False, "not finished")


def test_clip_is_done_reads_the_segments_path_relative_to_the_clip_folder(tmp_path, monkeypatch):
    # run.json records the segments file relative to the clip's output folder (as the pipeline writes it), so a
    # finished clip stays done whatever folder the batch is started from
    from aspectus.atomic import recorded_path

    d = tmp_path / "out" / "p01"
    d.mkdir(parents=True)
    seg = tmp_path / "segments.csv"
    seg.write_text("label,onset_s,offset_s\nreading,0,5\n")
    for n in ("samples.parquet", "events.csv", "features.csv", "features.parquet"):
        (d / n).write_text("x")
    write_json(d / "run.json", {"input_sha256": "a", "params_sha256": "b", "segments": recorded_path(seg, d)})
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    assert clip_is_done(d, input_sha256="a", params_sha256="b", segments=seg) == (True, "")
    other = tmp_path / "other.csv"
    other.write_text(seg.read_text())
    assert clip_is_done(d, input_sha256="a", params_sha256="b", segments=other)[1] == (
        "task segments file changed since it was processed")


def test_hash_index_rehashes_only_on_change(tmp_path, monkeypatch):
    clip = tmp_path / "p01.mp4"
    clip.write_bytes(b"abc")
    idx = HashIndex(tmp_path / "idx.json")
    h = idx.sha256(clip)
    assert h == sha256_file(clip)
    idx.save()
    calls = []
    import aspectus.studies.state as batch_mod

    monkeypatch.setattr(batch_mod, "sha256_file", lambda p: calls.append(p) or "computed")
    idx2 = HashIndex(tmp_path / "idx.json")
    assert idx2.sha256(clip) == h and calls == []  # from the cache
    os.utime(clip, ns=(1, 1))
    assert idx2.sha256(clip) == "computed" and len(calls) == 1
    (tmp_path / "idx.json").write_text("not json")
    assert HashIndex(tmp_path / "idx.json").lookup(clip) is None


def test_attempt_log_survives_a_torn_last_line(tmp_path):
    log = AttemptLog(tmp_path / "a.jsonl")
    log.append({"key": "p01", "status": "done"})
    with open(log.path, "ab") as fh:
        fh.write(b'{"key": "p02", "sta')  # a kill in the middle of a write
    log.append({"key": "p03", "status": "done"})
    assert [r["key"] for r in log.read()] == ["p01", "p03"]


def test_second_run_on_same_outdir_is_refused(tmp_path):
    src = _clips(tmp_path / "clips", {"p01.mp4": b"WAIT"})
    out = tmp_path / "out"
    stop = threading.Event()
    t = threading.Thread(target=lambda: _run(src, out, workers=1, cancel=stop))
    t.start()
    try:
        for _ in range(200):
            if (out / "status.csv").exists():
                break
            threading.Event().wait(0.05)
        with pytest.raises(AspectusError, match="another batch run is using"):
            _run(src, out, workers=1)
    finally:
        stop.set()
        t.join(timeout=60)
    assert not t.is_alive()


def test_an_empty_clip_fails_with_what_to_do(tmp_path):
    # as `aspectus process` says it (webcam.video): not only what is wrong but what to do
    src = _clips(tmp_path / "clips", {"p01.mp4": b"a", "p02.mp4": b""})
    out = tmp_path / "out"
    _run(src, out, workers=1)
    st = pd.read_csv(out / "status.csv").set_index("key")
    assert st.loc["p01", "status"] == "done"
    assert st.loc["p02", "status"] == "failed" and st.loc["p02", "reason"] == (
        "clip file is empty (0 bytes) - the recording was not saved; re-export it")


def test_dry_run_plan(tmp_path):
    src = _clips(tmp_path / "clips", {"p01.mp4": b"a", "p02.mp4": b"b"})
    out = tmp_path / "out"
    _run(src, out, workers=1)
    (src / "p03.mp4").write_bytes(b"new")
    plan = plan_batch(src, out, params=StandinParams()).set_index("key")["action"].to_dict()
    assert plan == {"p01": "skip", "p02": "skip", "p03": "process"}


def test_engine_parameters_checked():
    with pytest.raises(AspectusInputError, match="at least 1"):
        LocalEngine(workers=0)
    with pytest.raises(AspectusInputError, match="spawn"):
        LocalEngine(start_method="fork")
    assert default_workers(n_tasks=1) == 1
    assert 1 <= default_workers() <= (os.cpu_count() or 1)


def test_progress_bars_for_study_and_workers(tmp_path, capsys):
    src = _clips(tmp_path / "clips", {f"p0{i}.mp4": f"clip {i}".encode() for i in range(1, 4)})
    shares = []
    res = _run(src, tmp_path / "out", workers=2, show_progress=True, progress=lambda f, m: shares.append(f))
    assert res.counts["done"] == 3
    err = capsys.readouterr().err
    assert "study:" in err and "3/3 clips, 0 failed" in err
    assert "p01" in err or "p02" in err  # a worker bar names the clip it is on
    assert shares == sorted(shares) and shares[-1] == pytest.approx(1.0)  # the study share only grows


def test_results_of_an_earlier_method_revision_are_not_current(monkeypatch):
    """The parameters' fingerprint carries the method's revision: after a change that alters the samples for
    the same parameters (EXTRACTION_REVISION raised), a batch finds the old results out of date."""
    import aspectus.webcam.pipeline as pipeline

    p = pipeline.ProcessParams()
    now = p.fingerprint()
    assert now == params_fingerprint(p.to_dict())
    monkeypatch.setattr(pipeline, "EXTRACTION_REVISION", pipeline.EXTRACTION_REVISION + 1)
    assert p.fingerprint() != now


def test_study_table_carries_the_known_target_check(tmp_path):
    """Clips whose folders hold a known-target check get its figures and the rule's verdict in
    study_features.csv (columns defined in aspectus.schema, with units); a clip without a check gets empty
    cells, not a crash; study.json states the rule."""
    from aspectus.schema import TARGET_QUALITY_COLUMN_NAMES, column_unit
    from aspectus.synth.target_gaze import schedule_trajectory
    from aspectus.targets.analysis import check_samples
    from aspectus.targets.check import CHECK_JSON
    from aspectus.targets.schedule import Screen, make_schedule

    src = _clips(tmp_path / "clips", {"p01_s01.mp4": b"clip one", "p02_s01.mp4": b"clip two!",
                                      "p03_s01.mp4": b"clip three"})
    out = tmp_path / "out"
    _run(src, out, workers=1)
    assert "target_accuracy_offset_gain_deg" not in pd.read_csv(out / "study_features.csv").columns
    sched = make_schedule(Screen(1920, 1080, 344.0, 193.5, 600.0), seed=2, fixation_s=1.5, n_fixations=9)
    for key, gain in (("p01_s01", 1.0), ("p02_s01", 0.6)):
        tr = schedule_trajectory(sched, lead_in_s=2.0, gain=(gain, gain), offset_deg=(1.5, -4.0), seed=1)
        s = tr.at(np.arange(0, tr.duration_s, 1 / 30)).assign(valid=True)
        doc = check_samples(s, sched, start_s=2.0, run_events=False).to_dict() | {"format": "aspectus.target_check"}
        write_json(out / key / CHECK_JSON, doc)
    res = _run(src, out, workers=1, target_rule="max_accuracy_deg=2.5")
    assert res.counts["skipped"] == 3
    study = pd.read_csv(out / "study_features.csv").set_index("key")
    assert set(TARGET_QUALITY_COLUMN_NAMES) <= set(study.columns)
    assert all(column_unit(c) for c in TARGET_QUALITY_COLUMN_NAMES if c.endswith(("_deg", "_frac", "_s")))
    first = study.loc["p01_s01"].iloc[0]
    assert first["target_gain_yaw"] == pytest.approx(1.0, abs=0.02) and not first["target_excluded"]
    assert first["target_accuracy_offset_gain_deg"] < 0.2
    second = study.loc["p02_s01"].iloc[0]
    assert second["target_gain_yaw"] == pytest.approx(0.6, abs=0.02) and second["target_excluded"]
    assert "yaw gain 0.60 outside 0.8-1.25" in second["target_exclusion_reasons"]
    third = study.loc["p03_s01"]
    assert third["target_accuracy_offset_gain_deg"].isna().all() and third["target_excluded"].isna().all()
    assert (study.groupby(level=0)["target_gain_yaw"].nunique(dropna=False) == 1).all()  # same on every scope row
    side = json.loads((out / "study.json").read_text())
    assert side["target_quality"]["clips_with_check"] == 2
    assert side["target_quality"]["rule"]["max_accuracy_deg"] == 2.5 and "2.5 deg" in side["target_quality"]["rule"]["text"]
    pq = pd.read_parquet(out / "study_features.parquet")
    assert "target_precision_rms_s2s_deg" in pq.columns and len(pq) == len(study)
