"""Validation mode end to end on samples tables: one pair, overrides, markers, bad input, study mode, CLI.

The webcam side here is a samples table made from a known gaze trajectory
(30 Hz, noisy, with a gain and a constant angle offset, as the webcam's
calibration-free angles have), so these tests need no face mesh; the
rendered-clip test is in test_validate_e2e.py.
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from aspectus.cli import main
from aspectus.errors import AspectusInputError, ReferenceFormatError
from aspectus.reference import TableMapping
from aspectus.synth.lab_recording import write_demo_reference
from aspectus.synth.trajectory import synth_trajectory
from aspectus.validation.pair import ValidateParams, validate_pair
from aspectus.validation.manifest import read_validation_manifest
from aspectus.validation.study import validate_study

FRAME_S = 1 / 30
DURATION_S = 42.0


def _webcam_folder(folder, truth, *, seed=0, gain=(1.1, 0.9), kappa_deg=(4.0, -3.0), noise_deg=0.4):
    rng = np.random.default_rng(seed)
    t = np.arange(0, truth["t_s"].iloc[-1], 1 / 30)
    blink = np.interp(t, truth["t_s"], truth["blink"].astype(float)) > 0.5
    yaw = np.interp(t, truth["t_s"], truth["yaw_deg"]) * gain[0] + kappa_deg[0] + rng.normal(0, noise_deg, len(t))
    pitch = np.interp(t, truth["t_s"], truth["pitch_deg"]) * gain[1] + kappa_deg[1] + rng.normal(0, noise_deg, len(t))
    cam = pd.DataFrame({"t_s": t, "valid": ~blink, "yaw_deg": np.where(blink, np.nan, yaw),
                        "pitch_deg": np.where(blink, np.nan, pitch), "blink": blink})
    folder.mkdir(parents=True)
    cam.to_parquet(folder / "samples.parquet")
    return folder


@pytest.fixture(scope="module")
def session(tmp_path_factory):
    root = tmp_path_factory.mktemp("linden_brook")
    truth = synth_trajectory(duration_s=DURATION_S, seed=3, task="reading").samples
    ref = write_demo_reference(truth, root / "lab", stem="p01_s01", offset_s=-1.25, rate_hz=250.0, seed=1)
    cam = _webcam_folder(root / "out" / "p01_s01_webcam", truth)
    return {"root": root, "truth": truth, "ref": ref, "cam": cam}


def _params(**kw):
    from aspectus.events.analysis import AnalysisParams

    # the detector is pinned so that these figures test the validation, not a change of the default detector
    # and so is the window length (without one, validate_pair chooses it from the overlap)
    kw.setdefault("window_s", 5.0)
    return ValidateParams(analysis=AnalysisParams(detector="i2mc", window_s=5.0, step_s=5.0), **kw)


def test_pair_against_bids_writes_every_output(session, tmp_path):
    out = tmp_path / "val"
    r = validate_pair(session["cam"], session["ref"]["physio"], out, params=_params(), participant="p01",
                      session="s01")
    # the simulated lab tracker started 1.25 s before the webcam (write_demo_reference's offset_s)
    assert abs(r.alignment.offset_s - (-1.25)) < FRAME_S
    al = json.loads((out / "alignment.json").read_text())
    assert abs(al["offset_s"] + 1.25) < FRAME_S and al["confidence"] > 0.25
    assert {"method", "search_range_s"} <= set(al)
    ag = pd.read_csv(out / "agreement.csv")
    for col in ("feature", "n", "pearson_r", "icc", "ccc", "ba_bias", "ba_loa_low", "ba_loa_high", "icc_form",
                "pearson_ci_low", "ba_loa_low_ci_low"):
        assert col in ag.columns
    fc = ag[(ag["scope"] == "window") & (ag["feature"] == "fixation_count")].iloc[0]
    assert fc["n"] == 8  # 40.75 s of overlap in 5 s windows
    assert fc["pearson_r"] > 0.5
    assert fc["icc_form"] == "ICC(2,1)"
    assert (ag["ba_loa_low"] <= ag["ba_bias"]).all() and (ag["ba_bias"] <= ag["ba_loa_high"]).all()
    ev = json.loads((out / "events_agreement.json").read_text())
    assert 0.3 < ev["kappa"] <= 1 and 0.6 < ev["f1"] <= 1
    # the calibration-free gain recovers the webcam's simulated gain of 1.1 (yaw) and 0.9 (pitch)
    assert ev["gain"]["fixation_yaw"]["estimate"] == pytest.approx(1.1, abs=0.05)
    assert ev["gain"]["fixation_pitch"]["estimate"] == pytest.approx(0.9, abs=0.05)
    html = (out / "report.html").read_text()
    assert html.count("data:image/png;base64,") == 4
    assert "<script" not in html and "http://" not in html and "https://" not in html
    assert "ICC(2,1): two-way random effects, absolute agreement" in html
    # the report names how the clocks were aligned, the lab tracker's format and the detector in words, not by
    # their names in alignment.json and validation.json
    assert "found by cross-correlating the gaze angles and the gaze speed of both recordings" in html
    assert "(both)" not in html and "BIDS eyetrack)" not in html and "(BIDS eye-tracking recording)" in html
    assert "I2MC (two-means clustering)" in html and "window(s)" not in html
    for png in ("scatter_windows", "bland_altman_windows", "aligned_timeseries", "offset"):
        assert (out / f"{png}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    side = json.loads((out / "validation.json").read_text())
    assert set(side["outputs"]) >= {"agreement.csv", "report.html", "alignment.json"}
    assert "only 8 paired windows" in " ".join(r.notes)  # a small n is flagged
    # below 10 pairs the reading gives no statistics and says why (aspectus.validation.windows.MIN_PAIRS)
    assert "Only 8 windows could be paired" in r.reading and "do not show that the webcam can replace" in r.reading


def test_table_reference_gives_the_same_offset(session, tmp_path):
    m = TableMapping.load(session["ref"]["mapping"])
    r = validate_pair(session["cam"], session["ref"]["table"], tmp_path / "v", mapping=m, params=_params(),
                      figures=False)
    assert abs(r.alignment.offset_s + 1.25) < FRAME_S
    assert not list((tmp_path / "v").glob("*.png"))


def test_override_marker_and_resampling(session):
    r = validate_pair(session["cam"], session["ref"]["physio"], write=False, params=_params(offset_s=-1.0))
    assert r.alignment.offset_s == -1.0 and r.alignment.method == "user"
    r = validate_pair(session["cam"], session["ref"]["physio"], write=False,
                      params=_params(marker="webcam_start", webcam_marker_s=0.0))
    assert r.alignment.method == "marker: webcam_start"
    assert abs(r.alignment.offset_s + 1.25) < 0.005
    with pytest.raises(AspectusInputError, match="no marker 'page_2'.*webcam_start"):
        validate_pair(session["cam"], session["ref"]["physio"], write=False,
                      params=_params(marker="page_2", webcam_marker_s=0.0))
    r = validate_pair(session["cam"], session["ref"]["physio"], write=False,
                      params=_params(resample_reference_hz=30.0, reference_events="own"))
    assert r.reference_analysis.quality["sample_rate_hz"] == pytest.approx(30.0, rel=0.05)
    assert r.events["reference_events"] == "own"


def test_resampled_reference_counts_name_the_file_and_the_analysed_samples(session, tmp_path):
    """validation.json and the report say how many reference samples the file held and how many were analysed:
    resampled to 30 Hz, the analysed ones are the resampled rows (reference_quality.n_samples counts them), about
    30 a second over the reference's time; at its own rate every row of the file."""
    from aspectus.reference import read_reference

    n_file = len(read_reference(session["ref"]["physio"]).samples)
    r = validate_pair(session["cam"], session["ref"]["physio"], tmp_path / "v30", figures=False,
                      params=_params(resample_reference_hz=30.0))
    doc = json.loads((tmp_path / "v30" / "validation.json").read_text())
    rs = doc["reference_samples"]
    assert rs["n_in_file"] == n_file and rs["file_rate_hz"] == pytest.approx(250.0, rel=1e-6)
    assert rs["resampled_to_hz"] == 30.0
    assert rs["n_analysed"] == len(r.reference) == doc["reference_quality"]["n_samples"]
    assert rs["n_analysed"] == pytest.approx(30.0 * n_file / 250.0, rel=0.01)
    text = f"{rs['n_analysed']} of its {n_file} samples analysed"
    assert text in doc["reference_measured_at"]
    assert text in (tmp_path / "v30" / "report.html").read_text()
    own = validate_pair(session["cam"], session["ref"]["physio"], write=False, params=_params())
    assert own.meta["reference_samples"]["n_analysed"] == own.meta["reference_samples"]["n_in_file"] == n_file
    assert own.meta["reference_samples"]["resampled_to_hz"] is None
    assert own.reference_analysis.quality["n_samples"] == n_file
    assert f"all {n_file} samples analysed" in own.meta["reference_measured_at"]


