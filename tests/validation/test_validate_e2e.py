"""End to end: a rendered clip whose eyes follow hand-coded lab recordings, validated against those recordings.

The eyes of the rendered face follow four trials of Andersson et al. (2017)
(500 Hz lab recordings, ../shared/reference/lund2013), played one after the
other. The same recordings, written as one BIDS eye-tracking file that
starts 1.5 s before the clip, are the reference. The clip is rendered three
times (render seeds GATE_SEEDS); the real decoder, face mesh and pipeline run
on each; ``aspectus validate`` must find the offset and, over the three,
agree with the reference on per-window fixation counts.
"""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from _lund import BLINK, FIXATION, SACCADE, load_trial
from aspectus.reference import write_bids_physio
from aspectus.synth.trajectory import Trajectory

TRIALS = ("TH34_img_Europe", "TL20_img_konijntjes", "UH21_img_Rome", "UH29_img_Europe")
LEAD_S = 1.5  # the lab recording starts this long before the clip


def _lund_recording(lund_dir):
    """The four trials back to back: time (s), x/y (px), blink, and the angles of each sample."""
    parts, t0 = [], 0.0
    screen = None
    for name in TRIALS:
        tr = load_trial(lund_dir, name)
        screen = tr.screen
        blink = tr.labels["MN"] == BLINK
        parts.append(pd.DataFrame({"t_s": tr.t_s + t0, "yaw_deg": tr.yaw_deg, "pitch_deg": tr.pitch_deg,
                                   "valid": tr.valid, "blink": blink, "label": tr.labels["MN"]}))
        t0 = parts[-1]["t_s"].iloc[-1] + 0.002
    rec = pd.concat(parts, ignore_index=True)
    return rec, screen


def _trajectory(rec: pd.DataFrame) -> Trajectory:
    """The clip's gaze: the recording from LEAD_S on, on the clip clock, at 240 Hz, gaps bridged."""
    t = np.arange(0.0, rec["t_s"].iloc[-1] - LEAD_S, 1 / 240)
    ok = rec["valid"].to_numpy()
    src_t = rec["t_s"].to_numpy()[ok] - LEAD_S
    yaw = np.interp(t, src_t, rec["yaw_deg"].to_numpy()[ok])
    pitch = np.interp(t, src_t, rec["pitch_deg"].to_numpy()[ok])
    blink = np.interp(t, rec["t_s"].to_numpy() - LEAD_S, rec["blink"].to_numpy(float)) > 0.5
    n = len(t)
    samples = pd.DataFrame({"t_s": t, "yaw_deg": yaw, "pitch_deg": pitch, "blink": blink,
                            "lid_closure": blink.astype(float), "head_yaw_deg": np.zeros(n),
                            "head_pitch_deg": np.zeros(n), "head_roll_deg": np.zeros(n), "head_x_mm": np.zeros(n),
                            "head_y_mm": np.zeros(n), "head_z_mm": np.full(n, 600.0)})
    # the coder's events on the clip clock, as the trajectory's truth
    ct = rec["t_s"].to_numpy() - LEAD_S
    lab = rec["label"].to_numpy()
    cut = np.flatnonzero(np.diff(lab)) + 1
    runs = [(a, b) for a, b in zip(np.r_[0, cut], np.r_[cut, len(lab)]) if ct[a] >= 0]

    def table(code, extra):
        rows = [{"onset_s": ct[a], "offset_s": ct[b - 1], "duration_ms": (ct[b - 1] - ct[a]) * 1e3,
                 **extra(a, b)} for a, b in runs if lab[a] == code]
        return pd.DataFrame(rows)

    fix = table(FIXATION, lambda a, b: {"yaw_deg": float(np.nanmean(rec["yaw_deg"].to_numpy()[a:b])),
                                        "pitch_deg": float(np.nanmean(rec["pitch_deg"].to_numpy()[a:b]))})
    sac = table(SACCADE, lambda a, b: {"amplitude_deg": float(np.hypot(
        rec["yaw_deg"].iloc[b - 1] - rec["yaw_deg"].iloc[a], rec["pitch_deg"].iloc[b - 1] - rec["pitch_deg"].iloc[a]))})
    bl = table(BLINK, lambda a, b: {"closure_onset_s": ct[a], "closure_offset_s": ct[b - 1]})
    if not len(bl):
        bl = pd.DataFrame({"onset_s": [np.nan], "offset_s": [np.nan], "duration_ms": [np.nan],
                           "closure_onset_s": [np.nan], "closure_offset_s": [np.nan]}).iloc[:0]
    return Trajectory(samples=samples, fixations=fix, saccades=sac, blinks=bl,
                      params={"rate_hz": 240.0, "duration_s": float(t[-1])})


