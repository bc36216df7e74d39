"""Loader for the hand-coded recordings of Andersson et al. (2017).

Andersson, R., Larsson, L., Holmqvist, K., Stridh, M., & Nystrom, M. (2017).
One algorithm to rule them all? An evaluation and discussion of ten eye
movement event-detection algorithms. Behavior Research Methods, 49(2),
616-637. doi:10.3758/s13428-016-0738-9.

The files live in ``../shared/reference/lund2013/img`` (see the README there).
Each trial was labelled by two coders (``MN`` and ``RA``); both files of a
trial carry the same gaze samples. This module turns a trial into a aspectus
samples table (angles in degrees via :class:`aspectus.reference.screen.ScreenGeometry`),
offers the low-rate, noisy versions used to check the detectors under webcam
conditions, and the agreement figures (Cohen's kappa, fixation runs).

Used by the events tests and by the validation tests.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.reference.screen import ScreenGeometry

#: coder label codes, from the data set's README
FIXATION, SACCADE, PSO, PURSUIT, BLINK, UNDEFINED = 1, 2, 3, 4, 5, 6
CODERS = ("MN", "RA")


@dataclass
class LundTrial:
    """One trial: gaze in degrees and both coders' labels, per sample."""

    name: str
    t_s: np.ndarray
    yaw_deg: np.ndarray
    pitch_deg: np.ndarray
    valid: np.ndarray
    labels: dict[str, np.ndarray] = field(default_factory=dict)
    screen: ScreenGeometry | None = None

    @property
    def rate_hz(self) -> float:
        return float(1.0 / np.median(np.diff(self.t_s)))

    def samples(self) -> pd.DataFrame:
        """The trial as a aspectus samples table."""
        return pd.DataFrame({"t_s": self.t_s, "valid": self.valid,
                             "yaw_deg": np.where(self.valid, self.yaw_deg, np.nan),
                             "pitch_deg": np.where(self.valid, self.pitch_deg, np.nan)})

    def fixation_mask(self, coder: str) -> np.ndarray:
        return self.labels[coder] == FIXATION


def _read_mat(path: Path):
    import scipy.io as sio

    return sio.loadmat(str(path), squeeze_me=True, struct_as_record=False)["ETdata"]


def load_trial(directory: Path, name: str) -> LundTrial:
    """Read both coders' files of trial ``name`` (e.g. ``"TH34_img_Europe"``)."""
    directory = Path(directory)
    labels = {}
    pos = None
    screen = None
    for coder in CODERS:
        d = _read_mat(directory / f"{name}_labelled_{coder}.mat")
        p = np.asarray(d.pos, dtype=float)
        if pos is None:
            pos = p
            dim = np.asarray(d.screenDim, dtype=float)
            res = np.asarray(d.screenRes, dtype=float)
            screen = ScreenGeometry(width_mm=dim[0] * 1000.0, height_mm=dim[1] * 1000.0,
                                    distance_mm=float(d.viewDist) * 1000.0,
                                    width_px=int(res[0]), height_px=int(res[1]))
        labels[coder] = p[:, 5].astype(int)
    t_s = (pos[:, 0] - pos[0, 0]) / 1e6  # timestamps are microseconds; trust them, not sampFreq
    x, y = pos[:, 3], pos[:, 4]
    valid = ~((x == 0) & (y == 0)) & np.isfinite(x) & np.isfinite(y)
    yaw, pitch = screen.px_to_deg(x, y)
    return LundTrial(name=name, t_s=t_s, yaw_deg=np.asarray(yaw), pitch_deg=np.asarray(pitch),
                     valid=valid, labels=labels, screen=screen)


def trial_names(directory: Path) -> list[str]:
    names = sorted({p.name.rsplit("_labelled_", 1)[0] for p in Path(directory).glob("*_labelled_MN.mat")})
    return names


def load_all(directory: Path) -> list[LundTrial]:
    return [load_trial(directory, n) for n in trial_names(directory)]


