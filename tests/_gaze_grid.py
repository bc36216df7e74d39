"""The gaze precision grid: classroom-like rendered clips whose eyes follow hand-coded recordings.

Each condition renders a clip with :func:`aspectus.synth.render.render_clip` whose eyes follow the first seconds of
one of the hand-coded trials of Andersson et al. (2017) (../shared/reference/lund2013, read by
:mod:`_lund`), runs the whole webcam pipeline on it and compares with the truth:

* ``rms_s2s_deg``: RMS of the sample-to-sample change of the 2-D gaze error (estimate minus truth) over
  consecutive valid frames - the precision of the signal with the true eye movement taken out;
* ``rms_fix_deg``, ``rms_s2s_fix_deg``: the error's SD about its mean over each fixation both coders agree
  on, and its RMS-S2S inside them (:func:`_within_fixations`): per-sample RMS-S2S is comparable across frame
  rates only for white noise, the first is comparable for any error;
* ``noise_rms_s2s_deg``: the pipeline's own noise figure (run.json's quality), as a user sees it, and
  ``noise_rms_s2s_33ms_deg``, the same over 33 ms steps (the precision tier's figure; equal at 30 fps), and
  ``noise_sd_deg``, the SD of the samples about their fixation's mean (the tier's second figure);
* ``yaw_r``, ``yaw_gain``, ``pitch_r``, ``pitch_gain``: Pearson r and the least-squares slope of the
  estimate on the truth over valid frames;
* ``valid_frac``: the share of frames the pipeline marks valid; ``valid_far_frac``: the share of frames marked
  valid whose error is more than 5 deg from the clip's median error (trusted gaze far off, e.g. smeared frames);
* ``kappa``: Cohen's (1960) sample kappa, fixation vs not, of the default detector on the clip's samples
  against each coder's labels at the frame times, mean over the two coders; ``kappa_truth``: the same for
  the detector run on the true gaze at the frame times (the ceiling at this frame rate).

Used by bench/bench_gaze_grid.py (the whole grid) and tests/test_gaze_grid.py (the floors on a subset).
"""
from __future__ import annotations

from contextlib import contextmanager
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

import _lund

#: slow head drift and rotation (the renderer's defaults: yaw +-10, pitch +-4, roll +-2 deg; 15 / 10 / 25 mm)
HEAD_DRIFT_AND_TURNS: dict = {}
#: slow head drift in translation, distance and roll only
HEAD_DRIFT_ONLY = {"yaw_deg": 0.0, "pitch_deg": 0.0, "roll_deg": 3.0, "x_mm": 20.0, "y_mm": 15.0, "z_mm": 40.0}


@dataclass
class Condition:
    """One cell of the grid (names as in the renderer's parameters)."""

    name: str
    size_px: tuple = (1280, 720)
    distance_mm: float = 600.0
    codec: str = "libx264"
    crf: int = 28
    lid_follow: float = 1.0
    lighting_drift: float = 0.15
    lighting_gradient: float = 0.3
    head_motion: dict | None = field(default_factory=lambda: dict(HEAD_DRIFT_AND_TURNS))
    glasses: bool = False
    mirror: bool = False
    corneal_reflection: bool = False
    face: str = "hopper"
    trial: str = "UH21_img_Rome"
    duration_s: float = 8.0
    seed: int = 0
    fps: float = 30.0
    iris_colour: str | None = None
    exposure_ms: float = 0.0
    iris_sampling: str | None = None  # the renderer's default; "area" or "point" (aspectus.synth.frame.FaceRig)
    #: frames the camera missed, each with this probability (not the first): "dropped" ones are absent from the
    #: clip (its timestamps keep the gap, as a variable-frame-rate recording does), "repeated" ones hold the frame
    #: before's picture again (a constant-frame-rate recorder filling the gap); aspectus.synth.render.lost_frames
    frame_loss: float = 0.0
    frame_loss_kind: str = "dropped"

    def label(self) -> str:
        w, h = self.size_px
        codec = f"CRF{self.crf}" if self.codec == "libx264" else {"mjpeg": "MJPEG"}.get(self.codec, "mp4v")
        extra = "".join([" glasses" if self.glasses else "", " mirror" if self.mirror else "",
                         " reflection" if self.corneal_reflection else "",
                         " still-lids" if not self.lid_follow else "",
                         f" {self.fps:g}fps" if self.fps != 30.0 else "",
                         f" iris-{self.iris_colour}" if self.iris_colour else "",
                         f" exp{self.exposure_ms:g}ms" if self.exposure_ms else "",
                         f" {self.iris_sampling}-sampled" if self.iris_sampling else "",
                         f" {100 * self.frame_loss:g}%-{self.frame_loss_kind}" if self.frame_loss else ""])
        return f"{w}x{h} {self.distance_mm:.0f}mm {codec} {self.face} {self.trial.split('_')[0]} s{self.seed}{extra}"


