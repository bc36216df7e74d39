"""Gaze quality on the known-target sequence: alignment, offset and gain, accuracy, precision, data loss.

A clip that contains the sequence (:mod:`aspectus.targets.schedule`) is
checked in five steps:

1. **Find the sequence.** The full-screen flash lights the face: the
   picture's mean brightness (:func:`frame_brightness`) jumps above its
   running median for about the flash's length (:func:`find_flashes`). The
   first frame at half the jump or more is schedule time 0. Without a
   visible flash (or with ``align="xcorr"``) the gaze itself is matched to
   the dot's path: the start whose correlation of yaw with the dot's x and
   pitch with its y is largest (:func:`xcorr_start`).
2. **Fit the per-person mapping** on the still dots. For each dot, the
   median gaze of its valid samples from ``settle_s`` after its onset to its
   offset. Offset only: ``gaze = offset + target`` per axis (the mean
   difference). Offset and gain: ``gaze = offset + gain * target`` per axis
   (least squares). Both are reported, never hidden: a gain far from 1 means
   the measured angles are scaled (or the student did not follow the dots).
3. **Accuracy**: the mean over the still dots of the angle between each
   dot and its median gaze mapped back to the screen (after the offset fit;
   after offset and gain; and after offset and gain fitted without that dot,
   leave-one-out, which does not reward over-fitting). Beside it, the
   accuracy that the measured noise alone would give (``accuracy_noise_floor_deg``):
   what is above it is systematic error of the measurement. The accuracy and
   precision definitions follow Holmqvist, Nystroem & Mulvey (2012, ETRA,
   "Eye tracker data quality: what it is and how to measure it"; from
   memory).
4. **Precision** on each still dot's window: RMS of the sample-to-sample
   angular steps (RMS-S2S, consecutive valid frames only) and the SD
   (``sqrt(sd_x^2 + sd_y^2)``), both on the mapped gaze in degrees of
   visual angle on the screen, and RMS-S2S also on the raw gaze angle.
   **Data loss**: the share of frames of the sequence without valid gaze.
5. **Events**: the project's fixation detector runs on the sequence; a
   fixation counts as on a dot when its mid-time lies within the dot's
   time (plus ``settle_s``) and its mapped centre within ``hit_radius_deg``.
   **Smooth-pursuit gain**: on each moving sweep from ``settle_s`` after
   its onset to 0.1 s before its offset, the slope of the mapped gaze along
   the sweep over time divided by the dot's speed.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd

from aspectus.errors import AspectusInputError, ParameterError
from aspectus.targets.schedule import Schedule

#: gain range (per axis) outside which the check is flagged: issue 2's acceptance range for the webcam
#: gain against the truth on rendered clips (a project criterion, not a published standard)
GAIN_RANGE = (0.8, 1.25)


@dataclass
class CheckParams:
    """Parameters of the known-target check (all written to the sidecar).

    Attributes
    ----------
    align : {"auto", "flash", "xcorr", "given"}
        How schedule time 0 is found: ``"auto"`` flash, falling back to
        cross-correlation; ``"given"`` uses ``start_s``.
    start_s : float or None
        Clip time of the flash's onset when ``align="given"``.
    search_from_s : float
        Look for the flash from this clip time on (a second showing at the
        session's end: give a time after the first).
    settle_s : float
        Samples from this long after a dot's onset are used (saccade latency
        and landing; 0.5 s is common practice).
    min_valid_samples : int
        A still dot with fewer valid samples in its window is left out of the fit,
        and has no precision figures (nor with fewer than ``min_valid_samples - 1``
        steps between successive valid samples; :func:`precision_admits`).
    hit_radius_deg : float
        A fixation within this angle of the dot (after the mapping) is on it.
    gain_range : (float, float)
        Fitted gains outside it are flagged.
    xcorr_latency_s : float
        The eyes' lag behind the dot assumed when the start is found by
        cross-correlation (which finds the gaze's path, not the dot's):
        0.2 s, a typical saccade latency (from memory).
    """

    align: str = "auto"
    start_s: float | None = None
    search_from_s: float = 0.0
    settle_s: float = 0.5
    min_valid_samples: int = 5
    hit_radius_deg: float = 3.0
    gain_range: tuple = GAIN_RANGE
    xcorr_latency_s: float = 0.2

    def __post_init__(self):
        if self.align not in ("auto", "flash", "xcorr", "given"):
            raise ParameterError(f"align must be auto, flash, xcorr or given, got {self.align!r}")
        if self.align == "given" and (self.start_s is None or not math.isfinite(self.start_s)):
            raise ParameterError("align given needs the clip time of the flash in seconds "
                                 "(aspectus targets check: --align given --start-s S)")
        if not (0.0 <= self.settle_s <= 5.0):
            raise ParameterError(f"settle_s must be between 0 and 5 s, got {self.settle_s!r}")
        if not (0.1 <= self.hit_radius_deg <= 20.0):
            raise ParameterError(f"hit_radius_deg must be between 0.1 and 20, got {self.hit_radius_deg!r}")
        lo, hi = self.gain_range
        if not (0 < lo < hi):
            raise ParameterError(f"gain_range must be (low, high) with 0 < low < high, got {self.gain_range!r}")
        self.gain_range = (float(lo), float(hi))

    def to_dict(self) -> dict:
        d = asdict(self)
        d["gain_range"] = list(self.gain_range)
        return d


# --- finding the sequence ---------------------------------------------------------------------------------------

def frame_brightness(clip_path, *, cancel=None) -> tuple[np.ndarray, np.ndarray]:
    """Clip time (s, from the first frame) and mean grey level (0-255) of every frame of a clip."""
    from aspectus.webcam.video import iter_frames

    ts, bs = [], []
    t0 = None
    for fr in iter_frames(clip_path, cancel=cancel):
        if t0 is None:
            t0 = fr.pts_s
        ts.append(fr.pts_s - t0)
        bs.append(float(fr.image[::4, ::4].mean()))
    return np.asarray(ts), np.asarray(bs)


@dataclass
class Flash:
    """A flash found in the picture brightness."""

    frame_index: int
    t_s: float
    frames: int
    jump: float
    jump_over_noise: float


def find_flashes(t_s, brightness, *, flash_s: float, search_from_s: float = 0.0) -> list[Flash]:
    """Brief rises of the picture brightness that last about ``flash_s``, in time order.

    Parameters
    ----------
    t_s, brightness : array
        Frame times (s) and mean grey levels.
    flash_s : float
        The flash's length in the schedule, s.
    search_from_s : float
        Rises before this time are ignored.

    Notes
    -----
    The baseline is a running median over 2 s (a flash of up to 0.5 s does
    not move it); the noise is the MAD of the frame-to-frame change (x
    1.4826). A rise counts when its peak is at least 8 noise SDs and 1.5
    grey levels above the baseline and it stays above half its peak for no
    longer than ``flash_s`` plus 0.2 s and 2 frames (a lamp switched on or
    the camera's exposure settling lasts longer). Its onset is the first
    frame at half the peak or more.
    """
    from scipy.ndimage import median_filter

    t = np.asarray(t_s, float)
    b = np.asarray(brightness, float)
    if len(t) < 10:
        return []
    dt = float(np.median(np.diff(t)))
    win = max(5, int(round(2.0 / dt)) | 1)
    base = median_filter(b, size=win, mode="nearest")
    ex = b - base
    d = np.diff(b)
    noise = 1.4826 * float(np.median(np.abs(d - np.median(d)))) / math.sqrt(2) if len(d) else 0.0
    thr = max(8.0 * noise, 1.5)
    above = (ex > thr) & (t >= search_from_s)
    out = []
    i, n = 0, len(b)
    max_frames = int(math.ceil((flash_s + 0.2) / dt)) + 2
    while i < n:
        if not above[i]:
            i += 1
            continue
        j = i
        while j < n and above[j]:
            j += 1
        peak = float(ex[i:j].max())
        half = ex >= 0.5 * peak
        a = i
        while a > 0 and half[a - 1]:
            a -= 1
        z = j
        while z < n and half[z]:
            z += 1
        if z - a <= max_frames:
            out.append(Flash(frame_index=a, t_s=float(t[a]), frames=z - a, jump=peak,
                             jump_over_noise=peak / noise if noise > 0 else float("inf")))
        i = max(j, z)
    return out


def _target_path(schedule: Schedule, ts: np.ndarray):
    x, y, idx = schedule.position_deg(ts)
    return x, y, idx


def xcorr_start(t_s, yaw_deg, pitch_deg, valid, schedule: Schedule, *, search_from_s: float = 0.0,
                step_s: float | None = None) -> tuple[float, float]:
    """The clip time of schedule time 0 that best matches the gaze to the dot's path, and that match.

    For each candidate start (one frame apart) the Pearson correlation of
    yaw with the dot's x and of pitch with its y over the valid samples
    where a dot is on screen are averaged; the best start is refined to
    a fraction of a frame by a parabola through the peak and its
    neighbours. Returns ``(start_s, mean r)``; NaN when the clip is shorter
    than the sequence.
    """
    t = np.asarray(t_s, float)
    ok = np.asarray(valid, bool) & np.isfinite(yaw_deg) & np.isfinite(pitch_deg)
    t, yw, pt = t[ok], np.asarray(yaw_deg, float)[ok], np.asarray(pitch_deg, float)[ok]
    if len(t) < 20:
        return float("nan"), float("nan")
    dt = step_s or float(np.median(np.diff(t)))
    last = t[-1] - schedule.duration_s * 0.8
    starts = np.arange(search_from_s, last + dt / 2, dt)
    if not len(starts):
        return float("nan"), float("nan")
    scores = np.full(len(starts), np.nan)
    for k, s in enumerate(starts):
        x, y, idx = schedule.position_deg(t - s)
        m = idx >= 0
        if m.sum() < 20:
            continue
        rx = _pearson(yw[m], x[m])
        ry = _pearson(pt[m], y[m])
        vals = [v for v in (rx, ry) if np.isfinite(v)]
        if vals:
            scores[k] = float(np.mean(vals))
    if not np.isfinite(scores).any():
        return float("nan"), float("nan")
    k = int(np.nanargmax(scores))
    s = float(starts[k])
    if 0 < k < len(starts) - 1 and np.isfinite(scores[k - 1]) and np.isfinite(scores[k + 1]):
        a, b, c = scores[k - 1], scores[k], scores[k + 1]
        den = a - 2 * b + c
        if den < 0:
            s += 0.5 * (a - c) / den * dt
    return s, float(scores[k])


def _pearson(a, b) -> float:
    a = a - a.mean()
    b = b - b.mean()
    den = math.sqrt(float((a * a).sum() * (b * b).sum()))
    return float((a * b).sum() / den) if den > 0 else float("nan")


# --- fitting and figures ------------------------------------------------------------------------------------------

def angle_between_deg(x1_deg, y1_deg, x2_deg, y2_deg):
    """Angle (deg) between two directions given as screen degrees (``atan(x/D)``, ``atan(y/D)``)."""
    v1 = np.stack([np.tan(np.radians(x1_deg)), np.tan(np.radians(y1_deg)), np.ones(np.shape(x1_deg))], -1)
    v2 = np.stack([np.tan(np.radians(x2_deg)), np.tan(np.radians(y2_deg)), np.ones(np.shape(x2_deg))], -1)
    c = (v1 * v2).sum(-1) / (np.linalg.norm(v1, axis=-1) * np.linalg.norm(v2, axis=-1))
    return np.degrees(np.arccos(np.clip(c, -1.0, 1.0)))


@dataclass
class Mapping:
    """Per-person mapping from measured gaze angles to screen degrees, per axis: ``gaze = offset + gain * target``.

    ``offset_only_*`` is the offset-only fit (gain 1). ``gain_*_ci_low`` / ``gain_*_ci_high``: the gain's 95 %
    confidence interval from the fit's own scatter (:func:`gain_ci95`); with the 5-10 dots of a sequence it is
    often wide, and a gain outside the plausible range is only clear evidence when the interval is too.
    """

    offset_yaw_deg: float
    offset_pitch_deg: float
    gain_yaw: float
    gain_pitch: float
    offset_only_yaw_deg: float
    offset_only_pitch_deg: float
    r_yaw: float
    r_pitch: float
    n_targets: int
    gain_yaw_ci_low: float = float("nan")
    gain_yaw_ci_high: float = float("nan")
    gain_pitch_ci_low: float = float("nan")
    gain_pitch_ci_high: float = float("nan")

    @property
    def usable(self) -> bool:
        """Both gains fitted and at least 0.05 in size (a smaller one cannot be inverted sensibly)."""
        return bool(np.isfinite(self.gain_yaw) and np.isfinite(self.gain_pitch)
                    and abs(self.gain_yaw) >= 0.05 and abs(self.gain_pitch) >= 0.05)

    def to_screen_deg(self, yaw_deg, pitch_deg, *, gain: bool = True):
        yaw_deg, pitch_deg = np.asarray(yaw_deg, float), np.asarray(pitch_deg, float)
        if not gain:
            return yaw_deg - self.offset_only_yaw_deg, pitch_deg - self.offset_only_pitch_deg
        return (yaw_deg - self.offset_yaw_deg) / self.gain_yaw, (pitch_deg - self.offset_pitch_deg) / self.gain_pitch

    def to_dict(self) -> dict:
        return {k: (float(v) if not isinstance(v, int) else v) for k, v in asdict(self).items()}


def fit_mapping(target_x_deg, target_y_deg, gaze_yaw_deg, gaze_pitch_deg) -> Mapping:
    """Fit offset-only and offset+gain per axis by least squares (at least 3 targets, 2 distinct per axis)."""
    tx, ty = np.asarray(target_x_deg, float), np.asarray(target_y_deg, float)
    gx, gy = np.asarray(gaze_yaw_deg, float), np.asarray(gaze_pitch_deg, float)
    n = len(tx)
    if n < 3 or np.ptp(tx) < 1e-6 or np.ptp(ty) < 1e-6:
        nan = float("nan")
        return Mapping(nan, nan, nan, nan, float(np.mean(gx - tx)) if n else nan,
                       float(np.mean(gy - ty)) if n else nan, nan, nan, n)
    bx, ax = np.polyfit(tx, gx, 1)
    by, ay = np.polyfit(ty, gy, 1)
    (xl, xh), (yl, yh) = gain_ci95(tx, gx), gain_ci95(ty, gy)
    return Mapping(offset_yaw_deg=float(ax), offset_pitch_deg=float(ay), gain_yaw=float(bx), gain_pitch=float(by),
                   offset_only_yaw_deg=float(np.mean(gx - tx)), offset_only_pitch_deg=float(np.mean(gy - ty)),
                   r_yaw=_pearson(gx, tx), r_pitch=_pearson(gy, ty), n_targets=n, gain_yaw_ci_low=xl,
                   gain_yaw_ci_high=xh, gain_pitch_ci_low=yl, gain_pitch_ci_high=yh)


def gain_ci95(target_deg, gaze_deg) -> tuple[float, float]:
    """95 % confidence interval of the least-squares slope of ``gaze_deg`` on ``target_deg``.

    The textbook interval for a simple linear regression's slope: b +- t(0.975, n - 2) * s / sqrt(Sxx), with
    s^2 the residuals' sum of squares over n - 2 (the standard interval of any regression text, from memory;
    the tests check it against ``scipy.stats.linregress`` and by its coverage). It assumes independent errors
    of equal size per dot; the dots' errors are partly systematic per gaze direction
    (docs/notes/target-check.md), which this interval counts as scatter. ``(nan, nan)`` below 3 dots or
    without spread in the targets.
    """
    from scipy.stats import t as student_t

    x, y = np.asarray(target_deg, float), np.asarray(gaze_deg, float)
    n = len(x)
    sxx = float(np.sum((x - x.mean()) ** 2)) if n else 0.0
    if n < 3 or sxx <= 0:
        return float("nan"), float("nan")
    b, a = np.polyfit(x, y, 1)
    s = float(np.sqrt(np.sum((y - a - b * x) ** 2) / (n - 2)))
    half = float(student_t.ppf(0.975, n - 2)) * s / np.sqrt(sxx)
    return float(b - half), float(b + half)


def precision_admits(ok: np.ndarray, min_samples: int) -> bool:
    """Whether a still dot's window holds enough for its precision figures: at least ``min_samples`` usable
    samples (:attr:`CheckParams.min_valid_samples`, the count that admits it to the fit) and ``min_samples - 1``
    steps between successive usable ones. From 2-4 samples a 2-D SD scatters by 0.29-0.5 of itself (2 (n - 1)
    degrees of freedom, relative SE about 1 / sqrt(4 (n - 1)) for normal samples; the sampling variance of a
    variance, 2 sigma^4 / dof, from memory), 0.25 at 5, and it would describe dots the accuracy leaves out."""
    ok = np.asarray(ok, bool)
    k = max(3, int(min_samples))
    return bool(ok.sum() >= k and (ok[1:] & ok[:-1]).sum() >= k - 1)


def _rms_s2s(x, y, ok) -> float:
    """RMS-S2S (deg) of one still dot's samples (:func:`aspectus.events.detect.noise.rms_s2s_deg`)."""
    from aspectus.events.detect.noise import rms_s2s_deg

    return rms_s2s_deg(x, y, ok)