def degrade(trial: LundTrial, *, rate_hz: float = 30.0, noise_rms_deg: float = 0.5, seed: int = 0) -> LundTrial:
    """A low-rate, noisy version of a trial, like a webcam recording of it.

    Downsampling takes the sample nearest each ``1 / rate_hz`` tick (and the
    coders' label at that sample). Noise: independent Gaussian noise on yaw
    and pitch with per-axis SD ``noise_rms_deg / sqrt(2)``, so the RMS length
    of the added 2-D noise vector is ``noise_rms_deg``.
    """
    t = trial.t_s
    ticks = np.arange(t[0], t[-1] + 1e-9, 1.0 / rate_hz)
    idx = np.clip(np.searchsorted(t, ticks), 0, len(t) - 1)
    prev = np.clip(idx - 1, 0, len(t) - 1)
    idx = np.where(np.abs(t[prev] - ticks) <= np.abs(t[idx] - ticks), prev, idx)
    idx = np.unique(idx)
    rng = np.random.default_rng(seed)
    sd = noise_rms_deg / np.sqrt(2.0)
    return LundTrial(
        name=trial.name, t_s=t[idx].copy(),
        yaw_deg=trial.yaw_deg[idx] + rng.normal(0.0, sd, len(idx)),
        pitch_deg=trial.pitch_deg[idx] + rng.normal(0.0, sd, len(idx)),
        valid=trial.valid[idx].copy(),
        labels={c: v[idx].copy() for c, v in trial.labels.items()}, screen=trial.screen)


def ou_error(t_s: np.ndarray, sd_deg: float, tau_s: float, seed: int) -> np.ndarray:
    """An Ornstein-Uhlenbeck error, shape (n, 2), of per-axis SD ``sd_deg`` and time constant ``tau_s`` at the times
    ``t_s`` (autocovariance sd^2 exp(-|d| / tau); Uhlenbeck & Ornstein 1930 - from memory), exact over each
    interval: an error that changes over tens of milliseconds, as webcam gaze error does in part."""
    rng = np.random.default_rng(seed)
    t = np.asarray(t_s, float)
    e = np.zeros((len(t), 2))
    if not len(t) or sd_deg <= 0:
        return e
    a = np.exp(-np.diff(t) / tau_s)
    kick = rng.normal(0.0, 1.0, (len(t), 2))
    e[0] = sd_deg * kick[0]
    for k in range(1, len(t)):
        e[k] = a[k - 1] * e[k - 1] + sd_deg * np.sqrt(1.0 - a[k - 1] ** 2) * kick[k]
    return e


def with_drift(trial: LundTrial, sd_deg: float, tau_s: float = 0.05, seed: int = 0) -> LundTrial:
    """The trial with an Ornstein-Uhlenbeck error (:func:`ou_error`) added at its own rate, so that every rate
    :func:`degrade` makes of it samples the same error: the same eyes at 30, 60 or 120 Hz."""
    e = ou_error(trial.t_s, sd_deg, tau_s, seed)
    return LundTrial(trial.name, trial.t_s, trial.yaw_deg + e[:, 0], trial.pitch_deg + e[:, 1], trial.valid,
                     trial.labels, trial.screen)


def cohen_kappa(a: np.ndarray, b: np.ndarray) -> float:
    """Cohen's (1960) kappa of two boolean label vectors."""
    a = np.asarray(a, dtype=bool)
    b = np.asarray(b, dtype=bool)
    po = np.mean(a == b)
    pa, pb = a.mean(), b.mean()
    pe = pa * pb + (1 - pa) * (1 - pb)
    return float((po - pe) / (1 - pe)) if pe < 1 else float("nan")


def runs(mask: np.ndarray, t_s: np.ndarray) -> tuple[int, float]:
    """Number of runs of ``True`` and their mean duration in ms (first sample to first sample after)."""
    m = np.concatenate([[False], np.asarray(mask, bool), [False]])
    d = np.diff(m.astype(int))
    on = np.flatnonzero(d == 1)
    off = np.flatnonzero(d == -1)  # exclusive end index
    if len(on) == 0:
        return 0, float("nan")
    dt = float(np.median(np.diff(t_s)))
    t_end = np.append(t_s, t_s[-1] + dt)
    dur = (t_end[off] - t_s[on]) * 1000.0
    return int(len(on)), float(dur.mean())


