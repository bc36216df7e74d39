"""Constructed gaze signals with known fixations, for the detector tests."""
from __future__ import annotations

import numpy as np
import pandas as pd

#: (duration_s, yaw_deg, pitch_deg) of each fixation; jumps between them are instantaneous
PLAN = ((0.40, 0.0, 0.0), (0.30, 5.0, 0.0), (0.50, 5.0, 4.0), (0.25, -3.0, 4.0), (0.60, -3.0, -2.0), (0.35, 2.0, 1.0))


def step_signal(*, rate_hz: float = 30.0, noise_sd_deg: float = 0.03, seed: int = 0, plan=PLAN):
    """Piecewise-constant gaze with small white noise.

    Returns
    -------
    samples : pandas.DataFrame
        t_s, valid, yaw_deg, pitch_deg.
    truth : list of (start_index, end_index_exclusive, yaw_deg, pitch_deg)
    """
    rng = np.random.default_rng(seed)
    total = sum(p[0] for p in plan)
    n = int(round(total * rate_hz))
    t = np.arange(n) / rate_hz
    bounds = np.concatenate([[0.0], np.cumsum([p[0] for p in plan])])
    idx = np.searchsorted(t, bounds - 1e-9)
    idx[-1] = n
    yaw = np.empty(n)
    pitch = np.empty(n)
    truth = []
    for k, (_, yw, pt) in enumerate(plan):
        yaw[idx[k]:idx[k + 1]] = yw
        pitch[idx[k]:idx[k + 1]] = pt
        truth.append((int(idx[k]), int(idx[k + 1]), yw, pt))
    yaw += rng.normal(0, noise_sd_deg, n)
    pitch += rng.normal(0, noise_sd_deg, n)
    return pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": yaw, "pitch_deg": pitch}), truth


def main_sequence_duration_s(amplitude_deg):
    """Saccade duration from its amplitude: 2.2 ms/deg x A + 21 ms.

    Main-sequence literature (Carpenter 1988; Bahill, Clark & Stark 1975) - from memory, as in the project's
    field notes.
    """
    return (2.2 * np.asarray(amplitude_deg, float) + 21.0) / 1000.0


def scan_path(*, rate_hz: float, noise_rms_deg: float = 0.3, duration_s: float = 60.0, seed: int = 0,
              fix_ms=(150.0, 600.0), amp_deg=(5.0, 15.0), phase=None):
    """A scan path with known fixations: constant positions joined by main-sequence saccades.

    Fixation durations uniform in ``fix_ms``; saccade amplitudes uniform in ``amp_deg`` in a random direction
    (kept within +-15 deg); each saccade follows the minimum-jerk position profile
    ``10 u^3 - 15 u^4 + 6 u^5`` over its main-sequence duration. The path is drawn once per ``seed`` in continuous
    time, so every rate samples the same eye movements. White Gaussian noise with per-axis SD
    ``noise_rms_deg / sqrt(2)`` (RMS length of the 2-D noise vector ``noise_rms_deg``).

    Returns
    -------
    samples : pandas.DataFrame
        t_s, valid, yaw_deg, pitch_deg.
    truth : pandas.DataFrame
        One row per fixation: onset_s, offset_s, yaw_deg, pitch_deg (the first and last are cut by the
        recording's edges).
    fixation_mask : ndarray of bool
        Whether each sample's time lies inside a true fixation.
    """
    rng = np.random.default_rng(seed)
    pos = np.zeros(2)
    fix, sac = [], []
    t = 0.0
    while t < duration_s:
        d = rng.uniform(*fix_ms) / 1000.0
        fix.append((t, min(t + d, duration_s), pos[0], pos[1]))
        t += d
        if t >= duration_s:
            break
        for _ in range(100):
            a = rng.uniform(*amp_deg)
            th = rng.uniform(0, 2 * np.pi)
            new = pos + a * np.array([np.cos(th), np.sin(th)])
            if np.all(np.abs(new) <= 15.0):
                break
        sd = float(main_sequence_duration_s(a))
        sac.append((t, t + sd, pos.copy(), new.copy()))
        pos = new
        t += sd
    ph = rng.uniform(0, 1.0 / rate_hz) if phase is None else phase
    n = int(np.floor((duration_s - ph) * rate_hz))
    ts = ph + np.arange(n) / rate_hz
    yaw = np.empty(n)
    pitch = np.empty(n)
    inside = np.zeros(n, bool)
    for on, off, x, y in fix:
        m = (ts >= on) & (ts < off)
        yaw[m], pitch[m] = x, y
        inside |= m
    for on, off, p0, p1 in sac:
        m = (ts >= on) & (ts < off)
        u = (ts[m] - on) / (off - on)
        f = 10 * u**3 - 15 * u**4 + 6 * u**5
        yaw[m] = p0[0] + f * (p1[0] - p0[0])
        pitch[m] = p0[1] + f * (p1[1] - p0[1])
    nrng = np.random.default_rng(seed + 7919 * int(rate_hz))
    sd = noise_rms_deg / np.sqrt(2.0)
    yaw = yaw + nrng.normal(0, sd, n)
    pitch = pitch + nrng.normal(0, sd, n)
    truth = pd.DataFrame(fix, columns=["onset_s", "offset_s", "yaw_deg", "pitch_deg"])
    samples = pd.DataFrame({"t_s": ts, "valid": True, "yaw_deg": yaw, "pitch_deg": pitch})
    return samples, truth, inside


def same_eyes(rate_hz, seconds=120.0, tau_s=0.05, drift_sd=1.2, white_sd=0.4, iris_px=20.0, seed=0):
    """One gaze path sampled at ``rate_hz`` (30, 60 or 120) from the same continuous eyes: fixations of 400 ms
    (300 in the default 120 s) joined by 10-20 deg jumps, plus an error that changes over tens of milliseconds (an Ornstein-Uhlenbeck
    process, per-axis SD ``drift_sd`` deg, time constant ``tau_s``, drawn on a 120 Hz grid) and a white error of
    per-axis SD ``white_sd`` deg drawn afresh for each sample (the picture's own noise)."""
    rng = np.random.default_rng(seed)
    n = int(seconds * 120)
    t = np.arange(n) / 120.0
    jumps = rng.uniform(10, 20, int(np.ceil(seconds / 0.4)))
    ang = rng.uniform(0, 2 * np.pi, len(jumps))
    pos = np.cumsum(np.c_[jumps * np.cos(ang), jumps * np.sin(ang)], axis=0)
    pos -= np.round(pos / 40.0) * 40.0
    a = np.exp(-1 / 120.0 / tau_s)
    e = np.zeros((n, 2))
    e[0] = rng.normal(0, drift_sd, 2)
    kick = rng.normal(0, drift_sd * np.sqrt(1 - a * a), (n, 2))
    for k in range(1, n):
        e[k] = a * e[k - 1] + kick[k]
    g = pos[(t / 0.4).astype(int)] + e
    step = int(round(120 / rate_hz))
    g, t = g[::step], t[::step]
    g = g + np.random.default_rng(seed + 1000 * step).normal(0, white_sd, g.shape)
    return pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": g[:, 0], "pitch_deg": g[:, 1], "face_found": True,
                         "face_count": 1, "distance_mm": 600.0, "iris_diameter_px": iris_px})