def render_condition(cond: Condition, out_dir: Path, lund_dir: Path):
    from aspectus.synth.render import constant_frame_times, lost_frames, render_clip

    trial = _lund.load_trials(lund_dir, cond.trial)  # names joined by '+': end to end
    traj = _lund.as_trajectory(trial, duration_s=cond.duration_s, head_motion=cond.head_motion,
                               distance_mm=cond.distance_mm, seed=cond.seed)
    path = Path(out_dir) / f"{cond.name}.mp4"
    kw = {"crf": cond.crf} if cond.codec == "libx264" else {"bitrate_kbps": None}
    if cond.iris_sampling:
        kw["iris_sampling"] = cond.iris_sampling
    if cond.frame_loss:
        times = constant_frame_times(traj, cond.fps)  # the renderer's frames
        lost = lost_frames(len(times), cond.frame_loss, cond.seed)
        if cond.frame_loss_kind == "dropped":
            kw["frame_times_s"] = times[~lost]
        elif cond.frame_loss_kind == "repeated":
            kw["repeated_frames"] = lost
        else:
            raise ValueError(f"frame_loss_kind must be 'dropped' or 'repeated', got {cond.frame_loss_kind!r}")
    res = render_clip(path, traj, face=cond.face, size_px=tuple(cond.size_px), fps=cond.fps, codec=cond.codec,
                      seed=cond.seed,
                      lid_follow=cond.lid_follow, lighting_drift=cond.lighting_drift,
                      lighting_gradient=cond.lighting_gradient, glasses=cond.glasses, mirror=cond.mirror,
                      iris_colour=cond.iris_colour, exposure_ms=cond.exposure_ms,
                      corneal_reflection=cond.corneal_reflection, **kw)
    return res, trial


def first_seconds(src: Path, dst: Path, seconds: float) -> Path:
    """The clip's frames before ``seconds``, their packets copied into ``dst`` (the same encoded frames: no second
    encode), for measuring a shorter clip of the very same picture."""
    import av

    with av.open(str(src)) as i, av.open(str(dst), "w") as o:
        st = i.streams.video[0]
        ot = o.add_stream_from_template(st)
        for p in i.demux(st):
            if p.dts is None or (p.pts is not None and float(p.pts * st.time_base) >= seconds - 1e-6):
                continue
            p.stream = ot
            o.mux(p)
    return dst


def _fit(est, truth):
    ok = np.isfinite(est) & np.isfinite(truth)
    if ok.sum() < 10:
        return float("nan"), float("nan")
    return float(np.corrcoef(est[ok], truth[ok])[0, 1]), float(np.polyfit(truth[ok], est[ok], 1)[0])


def _labels_at(trial, t_s):
    idx = np.clip(np.searchsorted(trial.t_s, t_s), 0, len(trial.t_s) - 1)
    prev = np.clip(idx - 1, 0, len(trial.t_s) - 1)
    idx = np.where(np.abs(trial.t_s[prev] - t_s) <= np.abs(trial.t_s[idx] - t_s), prev, idx)
    return {c: trial.labels[c][idx] == _lund.FIXATION for c in _lund.CODERS}


def _kappa(samples: pd.DataFrame, coders: dict) -> float:
    from aspectus.events.analysis import run_analysis

    res = run_analysis(samples)
    fix = np.asarray(res.labels == "fixation")
    return float(np.mean([_lund.cohen_kappa(fix, m) for m in coders.values()]))


def _fixation_breaks(trial, t_s) -> np.ndarray:
    """(n - 1,) bool: whether the coders' own labels (at the trial's full rate) hold a sample that is not a
    fixation of both coders between frame i and frame i + 1 (both ends included). Labels read at the frame
    times alone miss a saccade shorter than a frame interval: both frames then read fixation, and the step
    between them would cross from one fixation to the next (2-4 of some 160 steps on two of the grid's four
    trials at 30 fps)."""
    t_s = np.asarray(t_s, float)
    fine = np.logical_and.reduce([trial.labels[c] == _lund.FIXATION for c in _lund.CODERS]).astype(int)
    cum = np.concatenate([[0], np.cumsum(1 - fine)])  # non-fixation samples before each index
    near = np.clip(np.searchsorted(trial.t_s, t_s), 0, len(trial.t_s) - 1)
    prev = np.clip(near - 1, 0, len(trial.t_s) - 1)
    near = np.where(np.abs(trial.t_s[prev] - t_s) <= np.abs(trial.t_s[near] - t_s), prev, near)  # as _labels_at
    return (cum[near[1:] + 1] - cum[near[:-1]]) > 0