def test_segments_are_paired(session, tmp_path):
    seg = tmp_path / "segments.csv"
    seg.write_text("label,onset_s,offset_s\n" + "".join(f"page_{i},{i * 8.0 + 1},{i * 8.0 + 8}\n" for i in range(5)))
    r = validate_pair(session["cam"], session["ref"]["physio"], write=False, params=_params(), segments=seg)
    seg_rows = r.agreement[r.agreement["scope"] == "segment"]
    assert len(seg_rows) and (seg_rows["n"] == 5).all()
    assert set(r.pairs.loc[r.pairs["scope"] == "segment", "label"]) == {f"page_{i}" for i in range(5)}


def test_segments_the_clip_was_processed_with_are_found_from_any_folder(session, tmp_path, monkeypatch):
    # run.json records the segments file relative to the clip's output folder (aspectus.atomic.recorded_path);
    # validate finds it from wherever it runs, and says so when the file is gone instead of silently leaving the
    # segments out
    import shutil

    from aspectus.atomic import recorded_path

    cam = tmp_path / "out" / "p01_s01"
    shutil.copytree(session["cam"], cam)
    seg = tmp_path / "segments.csv"
    seg.write_text("label,onset_s,offset_s\n" + "".join(f"page_{i},{i * 8.0 + 1},{i * 8.0 + 8}\n" for i in range(5)))
    (cam / "run.json").write_text(json.dumps({"segments": recorded_path(seg, cam)}))
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    r = validate_pair(cam, session["ref"]["physio"], write=False, params=_params())
    assert r.meta["segments"] == 5
    assert set(r.pairs.loc[r.pairs["scope"] == "segment", "label"]) == {f"page_{i}" for i in range(5)}
    seg.unlink()
    r = validate_pair(cam, session["ref"]["physio"], write=False, params=_params())
    assert r.meta["segments"] == 0
    assert any("task segments" in n and "no longer there" in n for n in r.notes)