def _sd(x, y, ok) -> float:
    """SD (deg, 2-D) of one still dot's samples about their mean (:func:`aspectus.events.detect.noise.fixation_sd_deg`
    with the dot as the one fixation)."""
    from aspectus.events.detect.noise import fixation_sd_deg

    return fixation_sd_deg(x, y, np.where(ok, 0, -1))


@dataclass
class TargetCheck:
    """Result of :func:`check_samples`: the figures (``summary``), the mapping, one row per target, flags."""

    summary: dict
    mapping: Mapping
    targets: pd.DataFrame
    flags: list = field(default_factory=list)
    alignment: dict = field(default_factory=dict)
    params: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"summary": _clean(self.summary), "mapping": _clean(self.mapping.to_dict()),
                "alignment": _clean(self.alignment), "flags": list(self.flags), "params": self.params}


def _clean(d):
    if isinstance(d, dict):
        return {k: _clean(v) for k, v in d.items()}
    if isinstance(d, (list, tuple)):
        return [_clean(v) for v in d]
    if isinstance(d, (float, np.floating)):
        return None if not math.isfinite(float(d)) else float(d)
    if isinstance(d, np.integer):
        return int(d)
    if isinstance(d, np.bool_):
        return bool(d)
    return d


def check_samples(samples: pd.DataFrame, schedule: Schedule, *, start_s: float, alignment: dict | None = None,
                  params: CheckParams | None = None, run_events: bool = True) -> TargetCheck:
    """Every figure of the check on a samples table whose schedule time 0 is at clip time ``start_s``.

    Parameters
    ----------
    samples : pandas.DataFrame
        ``t_s``, ``valid``, ``yaw_deg``, ``pitch_deg`` (:mod:`aspectus.schema`).
    schedule : Schedule
    start_s : float
        Clip time of the flash's onset.
    alignment : dict, optional
        How ``start_s`` was found (copied into the result).
    params : CheckParams, optional
    run_events : bool, default True
        Run the fixation detector for the fixation count.

    Returns
    -------
    TargetCheck
    """
    params = params or CheckParams()
    for c in ("t_s", "valid", "yaw_deg", "pitch_deg"):
        if c not in samples.columns:
            raise AspectusInputError(f"the samples table has no {c!r} column")
    t = samples["t_s"].to_numpy(float)
    ts = t - float(start_s)
    yaw = samples["yaw_deg"].to_numpy(float)
    pitch = samples["pitch_deg"].to_numpy(float)
    ok = samples["valid"].to_numpy(bool) & np.isfinite(yaw) & np.isfinite(pitch)
    span = (ts >= 0) & (ts < schedule.duration_s)
    flags = []
    if span.sum() == 0 or ts[-1] < schedule.duration_s - 1.0:
        raise AspectusInputError(
            f"the clip ends {max(0.0, ts[-1]):.1f} s after the sequence's start, before the sequence's end "
            f"({schedule.duration_s:.1f} s)",
            hint="record the whole sequence, or give the right start time (--align given --start-s S)")

    rows = []
    for r in schedule.targets.itertuples(index=False):
        w = (ts >= r.onset_s + params.settle_s) & (ts < r.offset_s - (0.1 if r.kind == "pursuit" else 0.0))
        n_w, okw = int(w.sum()), ok & w
        row = {"index": int(r.index), "kind": r.kind, "onset_s": float(r.onset_s), "offset_s": float(r.offset_s),
               "x_deg": float(r.x0_deg), "y_deg": float(r.y0_deg), "x_px": float(r.x0_px), "y_px": float(r.y0_px),
               "n_samples": n_w, "n_valid": int(okw.sum()),
               "loss_frac": float(1 - okw.sum() / n_w) if n_w else float("nan")}
        if r.kind == "fixation":
            row["gaze_yaw_deg"] = float(np.median(yaw[okw])) if okw.any() else float("nan")
            row["gaze_pitch_deg"] = float(np.median(pitch[okw])) if okw.any() else float("nan")
            row["used_in_fit"] = bool(okw.sum() >= params.min_valid_samples)
        rows.append(row)
    tab = pd.DataFrame(rows)
    fx = tab[tab["kind"] == "fixation"]
    use = fx[fx["used_in_fit"]]
    m = fit_mapping(use["x_deg"], use["y_deg"], use["gaze_yaw_deg"], use["gaze_pitch_deg"])
    nan = float("nan")
    summary = {"start_s": float(start_s), "sequence_duration_s": float(schedule.duration_s),
               "n_fixation_targets": int(len(fx)), "n_targets_used": int(len(use)),
               "n_pursuit_sweeps": int((tab["kind"] == "pursuit").sum())}
    if len(use) < 5:
        flags.append(f"only {len(use)} of {len(fx)} still dots had {params.min_valid_samples} or more valid samples: "
                     "the mapping and accuracy are not reliable")
    usable = m.usable
    summary["mapping_usable"] = usable
    if not np.isfinite(m.gain_yaw):
        flags.append("the mapping could not be fitted (too few still dots with valid gaze)")
    elif not usable:
        flags.append(f"the gaze hardly moves with the dots (gain yaw {m.gain_yaw:.2f}, pitch {m.gain_pitch:.2f}): "
                     "the mapping cannot be inverted; accuracy, precision on the screen and pursuit gain are not given")

    # accuracy per still dot (offset only; offset + gain; offset + gain leave-one-out)
    tab["error_offset_deg"] = nan
    tab["error_offset_gain_deg"] = nan
    tab["error_offset_gain_loo_deg"] = nan
    idx_use = use.index.to_numpy()
    if len(use):
        x0, y0 = m.to_screen_deg(use["gaze_yaw_deg"], use["gaze_pitch_deg"], gain=False)
        tab.loc[idx_use, "error_offset_deg"] = angle_between_deg(x0, y0, use["x_deg"], use["y_deg"])
    if usable:
        x1, y1 = m.to_screen_deg(use["gaze_yaw_deg"], use["gaze_pitch_deg"])
        tab.loc[idx_use, "error_offset_gain_deg"] = angle_between_deg(x1, y1, use["x_deg"], use["y_deg"])
        for i in idx_use:
            rest = use.drop(index=i)
            mk = fit_mapping(rest["x_deg"], rest["y_deg"], rest["gaze_yaw_deg"], rest["gaze_pitch_deg"])
            if mk.usable:
                xk, yk = mk.to_screen_deg(use.loc[i, "gaze_yaw_deg"], use.loc[i, "gaze_pitch_deg"])
                tab.loc[i, "error_offset_gain_loo_deg"] = float(
                    angle_between_deg(xk, yk, use.loc[i, "x_deg"], use.loc[i, "y_deg"]))
    summary["accuracy_offset_deg"] = float(tab["error_offset_deg"].mean())
    summary["accuracy_offset_gain_deg"] = float(tab["error_offset_gain_deg"].mean())
    summary["accuracy_offset_gain_loo_deg"] = float(tab["error_offset_gain_loo_deg"].mean())

    # precision per still dot, on the mapped gaze and on the raw angle
    gx, gy = m.to_screen_deg(yaw, pitch) if usable else (yaw * nan, pitch * nan)
    s2s, sd, s2s_raw = [], [], []
    n_prec = 0
    for r in schedule.targets.itertuples(index=False):
        if r.kind != "fixation":
            s2s.append(nan), sd.append(nan), s2s_raw.append(nan)
            continue
        w = (ts >= r.onset_s + params.settle_s) & (ts < r.offset_s)
        okw = ok[w]
        if not precision_admits(okw, params.min_valid_samples):  # missing (NaN), not zero or a wild figure
            s2s.append(nan), sd.append(nan), s2s_raw.append(nan)
            continue
        s2s.append(_rms_s2s(gx[w], gy[w], okw))
        sd.append(_sd(gx[w], gy[w], okw))
        s2s_raw.append(_rms_s2s(yaw[w], pitch[w], okw))
        n_prec += 1
    tab["precision_rms_s2s_deg"] = s2s
    tab["precision_sd_deg"] = sd
    tab["precision_rms_s2s_raw_deg"] = s2s_raw
    # the accuracy that the noise alone would give: the error of a median of n samples with SD sd/sqrt(2) per
    # axis is about 1.2533 * sd / sqrt(2 n) per axis (efficiency of the median, normal noise), and the mean
    # length of such a 2-D error is sqrt(pi / 2) times that (Rayleigh); independent samples assumed (white noise:
    # RMS-S2S near sqrt(2) x SD; more correlated noise makes this a lower bound)
    n_valid = tab["n_valid"].to_numpy(float)
    tab["accuracy_noise_floor_deg"] = np.where(
        (tab["kind"] == "fixation") & (n_valid >= 2),
        math.sqrt(math.pi / 2) * 1.2533 * tab["precision_sd_deg"].to_numpy(float) / np.sqrt(2 * np.maximum(n_valid, 1)),
        nan)
    fxt = tab[tab["kind"] == "fixation"]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        summary["precision_rms_s2s_deg"] = float(np.nanmedian(fxt["precision_rms_s2s_deg"])) \
            if fxt["precision_rms_s2s_deg"].notna().any() else nan
        summary["precision_sd_deg"] = float(np.nanmedian(fxt["precision_sd_deg"])) \
            if fxt["precision_sd_deg"].notna().any() else nan
        summary["precision_rms_s2s_raw_deg"] = float(np.nanmedian(fxt["precision_rms_s2s_raw_deg"])) \
            if fxt["precision_rms_s2s_raw_deg"].notna().any() else nan
    # still dots with precision figures (:func:`precision_admits`; the others are missing, not zero)
    summary["n_targets_precision"] = n_prec
    used = tab["kind"].eq("fixation") & tab["error_offset_gain_deg"].notna()
    summary["accuracy_noise_floor_deg"] = float(tab.loc[used, "accuracy_noise_floor_deg"].mean()) if used.any() else nan

    # data loss over the whole sequence
    summary["n_samples"] = int(span.sum())
    summary["loss_frac"] = float(1 - ok[span].mean()) if span.any() else nan
    dt = float(np.median(np.diff(t))) if len(t) > 1 else nan
    summary["sample_rate_hz"] = 1.0 / dt if dt > 0 else nan
    expected = schedule.duration_s / dt if dt > 0 else nan
    summary["missing_frames_frac"] = float(max(0.0, 1 - span.sum() / expected)) if expected > 0 else nan

    # smooth pursuit
    pg = []
    tab["pursuit_gain"] = nan
    for r in schedule.pursuits.itertuples(index=False):
        w = (ts >= r.onset_s + params.settle_s) & (ts < r.offset_s - 0.1) & ok
        if w.sum() < 10 or not usable:
            continue
        ux, uy = r.x1_deg - r.x0_deg, r.y1_deg - r.y0_deg
        norm = math.hypot(ux, uy)
        along = (gx[w] * ux + gy[w] * uy) / norm
        slope = np.polyfit(ts[w], along, 1)[0]
        speed = norm / (r.offset_s - r.onset_s)
        g = float(slope / speed)
        tab.loc[tab["index"] == r.index, "pursuit_gain"] = g
        pg.append(g)
    summary["pursuit_gain"] = float(np.median(pg)) if pg else nan

    # fixations on the dots
    summary["n_fixations_on_targets"] = nan
    summary["n_targets_fixated"] = nan
    summary["n_fixations_in_sequence"] = nan
    if run_events and usable:
        from aspectus.events.analysis import run_analysis

        sub = samples[span].copy()
        if ok[span].sum() >= 10:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                res = run_analysis(sub, source="target sequence")
            ev = res.events[res.events["type"] == "fixation"]
            mid = 0.5 * (ev["onset_s"].to_numpy(float) + ev["offset_s"].to_numpy(float)) - start_s
            ex, ey = m.to_screen_deg(ev["yaw_deg"].to_numpy(float), ev["pitch_deg"].to_numpy(float))
            on_target = np.zeros(len(ev), bool)
            hit = set()
            for r in schedule.fixations.itertuples(index=False):
                inwin = (mid >= r.onset_s) & (mid < r.offset_s + params.settle_s)
                near = angle_between_deg(ex, ey, np.full(len(ev), r.x0_deg), np.full(len(ev), r.y0_deg)) \
                    <= params.hit_radius_deg
                sel = inwin & near
                on_target |= sel
                if sel.any():
                    hit.add(int(r.index))
            summary["n_fixations_in_sequence"] = int(len(ev))
            summary["n_fixations_on_targets"] = int(on_target.sum())
            summary["n_targets_fixated"] = len(hit)
            tab["fixated"] = tab["index"].isin(hit) & (tab["kind"] == "fixation")

    lo, hi = params.gain_range
    for axis, g in (("yaw", m.gain_yaw), ("pitch", m.gain_pitch)):
        if np.isfinite(g) and not lo <= g <= hi:
            why = "the picture may be mirrored" if g < 0 else (
                "the measured angle changes less than the dots' angle" if g < lo else
                "the measured angle changes more than the dots' angle")
            ci = (getattr(m, f"gain_{axis}_ci_low"), getattr(m, f"gain_{axis}_ci_high"))
            sure = ("" if not all(np.isfinite(ci)) else
                    f" (95 % interval {ci[0]:.2f} to {ci[1]:.2f}, outside the range too)" if ci[1] < lo or ci[0] > hi else
                    f" (95 % interval {ci[0]:.2f} to {ci[1]:.2f}, which reaches into the range: the dots scatter "
                    "too much to be sure)")
            flags.append(f"{axis} gain {g:.2f} is outside {lo:g}-{hi:g}{sure}: {why}, or the student did not follow "
                         "the dots; angles of this clip are scaled by it")
    summary["gain_in_range"] = bool(all(np.isfinite(g) and lo <= g <= hi for g in (m.gain_yaw, m.gain_pitch)))
    if np.isfinite(summary["loss_frac"]) and summary["loss_frac"] > 0.25:
        flags.append(f"{100 * summary['loss_frac']:.0f} % of the sequence's frames have no valid gaze")
    return TargetCheck(summary=summary, mapping=m, targets=tab, flags=flags, alignment=dict(alignment or {}),
                       params=params.to_dict())