def _within_fixations(ey: np.ndarray, ep: np.ndarray, ok: np.ndarray, coders: dict,
                      breaks: np.ndarray | None = None) -> dict:
    """The error's spread inside the fixations both coders agree on (runs of at least 3 such frames, cut where
    ``breaks`` (:func:`_fixation_breaks`) says the coders' labels leave fixation between two frames):
    ``rms_fix_deg``, the SD of the 2-D error about its mean over each fixation, pooled
    (:func:`aspectus.events.detect.noise.fixation_sd_deg`: n - 1 per fixation, since each fixation's mean is taken
    from its own samples; dividing by n read it low by sqrt(1 - fixations / samples), 0.92-0.94 on the grid's
    trials at 30 fps and 0.96-0.97 at 60, which differed between the rates), and ``rms_s2s_fix_deg``, the
    RMS-S2S of the error over the steps between successive frames inside them (the root of the mean over
    steps of the squared distance; Holmqvist, Nystrom & Mulvey 2012). For white noise of per-axis SD s the
    first is s*sqrt(2) and the second 2 s at any frame rate (ratio sqrt(2)); error that changes slowly within a
    fixation raises the first and not the second, and its sample-to-sample steps shrink as the rate rises."""
    from aspectus.events.detect.noise import fixation_sd_deg

    both = ok & np.logical_and.reduce([np.asarray(m, bool) for m in coders.values()])
    cut = np.zeros(len(both), bool)  # a run ends after frame i where the labels leave fixation before i + 1
    if breaks is not None:
        cut[:-1] = np.asarray(breaks, bool)
    group = np.full(len(both), -1)
    steps, run, a = [], 0, None
    for i in range(len(both) + 1):
        inside = i < len(both) and both[i] and not (a is not None and cut[i - 1])
        if a is not None and not inside:  # the run a..i-1 ends
            if i - a >= 3:
                group[a:i] = run
                run += 1
                steps.append(np.hypot(np.diff(ey[a:i]), np.diff(ep[a:i])))
            a = None
        if a is None and i < len(both) and both[i]:
            a = i
    if not steps:
        return {"rms_fix_deg": float("nan"), "rms_s2s_fix_deg": float("nan")}
    d = np.concatenate(steps)
    return {"rms_fix_deg": fixation_sd_deg(ey, ep, group), "rms_s2s_fix_deg": float(np.sqrt(np.mean(d ** 2)))}


def _far_fraction(ey: np.ndarray, ep: np.ndarray, ok: np.ndarray, far_deg: float = 5.0) -> float:
    """Share of all frames taken as valid whose error lies more than ``far_deg`` from the clip's median error (the
    median removes the constant offset of a calibration-free estimate): gaze the detector would trust, far off."""
    if not ok.any():
        return float("nan")
    far = np.hypot(ey - np.median(ey[ok]), ep - np.median(ep[ok])) > far_deg
    return float((ok & far).mean())