def test_bad_reference_leaves_outdir_untouched(session, tmp_path):
    out = tmp_path / "val"
    out.mkdir()
    (out / "agreement.csv").write_text("previous result\n")
    bad = tmp_path / "bad.csv"
    bad.write_text("# lab export\ntime_ms,gaze_x_px,gaze_y_px,pupil_au,status,event\n0,1,1,1,ok,FIX\n"
                   "8,1,1,1,ok,FIX\n4,1,1,1,ok,FIX\n")
    m = TableMapping.load(session["ref"]["mapping"])
    with pytest.raises(ReferenceFormatError, match=r"bad.csv \(row 5\): timestamps go backwards"):
        validate_pair(session["cam"], bad, out, mapping=m)
    assert sorted(p.name for p in out.iterdir()) == ["agreement.csv"]
    assert (out / "agreement.csv").read_text() == "previous result\n"
    # a reference that does not overlap the clip at the given offset: nothing written either
    with pytest.raises(AspectusInputError, match="do not overlap"):
        validate_pair(session["cam"], session["ref"]["physio"], out, params=_params(offset_s=500.0))
    assert sorted(p.name for p in out.iterdir()) == ["agreement.csv"]
    with pytest.raises(AspectusInputError, match="no samples.parquet"):
        validate_pair(tmp_path, session["ref"]["physio"], out)


