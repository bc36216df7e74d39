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
    # a mirrored clip: the face mesh's right eye (the first column) is the subject's left
    mirrored = iris_contrast(steps, mirrored=True)
    assert mirrored["right_pct"] == 20.0 and mirrored["left_pct"] == 60.0 and mirrored["clip_pct"] == 20.0


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


def _contrast_meta(pct, pupil_eye_frames):
    ic = iris_contrast(np.full((300, 2), pct))
    ic["pupil_eye_frames"] = pupil_eye_frames
    return {"iris_contrast": ic}


def test_low_contrast_eyes_located_by_their_pupils_are_held_at_coarse_not_rejected():
    """A low-contrast clip whose eyes were located by their pupils keeps the tier its own noise earns, at most
    ``coarse``: on the rendered grid the pupils gave 1.1-1.2 deg (RMS-S2S against the truth) at 16.6 px light irises
    and 1.7 deg at 12 px hazel ones, against 3.7-6.7 deg by the iris edge, but 2.5-3.2 deg at 12 px light ones with
    a noise figure of 1.7-2.0 deg (docs/notes/gaze-measurement.md, "Irises of middling contrast")."""
    from aspectus.events.analysis import run_analysis

    smp = _steady_samples()
    res = run_analysis(smp)
    steady = summarise(smp, res, _contrast_meta(18.0, 600))
    assert steady["pupil_located_frac"] == 1.0
    assert steady["usable"] and steady["precision_tier"] == "coarse"
    assert "fixation count and durations" not in steady["trusted_features"]
    assert steady["trusted_features"][0].startswith("gaze direction averaged")
    assert "located by their pupils" in steady["verdict"] and "18 % darker than the whites" in steady["verdict"]
    assert "measured on rendered clips only" in steady["verdict"]
    # the same clip's figures with the iris edge found: the events tier (only the pupils' location holds it back)
    assert summarise(smp, res, _contrast_meta(60.0, 0))["precision_tier"] == "events"
    # noisy samples located by their pupils: the noise decides, as for any clip
    rng = np.random.default_rng(3)
    noisy = smp.assign(yaw_deg=smp["yaw_deg"] + rng.normal(0, 3.0, len(smp)),
                       pitch_deg=smp["pitch_deg"] + rng.normal(0, 3.0, len(smp)))
    bad = summarise(noisy, run_analysis(noisy), _contrast_meta(18.0, 600))
    assert not bad["usable"] and bad["precision_tier"] == "minimal"
    # low contrast and the pupils not used: the iris was not located, nothing about the gaze is trusted
    none = summarise(smp, res, _contrast_meta(18.0, 0))
    assert not none["usable"] and none["precision_tier"] == "minimal"
    assert "follows other edges" in none["verdict"]


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
    # located by the pupils: never the events tier, whatever the clip's own noise reads
    assert light["precision_tier"] in ("coarse", "minimal") and light["pupil_located_frac"] > 0.5
    assert "fixation count and durations" not in light["trusted_features"]
    assert "too little contrast against the whites of the eyes" in light["verdict"]
    ext = runs["light"]["extraction"]["iris_contrast"]
    assert ext["clip_pct"] == light["iris_contrast_pct"] and min(ext["frames"]) > 60
    # the light irises were located by their pupils (aspectus.webcam.frame_geometry), the dark ones never
    assert ext["pupil_eye_frames"] > 60 and "located by their pupils" in light["verdict"]
    assert runs["dark"]["extraction"]["iris_contrast"]["pupil_eye_frames"] == 0 and dark["pupil_located_frac"] == 0


