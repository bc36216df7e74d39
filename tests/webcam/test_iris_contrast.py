"""The clip's check of the iris's contrast against the whites of the eyes: a light iris (or dim light, or
overexposure) leaves the limbus fit without an edge to find, and the clip must say so rather than report a gaze
that follows other edges (docs/notes/gaze-measurement.md, "Light irises and exposure blur in the rendered grid")."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from aspectus.webcam.limbus import limbus_contrast
from aspectus.webcam.pipeline import MIN_IRIS_CONTRAST_PCT, iris_contrast, summarise


def _drawn_eye(sclera: float, iris: float, pupil: float = 15.0, r: float = 8.0, size: int = 48):
    """A drawn eye: an almond opening (lids outside it) holding a sclera, an iris of radius ``r`` px and a pupil of
    0.4 ``r``; returns the grey picture, the distance to the lids (inside the opening) and the centre."""
    yy, xx = np.mgrid[0:size, 0:size].astype(float)
    c = np.array([size / 2, size / 2])
    rho = np.hypot(xx - c[0], yy - c[1])
    g = np.full((size, size), sclera)
    g[rho <= r] = iris
    g[rho <= 0.4 * r] = pupil
    half_w, half_h = 2.6 * r, 0.9 * r  # the opening: wider than the iris, lids over its top and bottom
    inside = ((xx - c[0]) / half_w) ** 2 + ((yy - c[1]) / half_h) ** 2 <= 1.0
    import cv2

    dist = cv2.distanceTransform(inside.astype(np.uint8), cv2.DIST_L2, 3)
    g[~inside] = 120.0  # skin
    return g.astype(np.float32), dist, c


@pytest.mark.parametrize("sclera, iris", [(200.0, 60.0), (200.0, 175.0), (150.0, 154.0), (120.0, 36.0)])
def test_contrast_is_the_irises_weber_contrast_against_the_sclera(sclera, iris):
    # Weber contrast, (background - target) / background (the textbook definition, common practice), of the
    # drawn levels: the rings read the iris outside the pupil and the sclera inside the opening only
    g, dist, c = _drawn_eye(sclera, iris)
    assert limbus_contrast(g, dist, c, 8.0) == pytest.approx(100.0 * (sclera - iris) / sclera, abs=0.5)
    # a gain on the picture (brighter or dimmer light) does not change it
    assert limbus_contrast(0.5 * g, dist, c, 8.0) == pytest.approx(limbus_contrast(g, dist, c, 8.0), abs=0.5)


def test_contrast_is_not_measured_without_a_sclera_in_view():
    g, dist, c = _drawn_eye(200.0, 60.0)
    assert np.isnan(limbus_contrast(g, np.zeros_like(dist), c, 8.0))  # a closed eye: no opening


def test_clip_contrast_is_the_lower_eyes_median():
    steps = np.array([[60.0, 20.0], [62.0, np.nan], [58.0, 22.0], [np.nan, 18.0]])
    got = iris_contrast(steps)
    assert got["right_pct"] == 60.0 and got["left_pct"] == 20.0 and got["clip_pct"] == 20.0
    assert got["frames"] == [3, 3] and got["min_pct"] == MIN_IRIS_CONTRAST_PCT
    assert iris_contrast(np.full((4, 2), np.nan))["clip_pct"] is None


def _steady_samples(n=300, seed=0):
    """Fixations with little noise (0.3 deg): a clip whose gaze figures alone would read usable."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / 30.0
    yaw = np.repeat(rng.uniform(-8, 8, n // 10 + 1), 10)[:n] + rng.normal(0, 0.15, n)
    pitch = np.repeat(rng.uniform(-5, 5, n // 10 + 1), 10)[:n] + rng.normal(0, 0.15, n)
    return pd.DataFrame({"t_s": t, "valid": True, "yaw_deg": yaw, "pitch_deg": pitch, "face_found": True,
                         "face_count": 1, "distance_mm": 600.0, "iris_diameter_px": 20.0})


def test_low_iris_contrast_makes_a_steady_clip_not_usable_and_names_why():
    from aspectus.events.analysis import run_analysis

    smp = _steady_samples()
    res = run_analysis(smp)
    ok = summarise(smp, res, {"iris_contrast": iris_contrast(np.full((300, 2), 60.0))})
    assert ok["usable"] and ok["precision_tier"] == "events" and ok["iris_contrast_pct"] == 60.0
    assert "contrast" not in ok["verdict"]
    low = summarise(smp, res, {"iris_contrast": iris_contrast(np.full((300, 2), 18.0))})
    assert not low["usable"] and low["precision_tier"] == "minimal"
    assert "fixation count and durations" not in low["trusted_features"]
    assert "too little contrast against the whites of the eyes" in low["verdict"]
    assert "18 % darker than the whites" in low["verdict"] and "light irises, dim light or overexposure" in low["verdict"]
    # a clip processed before the check (no figure) keeps its verdict
    assert summarise(smp, res, {})["verdict"] == ok["verdict"]


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """The same 3 s, 640x480 clip (hopper, irises about 12 px, gaze moving) with the photograph's dark irises and
    with light blue-grey ones."""
    from aspectus.synth.render import Trajectory, render_clip

    rate = 120.0
    t = np.arange(int(3.0 * rate) + 1) / rate
    traj = Trajectory.from_samples(pd.DataFrame({"t_s": t, "yaw_deg": 8.0 * np.sin(2 * np.pi * 0.4 * t),
                                                 "pitch_deg": 4.0 * np.sin(2 * np.pi * 0.27 * t),
                                                 "head_z_mm": 550.0}))
    d = tmp_path_factory.mktemp("iris_contrast")
    out = {}
    for name, colour in (("dark", None), ("light", "light_blue_grey")):
        render_clip(d / f"{name}.mp4", traj, face="hopper", size_px=(640, 480), fps=30.0, seed=2, crf=28,
                    iris_colour=colour)
        out[name] = d / f"{name}.mp4"
    return out


def test_rendered_light_irises_are_flagged_and_dark_ones_are_not(rendered, tmp_path):
    from aspectus.webcam.pipeline import process_clip

    runs = {}
    for name, clip in rendered.items():
        process_clip(clip, tmp_path / name, stages="serial")
        runs[name] = json.loads((tmp_path / name / "run.json").read_text())
    dark, light = (runs[k]["quality"] for k in ("dark", "light"))
    assert dark["iris_contrast_pct"] >= MIN_IRIS_CONTRAST_PCT + 10, dark["iris_contrast_pct"]
    assert "contrast against the whites" not in dark["verdict"]
    assert light["iris_contrast_pct"] < MIN_IRIS_CONTRAST_PCT, light["iris_contrast_pct"]
    assert not light["usable"] and light["precision_tier"] == "minimal"
    assert "too little contrast against the whites of the eyes" in light["verdict"]
    ext = runs["light"]["extraction"]["iris_contrast"]
    assert ext["clip_pct"] == light["iris_contrast_pct"] and min(ext["frames"]) > 60