def test_a_purged_clip_says_how_to_rebuild_its_samples(session, tmp_path):
    # after `aspectus purge` the batch counts the clip as done, so the advice names `aspectus process`
    from _results import write_batch_folder

    from aspectus.privacy import plan_purge, purge

    batch = write_batch_folder(tmp_path / "b", {"a": {"participant": "p1", "seed": 1}})
    purge(plan_purge(batch))
    with pytest.raises(AspectusInputError, match=r"samples.parquet was deleted by `aspectus purge`.*aspectus process "):
        validate_pair(batch / "a", session["ref"]["physio"], tmp_path / "v")
    assert not (tmp_path / "v").exists()


def test_study_manifest_pooled_and_summary(session, tmp_path):
    root = tmp_path
    truth2 = synth_trajectory(duration_s=30.0, seed=9, task="reading").samples
    ref2 = write_demo_reference(truth2, root / "lab2", stem="p02_s01", offset_s=2.0, rate_hz=500.0, seed=2)
    _webcam_folder(root / "cam2", truth2, seed=4)
    # this clip's own precision check did not trust fixation measures (what run.json's quality records)
    (root / "cam2" / "run.json").write_text(json.dumps({"quality": {
        "precision_tier": "coarse", "usable": True, "noise_sd_deg": 1.2, "verdict": "Partly usable: samples spread"}}))
    man = root / "manifest.csv"
    man.write_text("webcam,reference,participant,session,mapping\n"
                   f"{session['cam']},{session['ref']['physio']},p01,s01,\n"
                   f"cam2,{ref2['table'].relative_to(root)},p02,s01,{ref2['mapping'].relative_to(root)}\n"
                   f"cam2,lab2/missing_physio.tsv.gz,p03,s01,\n")
    with pytest.raises(AspectusInputError, match=r"manifest.csv \(row 4\).*does not exist"):
        read_validation_manifest(man)
    man.write_text("\n".join(man.read_text().splitlines()[:3]) + "\n"
                   f"cam2,{ref2['physio'].relative_to(root)},p03,s01,\n")
    (root / "lab2" / "sub-p02_ses-s01_task-reading_recording-eye1_physio.json").write_text("{broken")
    res = validate_study(man, root / "study", params=_params(), figures=True)
    assert set(res.results) == {"p01_s01", "p02_s01"}
    assert "p03_s01" in res.failures and "not valid JSON" in res.failures["p03_s01"]
    assert abs(res.results["p02_s01"].alignment.offset_s - 2.0) < FRAME_S
    assert (root / "study" / "p01_s01" / "report.html").exists()
    pooled = pd.read_csv(root / "study" / "pooled_agreement.csv")
    fc = pooled[(pooled["scope"] == "window") & (pooled["feature"] == "fixation_count")].iloc[0]
    per = pd.read_csv(root / "study" / "participants.csv")
    assert fc["n"] == per.loc[per["status"] == "ok", "windows_paired"].sum()
    assert set(per["status"]) == {"ok", "failed"}
    own = per.set_index("key")
    assert own.loc["p02_s01", "webcam_verdict"] == "Partly usable" and own.loc["p02_s01", "webcam_precision_tier"] == "coarse"
    assert pd.isna(own.loc["p01_s01", "webcam_verdict"])  # no run.json: no check to name
    html = (root / "study" / "report.html").read_text()
    assert "Webcam clip&#x27;s own check" in html or "Webcam clip's own check" in html
    assert "Partly usable" in html
    md = (root / "study" / "summary.md").read_text()
    # the table to paste names its columns and features for a reader; summary.csv keeps the names for scripts
    assert "| Feature | Participants | Windows | Webcam mean | Lab tracker mean | r [95 % CI] | ICC(2,1) [95 % CI] |" in md
    assert "| Fixations (per window) |" in md and "fixation_count" not in md and "icc_2_1" not in md
    assert "fixation_count" in (root / "study" / "summary.csv").read_text()
    assert (root / "study" / "summary.html").read_text().count("<tr>") >= 2
    assert (root / "study" / "study_scatter.png").exists()