def render_lund_clip(lund_dir, clip, seed=1) -> None:
    """Render the clip whose eyes follow the recordings (called in a fresh interpreter by the test); ``seed``
    draws the renderer's head motion, noise and lighting."""
    from aspectus.synth.render import render_clip

    rec, _ = _lund_recording(Path(lund_dir))
    render_clip(Path(clip), _trajectory(rec), size_px=(960, 540), fps=30.0, seed=int(seed))


def _render_in_fresh_interpreter(lund_dir, clip, seed=1) -> None:
    # Rendered in a fresh interpreter, so that the test's input cannot depend on which tests ran before
    # it (it once did: libx264's AVX-512 code read unwritten memory - aspectus.synth.clip_writer.x264_options).
    code = ("import sys; sys.path[:0] = [sys.argv[1], sys.argv[1] + '/..']; from test_validate_e2e import render_lund_clip; "
            "render_lund_clip(sys.argv[2], sys.argv[3], int(sys.argv[4]))")
    r = subprocess.run([sys.executable, "-c", code, str(Path(__file__).parent), str(lund_dir), str(clip), str(seed)],
                       capture_output=True, text=True, timeout=1200)
    assert r.returncode == 0, r.stderr[-2000:]


def write_reference(lund_dir, folder) -> Path:
    """The recordings as one BIDS eye-tracking file starting LEAD_S before the clip; returns its physio path."""
    rec, screen = _lund_recording(Path(lund_dir))
    x_px, y_px = screen.deg_to_px(rec["yaw_deg"], rec["pitch_deg"])
    table = pd.DataFrame({"timestamp": np.round(rec["t_s"].to_numpy() * 1e6 + 2.5e9),
                          "x_coordinate": np.where(rec["valid"], x_px, np.nan),
                          "y_coordinate": np.where(rec["valid"], y_px, np.nan)})
    bids = write_bids_physio(Path(folder) / "lab", table, base="sub-p01_ses-s01_task-images",
                             sampling_frequency_hz=500.0, screen=screen, timestamp_unit="us")
    return bids["physio"]


def process_and_validate(clip, folder, physio, params=None):
    """Process the rendered clip (``params``: ProcessParams, the defaults when None) into ``folder``/out and
    validate it against ``physio`` into ``folder``/validation with the default detector (noise-adaptive I-DT,
    as a user would run it, on both sides) over 2-s windows. Returns (process result, alignment dict,
    per-window fixation-count agreement row, validation result, validation folder)."""
    from aspectus.events.analysis import AnalysisParams
    from aspectus.validation.pair import ValidateParams, validate_pair
    from aspectus.webcam.pipeline import process_clip

    clip, folder = Path(clip), Path(folder)
    proc = process_clip(clip, folder / "out" / clip.stem) if params is None else \
        process_clip(clip, folder / "out" / clip.stem, params=params)
    out = folder / "validation"
    r = validate_pair(folder / "out" / clip.stem, physio, out,
                      params=ValidateParams(analysis=AnalysisParams(window_s=2.0, step_s=2.0)))
    al = json.loads((out / "alignment.json").read_text())
    ag = pd.read_csv(out / "agreement.csv")
    fc = ag[(ag["scope"] == "window") & (ag["feature"] == "fixation_count")].iloc[0]
    return proc, al, fc, r, out


#: Render seeds of the clips the floor is read on (the renderer's head motion, noise and lighting drawn anew; chosen
#: before they were measured, docs/notes/gaze-measurement.md, "The default gated on fresh draws").
GATE_SEEDS = (14, 15, 16)


