"""The iris's motion between frames read by registering its disc (aspectus.webcam.iris_registration), and its
fusion with the absolute iris estimate.

The checks against something outside the code: a drawn textured disc moved by a known sub-pixel shift (the
shift is the construction's, exact by area sampling); series whose truth, increments and noise levels are
drawn here (a Kalman smoother's error must fall below the observations' and the clip-measured noise levels must
find the drawn ones); and a rendered clip's truth (aspectus.synth), whose eyes follow a hand-coded recording of
Andersson et al. (2017) (../shared/reference/lund2013).
"""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.webcam.iris_registration import (clip_gain, noise_levels, register_shift, reject_failed, smooth)

#: the drawing's supersampling: a disc drawn on a grid this many times finer and area-averaged
SUPER = 16


def _eye_patch(dx: float, dy: float, *, lid_rows: int = 0, size=(24, 16), centre=(11.5, 7.5), radius=4.2,
               seed: int = 3) -> np.ndarray:
    """A 24 x 16 patch: a textured dark iris disc (radius 4.2 samples, like the eye patches' 8-9 samples across)
    on a bright sclera, its centre moved by (dx, dy) samples, drawn SUPER times finer and area-averaged so the
    sub-pixel shift is exact; ``lid_rows`` top rows covered by a still skin band (a lid that does not move)."""
    import cv2

    W, H = size
    rng = np.random.default_rng(seed)
    tex = cv2.GaussianBlur(rng.normal(0.0, 1.0, (4 * H, 4 * W)).astype(np.float32), (0, 0), 1.0)
    ys, xs = np.mgrid[0:H * SUPER, 0:W * SUPER].astype(float)
    xs = (xs + 0.5) / SUPER - 0.5
    ys = (ys + 0.5) / SUPER - 0.5
    u, v = xs - (centre[0] + dx), ys - (centre[1] + dy)  # coordinates fixed to the iris
    rr = np.hypot(u, v)
    # the texture (detail of about half a sample) fixed to the iris, read with bilinear interpolation
    t = cv2.remap(tex, ((u + W) * 2).astype(np.float32), ((v + H) * 2).astype(np.float32), cv2.INTER_LINEAR)
    iris = 70.0 + 12.0 * t / float(np.abs(tex).max()) - 20.0 * (rr < 0.35 * radius)  # pupil darker
    img = np.where(rr < radius, iris, 205.0)
    if lid_rows:
        img[:lid_rows * SUPER] = 150.0
    # blurred by half a sample before sampling, as the eye patches are (aspectus.webcam.iris_appearance)
    img = cv2.GaussianBlur(img.astype(np.float32), (0, 0), 0.5 * SUPER)
    out = img.reshape(H, SUPER, W, SUPER).mean(axis=(1, 3))
    return np.clip(np.rint(out), 0, 255).astype(np.uint8)


@pytest.mark.parametrize("shift", [(0.3, -0.2), (-0.45, 0.15), (1.4, 0.6), (0.07, 0.05)])
def test_registration_reads_a_known_subpixel_shift(shift):
    ref, cur = _eye_patch(0.0, 0.0), _eye_patch(*shift)
    s, resid = register_shift(ref, cur, (11.5, 7.5), 1.25 * 4.2, start=(1.0, 0.5) if abs(shift[0]) > 1 else None)
    # uint8 rounding of the drawn patches leaves a few hundredths of a sample
    assert np.allclose(s, shift, atol=0.03), (s, shift)
    assert resid < 0.1


def test_registration_holds_with_a_still_lid_over_the_disc_and_a_brightness_change():
    ref = _eye_patch(0.0, 0.0, lid_rows=5)
    cur = np.clip(_eye_patch(0.35, 0.25, lid_rows=5).astype(float) * 1.1 + 6.0, 0, 255).astype(np.uint8)
    s, _ = register_shift(ref, cur, (11.5, 7.5), 1.25 * 4.2)
    # the still lid covers the disc's top (rows 0-4 of a disc spanning rows 3-12): it reads part of the motion as
    # none; within 0.1 sample (a quarter of the motion) on this drawing
    assert np.allclose(s, (0.35, 0.25), atol=0.1), s


def test_failed_registrations_are_dropped():
    d = np.zeros((40, 2, 2))
    res = np.full((40, 2), 0.05) + np.random.default_rng(0).normal(0, 0.005, (40, 2))
    d[5, 0] = (4.0, 0.0)  # longer than 0.6 of a 5-sample disc radius
    res[9, 1] = 0.5  # a residual far beyond the clip's
    res[12, 0] = np.nan
    out = reject_failed(d, res, 5.0)
    assert np.isnan(out[5, 0]).all() and np.isnan(out[9, 1]).all() and np.isnan(out[12, 0]).all()
    assert np.isfinite(out).all(axis=-1).sum() == 80 - 3