def test_cli_pair_and_errors(session, tmp_path, capsys):
    out = tmp_path / "cli"
    rc = main(["validate", str(session["cam"]), str(session["ref"]["table"]), "-o", str(out), "--mapping",
               str(session["ref"]["mapping"]), "--window-s", "5", "--detector", "i2mc", "--no-figures"])
    assert rc == 0
    line = capsys.readouterr().out
    # the terminal names each figure in words: the clock offset, kappa and F1 with their scales, the report's path
    assert "the lab tracker started 1.25" in line and "before the webcam" in line and "kappa" in line
    assert "cross-correlating the gaze angles and the gaze speed" in line and "(both)" not in line
    assert "(0: chance, 1: complete)" in line and "fixations per 5 s window" in line
    assert line.rstrip().splitlines()[-1] == f"Report (open in a browser): {out / 'report.html'}"
    # 8 windows of 5 s: the terminal, like the report and the app, shows no r or ICC below MIN_PAIRS
    assert "8 windows, too few for r and ICC (at least 10)" in line and "ICC 0." not in line and "ICC -" not in line
    assert (out / "agreement.csv").exists() and (out / "report.html").exists()
    rc = main(["validate", str(session["cam"]), str(session["ref"]["table"]), "-o", str(out / "x"),
               "--time-col", "time_ms", "--time-unit", "ms", "--x-col", "gaze_x_px", "--y-col", "gaze_y_px",
               "--units", "px", "--screen-size-mm", "531", "299", "--distance-mm", "650", "--screen-res-px", "1920",
               "1080", "--validity-col", "status", "--valid-values", "ok", "--offset-s", "-1.25", "--window-s", "5",
               "--no-figures", "--save-mapping", str(tmp_path / "m.json")])
    assert rc == 0
    assert json.loads((out / "x" / "alignment.json").read_text())["offset_s"] == -1.25
    assert TableMapping.load(tmp_path / "m.json").units == "px"
    capsys.readouterr()
    rc = main(["validate", str(session["cam"]), str(session["ref"]["table"]), "-o", str(out / "y"), "--time-col",
               "time_ms", "--x-col", "gaze_x_px", "--y-col", "gaze_y_px", "--units", "px"])
    assert rc == 2
    err = capsys.readouterr().err
    assert "aspectus: error:" in err and "screen" in err
    assert not (out / "y").exists()
    rc = main(["validate", str(session["cam"]), "-o", str(out / "z")])
    assert rc == 2 and "needs WEBCAM and REFERENCE" in capsys.readouterr().err


def test_study_report_carries_the_known_target_check(session, tmp_path):
    """A pair whose webcam folder holds a known-target check gets its figures and the rule's verdict in
    participants.csv and a section in report.html; a pair without one gets empty cells and "no check"."""
    from aspectus.atomic import write_json
    from aspectus.synth.target_gaze import schedule_trajectory
    from aspectus.targets.analysis import check_samples
    from aspectus.targets.check import CHECK_JSON
    from aspectus.targets.schedule import Screen, make_schedule

    root = tmp_path
    truth2 = synth_trajectory(duration_s=30.0, seed=9, task="reading").samples
    ref2 = write_demo_reference(truth2, root / "lab2", stem="p02_s01", offset_s=2.0, rate_hz=500.0, seed=2)
    cam2 = _webcam_folder(root / "cam2", truth2, seed=4)
    sched = make_schedule(Screen(1920, 1080, 344.0, 193.5, 600.0), seed=2, fixation_s=1.5, n_fixations=9)
    tr = schedule_trajectory(sched, lead_in_s=2.0, gain=(0.6, 0.6), offset_deg=(1.5, -4.0), seed=1)
    s = tr.at(np.arange(0, tr.duration_s, 1 / 30)).assign(valid=True)
    write_json(cam2 / CHECK_JSON, check_samples(s, sched, start_s=2.0, run_events=False).to_dict()
               | {"format": "aspectus.target_check"})
    man = root / "manifest.csv"
    man.write_text("webcam,reference,participant,session\n"
                   f"{session['cam']},{session['ref']['physio']},p01,s01\n"
                   f"cam2,{ref2['physio'].relative_to(root)},p02,s01\n")
    validate_study(man, root / "study", params=_params(), figures=False, target_rule="gain_min=0.7")
    per = pd.read_csv(root / "study" / "participants.csv").set_index("participant")
    assert np.isnan(per.loc["p01", "target_accuracy_offset_gain_deg"]) and pd.isna(per.loc["p01", "target_excluded"])
    assert per.loc["p02", "target_gain_yaw"] == pytest.approx(0.6, abs=0.02)
    lo, hi = per.loc["p02", "target_gain_yaw_ci_low"], per.loc["p02", "target_gain_yaw_ci_high"]
    assert lo <= per.loc["p02", "target_gain_yaw"] <= hi < 0.7  # noise-free eyes: a narrow interval
    assert per.loc["p02", "target_excluded"] and "yaw gain 0.60 outside 0.7-1.25" in per.loc["p02", "target_exclusion_reasons"]
    html = (root / "study" / "report.html").read_text()
    assert "Gaze quality on the known-target sequence" in html and "no check" in html
    assert "outside 0.7-1.25" in html and "Accuracy after offset and gain (deg)" in html
    assert f"{per.loc['p02', 'target_gain_yaw']:.2f} ({lo:.2f} to {hi:.2f})" in html  # the gain with its interval
    side = json.loads((root / "study" / "study_validation.json").read_text())
    assert side["target_quality_rule"]["gain_min"] == 0.7
    # a study without any check: no target_* columns and no section
    one = root / "one.csv"
    one.write_text("webcam,reference,participant,session\n" f"{session['cam']},{session['ref']['physio']},p01,s01\n")
    validate_study(one, root / "study1", params=_params(), figures=False)
    assert not any(c.startswith("target_") for c in pd.read_csv(root / "study1" / "participants.csv").columns)
    assert "known-target" not in (root / "study1" / "report.html").read_text()