def _drawn_light_eye(centre, r, *, iris=175.0, sclera=190.0, pupil=15.0, size=48):
    """A drawn eye (supersampled, averaged down) whose light iris barely differs from the sclera, with a dark pupil
    of 0.4 iris radii; its face mesh points (right eye only)."""
    import cv2

    from _drawn_eye import SUPERSAMPLE, eye_opening, right_eye_only

    outline, mask, X, Y = eye_opening(cv2, centre, r, top=centre[1] - 0.8 * r, bottom=centre[1] + 0.7 * r,
                                      size=size)
    rho = np.hypot(X, Y)
    fine = np.where(mask > 0, np.where(rho <= r, np.where(rho <= 0.4 * r, pupil, iris), sclera), 120.0)
    n = size
    img = fine.reshape(n, SUPERSAMPLE, n, SUPERSAMPLE).mean(axis=(1, 3))
    return np.repeat(img[..., None], 3, axis=2).astype(np.uint8), right_eye_only(outline)


@pytest.mark.parametrize("r", [8.0, 6.0])
def test_pupil_centre_finds_a_light_irises_centre_from_an_offset_start(r):
    from aspectus.webcam.limbus import limbus_centres_many, pupil_centre

    centre = np.array([24.3, 23.6])
    img, pts = _drawn_light_eye(centre, r)
    start = centre + [0.1 * 2 * r, -0.08 * 2 * r]  # the mesh point 10 % of the diameter off
    iris_px = np.array([start, start + 1000.0])
    diam = np.array([2 * r, 2 * r])
    # the drawn eye's contrast is the light iris's, below the limit (Weber contrast of 190 vs 175: 7.9 %)
    (_, _, _, step), = limbus_centres_many([(img, pts, iris_px, diam)], contrast=True)
    assert step[0] < MIN_IRIS_CONTRAST_PCT
    got = pupil_centre(img, pts, start, 2 * r, 0)
    # the darkest tenth of the pixels within 0.7 radii: the pupil (its area is 0.4^2 / 0.7^2 = 33 % of the disc,
    # the lids cut a little), symmetric about the centre
    assert np.hypot(*(got - centre)) < 0.3, got


def test_a_light_iris_is_located_by_its_pupil_in_the_geometry_and_a_dark_one_by_the_limbus():
    """The per-frame geometry switches an eye to its pupil once the median of its frames' contrasts is low, and
    never on a dark iris."""
    from aspectus.webcam.frame_geometry import FrameGeometry
    from aspectus.webcam.limbus import CONTRAST_MIN_FRAMES

    centre, r = np.array([24.3, 23.6]), 8.0
    light, pts = _drawn_light_eye(centre, r)
    dark, _ = _drawn_light_eye(centre, r, iris=60.0)
    start = centre + [1.2, -1.0]
    job = (None, pts, np.array([start, start + 1000.0]), np.array([2 * r, 2 * r]))
    for img, pct, want_pupil in ((light, 8.0, True), (dark, 68.0, False)):
        g = FrameGeometry(fov_deg=60.0, refine_iris=True)
        iris0 = np.array([start + [0.5, 0.5], start + 1000.0])
        ok0, diam0 = np.array([True, False]), np.array([15.0, np.nan])
        for i in range(CONTRAST_MIN_FRAMES):  # the median of the eye's frames so far decides, once there are enough
            iris, ok, diam = g._pupil_where_faint((img,) + job[1:], iris0, ok0, diam0, np.array([pct, np.nan]))
            if i < CONTRAST_MIN_FRAMES - 1:
                assert np.array_equal(iris, iris0) and g.pupil_eye_frames == 0
        if want_pupil:
            assert np.hypot(*(iris[0] - centre)) < 0.3 and ok[0] and diam[0] == 2 * r and g.pupil_eye_frames == 1
        else:
            assert np.array_equal(iris, iris0) and diam[0] == 15.0 and g.pupil_eye_frames == 0