def _series(n=3000, q_sd=0.05, r_sd=0.3, gain=1.0, seed=1):
    """A random walk with saccade-like jumps (truth), white absolute errors (SD r_sd) and increments that read
    the motion times ``gain`` with white errors (SD q_sd)."""
    rng = np.random.default_rng(seed)
    steps = rng.normal(0.0, 0.1, n)
    jump = rng.random(n) < 0.05
    steps[jump] += rng.normal(0.0, 3.0, int(jump.sum()))
    truth = np.cumsum(steps)
    z = truth + rng.normal(0.0, r_sd, n)
    d = gain * np.diff(truth, prepend=np.nan) + rng.normal(0.0, q_sd, n)
    return truth, z, d


def test_noise_levels_are_found_from_the_series_itself():
    truth, z, d = _series()
    # one eye: R from the innovations' lag-1 covariance; Q, far smaller, only as a difference of large numbers
    Q, R = noise_levels(z, d, 1.0)
    assert np.sqrt(R) == pytest.approx(0.3, rel=0.1)
    assert np.sqrt(Q) < 0.15
    # with the other eye's increments (the same motion, independent errors): both levels
    other = np.diff(truth, prepend=np.nan) + np.random.default_rng(9).normal(0.0, 0.05, len(truth))
    Q, R = noise_levels(z, d, 1.0, other=other)
    assert np.sqrt(Q) == pytest.approx(0.05, rel=0.1)
    assert np.sqrt(R) == pytest.approx(0.3, rel=0.1)


def test_gain_of_short_increments_is_measured():
    truth, z, d = _series(gain=0.6)
    assert clip_gain(z, d) == pytest.approx(1 / 0.6, rel=0.05)


def test_smoother_takes_the_steps_from_the_increments_and_the_level_from_the_observations():
    truth, z, d = _series(gain=0.6)
    k = clip_gain(z, d)
    other = np.diff(truth, prepend=np.nan) + np.random.default_rng(9).normal(0.0, 0.05 / 0.6, len(truth))
    Q, R = noise_levels(z, d, k, other=other)
    x = smooth(z, d, k, Q, R)
    s2s = lambda e: float(np.sqrt(np.nanmean(np.diff(e) ** 2)))  # noqa: E731
    # white absolute error SD 0.3: its steps 0.42; the increments' error 0.05 / 0.6
    assert s2s(z - truth) == pytest.approx(0.3 * np.sqrt(2), rel=0.05)
    assert s2s(x - truth) < 0.25 * s2s(z - truth)
    # bounded: no drift, the level's error below the observations'
    assert np.sqrt(np.mean((x - truth) ** 2)) < 0.6 * 0.3
    # a saccade's step is kept (the increments carry it): the step gain on the jumps
    big = np.abs(np.diff(truth)) > 2.0
    gain = np.sum(np.diff(x)[big] * np.diff(truth)[big]) / np.sum(np.diff(truth)[big] ** 2)
    assert gain == pytest.approx(1.0, abs=0.05)


def test_a_missing_increment_restarts_from_the_observation():
    truth, z, d = _series(n=200)
    d[100] = np.nan
    x = smooth(z, d, 1.0, 0.0025, 0.09)
    assert np.isfinite(x).all()
    x2 = smooth(z[100:], np.concatenate([[np.nan], d[101:]]), 1.0, 0.0025, 0.09)
    assert np.allclose(x[100:], x2)


def test_the_setting_needs_the_eye_picture():
    from aspectus.errors import ParameterError
    from aspectus.webcam.gaze import GazeParams

    with pytest.raises(ParameterError, match="iris_registration needs refine_iris and eye_anchors"):
        GazeParams(iris_registration=True, refine_iris=False)
    with pytest.raises(ParameterError, match="iris_registration"):
        GazeParams(iris_registration="yes")
    assert GazeParams.from_dict({"iris_registration": True}).iris_registration is True


def test_increments_in_the_picture_are_free_of_the_patch_frames_jitter():
    """Both eyes move alike in the picture; each eye's patch frame jitters on its own (as the eye anchors that
    place it do). The iris's shift inside each patch then carries the frame's jitter, and so do the transforms:
    in the picture the increments must give the true motion back, the same for both eyes."""
    from aspectus.webcam.iris_appearance import to_patch
    from aspectus.webcam.iris_registration import picture_increments

    rng = np.random.default_rng(4)
    n = 200
    path = np.cumsum(rng.normal(0.0, 0.4, (n, 2)), axis=0) + [320.0, 240.0]
    iris = np.stack([path, path + [60.0, 1.0]], axis=1)  # (n, 2 eyes, 2) px, moving together
    A = np.zeros((n, 2, 2, 3))
    scale = 1.4 * (1.0 + rng.normal(0.0, 0.01, (n, 2)))  # px per sample, jittering per eye
    A[..., 0, 0] = A[..., 1, 1] = scale
    A[..., 2] = iris[0] - [16.0, 11.0] + rng.normal(0.0, 0.45, (n, 2, 2))  # each eye's frame jitters by 0.45 px
    z = to_patch(iris, A)
    d = np.diff(z, axis=0, prepend=np.nan)  # a perfect registration, in patch samples
    inc = picture_increments(z, d, np.ones((2, 2)), A)
    true = np.diff(iris, axis=0)
    assert np.allclose(inc[1:], true, atol=1e-9)
    # in patch coordinates the two eyes' increments differ by the frames' jitter
    assert np.std(d[1:, 0] - d[1:, 1]) > 0.3