def load_trials(directory: Path, names: str) -> LundTrial:
    """One trial (:func:`load_trial`), or several end to end: ``names`` joined by "+" (each trial's time
    continues from the end of the one before; the same screen geometry, that of the first)."""
    parts = names.split("+")
    if len(parts) == 1:
        return load_trial(directory, names)
    trs = [load_trial(directory, n) for n in parts]
    t, off = [], 0.0
    for tr in trs:
        t.append(tr.t_s - tr.t_s[0] + off)
        off = t[-1][-1] + float(np.median(np.diff(tr.t_s)))

    def cat(f):
        return np.concatenate([getattr(tr, f) for tr in trs])

    return LundTrial(names, np.concatenate(t), cat("yaw_deg"), cat("pitch_deg"), cat("valid"),
                     {c: np.concatenate([tr.labels[c] for tr in trs]) for c in CODERS}, trs[0].screen)


def as_trajectory(trial: LundTrial, *, duration_s: float | None = None, head_motion: dict | None = None,
                  distance_mm: float = 600.0, seed: int = 0):
    """The trial's gaze as a renderer trajectory (aspectus.synth.trajectory.Trajectory), for rendered clips.

    Samples either coder labelled as a blink, and samples without gaze (``valid`` False), become a blink in
    the trajectory: the lids close (ramping over about 40 ms) and the gaze is interpolated across, so the
    rendered eyes never follow the tracker's wild values during a blink (up to 77 deg in UL23). ``head_motion``:
    keys as in
    ``aspectus.synth.trajectory.HEAD_MOTION_DEFAULTS`` (slow drift in rotation, translation and distance,
    drawn with ``seed``); None keeps the head still at ``distance_mm``.
    """
    from aspectus.synth.trajectory import HEAD_MOTION_DEFAULTS, Trajectory, head_track

    t = trial.t_s
    keep = t <= (duration_s if duration_s is not None else t[-1])
    lost = ~np.asarray(trial.valid, bool)
    for c in CODERS:
        lost |= trial.labels[c] == BLINK
    cols = {}
    for name, v in (("yaw_deg", trial.yaw_deg), ("pitch_deg", trial.pitch_deg)):
        s = pd.Series(np.where(lost, np.nan, v)[keep]).interpolate().bfill().ffill()
        cols[name] = s.to_numpy()
    ramp = max(1, int(round(0.04 * trial.rate_hz)))
    closure = np.convolve(lost[keep].astype(float), np.ones(2 * ramp + 1) / (2 * ramp + 1), mode="same")
    df = pd.DataFrame({"t_s": t[keep], **cols, "lid_closure": np.clip(2.0 * closure, 0.0, 1.0)})
    if head_motion is not None:
        motion = dict(HEAD_MOTION_DEFAULTS, distance_mm=distance_mm) | dict(head_motion)
        for k, v in head_track(t[keep], motion, seed=seed).items():
            df[k] = v
    return Trajectory.from_samples(df, head_distance_mm=distance_mm)


def _label_runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    m = np.concatenate([[False], np.asarray(mask, bool), [False]]).astype(int)
    d = np.diff(m)
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1)


def saccade_known_kappa(low: LundTrial, coder: str) -> float:
    """Kappa against ``coder`` of a labelling that knows the coder's saccades, blinks etc. but not the PSO.

    Fixation = the coder's fixation or post-saccadic oscillation (PSO); everything else as the coder. The
    ceiling for a detector that finds every saccade sample but cannot see the oscillation.
    """
    lab = low.labels[coder]
    return cohen_kappa(np.isin(lab, [FIXATION, PSO]), lab == FIXATION)