def measure(samples: pd.DataFrame, truth: pd.DataFrame, trial) -> dict:
    """The grid's figures for one processed clip (see the module docstring)."""
    from aspectus.events.analysis import run_analysis

    # rows are compared by frame: the samples' times must be the truth's (the middle of each frame's exposure)
    if len(samples) != len(truth) or not np.allclose(samples["pts_s"].to_numpy(float),
                                                     truth["pts_s"].to_numpy(float), atol=2e-3):
        raise ValueError("the samples' frame times are not the truth's; estimate and truth cannot be compared")
    ok = samples["valid"].to_numpy(bool)
    ey = samples["yaw_deg"].to_numpy() - truth["yaw_deg"].to_numpy()
    ep = samples["pitch_deg"].to_numpy() - truth["pitch_deg"].to_numpy()
    pair = ok[1:] & ok[:-1]
    d2 = np.diff(ey) ** 2 + np.diff(ep) ** 2
    out = {"iris_px": float(truth["iris_diameter_px"].median()), "valid_frac": float(ok.mean()),
           "valid_far_frac": _far_fraction(ey, ep, ok),
           "rms_s2s_deg": float(np.sqrt(np.mean(d2[pair]))) if pair.sum() >= 10 else float("nan")}
    t_s = truth["t_s"].to_numpy()
    out.update(_within_fixations(ey, ep, ok, _labels_at(trial, t_s), _fixation_breaks(trial, t_s)))
    out["yaw_r"], out["yaw_gain"] = _fit(samples["yaw_deg"].to_numpy(), truth["yaw_deg"].to_numpy())
    out["pitch_r"], out["pitch_gain"] = _fit(samples["pitch_deg"].to_numpy(), truth["pitch_deg"].to_numpy())
    coders = _labels_at(trial, truth["t_s"].to_numpy())
    out["kappa"] = _kappa(samples, coders)
    true_samples = pd.DataFrame({"t_s": truth["t_s"], "valid": True, "yaw_deg": truth["yaw_deg"],
                                 "pitch_deg": truth["pitch_deg"]})
    out["kappa_truth"] = _kappa(true_samples, coders)
    q = run_analysis(samples).quality
    out["noise_rms_s2s_deg"] = float(q.get("noise_rms_s2s_deg", np.nan))
    out["noise_rms_s2s_33ms_deg"] = float(q.get("noise_rms_s2s_33ms_deg", np.nan))
    out["noise_sd_deg"] = float(q.get("noise_sd_deg", np.nan))
    return out


#: gaze settings the grid compares: the default (``iris_combine="auto"``: the appearance estimate at every iris size since
#: 2026-12-05; below 16.8 px of the limbus fit's diameter before, the limbus fit above), the limbus fit alone, and the limbus fit
#: fused with the face mesh's iris point (mapped onto the limbus scale in the head,
#: :func:`aspectus.webcam.gaze.fuse_iris_centres`); ``"iris_px": "limbus"`` re-estimates on the limbus fit's own
#: centres (what the pipeline had before the appearance estimate)
VARIANTS = {"default": {}, "limbus": {"iris_combine": "limbus", "iris_px": "limbus"},
            "fuse": {"iris_combine": "fuse", "iris_px": "limbus"}}
#: a variant with the renderer's true iris centres in place of the localiser's (what the rest of the chain -
#: head pose, eyeball centres, detector - gives with a perfect iris localiser)
TRUE_IRIS = {"true_iris": {"iris_px": "truth"}}


def true_iris_px(truth: pd.DataFrame, mirrored: bool = False) -> np.ndarray:
    """(N, 2, 2) true iris centres in the pipeline's eye order, px: the truth file's picture convention (pixel i
    spans [i, i+1)) is aspectus's (aspectus.schema), the one the pipeline's iris centres are in.

    The pipeline's iris centres are in the face mesh's order (its right eye first), which on a ``mirrored``
    picture is the subject's left eye (aspectus.webcam.gaze.unmirror); the truth names the subject's eyes (the
    renderer's ``mirror``: the subject's right iris then lies on the picture's right side). So on a mirrored
    clip the truth's left eye comes first."""
    right = truth[["right_iris_x_px", "right_iris_y_px"]].to_numpy(float)
    left = truth[["left_iris_x_px", "left_iris_y_px"]].to_numpy(float)
    return np.stack([left, right] if mirrored else [right, left], axis=1)


@contextmanager
def gaze_inputs():
    """While the block runs, keep the keyword inputs (without ``params``) of the pipeline's clip-level gaze
    estimate: the per-frame head poses, iris centres and the rest, for re-estimating with other settings or with
    true inputs swapped in. Yields the dict, filled by the last clip processed in the block."""
    from aspectus.webcam import pipeline

    orig = pipeline.estimate_gaze
    cap: dict = {}

    def spy(**kw):
        cap.clear()
        cap.update({k: v for k, v in kw.items() if k != "params"})
        return orig(**kw)

    pipeline.estimate_gaze = spy
    try:
        yield cap
    finally:
        pipeline.estimate_gaze = orig


def with_gaze(samples: pd.DataFrame, **kw) -> pd.DataFrame:
    """A copy of ``samples`` with the gaze columns re-estimated by ``estimate_gaze(**kw)``."""
    from aspectus.webcam.gaze import estimate_gaze

    cols, _ = estimate_gaze(**kw)
    s = samples.copy()
    for c, v in cols.items():
        if c in s.columns:
            s[c] = v
    return s


