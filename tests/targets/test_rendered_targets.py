"""The known-target check end to end on rendered clips whose eyes follow the schedule (runs the face mesh).

What the renderer's noise and gain imply (issue 20: the check's accuracy after
offset+gain within 0.5 deg of it). Measured on :func:`good_clip` (720p,
astronaut face, still head, gain 1, drift 0.05 deg; ``/tmp``-rendered with the
fixture's arguments and compared frame by frame with ``clip_truth.csv``):

* the check's accuracy after offset+gain: 0.62 deg (0.78 leave-one-out);
* the same check on the renderer's own gaze (the eyes alone): 0.03 deg; the
  noise floor of the measured medians: 0.09 deg - together the 0.12 deg the
  first version of this test called "implied";
* the measurement chain's own error, computed without the check (no
  schedule, no flash, no settling window: the renderer's fixations from
  ``clip_truth_events.csv``, median webcam gaze against median true gaze,
  offset and gain fitted webcam-on-truth): 0.65 deg. Per still dot the
  webcam's yaw minus the true yaw ranges 2.3-4.0 deg and pitch 3.3-5.1 deg
  (SD 0.53 / 0.71 deg over 10 dots, 0.37 / 0.63 deg left after a linear fit
  on the dot's place, so a gain does not absorb it); the two eyes' errors
  differ per dot (SD 0.7-1.0 deg each), and the head pose estimate moves by
  SD 0.32 deg in pitch between dots while the rendered head is still;
* the analysis's choices move the 0.62 by at most 0.06 deg: settle window
  0/0.2/0.5 s, start 0.1 s early to 0.3 s late all give 0.61-0.68 deg.

So the 0.62 deg is the gaze chain's systematic error on single gaze
directions (per-eye, per-direction iris and head-pose errors), not the
analysis's. "What the renderer implies" is therefore taken as the eyes'
own accuracy plus the chain's systematic error measured independently on
the same clip's truth (:func:`chain_systematic_error_deg`), and the check must
come within 0.5 deg of that (held out, measured once on a hopper-face clip with another schedule: 1.36
against 0.03 + 0.98; docs/notes/target-check.md). Against the eyes and noise alone (0.12 deg) the
0.5 deg margin was not met (a strict expected failure) until the limbus fit's centres were put in the face
mesh's picture convention: since then :func:`test_accuracy_against_the_eyes_alone` passes on this clip
(0.54 against 0.12) but the margin is not met on three dev clips (0.75 / 1.51 / 1.44; its docstring). The
test's docstring holds the decomposition of the error per still dot on three dev clips
(bench/bench_target_error.py; docs/notes/target-check.md, "The accuracy error decomposed per still dot"):
the iris centres' picture error and the eyeball centres' motion with the eyes, in about equal shares; the
eyeball model itself 0.08-0.09 deg; the analysis's windows, fit and reference not the cause. Re-measured
2026-12-04 with the limbus iris scale: check 0.626 deg, eyes 0.026 + noise 0.091, chain 0.652, gains
1.013 / 1.102; with the limbus fit in the mesh's picture convention: check 0.540, eyes 0.026 + noise 0.092,
chain 0.521, gains 1.011 / 1.099.
"""
from __future__ import annotations

import json

import pytest

from aspectus.synth.render import read_truth
from aspectus.synth.target_gaze import render_target_clip
from aspectus.targets.analysis import CheckParams, check_samples, find_start
from aspectus.targets.check import run_check
from aspectus.targets.schedule import Screen, make_schedule

pytestmark = pytest.mark.slow

SCREEN = Screen(1280, 720, 344.0, 193.5, 600.0)
#: the face whose vertical gaze the measurement follows best (DEVELOPERS.md: pitch r 0.994, gain 1.00)
FACE = "astronaut"


@pytest.fixture(scope="module")
def good_clip(tmp_path_factory):
    d = tmp_path_factory.mktemp("targets_good")
    sched = make_schedule(SCREEN, seed=1, fixation_s=1.2, n_fixations=9, pursuit_sweeps=1)
    sched.write(d / "schedule.json")
    res, truth = render_target_clip(d / "clip.mp4", sched, lead_in_s=1.5, tail_s=0.5, gain=(1.0, 1.0),
                                    offset_deg=(2.0, -2.0), size_px=(1280, 720), fov_deg=60.0, seed=2, face=FACE)
    check = run_check(d / "clip.mp4", d / "schedule.json", d / "out", apply_mapping=True)
    return d, sched, res, truth, check