def position_oracle_kappa(trial: LundTrial, low: LundTrial, coder: str, *, z: float, noise_sd_deg: float):
    """Kappa of a position rule that knows the coder's true fixation centres, against ``coder``.

    ``trial`` is the native recording, ``low`` its degraded version. For each coder fixation the centre is
    the mean of its native (noise-free) samples. A sample of ``low`` that the coder labels saccade, or a
    fixation sample beside a saccade or PSO sample, is compared with the two fixations around it: it is
    labelled not-fixation when its (noisy) position, projected on the line from the fixation before to the
    fixation after, lies more than ``z`` x ``noise_sd_deg`` from both centres and between them. Every other
    sample keeps a perfect label, except PSO, which is labelled fixation. So the rule is told what no
    detector knows (the true centres, which samples to test); what it still misses, position cannot show.

    Returns (kappa, hits on saccade samples, false alarms on fixation samples).
    """
    lab, lab_n = low.labels[coder], trial.labels[coder]
    s, e = _label_runs(lab_n == FIXATION)
    cx = np.array([np.nanmean(trial.yaw_deg[a:b]) for a, b in zip(s, e)])
    cy = np.array([np.nanmean(trial.pitch_deg[a:b]) for a, b in zip(s, e)])
    ts, te = trial.t_s[s], trial.t_s[e - 1]
    t = low.t_s
    run_of = np.searchsorted(ts, t, side="right") - 1
    nonfix = ~np.isin(lab, [FIXATION, PSO, SACCADE])
    hits = alarms = 0
    for i in range(len(t)):
        if lab[i] == SACCADE:
            ib, ia = np.searchsorted(te, t[i], side="right") - 1, np.searchsorted(ts, t[i], side="right")
        elif lab[i] == FIXATION and i + 1 < len(t) and lab[i + 1] in (SACCADE, PSO):
            ib = run_of[i]
            ia = ib + 1
        elif lab[i] == FIXATION and i > 0 and lab[i - 1] in (SACCADE, PSO):
            ia = run_of[i]
            ib = ia - 1
        else:
            continue
        if ib < 0 or ia >= len(s):
            continue
        a, b = np.array([cx[ib], cy[ib]]), np.array([cx[ia], cy[ia]])
        dist = float(np.linalg.norm(b - a))
        if not np.isfinite(dist) or dist == 0:
            continue
        p = float((np.array([low.yaw_deg[i], low.pitch_deg[i]]) - a) @ (b - a) / dist)
        if z * noise_sd_deg < p < dist - z * noise_sd_deg:
            nonfix[i] = True
            hits += lab[i] == SACCADE
            alarms += lab[i] == FIXATION
    return cohen_kappa(~nonfix, lab == FIXATION), int(hits), int(alarms)


def pso_duration_bias_ms(trial: LundTrial, coder: str) -> float:
    """Mean fixation duration with the coder's PSO counted as fixation, minus without, ms (native rate).

    What a detector that finds the coder's saccades exactly but cannot see the oscillation reads too long.
    """
    return runs(np.isin(trial.labels[coder], [FIXATION, PSO]), trial.t_s)[1] - runs(trial.fixation_mask(coder),
                                                                                        trial.t_s)[1]


def ar1_noise(n: int, rho: float, sd: float, rng: np.random.Generator) -> np.ndarray:
    """``n`` values of an AR(1) process ``e[i] = rho e[i-1] + w[i]`` with stationary SD ``sd`` (started in its
    stationary distribution); ``rho = 0`` is white noise."""
    if not 0.0 <= rho < 1.0:
        raise ValueError(f"rho must be in [0, 1), got {rho!r}")
    w = rng.normal(0.0, sd * np.sqrt(1.0 - rho * rho), n)
    e = np.empty(n)
    if n:
        e[0] = rng.normal(0.0, sd)
    for i in range(1, n):
        e[i] = rho * e[i - 1] + w[i]
    return e