@pytest.mark.slow
def test_rendered_clip_following_lund_recordings(lund_dir, tmp_path):
    physio = write_reference(lund_dir, tmp_path)
    runs = {}
    for seed in GATE_SEEDS:
        folder = tmp_path / f"seed{seed}"
        folder.mkdir()
        clip = folder / "p01_s01_lund.mp4"
        _render_in_fresh_interpreter(lund_dir, clip, seed)
        runs[seed] = process_and_validate(clip, folder, physio)
    for seed, (proc, al, fc, r, _) in runs.items():
        used = json.loads((proc.out_dir / "run.json").read_text())["extraction"]["gaze_model"]["iris_estimate"]["used"]
        print(f"seed {seed}: offset {al['offset_s']:.4f} s (confidence {al['confidence']:.2f}); fixation count per "
              f"2 s window: n={fc['n']}, r={fc['pearson_r']:.3f}, ICC={fc['icc']:.3f}, bias={fc['ba_bias']:.2f}; "
              f"kappa={r.events['kappa']:.3f}, F1={r.events['f1']:.3f}; iris estimate "
              f"{used}")
        assert proc.summary["valid_frac"] > 0.8, seed
        assert abs(al["offset_s"] - (-LEAD_S)) < 1 / 30, (seed, al)  # the reference started 1.5 s before the clip
        assert fc["n"] >= 15, seed
        assert abs(fc["ba_bias"]) < 1.5, seed
        assert 0.2 < r.events["kappa"] < 1.0 and 0.6 < r.events["f1"] <= 1.0, seed
    mean_r = float(np.mean([runs[seed][2]["pearson_r"] for seed in GATE_SEEDS]))
    print(f"mean per-window fixation-count r over seeds {GATE_SEEDS}: {mean_r:.3f}")
    # Issue 4's floor: per-window fixation-count r >= 0.8, read as the mean over three draws of the clip, since
    # one draw of 19 windows is too noisy a gate (DEVELOPERS.md, "What limits the end-to-end validation
    # figure"): over seeds 1-13 the same webcam error drawn anew gave r 0.75-0.93 (SD 0.045).
    # Measured 2026-12-05 (docs/notes/gaze-measurement.md): with the limbus fit as this clip's estimate, seeds
    # 14 / 15 / 16 read r 0.880 / 0.902 / 0.833 with the side-arc rule (the default since; mean 0.872) and 0.871 /
    # 0.927 / 0.895 without it (mean 0.898); since `auto` reads the clip's iris size from the limbus fit (15.9 px
    # here, below 16.8) the clip takes the appearance estimate: 0.896 / 0.915 / 0.883, mean 0.898, ICC 0.841-0.896,
    # bias -0.79 to -0.21, kappa 0.354-0.465, F1 0.824-0.855 (the side-arc rule does not act on it). Seed 1, which
    # this test read before, gives r 0.781 with the appearance estimate (0.850 with the limbus fit); over seeds
    # 14-21 0.707-0.926, mean 0.857, three of nine draws with seed 1 below 0.8. History on seed 1: 0.64 -> 0.70
    # with the merge test of fragment means (postprocess.means_indistinguishable), -> 0.855 with the limbus
    # fit's one-sided weights (limbus.py). Noise-free 30 Hz gaze reached only 0.87 on seed 1, so the margin is
    # small. With `--gaze iris_combine=limbus` and the anchors left on `auto` (below and beside the eyes, as this
    # clip's size takes them; the figures above had the anchors below the eyes) seeds 14-21 read a mean 0.860
    # (appearance 0.857) and seed 1 0.784 (bench/e2e_render_seeds.py --seeds 1,14-21 --option
    # iris_combine=limbus, 2026-12-05).
    assert mean_r >= 0.8  # issue 4 floor
    _, _, _, _, out = runs[GATE_SEEDS[0]]
    assert (out / "report.html").exists()
    # the gains' per-axis error figures are recorded (events_agreement.json) and read on both sides
    g = json.loads((out / "events_agreement.json").read_text())["gain"]
    print("gains: saccade amplitude {:.4f}, fixation yaw {:.4f}, pitch {:.4f}; per-axis fixation-mean error SD "
          "{}; lag-1 correlation {}; amplitude error SD {}".format(
              g["saccade_amplitude"]["estimate"], g["fixation_yaw"]["estimate"], g["fixation_pitch"]["estimate"],
              g["fixation_mean_error_sd_per_axis_deg"], g["error_lag1_correlation_per_axis"],
              g["saccade_amplitude_error_sd_deg"]))
    for side in ("webcam", "reference"):
        assert all(v is not None and v > 0 for v in g["fixation_mean_error_sd_per_axis_deg"][side].values())
        assert g["saccade_amplitude_error_sd_deg"][side] > 0
