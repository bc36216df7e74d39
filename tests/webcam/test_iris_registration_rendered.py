"""``GazeParams(iris_registration=True)`` on a rendered classroom clip: the fused iris centres against the absolute
ones they start from, both against the renderer's truth.

A 10-s 640 x 480 H.264 CRF 28 clip (iris 12 px, lids that follow vertical gaze, lighting drift and gradient, head
drift and turns), the eyes following a hand-coded trial of Andersson et al. (2017) (../shared/reference/lund2013),
on a seed no measurement in docs/notes/gaze-measurement.md used. The pipeline runs once with the option; the
absolute centres (the appearance estimate, what the default takes at this size) are the registration's input,
caught on the way, and the default's gaze is re-estimated from them on the same per-frame measurements.
"""
from __future__ import annotations

import numpy as np
import pytest

import _gaze_grid as G

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def run(lund_dir, tmp_path_factory):
    from aspectus.webcam import pipeline
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    cond = G.Condition("registration_12px", size_px=(640, 480), distance_mm=550.0, trial="TL20_img_konijntjes",
                       face="hopper", seed=41, duration_s=10.0)
    res, trial = G.render_condition(cond, tmp_path_factory.mktemp("registration"), lund_dir)
    seen = {}
    orig = pipeline._registered_iris

    def spy(a, patches, found, iris, **kw):
        seen["absolute"] = np.array(iris, float)
        out, info = orig(a, patches, found, iris, **kw)
        seen["fused"] = np.array(out, float)
        return out, info

    pipeline._registered_iris = spy
    try:
        with G.gaze_inputs() as kw:
            samples, meta = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(iris_registration=True)))
    finally:
        pipeline._registered_iris = orig
    kw = dict(kw)
    absolute = G.with_gaze(samples, **(kw | {"iris_px": seen["absolute"]}), params=GazeParams())
    return {"truth": res.truth, "trial": trial, "seen": seen, "meta": meta,
            "fused": G.measure(samples, res.truth, trial), "absolute": G.measure(absolute, res.truth, trial)}


def _s2s_px(iris, truth):
    """Per axis, the RMS of the frame-to-frame change of the iris centres' error (both eyes), px."""
    e = np.asarray(iris, float) - G.true_iris_px(truth)
    de = np.diff(e, axis=0)
    return np.sqrt(np.nanmean(de ** 2, axis=(0, 1)))


def test_registration_is_recorded(run):
    info = run["meta"]["gaze_model"]["iris_registration"]
    assert info["applied"] is True
    assert run["meta"]["gaze_model"]["iris_estimate"]["used"] == "appearance"
    n = len(run["truth"])
    # open-eye frame pairs with an increment: nearly all (a few blinks in the trial)
    assert min(info["increments"]) > 0.8 * n
    assert 0 < info["cpu_ms_per_frame"] < 50


def test_fused_iris_centres_change_with_less_error_than_the_absolute_ones(run):
    a = _s2s_px(run["seen"]["absolute"], run["truth"])
    f = _s2s_px(run["seen"]["fused"], run["truth"])
    print("iris error RMS-S2S px (x, y): absolute", np.round(a, 3), "fused", np.round(f, 3))
    # measured (2026-12-04): absolute 0.265 / 0.316 px, fused 0.209 / 0.244 (x / y)
    assert (f < 0.85 * a).all()


def test_fused_gaze_is_steadier_and_no_less_correlated(run):
    a, f = run["absolute"], run["fused"]
    print({k: (round(a[k], 3), round(f[k], 3)) for k in ("rms_s2s_deg", "rms_fix_deg", "yaw_r", "pitch_r",
                                                          "pitch_gain", "kappa")})
    # measured (2026-12-04): RMS-S2S 1.66 -> 1.31 deg, the error's RMS about each fixation's mean 1.24 -> 1.07, yaw r
    # 0.971 -> 0.973, pitch r 0.969 -> 0.972. Not asserted, and the reason the option is not the default: kappa
    # against the coders under the default noise-adaptive I-DT 0.387 -> 0.282 (docs/notes/gaze-measurement.md)
    assert f["rms_s2s_deg"] < 0.85 * a["rms_s2s_deg"]
    assert f["rms_fix_deg"] < a["rms_fix_deg"]
    assert f["yaw_r"] >= a["yaw_r"] - 0.005 and f["pitch_r"] >= a["pitch_r"] - 0.005


def test_on_a_large_face_the_registration_runs_on_the_patches_auto_keeps(lund_dir, tmp_path):
    """At 25 px ``iris_combine="auto"`` keeps the eye patches too (the appearance estimate at every size, since
    2026-12-05), so the option registers them there as well; run.json records it."""
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    cond = G.Condition("registration_25px", size_px=(1280, 720), distance_mm=530.0, trial="TH34_img_Europe",
                       seed=41, duration_s=3.0)
    res, _ = G.render_condition(cond, tmp_path, lund_dir)
    s1, m1 = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(iris_registration=True)))
    info = m1["gaze_model"]["iris_registration"]
    assert info["applied"] is True, info
    assert min(info["increments"]) > 0.8 * len(res.truth)
    s0, m0 = extract_samples(res.path, params=ProcessParams(gaze=GazeParams()))
    assert m0["gaze_model"]["iris_estimate"]["used"] == m1["gaze_model"]["iris_estimate"]["used"]
    # the registered increments move the samples; the valid frames are the same
    assert np.array_equal(np.isfinite(s0["pitch_deg"]), np.isfinite(s1["pitch_deg"]))
    assert not np.allclose(s0["pitch_deg"], s1["pitch_deg"], equal_nan=True)