def test_the_overlap_counts_the_time_each_sample_stands_for_and_never_reads_as_more_windows():
    # the demo clip: 600 frames at 30 Hz cover 20 s (each frame half an interval either side, as the clip's
    # own feature windows count them), so 2-s windows give 10, not the 9 that 19.97 s from the first frame to
    # the last held; a 250 Hz reference that starts 1.25 s earlier and ends later does not shorten it
    from aspectus.validation.pair import _common_span, _common_windows
    from aspectus.validation.windows import choose_window_s, n_windows, overlap_text

    tw = np.arange(600) / 30.0
    tr = np.arange(0, 22.5, 1 / 250.0) - 1.25
    lo, hi = _common_span(tw, tr)
    assert lo == pytest.approx(-1 / 60, abs=1e-12) and hi == pytest.approx(20 - 1 / 60, abs=1e-12)
    assert n_windows(hi - lo, 2.0) == 10 and len(_common_windows(tw, tr, 2.0, 2.0)) == 10
    assert len(_common_windows(tw, tr, 5.0, 5.0)) == 4
    assert overlap_text(hi - lo) == "20.00 s"
    # in words the overlap is truncated, never rounded up past what the windows hold
    assert overlap_text(599 / 30) == "19.96 s"
    for given in (True, False):
        c = choose_window_s(599 / 30, 2.0, given=given)
        assert c.windows == 9
        assert "19.96 s" in c.reason and "20.0 s" not in c.reason


def test_compared_rates_share_the_features_tables_unit():
    # README "The features table": rates are per minute (fixation_rate_per_s stays only for files written
    # before); a report that put 'Fixation rate (1/s)' beside 'Blink rate (1/min)' read as two kinds of rate
    from aspectus.schema import FEATURE_COLUMNS
    from aspectus.validation.pair import DEFAULT_FEATURES

    rates = [f for f in DEFAULT_FEATURES if "_rate_" in f]
    assert rates and all(f.endswith("_per_min") for f in rates), rates
    assert set(DEFAULT_FEATURES) <= {c.name for c in FEATURE_COLUMNS}


