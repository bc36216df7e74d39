"""Rendered conditions of classroom webcams the face photographs do not bring: iris colour and exposure blur."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from aspectus.errors import ParameterError
from aspectus.synth.frame import IRIS_COLOURS, Camera, FaceRig, gaze_vector
from aspectus.synth.render import Trajectory, render_clip

av = pytest.importorskip("av")


def _grey_frames(path):
    with av.open(str(path)) as c:
        return [f.to_ndarray(format="gray").astype(float) for f in c.decode(video=0)]


def _iris_ring_rgb(img, uv, iris_px):
    """Mean colour of the iris between the pupil and the limbus shading (0.45-0.7 of the radius), beside the
    pupil (within 0.25 of the radius of its row, clear of the lids and the lid's shadow)."""
    yy, xx = np.mgrid[0:img.shape[0], 0:img.shape[1]]
    rho = np.hypot(xx + 0.5 - uv[0], yy + 0.5 - uv[1]) / (iris_px / 2)
    ring = (rho > 0.45) & (rho < 0.7) & (np.abs(yy + 0.5 - uv[1]) < 0.25 * iris_px / 2)
    return img[ring].reshape(-1, 3).mean(axis=0)


def test_iris_colour_reaches_the_iris_pixels_and_defaults_to_the_photograph():
    from aspectus.synth.face import load_face

    face = load_face("hopper")
    cam, bg = Camera(1280, 720), np.zeros((720, 1280, 3), np.uint8)
    photo = FaceRig(face, cam, background=bg)
    light = FaceRig(face, cam, background=bg, iris_rgb=IRIS_COLOURS["light_blue_grey"])
    same = FaceRig(face, cam, background=bg, iris_rgb=face.eyes["right"].iris_rgb)
    R, T, g = np.eye(3), photo.rest_origin_mm, gaze_vector(0.0, 0.0)
    img0, info = photo.render(R=R, T_mm=T, gaze=g, closure=0.0)
    img1, _ = light.render(R=R, T_mm=T, gaze=g, closure=0.0)
    img2, _ = same.render(R=R, T_mm=T, gaze=g, closure=0.0)
    uv, d = info["iris_uv"]["right"], info["iris_diameter_px"]
    assert d > 20
    want = np.array(IRIS_COLOURS["light_blue_grey"])
    got = _iris_ring_rgb(img1, uv, d)
    # the texture shades the base colour by 0.9 +- 0.18 (streaks) and the optical blur mixes in a little pupil
    np.testing.assert_allclose(got / want, 0.9, atol=0.12)
    assert got[2] > got[0] + 15  # blue-grey: more blue than red, as asked
    np.testing.assert_allclose(_iris_ring_rgb(img0, uv, d), _iris_ring_rgb(img2, uv, d), atol=1.0)  # the default
    skin = np.ones(img0.shape[:2], bool)
    for e in ("right", "left"):
        x, y = info["iris_uv"][e]
        skin[int(y - 2 * d):int(y + 2 * d), int(x - 2 * d):int(x + 2 * d)] = False
    assert np.array_equal(img0[skin], img1[skin])  # only the eyes change
    with pytest.raises(ParameterError, match="iris_rgb"):
        FaceRig(face, cam, background=bg, iris_rgb=(300, 0, 0))


def _moving_head(speed_mm_s: float, duration_s: float = 0.6, rate_hz: float = 600.0) -> Trajectory:
    """A head at 450 mm sliding sideways at constant speed (eyes still in the head, looking ahead)."""
    t = np.arange(int(round(duration_s * rate_hz)) + 1) / rate_hz
    return Trajectory.from_samples(pd.DataFrame({"t_s": t, "yaw_deg": 0.0, "pitch_deg": 0.0,
                                                 "head_x_mm": speed_mm_s * (t - duration_s / 2),
                                                 "head_z_mm": 450.0}))


def _box_blur(row: np.ndarray, length: float, shift: float) -> np.ndarray:
    """``row`` averaged over a box of ``length`` px centred ``shift`` px to the right (linear interpolation)."""
    if length < 1e-6:
        offs = np.array([shift])
    else:
        offs = shift + length * ((np.arange(64) + 0.5) / 64 - 0.5)
    x = np.arange(len(row), dtype=float)
    return np.mean([np.interp(x - o, x, row) for o in offs], axis=0)


def test_exposure_blur_is_exposure_times_speed_and_centred_on_the_truth(tmp_path):
    """A frame exposed for 30 ms of a head sliding at a known speed is the instant at the frame time smeared
    along the motion by speed x exposure (a box), centred on it: fitted on the picture rows through the iris."""
    traj = _moving_head(200.0)
    kw = dict(size_px=(1280, 720), noise_sd=0.0, crf=0, fps=30.0, seed=1)
    sharp = render_clip(tmp_path / "sharp.mp4", traj, **kw)
    blur = render_clip(tmp_path / "blur.mp4", traj, exposure_ms=30.0, **kw)
    p = json.loads(blur.truth_json_path.read_text())
    assert p["exposure_ms"] == 30.0 and p["exposure_subframes"]["max"] > 8
    pd.testing.assert_frame_equal(sharp.truth.drop(columns=["exposure_start_s", "exposure_end_s"]),
                                  blur.truth.drop(columns=["exposure_start_s", "exposure_end_s"]))
    np.testing.assert_allclose(blur.truth["exposure_end_s"] - blur.truth["exposure_start_s"], 0.030, atol=1e-9)
    np.testing.assert_allclose(0.5 * (blur.truth["exposure_end_s"] + blur.truth["exposure_start_s"]),
                               blur.truth["t_s"], atol=1e-9)
    fs, fb = _grey_frames(sharp.path), _grey_frames(blur.path)
    tr = sharp.truth
    speed_px_s = np.gradient(tr["right_iris_x_px"].to_numpy(), tr["t_s"].to_numpy())
    for i in (6, 9, 12):
        want = speed_px_s[i] * 0.030
        assert want > 5  # px: a smear well above the optical blur
        x, y, d = tr.right_iris_x_px[i], tr.right_iris_y_px[i], tr.iris_diameter_px[i]
        rows = slice(int(y - 0.2 * d), int(y + 0.2 * d) + 1)
        cols = slice(int(x - 1.6 * d), int(x + 1.6 * d))
        a, b = fs[i][rows, cols].mean(axis=0), fb[i][rows, cols].mean(axis=0)
        inner = slice(int(0.5 * d), -int(0.5 * d))  # away from the window's ends
        fits = [(np.mean((_box_blur(a, L, s)[inner] - b[inner]) ** 2), L, s)
                for L in np.arange(0.0, 2.0 * want, 0.25) for s in np.arange(-2.0, 2.01, 0.25)]
        err, length, shift = min(fits)
        assert length == pytest.approx(want, rel=0.1, abs=0.5), (i, length, want)
        assert abs(shift) <= 0.5, (i, shift)  # the smear is centred on the truth's instant
        assert err < 0.05 * np.mean((a[inner] - b[inner]) ** 2)  # a box explains the blurred row


def test_exposure_of_a_still_scene_is_the_instant_and_checks_its_length(tmp_path):
    still = Trajectory.from_samples(pd.DataFrame({"t_s": [0.0, 0.5], "yaw_deg": 5.0, "pitch_deg": -3.0}))
    kw = dict(size_px=(320, 240), noise_sd=2.0, seed=2, lighting_drift=0.1)
    a = render_clip(tmp_path / "a.mp4", still, **kw)
    b = render_clip(tmp_path / "b.mp4", still, exposure_ms=33.0, **kw)
    assert json.loads(b.truth_json_path.read_text())["exposure_subframes"] == {"mean": 1.0, "max": 1}
    for x, y in zip(_grey_frames(a.path), _grey_frames(b.path)):
        assert np.array_equal(x, y)
    assert json.loads(a.truth_json_path.read_text())["exposure_subframes"] is None
    np.testing.assert_array_equal(a.truth["exposure_start_s"], a.truth["t_s"])
    with pytest.raises(ParameterError, match="frame interval"):
        render_clip(tmp_path / "c.mp4", still, exposure_ms=40.0, **kw)
    with pytest.raises(ParameterError, match="exposure_ms"):
        render_clip(tmp_path / "c.mp4", still, exposure_ms=-1.0, **kw)
    with pytest.raises(ParameterError, match="iris_colour"):
        render_clip(tmp_path / "c.mp4", still, iris_colour="violet", **kw)