def _mirrored_pair(r: float = 6.0, size: int = 48):
    """A picture of two eyes that are each other's mirror image (the subject's right eye on the picture's left, as a
    camera shows it; the left eye its mirror about the picture's middle), drawn lopsided so that a measurement that
    read one side of an eye differently from the other would tell them apart: the iris 0.3 radii towards the outer
    corner, the upper lid lower than the lower one is deep, the sclera dimming towards the outer corner only; its
    face mesh points with both outlines."""
    import cv2

    from _drawn_eye import SUPERSAMPLE, eye_opening
    from aspectus.webcam.landmarks import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE

    centre = np.array([24.3, 23.6])  # the eye opening's centre
    outline, mask, X, Y = eye_opening(cv2, centre, r, top=centre[1] - 0.75 * r, bottom=centre[1] + 1.0 * r,
                                      size=size)
    iris_c = np.array([-0.3 * r, 0.1 * r])  # from the opening's centre: looking to the outer corner
    rho = np.hypot(X - iris_c[0], Y - iris_c[1])
    sclera = 200.0 * (1.0 - 0.35 * np.clip(-X / (2.6 * r), 0.0, 1.0) ** 2)  # dimmer towards the outer corner
    fine = np.where(mask > 0, np.where(rho <= r, np.where(rho <= 0.4 * r, 15.0, 60.0), sclera), 120.0)
    half = fine.reshape(size, SUPERSAMPLE, size, SUPERSAMPLE).mean(axis=(1, 3))
    img = np.hstack([half, half[:, ::-1]])  # pixel i spans [i, i + 1): column i's mirror is column 2 size - 1 - i
    w = 2 * size
    pts = np.zeros((478, 3))
    pts[list(RIGHT_EYE_OUTLINE), :2] = outline
    pts[list(LEFT_EYE_OUTLINE), :2] = np.c_[w - outline[:, 0], outline[:, 1]]
    right = centre + iris_c
    iris_px = np.array([right, [w - right[0], right[1]]])
    return np.repeat(img[..., None], 3, axis=2).astype(np.uint8), pts, iris_px


def test_two_mirror_image_eyes_read_the_same_contrast_and_a_side_to_side_light_gradient_barely_moves_it():
    """The measurement has no side. On the rendered 12 px grid cell the subject's left eye read 12 points below the
    right (69.8 / 57.7 %): the renderer draws hopper's left eye, as the photograph shows it, with a darker sclera and
    a narrower opening, and in the mirrored clip the low eye was still the subject's left, not the picture's right
    or the face mesh's name for it (docs/notes/gaze-measurement.md, "Why the left eye reads lower"). Here both eyes
    are drawn alike, mirrored: they must read alike. A light falling off from one side (the renderer's
    ``lighting_gradient``, a gain across the picture) leaves each eye's Weber contrast, a ratio, all but unchanged."""
    from aspectus.webcam.limbus import limbus_centres_many

    r = 6.0  # the 12 px iris of the grid's smallest face
    img, pts, iris_px = _mirrored_pair(r)
    diam = np.array([2 * r, 2 * r])
    (_, fitted, _, steps), = limbus_centres_many([(img, pts, iris_px + [[0.6, -0.4], [-0.6, -0.4]], diam)],
                                                 contrast=True)
    assert fitted.all() and np.all(np.isfinite(steps))
    assert abs(steps[0] - steps[1]) < 0.5, steps
    # about the drawn levels' Weber contrast (iris 60 against a sclera of 200 dimmed to 175-200 beside it: 66-70 %),
    # a little less where the picture's blur mixes the two
    assert 55.0 < steps[0] < 72.0, steps
    # the renderer's gradient at 0.3 across the picture, taken as if this 96 px strip were 640 px of a 12 px-iris clip
    w = img.shape[1]
    gain = 1.0 + 0.3 * (0.5 - (np.arange(w) + 0.5) / w) * w / 640.0
    lit = np.clip(img * gain[None, :, None] + 0.5, 0, 255).astype(np.uint8)
    (_, _, _, lit_steps), = limbus_centres_many([(lit, pts, iris_px + [[0.6, -0.4], [-0.6, -0.4]], diam)],
                                                contrast=True)
    assert np.all(np.abs(lit_steps - steps) < 1.0), (steps, lit_steps)