def test_the_reading_names_the_icc_form_that_was_computed(session, tmp_path):
    # --icc-form 3,1 (consistency): the plain-language reading said "absolute agreement ICC(2,1)" beside it
    r = validate_pair(session["cam"], session["ref"]["physio"], tmp_path / "v", params=_params(window_s=2.0,
                      icc_form="3,1"), figures=False)
    fc = r.agreement[(r.agreement["scope"] == "window") & (r.agreement["feature"] == "fixation_count")].iloc[0]
    assert fc["n"] >= 10 and fc["icc_form"] == "ICC(3,1)"
    assert f"consistency ICC(3,1) = {fc['icc']:.2f}" in r.reading and "ICC(2,1)" not in r.reading
    bias = f"{abs(fc['ba_bias']):.1f}"
    assert (f"counted {bias} " in r.reading) != (bias == "0.0")  # a zero bias reads "as many", not "0.0 fewer"


def test_the_compact_table_shows_no_negative_zero_and_the_window_choice_says_what_it_counts():
    # the demo pair's blink rate: every window agreed, so the limits of agreement are 0 give or take the last bit
    # of a float; printed with two decimals that read "-0.00 to 0.00", a negative figure where there is none
    from aspectus.validation.report import compact_agreement
    from aspectus.validation.windows import choose_window_s

    ag = pd.DataFrame([{"scope": "window", "feature": "blink_rate_per_min", "n": 10, "mean_webcam": 12.0,
                        "mean_reference": 12.0, "pearson_r": 1.0, "pearson_ci_low": 1.0, "pearson_ci_high": 1.0,
                        "icc": 1.0, "icc_ci_low": np.nan, "icc_ci_high": np.nan, "ba_bias": 0.0,
                        "ba_loa_low": -1e-15, "ba_loa_high": 1e-15},
                       {"scope": "window", "feature": "fixation_count", "n": 10, "mean_webcam": 6.6,
                        "mean_reference": 7.4, "pearson_r": 0.74, "pearson_ci_low": 0.22, "pearson_ci_high": 0.94,
                        "icc": 0.58, "icc_ci_low": -0.06, "icc_ci_high": 0.88, "ba_bias": -0.8,
                        "ba_loa_low": -2.35, "ba_loa_high": 0.75}])
    t = compact_agreement(ag).set_index("Feature")
    blink = t.loc["Blink rate (1/min)", "Bias [95 % limits]"]
    assert "-0.0" not in blink and blink.startswith("0.0") and " [0.0" in blink
    # a rate per minute prints one decimal ("12.0", not "12.00"; the report read "186.00" fixations a minute)
    assert t.loc["Blink rate (1/min)", "Webcam mean"] == "12.0" and blink == "0.0 [0.0 to 0.0]"
    assert t.loc["Fixations (per window)", "ICC [95 % CI]"] == "0.58 [-0.06, 0.88]"  # real negatives stay
    # 20 s of overlap with the 10 s feature windows: 2 s chosen, and the count it gives is named as windows
    c = choose_window_s(20.0, 10.0)
    assert c.window_s == 2.0 and "gives at least 10 windows (it gives 10)" in c.reason


def test_the_report_says_in_words_what_kappa_f1_and_gain_are_with_each_sides_error(session, tmp_path):
    # the gains' error allowance (each side's fixation-mean error and its lag-1 correlation, events_agreement.json)
    # was given only as a method note; the report now says what the rows mean and gives both sides' figures
    import html as _html

    out = tmp_path / "v"
    validate_pair(session["cam"], session["ref"]["physio"], out, params=_params(window_s=2.0), figures=False)
    ev = json.loads((out / "events_agreement.json").read_text())
    page = _html.unescape((out / "report.html").read_text())
    assert "Kappa: how well the two agree on which samples belong to a fixation" in page
    assert "Gain: how many degrees the webcam measures for each degree the lab tracker measures" in page
    # per axis, as the fixation gains are fitted (events_agreement.json's per-axis figures)
    sd, rho = ev["gain"]["fixation_mean_error_sd_per_axis_deg"], ev["gain"]["error_lag1_correlation_per_axis"]
    for side, name in (("webcam", "webcam"), ("reference", "lab tracker")):
        assert (f"{name} {sd[side]['yaw']:.2f} deg across (yaw; successive errors correlated {rho[side]['yaw']:.2f})"
                f" and {sd[side]['pitch']:.2f} deg up-down (pitch; {rho[side]['pitch']:.2f})") in page, side