def test_start_within_one_frame_and_accuracy_as_the_renderer_implies(good_clip):
    d, sched, res, truth, check = good_clip
    frame_s = 1 / 30
    assert check.alignment["method"] == "flash"
    assert abs(check.summary["start_s"] - truth["flash_first_frame_t_s"]) <= frame_s
    assert abs(check.alignment["frame_index"] - truth["flash_first_frame"]) <= 1
    # the same check on the renderer's own gaze: the eyes' accuracy and gain
    tr = read_truth(res.truth_path).assign(valid=True)
    ideal = check_samples(tr, sched, start_s=truth["flash_first_frame_t_s"], run_events=False)
    assert ideal.mapping.gain_yaw == pytest.approx(1.0, abs=0.01)
    eyes_noise = ideal.summary["accuracy_offset_gain_deg"] + check.summary["accuracy_noise_floor_deg"]
    acc = check.summary["accuracy_offset_gain_deg"]
    print(f"accuracy offset+gain {acc:.3f} deg; eyes + noise {eyes_noise:.3f} (eyes {ideal.summary['accuracy_offset_gain_deg']:.3f}"
          f" + noise {check.summary['accuracy_noise_floor_deg']:.3f}); gains {check.mapping.gain_yaw:.3f} / "
          f"{check.mapping.gain_pitch:.3f}; precision RMS-S2S {check.summary['precision_rms_s2s_deg']:.3f}")
    assert acc < 1.0  # measured 0.54 (0.62 before the picture convention fix; see the module docstring)
    assert acc < check.summary["accuracy_offset_deg"] + 0.05  # fitting the gain never makes the fitted dots worse
    # gain near the renderer's (the measurement's own gain was 0.93-1.00 on such clips, DEVELOPERS.md). Measured
    # yaw 1.01, pitch 1.10 with the metric scale from the limbus fit (GazeParams.iris_scale, the default; it
    # reads this clip's iris 0.983 of the rendered size, the face mesh 1.030); with the mesh's about 0.97 / 1.05
    # (scaled by the two sizes' ratio 0.956, not run). The
    # pitch over-reading is the chain's, not the scale's (pitch upper bound 1.1 before the limbus scale)
    assert 0.85 <= check.mapping.gain_yaw <= 1.1 and 0.8 <= check.mapping.gain_pitch <= 1.15
    assert check.flags == [] and check.summary["gain_in_range"]
    assert check.summary["loss_frac"] < 0.05
    assert check.summary["pursuit_gain"] == pytest.approx(1.0, abs=0.15)
    assert check.summary["n_targets_fixated"] >= check.summary["n_fixation_targets"] - 1
    # the sidecar and the session mapped to the screen
    doc = json.loads((d / "out" / "target_check.json").read_text())
    assert doc["mapping"]["gain_yaw"] == pytest.approx(check.mapping.gain_yaw)
    assert doc["schedule"]["format_version"] == 1 and doc["samples_sha256"]
    # the fitted parameters in run.json, which still marks the clip as done
    from aspectus.atomic import sha256_file
    from aspectus.studies.done import clip_is_done

    run = json.loads((d / "out" / "run.json").read_text())
    tc = run["target_check"]
    assert tc["mapping"]["gain_yaw"] == pytest.approx(check.mapping.gain_yaw)
    assert tc["mapping"]["offset_pitch_deg"] == pytest.approx(check.mapping.offset_pitch_deg)
    assert tc["alignment"]["method"] == "flash" and tc["alignment"]["start_s"] == pytest.approx(check.summary["start_s"])
    assert tc["figures"]["accuracy_offset_gain_deg"] == pytest.approx(check.summary["accuracy_offset_gain_deg"])
    assert tc["sha256"] == sha256_file(d / "out" / "target_check.json") and tc["params"]["settle_s"] == 0.5
    assert clip_is_done(d / "out", input_sha256=run["input_sha256"], params_sha256=run["params_sha256"])[0]
    # the appearance estimate learnt from the clip's open-eye frames (no blinks in this render): about its length,
    # short enough for the plain-words line to say so
    est = run["extraction"]["gaze_model"]["iris_estimate"]
    assert est["used"] == "appearance" and res.frames / 30 - 1.5 <= est["learnt_from_s"] <= res.frames / 30
    from aspectus.webcam.gaze import describe_iris_estimate

    assert f"learnt from {est['learnt_from_s']:g} s of open eyes" in describe_iris_estimate(est)
    import pandas as pd

    sg = pd.read_parquet(d / "out" / "screen_gaze.parquet")
    assert len(sg) == res.frames and {"screen_x_px", "screen_y_px", "screen_x_deg", "screen_y_deg"} <= set(sg)