def find_start(schedule: Schedule, samples: pd.DataFrame, *, clip_path=None, params: CheckParams | None = None,
               brightness=None) -> dict:
    """Schedule time 0 on the clip's clock: ``{"start_s", "method", ...}`` (see the module docstring).

    ``brightness`` may be given as ``(t_s, grey)``; otherwise it is measured on ``clip_path``.
    """
    params = params or CheckParams()
    if params.align == "given":
        return {"start_s": float(params.start_s), "method": "given"}
    out: dict = {}
    if params.align in ("auto", "flash"):
        if brightness is None and clip_path is not None:
            brightness = frame_brightness(clip_path)
        if brightness is not None:
            fl = find_flashes(*brightness, flash_s=schedule.flash_s, search_from_s=params.search_from_s)
            out["flashes_found"] = len(fl)
            if fl:
                f = fl[0]
                return {"start_s": f.t_s, "method": "flash", "frame_index": f.frame_index, "flash_frames": f.frames,
                        "jump_grey": f.jump, "jump_over_noise": f.jump_over_noise, "flashes_found": len(fl),
                        "flash_times_s": [x.t_s for x in fl]}
        if params.align == "flash":
            raise AspectusInputError(
                "no flash was found in the picture's brightness", path=clip_path,
                hint="check that the sequence was recorded from its start, or find it by the gaze (--align xcorr), "
                "or give the clip time of its flash (--align given --start-s S)")
    s, r = xcorr_start(samples["t_s"], samples["yaw_deg"], samples["pitch_deg"], samples["valid"], schedule,
                       search_from_s=params.search_from_s)
    if not np.isfinite(s):
        raise AspectusInputError("the sequence could not be found in the gaze (the clip is shorter than the "
                                 "sequence, or the gaze does not follow the dots)",
                                 path=clip_path, hint="if the whole sequence is in the clip, give the clip time of "
                                 "its flash in seconds: --align given --start-s S")
    out.update({"start_s": s - params.xcorr_latency_s, "method": "xcorr", "xcorr_r": r,
                "xcorr_latency_s": params.xcorr_latency_s})
    return out