def with_noise(trial: LundTrial, noise_rms_deg: float, *, rho: float = 0.0, seed: int = 0) -> LundTrial:
    """``trial`` plus noise on yaw and pitch: AR(1) of lag-1 correlation ``rho`` (:func:`ar1_noise`), per-axis SD
    ``noise_rms_deg / sqrt(2)`` as in :func:`degrade` (RMS length of the 2-D noise vector ``noise_rms_deg``)."""
    rng = np.random.default_rng(seed)
    sd = noise_rms_deg / np.sqrt(2.0)
    n = len(trial.t_s)
    return LundTrial(name=trial.name, t_s=trial.t_s.copy(), yaw_deg=trial.yaw_deg + ar1_noise(n, rho, sd, rng),
                     pitch_deg=trial.pitch_deg + ar1_noise(n, rho, sd, rng), valid=trial.valid.copy(),
                     labels={c: v.copy() for c, v in trial.labels.items()}, screen=trial.screen)


def agreement_at_30hz(trials: list[LundTrial], noise_rms_deg: float, rho: float = 0.0) -> dict:
    """The default analysis against both coders on ``trials`` at 30 Hz (:func:`degrade`, noise-free) plus noise
    (:func:`with_noise`, seed 1000 + trial index): means over the trials of the sample kappa (``kappa``), the
    fixations found per coder fixation (``count_ratio``) and the I-DT threshold in degrees (``threshold_deg``)."""
    from aspectus.events.analysis import AnalysisParams, run_analysis

    kappa, ratio, thr = [], [], []
    for k, tr in enumerate(trials):
        lo = with_noise(degrade(tr, rate_hz=30.0, noise_rms_deg=0.0, seed=k), noise_rms_deg, rho=rho, seed=1000 + k)
        res = run_analysis(lo.samples(), AnalysisParams())
        fix = res.labels == "fixation"
        kappa.append(np.mean([cohen_kappa(fix, lo.labels[c] == FIXATION) for c in CODERS]))
        n_ref = np.mean([runs(lo.fixation_mask(c), lo.t_s)[0] for c in CODERS])
        ratio.append(int((res.events.type == "fixation").sum()) / n_ref)
        thr.append(res.quality["detector_thresholds"]["dispersion_deg"])
    return {"kappa": float(np.mean(kappa)), "count_ratio": float(np.mean(ratio)), "threshold_deg": float(np.mean(thr))}


def noise_conditions_main(argv, description: str, measure, labels=("before", "after")) -> int:
    """The command line of the benches that compare two settings on the Lund trials at 30 Hz over noise levels and
    lag-1 correlations (``--noise``, ``--rho``): one Markdown row per condition with ``measure(trials, noise, rho,
    on)``'s kappa, fixations per coder fixation and, where it gives one, I-DT threshold, off -> on."""
    import argparse

    ap = argparse.ArgumentParser(description=description)
    ap.add_argument("--trials-dir", type=Path,
                    default=Path(__file__).resolve().parents[2] / "shared" / "reference" / "lund2013" / "img")
    ap.add_argument("--noise", type=float, nargs="+", default=[0.5, 1.0, 1.5], help="noise RMS per sample, deg")
    ap.add_argument("--rho", type=float, nargs="+", default=[0.0, 0.7, 0.8, 0.9])
    a = ap.parse_args(argv)
    trials = load_all(a.trials_dir)
    arrow = f"{labels[0]} -> {labels[1]}"
    print(f"| noise RMS deg | rho | kappa {arrow} | fixations / coders' {arrow} | threshold deg {arrow} |")
    print("|---|---|---|---|---|")
    for lev in a.noise:
        for rho in a.rho:
            b, f = measure(trials, lev, rho, False), measure(trials, lev, rho, True)
            print(f"| {lev:g} | {rho:g} | {b['kappa']:.3f} -> {f['kappa']:.3f} | {b['count_ratio']:.3f} -> "
                  f"{f['count_ratio']:.3f} | {b['threshold_deg']:.2f} -> {f['threshold_deg']:.2f} |", flush=True)
    return 0