def chain_systematic_error_deg(samples, truth, truth_events, *, skip_s: float = 0.1) -> float:
    """The gaze chain's own accuracy on a rendered clip, without the known-target analysis.

    For every fixation of the renderer (``clip_truth_events.csv``; from ``skip_s`` after its onset, past the
    saccade and its landing), the median measured gaze and the median true gaze over the valid frames; the
    measured medians are mapped by an offset and gain per axis fitted measured-on-true (least squares), and
    the mean angle between mapped and true directions is returned. Plain numpy here, on purpose: it shares no
    code with :mod:`aspectus.targets.analysis`.
    """
    import numpy as np

    t = samples["t_s"].to_numpy(float)
    ok = samples["valid"].to_numpy(bool)
    rows = []
    for r in truth_events[truth_events["type"] == "fixation"].itertuples(index=False):
        w = (t >= r.onset_s + skip_s) & (t < r.offset_s) & ok
        if w.sum() >= 5:
            rows.append([np.median(truth["yaw_deg"].to_numpy(float)[w]), np.median(truth["pitch_deg"].to_numpy(float)[w]),
                         np.median(samples["yaw_deg"].to_numpy(float)[w]),
                         np.median(samples["pitch_deg"].to_numpy(float)[w])])
    a = np.asarray(rows)
    assert len(a) >= 5, "too few rendered fixations with valid gaze"
    by, ay = np.polyfit(a[:, 0], a[:, 2], 1)
    bp, ap = np.polyfit(a[:, 1], a[:, 3], 1)

    def unit(yaw, pitch):
        v = np.stack([np.tan(np.radians(yaw)), np.tan(np.radians(pitch)), np.ones_like(yaw)], -1)
        return v / np.linalg.norm(v, axis=-1, keepdims=True)

    c = (unit((a[:, 2] - ay) / by, (a[:, 3] - ap) / bp) * unit(a[:, 0], a[:, 1])).sum(-1)
    return float(np.degrees(np.arccos(np.clip(c, -1, 1))).mean())


def _implied(good_clip):
    import pandas as pd

    d, sched, res, truth, check = good_clip
    tr = read_truth(res.truth_path)
    ideal = check_samples(tr.assign(valid=True), sched, start_s=truth["flash_first_frame_t_s"], run_events=False)
    samples = pd.read_parquet(d / "out" / "samples.parquet")
    chain = chain_systematic_error_deg(samples, tr, pd.read_csv(d / "clip_truth_events.csv"))
    return samples, ideal.summary["accuracy_offset_gain_deg"], chain


def test_accuracy_within_half_a_degree_of_the_implied(good_clip):
    """Issue 20's check, with "implied" = the eyes' own accuracy + the chain's systematic error on this clip's
    truth (module docstring: measured 0.62 deg against 0.03 + 0.65). The same criterion fails when the analysis
    is at fault: the start 0.9 s late (the windows then straddle the saccades) is caught."""
    d, sched, res, truth, check = good_clip
    samples, eyes, chain = _implied(good_clip)
    implied = eyes + chain
    acc = check.summary["accuracy_offset_gain_deg"]
    print(f"accuracy offset+gain {acc:.3f} deg; implied {implied:.3f} (eyes {eyes:.3f} + chain {chain:.3f})")
    assert eyes < 0.1  # the rendered eyes follow the dots (drift 0.05 deg per axis)
    assert abs(acc - implied) <= 0.5
    late = check_samples(samples, sched, start_s=truth["flash_first_frame_t_s"] + 0.9, run_events=False)
    assert abs(late.summary["accuracy_offset_gain_deg"] - implied) > 0.5


def test_accuracy_against_the_eyes_alone(good_clip):
    """Issue 20's 0.5 deg margin over the eyes and noise alone. Met on this clip since the limbus fit's centres
    are in the face mesh's picture convention (aspectus.schema): 0.54 deg against 0.026 + 0.092 (0.62 before,
    a strict expected failure). Not met on three dev clips (bench/bench_target_error.py, after the same change):
    0.75 / 1.51 / 1.44 deg against 0.14 / 0.19 / 0.16, so the floor is not met in general and this clip's 0.08 deg
    of headroom is within the +-0.2 deg a half-pixel change moves such figures. Decomposed with the check's own
    code on the dev clips (docs/notes/target-check.md): the iris centres' per-direction picture error and the
    eyeball centres' motion with the eyes, in about equal shares; the window, the fit and the reference are
    not the cause. Of the centres' motion only the part both eyes share reaches the binocular gaze - the face
    mesh's PnP pitch following the gaze and, on the astronaut face, the eye anchors' sideways motion; the PnP
    roll that follows the gaze yaw cancels between the eyes (tests/webcam/test_binocular_centre_motion.py).
    Re-measured 2026-12-04, with two held-out clips (dev 0.70 / 1.49 / 1.43, held out 0.86 / 0.71 deg against
    0.13-0.21 implied); the skin head rotation with the anchors beside the eyes brings them to 0.64 / 0.94 / 0.91 / 0.71 /
    0.58, still above the margin, and reads turning heads worse, so the defaults stay (the note's section
    "The eyeball centres' motion"). By axis (the note's section "Which axis"): the pitch residual is the
    limbus fit's vertical error (the true iris height alone brings the check to 0.36-0.96 deg on the five
    clips), a per-eye, per-dot scatter of SD 0.4 px that goes with the upper arcs' candidates lying inside
    the rim near the lids, not with the gaze direction; the yaw residual is the centres' motion. A fixed
    radius, rays near the horizontal only (worse on seven of nine off-axis clips), a wider lid margin and the
    mesh's iris point mixed in were tried; none holds in general."""
    d, sched, res, truth, check = good_clip
    samples, eyes, chain = _implied(good_clip)
    acc, floor = check.summary["accuracy_offset_gain_deg"], check.summary["accuracy_noise_floor_deg"]
    print(f"accuracy offset+gain {acc:.3f} deg; eyes {eyes:.3f} + noise floor {floor:.3f}; chain {chain:.3f}")
    assert abs(acc - (eyes + floor)) <= 0.5