def _px(x) -> float:
    return float(np.nan if x is None else x)


def run_condition(cond: Condition, out_dir: Path, lund_dir: Path, *, variants: dict | None = None,
                  keep_samples: bool = False, pipeline_gaze: dict | None = None) -> list[dict]:
    """Render, process and measure one condition; one row (the condition's fields and figures) per variant.

    The face mesh runs once; each variant re-runs only the clip-level gaze estimate on the same per-frame
    measurements (the pipeline's own samples for the default variant). Besides the figures of :func:`measure`, each
    row holds ``iris_estimate``: the iris estimate the default took (run.json's ``gaze_model.iris_estimate.used``;
    None in the other variants' rows), ``eye_anchor_set``: the skin points that placed the head
    (``gaze_model.eye_anchor_set.used``; None in the other variants' rows, which re-use the default's head
    placement) and ``iris_px_measured``: the clip's iris diameter as the pipeline measured it for its choice
    (``gaze_model.iris_estimate.iris_px``: the limbus fit's median over open-eye frames, the face mesh's with too
    few fits; NaN unless the pipeline's setting is ``auto``) with ``iris_px_measured_from`` its source
    (``iris_px_source``: "limbus fit" or "face mesh") and ``iris_px_mesh`` the face mesh's median
    (``mesh_median_iris_px``, what the choice read before), ``blink_pad_frames`` (``gaze_model.blink_pad_frames``), ``n_samples``
    and ``precision_tier``, the tier the pipeline's summary gives the clip (None in the other variants' rows).
    ``keep_samples``: each row also holds its samples table under
    ``"samples"``. ``pipeline_gaze``: gaze settings for the pipeline's own run (e.g. ``{"eye_anchor_set":
    "below"}``, which acts in the per-frame geometry); the variants re-estimate with them too.
    """
    from aspectus.webcam import pipeline
    from aspectus.webcam.gaze import GazeParams, estimate_gaze
    from aspectus.events.analysis import run_analysis
    from aspectus.webcam.pipeline import ProcessParams, extract_samples, summarise

    res, trial = render_condition(cond, out_dir, lund_dir)
    captured = {}
    orig_app = pipeline._appearance_iris

    def spy(**kw):
        captured.update(kw)
        return estimate_gaze(**kw)

    def app_spy(a, patches, found):
        captured["limbus_iris_px"] = a[:, 15:19].reshape(len(a), 2, 2).copy()
        return orig_app(a, patches, found)

    pipeline.estimate_gaze, pipeline._appearance_iris = spy, app_spy
    try:
        samples, meta = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(mirrored=cond.mirror,
                                                                                       **(pipeline_gaze or {}))))
    finally:
        pipeline.estimate_gaze, pipeline._appearance_iris = estimate_gaze, orig_app
    limbus_iris = captured.pop("limbus_iris_px", None)
    choice = meta["gaze_model"].get("iris_estimate") or {}
    anchors = meta["gaze_model"].get("eye_anchor_set") or {}
    rows = []
    for name, over in (variants or VARIANTS).items():
        s = samples
        if over:
            over = dict(over)
            kw = {k: v for k, v in captured.items() if k != "params"}
            src = over.pop("iris_px", None)
            if src == "truth":
                kw["iris_px"] = true_iris_px(res.truth, mirrored=cond.mirror)
            elif src == "limbus" and limbus_iris is not None:
                kw["iris_px"] = limbus_iris
            s = with_gaze(samples, **kw, params=GazeParams(mirrored=cond.mirror, **(pipeline_gaze or {}) | over))
        rows.append(asdict(cond) | {"label": cond.label(), "variant": name} | measure(s, res.truth, trial)
                    | {"iris_estimate": choice.get("used") if not over else None,
                       "eye_anchor_set": anchors.get("used") if not over else None,
                       "blink_pad_frames": meta["gaze_model"].get("blink_pad_frames"), "n_samples": len(s),
                       "iris_px_measured": _px(choice.get("iris_px")),
                       "iris_px_measured_from": choice.get("iris_px_source"),
                       "iris_px_mesh": _px(choice.get("mesh_median_iris_px")),
                       "iris_estimate_reason": choice.get("reason") if not over else None,
                       "appearance_share": choice.get("appearance_share") if not over else None,
                       "precision_tier": summarise(s, run_analysis(s), meta)["precision_tier"] if not over else None}
                    | ({"samples": s} if keep_samples else {}))
    return rows