def _still_clip(n: int, *, open_eyes: bool = True):
    """``n`` frames of both eyes' drawn patches (the iris still, ``_eye_patch``), identity-scaled patch frames
    placed at fixed picture positions, the absolute centres where the drawing puts them; ``open_eyes`` False: every
    frame a blink."""
    patch = _eye_patch(0.0, 0.0)
    patches = np.broadcast_to(patch, (n, 2) + patch.shape).copy()
    A = np.zeros((n, 2, 2, 3))
    A[..., 0, 0] = A[..., 1, 1] = 1.5
    A[:, 0, :, 2], A[:, 1, :, 2] = (300.0, 200.0), (380.0, 200.0)
    iris = A[..., 2] + 1.5 * np.array([11.5, 7.5])
    diam = np.full((n, 2), 1.5 * 8.4)
    return patches, A, iris, diam, np.full(n, open_eyes)


@pytest.mark.parametrize("n, open_eyes", [(12, True), (300, False)])
def test_the_record_does_not_call_frames_fused_that_no_smoother_touched(n, open_eyes):
    """Too few frames for the noise levels (a clip of 12 frames), or no increment at all (every frame a blink):
    the centres stay as they were, and the record (run.json's gaze_model.iris_registration) must say that nothing
    was fused rather than count every frame."""
    from aspectus.webcam.iris_registration import registered_iris

    patches, A, iris, diam, usable = _still_clip(n, open_eyes=open_eyes)
    out, info = registered_iris(patches, A, iris, diam, usable)
    assert np.array_equal(out, iris)
    assert all(v is None for v in info["levels"].values())
    assert info["frames_fused"] == [0, 0]
    assert info["applied"] is False
    assert "reason" in info


def test_the_record_counts_fused_frames_of_a_clip_long_enough():
    """The same drawn eyes over 300 open-eye frames, the absolute centres noisy: every frame is fused."""
    from aspectus.webcam.iris_registration import registered_iris

    patches, A, iris, diam, usable = _still_clip(300)
    noisy = iris + np.random.default_rng(2).normal(0.0, 0.5, iris.shape)
    out, info = registered_iris(patches, A, noisy, diam, usable)
    assert info["applied"] is True and info["frames_fused"] == [300, 300]
    # the still iris: the fused centres scatter less than the absolute ones
    assert np.std(out - iris) < 0.5 * np.std(noisy - iris)


def _record(A, iris, diam):
    """The per-frame record the pipeline keeps (aspectus.webcam.frame_geometry's columns) for ``_still_clip``."""
    from aspectus.webcam.frame_geometry import APPEARANCE_COLUMNS, RECORD_WIDTH

    n = len(A)
    n_meta = sum(k for name, k in APPEARANCE_COLUMNS if name != "patches")
    a = np.full((n, RECORD_WIDTH + n_meta), np.nan)
    a[:, 15:19] = iris.reshape(n, 4)
    a[:, 19:21] = diam
    a[:, 29:31] = 0.3  # eyes open throughout
    a[:, RECORD_WIDTH + 2:RECORD_WIDTH + 14] = A.reshape(n, 12)
    return a


def test_the_registration_step_reports_progress_and_honours_cancellation():
    """The registration runs after the frames (some 3 ms a frame: minutes on an hour's clip); like the frame loop
    it must move the progress bar and stop when the user cancels."""
    from aspectus.errors import Cancelled
    from aspectus.webcam.pipeline import _registered_iris

    n = 600
    patches, A, iris, diam, _ = _still_clip(n)
    a = _record(A, iris, diam)
    found = np.ones(n, bool)
    seen = []
    _registered_iris(a, patches, found, iris, progress=lambda f, m: seen.append((f, m)), name="clip.mp4")
    fr = [f for f, _ in seen]
    assert len(seen) >= 3 and fr == sorted(fr) and 0.85 < fr[0] and fr[-1] == pytest.approx(0.99)
    assert "clip.mp4" in seen[-1][1] and f"frame {n} of {n}" in seen[-1][1]

    class Flag:
        calls = 0

        def is_set(self):
            self.calls += 1
            return self.calls > 1

    flag = Flag()
    with pytest.raises(Cancelled, match="clip.mp4"):
        _registered_iris(a, patches, found, iris, cancel=flag, name="clip.mp4")
    assert flag.calls == 2  # stopped at the second look, not after the whole clip
