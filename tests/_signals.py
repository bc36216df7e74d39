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
