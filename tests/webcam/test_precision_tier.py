"""The per-clip verdict says which features the clip's own gaze precision supports (issue 15, "an honest floor")."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from aspectus.webcam.pipeline import PRECISION_TIERS, precision_tier, summarise


@pytest.mark.parametrize("noise, iris, tier", [
    (0.9, 25.0, "events"), (1.5, 12.0, "events"),            # tier edges included
    (1.4, 10.0, "coarse"), (2.9, 16.0, "coarse"), (3.0, 8.0, "coarse"),
    (3.5, 25.0, "minimal"), (1.0, 7.0, "minimal"), (float("nan"), 20.0, "minimal"), (1.0, None, "minimal"),
])
def test_tier_follows_noise_and_iris_size(noise, iris, tier):
    got, features = precision_tier(noise, iris)
    assert got == tier
    assert "blink rate" in features and "data quality" in features  # always measurable with a face
    assert ("fixation count and durations" in features) == (tier == "events")


def test_tiers_are_ordered():
    noise = [t[1] for t in PRECISION_TIERS]
    iris = [t[2] for t in PRECISION_TIERS]
    assert noise == sorted(noise) and iris == sorted(iris, reverse=True)


def _samples(noise_deg, iris_px, n=300, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / 30.0
    yaw = np.repeat(rng.uniform(-8, 8, n // 10 + 1), 10)[:n] + rng.normal(0, noise_deg / 2, n)
    pitch = np.repeat(rng.uniform(-5, 5, n // 10 + 1), 10)[:n] + rng.normal(0, noise_deg / 2, n)
    return pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": yaw, "pitch_deg": pitch, "face_found": True,
                         "face_count": 1, "distance_mm": 600.0, "iris_diameter_px": iris_px})


@pytest.mark.parametrize("noise, iris, tier, words", [
    (0.3, 20.0, "events", "supports fixation and saccade measures"),
    (0.3, 9.0, "coarse", "too low for fixation counts and durations"),
])
def test_summary_and_verdict_carry_the_tier(noise, iris, tier, words):
    from aspectus.events.analysis import run_analysis

    smp = _samples(noise, iris)
    s = summarise(smp, run_analysis(smp), {})
    assert s["median_iris_px"] == pytest.approx(iris)
    assert s["precision_tier"] == tier and s["trusted_features"] == precision_tier(s["noise_rms_s2s_deg"], iris)[1]
    assert words in s["verdict"] and f"irises about {iris:.0f} px" in s["verdict"]
