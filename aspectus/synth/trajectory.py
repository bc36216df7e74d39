"""Synthetic gaze trajectories with known fixations, saccades and blinks.

The trajectories drive :func:`aspectus.synth.render.render_clip`; they are the
ground truth a rendered clip is checked against. Angles follow the frame of
:mod:`aspectus.schema` (yaw > 0 = the subject's right, pitch > 0 = up); the
gaze angles are head-compensated (where the eyes point in the world), so they
do not depend on the head motion.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from aspectus.errors import ParameterError

#: Default head position in the camera frame (mm): straight in front of the
#: camera at a typical laptop viewing distance.
DEFAULT_HEAD_Z_MM = 600.0

#: Keys of ``head_motion`` when given as a dict, with their defaults.
HEAD_MOTION_DEFAULTS = {
    "yaw_deg": 10.0,      # amplitude of slow head yaw (clipped to +-15 deg)
    "pitch_deg": 4.0,     # amplitude of slow head pitch
    "roll_deg": 2.0,      # amplitude of slow head roll
    "x_mm": 15.0,         # amplitude of sideways drift
    "y_mm": 10.0,         # amplitude of up/down drift
    "z_mm": 25.0,         # amplitude of forward/back drift
    "period_s": 12.0,     # typical period of the slowest component
    "distance_mm": DEFAULT_HEAD_Z_MM,  # mean head distance (z of the head origin)
}

TASKS = ("reading", "scene")


@dataclass
class Trajectory:
    """A gaze trajectory sampled at a fixed high rate.

    Attributes
    ----------
    samples : pandas.DataFrame
        One row per sample: ``t_s``, ``yaw_deg``, ``pitch_deg``, ``blink``
        (bool: lids at least half closed), ``lid_closure`` (0 open .. 1
        closed), ``head_yaw_deg``, ``head_pitch_deg``, ``head_roll_deg``,
        ``head_x_mm``, ``head_y_mm``, ``head_z_mm``.
    fixations : pandas.DataFrame
        True fixations: ``onset_s``, ``offset_s``, ``duration_ms``,
        ``yaw_deg``, ``pitch_deg`` (the fixation's target, drift excluded).
    saccades : pandas.DataFrame
        True saccades: ``onset_s``, ``offset_s``, ``duration_ms``,
        ``amplitude_deg``.
    blinks : pandas.DataFrame
        True blinks: ``onset_s``, ``offset_s`` (lids at least half closed),
        ``duration_ms``, ``closure_onset_s``, ``closure_offset_s`` (whole
        lid movement).
    params : dict
        The parameters that made it.
    """

    samples: pd.DataFrame
    fixations: pd.DataFrame
    saccades: pd.DataFrame = field(default_factory=pd.DataFrame)
    blinks: pd.DataFrame = field(default_factory=pd.DataFrame)
    params: dict = field(default_factory=dict)

    @property
    def rate_hz(self) -> float:
        return float(self.params.get("rate_hz", np.nan))

    @property
    def duration_s(self) -> float:
        return float(self.params.get("duration_s", np.nan))

    @classmethod
    def from_samples(cls, samples: pd.DataFrame, *, head_distance_mm: float = DEFAULT_HEAD_Z_MM) -> Trajectory:
        """A trajectory from a hand-made table (for tests and special clips).

        Parameters
        ----------
        samples : pandas.DataFrame
            Needs ``t_s`` (s, increasing, from 0), ``yaw_deg`` and
            ``pitch_deg`` (deg). Optional: ``lid_closure`` (0-1) or ``blink``
            (bool, closes the lids fully), and the head columns
            (``head_yaw_deg`` ... ``head_z_mm``); missing head columns mean
            a still head at ``(0, 0, head_distance_mm)``.
        head_distance_mm : float, default 600
            Head distance used when ``head_z_mm`` is absent, mm.

        Returns
        -------
        Trajectory
            With empty ``fixations``/``saccades``/``blinks`` tables.
        """
        for c in ("t_s", "yaw_deg", "pitch_deg"):
            if c not in samples.columns:
                raise ParameterError(f"trajectory samples need a {c!r} column")
        s = pd.DataFrame({"t_s": pd.to_numeric(samples["t_s"], errors="coerce").astype(float)})
        t = s["t_s"].to_numpy()
        if len(t) < 2 or not np.isfinite(t).all() or (np.diff(t) <= 0).any() or t[0] < 0:
            raise ParameterError("trajectory t_s must be at least two finite, increasing times from 0 s or later")
        for c in ("yaw_deg", "pitch_deg"):
            v = pd.to_numeric(samples[c], errors="coerce").astype(float)
            if not np.isfinite(v).all():
                raise ParameterError(f"trajectory {c} must be finite",
                                     where=f"row {int(np.argmax(~np.isfinite(v.to_numpy()))) + 1}")
            s[c] = v
        if "lid_closure" in samples.columns:
            s["lid_closure"] = np.clip(samples["lid_closure"].to_numpy(float), 0.0, 1.0)
        elif "blink" in samples.columns:
            s["lid_closure"] = samples["blink"].to_numpy(bool).astype(float)
        else:
            s["lid_closure"] = 0.0
        s.insert(3, "blink", s["lid_closure"] >= 0.5)
        defaults = {"head_yaw_deg": 0.0, "head_pitch_deg": 0.0, "head_roll_deg": 0.0, "head_x_mm": 0.0,
                    "head_y_mm": 0.0, "head_z_mm": float(head_distance_mm)}
        for c, d in defaults.items():
            s[c] = samples[c].to_numpy(float) if c in samples.columns else d
        empty = pd.DataFrame(columns=["onset_s", "offset_s", "duration_ms", "yaw_deg", "pitch_deg"])
        rate = float(1.0 / np.median(np.diff(t)))
        return cls(samples=s, fixations=empty,
                   saccades=pd.DataFrame(columns=["onset_s", "offset_s", "duration_ms", "amplitude_deg"]),
                   blinks=pd.DataFrame(columns=["onset_s", "offset_s", "duration_ms", "closure_onset_s",
                                                "closure_offset_s"]),
                   params={"duration_s": float(t[-1]), "rate_hz": rate, "source": "table"})

    def at(self, t_s) -> pd.DataFrame:
        """The trajectory linearly interpolated at times ``t_s`` (s); ``blink`` from the interpolated closure."""
        t_s = np.asarray(t_s, dtype=float)
        s = self.samples
        out = {"t_s": t_s}
        tt = s["t_s"].to_numpy(dtype=float)
        defaults = {"head_yaw_deg": 0.0, "head_pitch_deg": 0.0, "head_roll_deg": 0.0, "head_x_mm": 0.0,
                    "head_y_mm": 0.0, "head_z_mm": DEFAULT_HEAD_Z_MM}
        for c in ("yaw_deg", "pitch_deg", "lid_closure", *defaults):
            if c in s.columns:
                v = s[c].to_numpy(dtype=float)
            elif c == "lid_closure":  # a table with only a blink flag: lids fully closed while it is set
                v = s["blink"].to_numpy(dtype=bool).astype(float) if "blink" in s.columns else np.zeros(len(tt))
            else:
                v = np.full(len(tt), defaults[c])
            out[c] = np.interp(t_s, tt, v)
        out["blink"] = out["lid_closure"] >= 0.5
        return pd.DataFrame(out)


def _check_positive(name, value, *, allow_zero=False):
    ok = isinstance(value, (int, float, np.integer, np.floating)) and np.isfinite(value)
    ok = ok and (value >= 0 if allow_zero else value > 0)
    if not ok:
        rule = "zero or more" if allow_zero else "a positive number"
        raise ParameterError(f"{name} must be {rule}, got {value!r}")


def saccade_duration_ms(amplitude_deg):
    """Main-sequence saccade duration.

    Parameters
    ----------
    amplitude_deg : float or array
        Saccade amplitude in degrees.

    Returns
    -------
    float or array
        Duration in ms, ``2.2 * amplitude_deg + 21`` (Carpenter 1988;
        Bahill, Clark & Stark 1975 - field notes, from memory).
    """
    return 2.2 * np.asarray(amplitude_deg, dtype=float) + 21.0


def _min_jerk(tau):
    """Minimum-jerk position profile on tau in [0, 1] (smooth, bell-shaped velocity)."""
    tau = np.clip(tau, 0.0, 1.0)
    return tau ** 3 * (10 - 15 * tau + 6 * tau ** 2)


def _reading_targets(rng, n, amplitude_deg):
    """Fixation targets for reading lines left to right (screen x = yaw), top to bottom."""
    half_w = amplitude_deg
    top = 0.5 * amplitude_deg
    line_step = max(0.8, 0.2 * amplitude_deg)
    n_lines = max(2, int(round(2 * top / line_step)) + 1)
    yaw, pitch, line = -half_w, top, 0
    out = []
    for _ in range(n):
        out.append((yaw, pitch + rng.normal(0, 0.1)))
        step = rng.uniform(2.0, 3.0)
        if yaw + step > half_w:  # return sweep to the next line
            line = (line + 1) % n_lines
            yaw = -half_w + rng.uniform(0, 1.0)
            pitch = top - line * line_step
        elif rng.random() < 0.1:  # regression
            yaw = max(-half_w, yaw - rng.uniform(1.0, 2.5))
        else:
            yaw = yaw + step
    return out


def _scene_targets(rng, n, amplitude_deg):
    """Fixation targets for free viewing: jumps within +-amplitude (yaw) and +-0.6 amplitude (pitch)."""
    out = []
    y, p = 0.0, 0.0
    for _ in range(n):
        out.append((y, p))
        for _try in range(20):  # prefer moderate jumps (>= 1.5 deg)
            ny = rng.uniform(-amplitude_deg, amplitude_deg)
            np_ = rng.uniform(-0.6 * amplitude_deg, 0.6 * amplitude_deg)
            if np.hypot(ny - y, np_ - p) >= 1.5:
                break
        y, p = ny, np_
    return out


def _ou_noise(rng, n, *, rate_hz, sd, tau_s):
    """Ornstein-Uhlenbeck process (stationary SD ``sd``, time constant ``tau_s``): fixational drift."""
    a = np.exp(-1.0 / (rate_hz * tau_s))
    e = rng.normal(0, sd * np.sqrt(1 - a * a), n)
    e[0] = rng.normal(0, sd)
    from scipy.signal import lfilter

    return lfilter([1.0], [1.0, -a], e)


def head_track(t_s, motion: dict, *, seed: int = 0) -> dict:
    """Slow head motion at times ``t_s`` (s): the columns ``head_yaw_deg`` ... ``head_z_mm`` of a trajectory.

    ``motion`` holds the keys of :data:`HEAD_MOTION_DEFAULTS` (amplitudes, the slowest period and the mean
    distance); each axis is a sum of three sinusoids of random phase (periods about ``period_s``,
    ``period_s / 2.3`` and ``period_s / 4.1``), drawn with ``seed``.
    """
    motion = dict(HEAD_MOTION_DEFAULTS) | dict(motion)
    return _head_track(np.random.default_rng(seed), np.asarray(t_s, float), motion)


def _head_track(rng, t, motion: dict):
    """Slow head motion as a sum of three sinusoids per axis, normalised to the amplitude."""
    period = float(motion["period_s"])
    out = {}
    for key, col in (("yaw_deg", "head_yaw_deg"), ("pitch_deg", "head_pitch_deg"), ("roll_deg", "head_roll_deg"),
                     ("x_mm", "head_x_mm"), ("y_mm", "head_y_mm"), ("z_mm", "head_z_mm")):
        amp = float(motion[key])
        sig = np.zeros_like(t)
        for k, w in ((1.0, 1.0), (2.3, 0.5), (4.1, 0.25)):
            f = k / period * rng.uniform(0.8, 1.25)
            sig += w * np.sin(2 * np.pi * f * t + rng.uniform(0, 2 * np.pi))
        sig = sig / 1.75 * amp
        if key == "yaw_deg":
            sig = np.clip(sig, -15.0, 15.0)
        out[col] = sig
    out["head_z_mm"] = out["head_z_mm"] + float(motion["distance_mm"])
    return out


def synth_trajectory(*, duration_s: float, rate_hz: float = 240.0, seed: int = 0, task: str = "reading",
                     amplitude_deg: float | None = None, blink_rate_per_min: float = 12.0,
                     fixation_mean_ms: float | None = None, drift_sd_deg: float = 0.05,
                     head_motion: bool | dict = False, head_distance_mm: float = DEFAULT_HEAD_Z_MM) -> Trajectory:
    """Make a gaze trajectory with known fixations, saccades and blinks.

    Parameters
    ----------
    duration_s : float
        Length in seconds.
    rate_hz : float, default 240
        Sampling rate of the trajectory in Hz.
    seed : int, default 0
        Seed of the random generator; the same seed gives the same trajectory.
    task : {"reading", "scene"}, default "reading"
        ``"reading"``: rightward steps of 2-3 deg along lines, occasional
        regressions, return sweeps to the next line. ``"scene"``: jumps to
        random places within +-``amplitude_deg`` yaw and +-0.6
        ``amplitude_deg`` pitch.
    amplitude_deg : float, optional
        Half-width in degrees of the region looked at (default 8 reading,
        10 scene).
    blink_rate_per_min : float, default 12
        Mean blink rate (blinks per minute, Poisson, at least 1 s apart).
    fixation_mean_ms : float, optional
        Mean fixation duration in ms (gamma distributed, shape 4, at least
        80 ms). Default 230 ms reading, 280 ms scene (Rayner 1998 - field
        notes, from memory).
    drift_sd_deg : float, default 0.05
        SD in degrees of the fixational drift (Ornstein-Uhlenbeck, 0.2 s time
        constant), per axis.
    head_motion : bool or dict, default False
        ``False``: head still at ``(0, 0, head_distance_mm)`` facing the
        camera. ``True`` or a dict: slow head motion with amplitudes from
        :data:`HEAD_MOTION_DEFAULTS` (keys ``yaw_deg`` (clipped to +-15),
        ``pitch_deg``, ``roll_deg``, ``x_mm``, ``y_mm``, ``z_mm``,
        ``period_s``, ``distance_mm``); the gaze stays on the task.
    head_distance_mm : float, default 600
        Mean distance of the head origin from the camera in mm (a
        ``distance_mm`` key in ``head_motion`` takes precedence).

    Returns
    -------
    Trajectory

    Notes
    -----
    Saccades follow the main sequence, duration ``2.2 ms/deg * amplitude +
    21 ms`` (field notes), with a minimum-jerk position profile (bell-shaped
    velocity). Blinks last 200-400 ms of lid movement (closing 35 %, closed
    15 %, opening 50 % of it); ``blink`` is true while the lids are at least
    half closed (about 115-230 ms; blink duration 100-400 ms is common
    practice, from memory). The gaze keeps its fixation value under a blink.

    Examples
    --------
    >>> tr = synth_trajectory(duration_s=10.0, seed=1)
    >>> len(tr.samples), len(tr.fixations), len(tr.saccades), len(tr.blinks)
    (2401, 41, 40, 1)
    >>> tr.samples.columns.tolist()[:4]
    ['t_s', 'yaw_deg', 'pitch_deg', 'blink']
    """
    _check_positive("duration_s", duration_s)
    _check_positive("rate_hz", rate_hz)
    _check_positive("blink_rate_per_min", blink_rate_per_min, allow_zero=True)
    _check_positive("drift_sd_deg", drift_sd_deg, allow_zero=True)
    _check_positive("head_distance_mm", head_distance_mm)
    if task not in TASKS:
        raise ParameterError(f"task must be one of {', '.join(TASKS)}, got {task!r}")
    if amplitude_deg is None:
        amplitude_deg = 8.0 if task == "reading" else 10.0
    _check_positive("amplitude_deg", amplitude_deg)
    if fixation_mean_ms is None:
        fixation_mean_ms = 230.0 if task == "reading" else 280.0
    _check_positive("fixation_mean_ms", fixation_mean_ms)
    if head_motion is True:
        motion = dict(HEAD_MOTION_DEFAULTS, distance_mm=head_distance_mm)
    elif head_motion is False or head_motion is None:
        motion = None
    elif isinstance(head_motion, dict):
        unknown = set(head_motion) - set(HEAD_MOTION_DEFAULTS)
        if unknown:
            raise ParameterError(f"unknown head_motion key(s) {', '.join(sorted(unknown))}; "
                                 f"known: {', '.join(HEAD_MOTION_DEFAULTS)}")
        motion = dict(HEAD_MOTION_DEFAULTS, distance_mm=head_distance_mm)
        motion.update(head_motion)
    else:
        raise ParameterError(f"head_motion must be True, False or a dict, got {head_motion!r}")

    rng = np.random.default_rng(seed)
    n = int(np.floor(duration_s * rate_hz)) + 1
    t = np.arange(n) / rate_hz

    # --- fixations and saccades --------------------------------------------------
    n_fix_guess = int(duration_s * 1000.0 / (0.6 * fixation_mean_ms)) + 4
    targets = (_reading_targets if task == "reading" else _scene_targets)(rng, n_fix_guess, amplitude_deg)
    shape = 4.0
    fix_rows, sac_rows = [], []
    yaw = np.empty(n)
    pitch = np.empty(n)
    t0 = 0.0
    k = 0
    while t0 < duration_s:
        if k + 1 >= len(targets):
            targets += (_reading_targets if task == "reading" else _scene_targets)(rng, n_fix_guess, amplitude_deg)
        dur = max(0.080, rng.gamma(shape, fixation_mean_ms / shape / 1000.0))
        y0, p0 = targets[k]
        t1 = min(t0 + dur, duration_s + 1.0 / rate_hz)
        sel = slice(np.searchsorted(t, t0), np.searchsorted(t, t1))
        yaw[sel], pitch[sel] = y0, p0
        fix_rows.append((t0, min(t1, duration_s), y0, p0))
        if t1 >= duration_s:
            break
        y1, p1 = targets[k + 1]
        amp = float(np.hypot(y1 - y0, p1 - p0))
        sdur = saccade_duration_ms(amp) / 1000.0
        t2 = t1 + sdur
        sel = slice(np.searchsorted(t, t1), np.searchsorted(t, t2))
        s = _min_jerk((t[sel] - t1) / sdur)
        yaw[sel] = y0 + (y1 - y0) * s
        pitch[sel] = p0 + (p1 - p0) * s
        sac_rows.append((t1, min(t2, duration_s), amp))
        t0 = t2
        k += 1
    fixations = pd.DataFrame(fix_rows, columns=["onset_s", "offset_s", "yaw_deg", "pitch_deg"])
    fixations.insert(2, "duration_ms", (fixations["offset_s"] - fixations["onset_s"]) * 1000.0)
    saccades = pd.DataFrame(sac_rows, columns=["onset_s", "offset_s", "amplitude_deg"])
    saccades.insert(2, "duration_ms", (saccades["offset_s"] - saccades["onset_s"]) * 1000.0)

    # fixational drift and tremor, only during fixations so saccade ends stay put
    if drift_sd_deg > 0:
        dy = _ou_noise(rng, n, rate_hz=rate_hz, sd=drift_sd_deg, tau_s=0.2)
        dp = _ou_noise(rng, n, rate_hz=rate_hz, sd=drift_sd_deg, tau_s=0.2)
        # taper the drift to zero at fixation edges, so the gaze is continuous
        w = np.zeros(n)
        for on, off in zip(fixations["onset_s"], fixations["offset_s"]):
            sel = slice(np.searchsorted(t, on), np.searchsorted(t, off))
            edge = np.minimum(t[sel] - on, off - t[sel]) / 0.03
            w[sel] = np.clip(edge, 0, 1)
        yaw = yaw + dy * w
        pitch = pitch + dp * w

    # --- blinks ---------------------------------------------------------------
    closure = np.zeros(n)
    blink_rows = []
    if blink_rate_per_min > 0:
        tb = 0.3 + rng.exponential(60.0 / blink_rate_per_min)
        while True:
            lid_s = rng.uniform(0.2, 0.4)
            if tb + lid_s > duration_s - 0.2:
                break
            i0, i1 = np.searchsorted(t, tb), np.searchsorted(t, tb + lid_s)
            tau = (t[i0:i1] - tb) / lid_s
            c = np.zeros(i1 - i0)
            a = (tau >= 0) & (tau < 0.35)
            c[a] = 0.5 - 0.5 * np.cos(np.pi * tau[a] / 0.35)
            c[(tau >= 0.35) & (tau < 0.5)] = 1.0
            b = (tau >= 0.5) & (tau < 1.0)
            c[b] = 0.5 + 0.5 * np.cos(np.pi * (tau[b] - 0.5) / 0.5)
            closure[i0:i1] = np.maximum(closure[i0:i1], c)
            # half-closed from tau=0.175 to tau=0.75 (where the cosines pass 0.5)
            blink_rows.append((tb + 0.175 * lid_s, tb + 0.75 * lid_s, tb, tb + lid_s))
            tb = tb + lid_s + max(1.0, rng.exponential(60.0 / blink_rate_per_min))
    blinks = pd.DataFrame(blink_rows, columns=["onset_s", "offset_s", "closure_onset_s", "closure_offset_s"])
    blinks.insert(2, "duration_ms", (blinks["offset_s"] - blinks["onset_s"]) * 1000.0)

    # --- head -----------------------------------------------------------------
    if motion is None:
        head = {"head_yaw_deg": np.zeros(n), "head_pitch_deg": np.zeros(n), "head_roll_deg": np.zeros(n),
                "head_x_mm": np.zeros(n), "head_y_mm": np.zeros(n), "head_z_mm": np.full(n, float(head_distance_mm))}
    else:
        for key in HEAD_MOTION_DEFAULTS:
            v = motion[key]
            if not (isinstance(v, (int, float, np.integer, np.floating)) and np.isfinite(v)):
                raise ParameterError(f"head_motion[{key!r}] must be a number, got {v!r}")
        _check_positive("head_motion['period_s']", motion["period_s"])
        _check_positive("head_motion['distance_mm']", motion["distance_mm"])
        head = _head_track(rng, t, motion)

    samples = pd.DataFrame({"t_s": t, "yaw_deg": yaw, "pitch_deg": pitch, "blink": closure >= 0.5,
                            "lid_closure": closure, **head})
    params = {"duration_s": float(duration_s), "rate_hz": float(rate_hz), "seed": int(seed), "task": task,
              "amplitude_deg": float(amplitude_deg), "blink_rate_per_min": float(blink_rate_per_min),
              "fixation_mean_ms": float(fixation_mean_ms), "drift_sd_deg": float(drift_sd_deg),
              "head_motion": motion, "head_distance_mm": float(head_distance_mm)}
    return Trajectory(samples=samples, fixations=fixations, saccades=saccades, blinks=blinks, params=params)