def test_cross_correlation_finds_the_start_without_the_flash(good_clip):
    d, sched, res, truth, check = good_clip
    import pandas as pd

    s = pd.read_parquet(d / "out" / "samples.parquet")
    al = find_start(sched, s, params=CheckParams(align="xcorr"))
    assert abs(al["start_s"] - truth["flash_first_frame_t_s"]) <= 2 / 30, al


def test_wrong_gain_is_reported(tmp_path, capsys):
    """Eyes that move only 0.6 times as far as the dots (a scaled measurement, or a student not following),
    in the renderer's classroom conditions: 640x480 at 550 mm (iris 12 px), H.264 CRF 28, lids following the
    eyes, a slow +-15 % drift of the light level and a window on the left (lighting_drift, lighting_gradient),
    the head drifting and turning; the flash is still found on its first frame. Measured on four draws of these
    conditions (schedule seeds 5-8, render seeds 3-6): gains yaw 0.53-0.68, pitch 0.28-0.49, all flagged, start
    on the first flashed frame every time (bench/bench_target_check.py's k12 rows: 0.51 / 0.47 with 9 dots)."""
    from aspectus.cli import main

    sched = make_schedule(SCREEN, seed=5, fixation_s=1.2, n_fixations=5, pursuit_sweeps=0)
    sched.write(tmp_path / "schedule.json")
    render_target_clip(tmp_path / "wrong_gain.mp4", sched, lead_in_s=1.0, tail_s=0.5, gain=(0.6, 0.6),
                       offset_deg=(2.0, -2.0), size_px=(640, 480), fov_deg=60.0, seed=3, crf=28, head_motion=True,
                       head_distance_mm=550.0, lighting_drift=0.15, lighting_gradient=0.4)
    rc = main(["targets", "check", str(tmp_path / "wrong_gain.mp4"), "--schedule", str(tmp_path / "schedule.json"),
               "-o", str(tmp_path / "out"), "--quiet"])
    assert rc == 0
    out = capsys.readouterr().out
    doc = json.loads((tmp_path / "out" / "wrong_gain" / "target_check.json").read_text())
    print(out)
    truth = json.loads((tmp_path / "wrong_gain_targets.json").read_text())
    assert doc["alignment"]["method"] == "flash"
    assert abs(doc["alignment"]["frame_index"] - truth["flash_first_frame"]) <= 1
    assert doc["summary"]["gain_in_range"] is False
    assert doc["mapping"]["gain_yaw"] < 0.8 and doc["mapping"]["gain_pitch"] < 0.8
    assert "yaw gain" in out and "pitch gain" in out and "outside 0.8-1.25" in out and "95 % interval" in out


def test_a_clip_without_the_whole_sequence_names_the_clip_and_the_options(tmp_path, capsys):
    """A 1.5-s clip of a student (no sequence in it): the automatic search names the options that give the start
    by hand, and those options on the too-short clip name the clip file, what was expected and what to do."""
    from aspectus.cli import main
    from aspectus.synth.render import render_clip
    from aspectus.synth.trajectory import synth_trajectory

    clip = render_clip(tmp_path / "short_p01.mp4", synth_trajectory(duration_s=1.5, seed=3), size_px=(640, 360),
                       fps=30.0, seed=3).path
    sched = make_schedule(SCREEN, seed=1, fixation_s=1.2, n_fixations=5, pursuit_sweeps=0).write(tmp_path / "s.json")
    base = ["targets", "check", str(clip), "--schedule", str(sched), "-o", str(tmp_path / "out"), "--quiet"]
    assert main(base) == 2
    err = capsys.readouterr().err
    assert str(clip) in err and "could not be found" in err and "--align given --start-s S" in err
    assert "align=given" not in err
    assert main(base + ["--align", "given", "--start-s", "0"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"aspectus: error: {clip}: the clip ends 1.5 s after the sequence's start"), err
    assert "record the whole sequence" in err and "--start-s" in err
    assert not (tmp_path / "out" / "short_p01" / "target_check.json").exists()
