"""The iris height learnt from the eyes' own appearance (aspectus.webcam.iris_appearance), on synthetic patches.

The patches are drawn here: a dark disc (the iris) on a brighter background, at a known position that moves in
fixations and saccades, with pixel noise and a slow lighting drift; the labels are that position plus
independent noise of 0.8 px per eye (about the limbus fit's vertical error at classroom scale,
docs/notes/gaze-measurement.md). What a regression on many pixels should do against noisy labels: follow the
position with gain near one and far less noise than the labels, never echo a frame's own label noise
(cross-fitting), and leave out what it is told to leave out.
"""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.webcam import iris_appearance as IA

W, H = IA.PATCH_SIZE


def _positions(n: int, rng) -> np.ndarray:
    """(n, 2) patch positions: fixations of 5-15 frames joined by jumps, within the patch's middle."""
    pos = np.empty((n, 2))
    k = 0
    while k < n:
        m = int(rng.integers(5, 16))
        pos[k:k + m] = [W / 2 - 0.5 + rng.uniform(-3, 3), H / 2 - 0.5 + rng.uniform(-2.5, 2.5)]
        k += m
    return pos


def _draw(pos: np.ndarray, rng, *, noise=4.0, radius=3.5) -> np.ndarray:
    """(n, H, W) uint8 patches with a dark anti-aliased disc at ``pos`` and a lighting drift of +-20 %."""
    n = len(pos)
    v, u = np.mgrid[0:H, 0:W]
    d = np.hypot(u[None] - pos[:, 0, None, None], v[None] - pos[:, 1, None, None])
    cover = np.clip(radius - d + 0.5, 0.0, 1.0)
    light = 1.0 + 0.2 * np.sin(np.linspace(0, 3 * np.pi, n))[:, None, None]
    img = (150.0 - 90.0 * cover) * light + rng.normal(0, noise, (n, H, W))
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)


def _clip(n=600, seed=1, label_sd=0.8):
    rng = np.random.default_rng(seed)
    pos = _positions(n, rng)
    patches = np.stack([_draw(pos, rng), _draw(pos, rng)], axis=1)  # both eyes look at the same place
    affines = np.zeros((n, 2, 2, 3))
    affines[..., 0, 0] = affines[..., 1, 1] = 1.0  # patch coordinates are picture px here
    affines[:, 1, 0, 2] = 60.0  # the left eye sits 60 px to the right
    truth = np.stack([pos, pos + [60.0, 0.0]], axis=1)
    labels = truth + rng.normal(0, label_sd, truth.shape)
    return patches, affines, truth, labels


def _gain_sd(est, truth):
    ok = np.isfinite(est)
    g = np.polyfit(truth[ok], est[ok], 1)[0]
    return g, float(np.std(est[ok] - truth[ok]))


def test_regression_follows_the_position_with_far_less_noise_than_its_labels():
    patches, affines, truth, labels = _clip()
    pred, info = IA.appearance_iris(patches, affines, labels, np.ones(len(truth), bool))
    for e in range(2):
        for ax in range(2):
            g, sd = _gain_sd(pred[:, e, ax], truth[:, e, ax])
            _, sd_label = _gain_sd(labels[:, e, ax], truth[:, e, ax])
            assert 0.9 <= g <= 1.1, (e, ax, g)
            assert sd < 0.4 * sd_label, (e, ax, sd, sd_label)
    assert info["blocks"][0]["right"]["fitted"] and info["blocks"][0]["left"]["fitted"]


def test_a_frames_own_label_noise_does_not_reach_its_prediction():
    """Patches that carry no information and labels that are pure noise: an in-sample fit of 32 components on
    300 frames would echo the labels (r about 0.3); the cross-fitted prediction must not."""
    rng = np.random.default_rng(3)
    n = 600
    X = rng.normal(0, 1, (n, W * H)).astype(np.float32)
    y = rng.normal(0, 1, (n, 2))
    pred, info = IA.crossfit_predict(X, y, np.ones(n, bool))
    ok = np.isfinite(pred).all(axis=1)
    assert ok.mean() > 0.95
    for j in range(2):
        # no echo; a cross-fit of pure noise leans slightly negative instead (each fold is predicted around the
        # other folds' mean, which lacks its own labels: r about -1/sqrt(frames per fold) = -0.13 from that alone)
        assert -0.3 < np.corrcoef(pred[ok, j], y[ok, j])[0, 1] < 0.1
    # the contrast that shows the test can fail: the same model fitted on all frames, in-sample
    Xc = X - X.mean(axis=0)
    _, _, Vt = np.linalg.svd(Xc, full_matrices=False)
    Z = Xc @ Vt[:32].T
    fit = Z @ np.linalg.lstsq(Z, y - y.mean(axis=0), rcond=None)[0]
    assert np.corrcoef(fit[:, 0], y[:, 0])[0, 1] > 0.15


def test_closed_eye_frames_are_not_labels():
    """A third of the frames carry labels 2 px low (half-closed lids pull the fit; too little to be trimmed as
    outliers); marked not usable they do not pull the fit, used they would."""
    patches, affines, truth, labels = _clip(seed=5)
    bad = np.zeros(len(truth), bool)
    bad[::3] = True
    labels[bad, :, 1] += 2.0
    usable = ~bad
    pred, _ = IA.appearance_iris(patches, affines, labels, usable)
    pred_all, _ = IA.appearance_iris(patches, affines, labels, np.ones(len(truth), bool))
    # on the open-eye frames (the closed ones are blinks, invalid in the gaze; there the blend may take in part
    # of their own fit, as the default takes all of it)
    err = np.abs(np.nanmean(pred[usable, :, 1] - truth[usable, :, 1]))
    err_all = np.abs(np.nanmean(pred_all[usable, :, 1] - truth[usable, :, 1]))
    assert err < 0.08, err
    assert err_all > 0.15, err_all  # used as labels, the same frames move it (by 0.24 px here)


def test_too_few_frames_no_patches_and_failed_fits_give_no_prediction_and_no_crash():
    patches, affines, truth, labels = _clip(n=120)
    pred, info = IA.appearance_iris(patches, affines, labels, np.ones(120, bool))
    assert np.isnan(pred).all() and not info["blocks"][0]["right"]["fitted"]
    patches, affines, truth, labels = _clip(n=400)
    affines[:, 1] = np.nan  # the left eye never had a patch
    pred, _ = IA.appearance_iris(patches, affines, labels, np.ones(400, bool))
    assert np.isnan(pred[:, 1]).all() and np.isfinite(pred[:, 0]).all()
    labels[:] = np.nan  # every limbus fit failed
    pred, info = IA.appearance_iris(patches, affines, labels, np.ones(400, bool))
    assert np.isnan(pred).all()
    pred, info = IA.appearance_iris(patches[:0], affines[:0], labels[:0], np.ones(0, bool))
    assert pred.shape == (0, 2, 2) and info["blocks"] == []


def test_long_clips_are_fitted_in_blocks_and_a_short_last_block_joins_the_one_before():
    patches, affines, truth, labels = _clip(n=950)
    pred, info = IA.appearance_iris(patches, affines, labels, np.ones(950, bool), block_frames=400)
    assert [b["frames"] for b in info["blocks"]] == [[0, 400], [400, 950]]
    g, sd = _gain_sd(pred[:, 0, 1], truth[:, 0, 1])
    assert 0.9 <= g <= 1.1 and sd < 0.3


def test_patch_frame_round_trip_and_sampling_follows_the_picture():
    rng = np.random.default_rng(0)
    A = np.zeros((5, 2, 2, 3))
    A[..., :2] = rng.normal(0, 1, (5, 2, 2, 2)) + 2 * np.eye(2)
    A[..., 2] = rng.normal(100, 10, (5, 2, 2))
    p = rng.normal(50, 20, (5, 2, 2))
    np.testing.assert_allclose(IA.to_picture(IA.to_patch(p, A), A), p, atol=1e-9)
    A[0, 0] = np.nan
    assert np.isnan(IA.to_patch(p, A)[0, 0]).all() and np.isfinite(IA.to_patch(p, A)[0, 1]).all()

    sampler = IA.EyePatchSampler()
    anchors = np.array([[90, 130], [100, 132], [110, 130], [150, 130], [160, 132], [170, 130]], float)
    corners = np.array([[[85, 115], [115, 115]], [[145, 115], [175, 115]]], float)
    aff = sampler.affines(anchors, corners)
    assert aff is not None
    # a dark square in the picture moves the patch's dark centroid by the same amount in patch samples
    pic = np.full((240, 320), 200, np.uint8)
    pic[110:118, 96:104] = 30
    p1 = sampler.sample(pic, (0, 0), aff).astype(float)
    pic2 = np.full((240, 320), 200, np.uint8)
    pic2[114:122, 96:104] = 30  # 4 px lower
    p2 = sampler.sample(pic2, (0, 0), aff).astype(float)
    v = np.arange(H)[:, None]

    def centroid(p):
        w = np.clip(200.0 - p[0], 0.0, None)  # the dark square only
        return float((w * v).sum() / w.sum())

    step = float(np.hypot(*aff[0, :, 1]))  # px per patch sample, vertically
    assert centroid(p2) - centroid(p1) == pytest.approx(4.0 / step, abs=0.25)
    assert sampler.sample(pic[:100], (0, 0), aff) is None  # the patch reaches outside the crop
    assert IA.EyePatchSampler().affines(np.full((6, 2), np.nan), corners) is None


def test_the_blend_leans_on_the_measure_that_agrees_with_the_other_eye():
    """One eye's estimate is made noisier than its labels: the blend falls back to the labels there, and takes
    the estimate where the labels are the noisier."""
    rng = np.random.default_rng(7)
    n = 600
    t = _positions(n, rng)[:, 1]
    labels = np.stack([np.c_[t, t] for _ in range(2)], axis=1).astype(float)  # (n, eye, axis)
    est = labels.copy()
    labels[:, 0, 1] += rng.normal(0, 0.2, n)  # right eye: good labels ...
    est[:, 0, 1] += rng.normal(0, 1.0, n)  # ... and a poor estimate
    labels[:, 1, 1] += rng.normal(0, 1.0, n)  # left eye: poor labels ...
    est[:, 1, 1] += rng.normal(0, 0.2, n)  # ... and a good estimate
    out, w = IA.blend_with_labels(est, labels, np.ones(n, bool))
    assert w["right"] <= 0.2 and w["left"] >= 0.8
    for e in range(2):
        assert np.std(out[:, e, 1] - t) <= min(np.std(est[:, e, 1] - t), np.std(labels[:, e, 1] - t)) + 0.02
    labels[:50, 0, 1] = np.nan  # where the label is missing, the estimate is taken
    out, _ = IA.blend_with_labels(est, labels, np.ones(n, bool))
    np.testing.assert_allclose(out[:50, 0, 1], est[:50, 0, 1])


def test_a_label_and_its_patch_stay_aligned_in_the_picture_convention():
    """A dark disc drawn by its area in each pixel at a known centre (aspectus.schema's picture convention:
    pixel i spans [i, i + 1)) and sampled into patches from a crop: the disc's centre in each patch (its
    darkness-weighted centroid over the patch's samples) is where to_patch puts the centre, within 0.1 px of
    the picture (OpenCV samples with pixel i's centre at i; mixing the two would leave 0.5 px)."""
    n, r, (w, h) = 8, 5.0, (100, 80)
    centres = np.array([[35.3, 41.6], [66.85, 39.2]])
    s = (np.arange(n) + 0.5) / n
    ys = (np.arange(h)[:, None] + s[None, :]).ravel()
    xs = (np.arange(w)[:, None] + s[None, :]).ravel()
    cover = np.zeros((h * n, w * n))
    for c in centres:
        cover += np.hypot(xs[None, :] - c[0], ys[:, None] - c[1]) <= r
    img = np.rint(200.0 - 150.0 * cover.reshape(h, n, w, n).mean(axis=(1, 3))).astype(np.uint8)
    origin = (7, 12)
    crop = img[origin[1]:, origin[0]:]
    sampler = IA.EyePatchSampler()
    W, H = sampler.size
    A = np.zeros((2, 2, 3))
    for e, step in enumerate((0.9, 1.2)):  # px per sample; patch centred 1.3 px beside the disc
        A[e, :, :2] = np.diag([step, step])
        A[e, :, 2] = centres[e] + [1.3, -0.4] - step * np.array([(W - 1) / 2, (H - 1) / 2])
    patches = sampler.sample(crop, origin, A)
    assert patches is not None
    label = IA.to_patch(centres[None], A[None])[0]
    jj, ii = np.mgrid[0:H, 0:W].astype(float)
    for e in range(2):
        dark = np.clip(200.0 - patches[e].astype(float), 0, None)
        got = np.array([(dark * ii).sum(), (dark * jj).sum()]) / dark.sum()
        step = A[e, 0, 0]
        assert np.all(np.abs(got - label[e]) * step < 0.1), (e, got, label[e])


def test_the_instrument_never_shrinks_an_estimate_below_its_own_motion():
    """The rescale divides out a regression's shrinkage, measured with the other eye's labels as the instrument
    (instrumental variables, Reiersol 1945 - from memory: cov(est_R, label_L) / cov(label_R, label_L) is the
    share of the labelled motion the estimate follows when the eyes' label errors are independent). A regression
    on the labels cannot follow more than all of it, so a gain measured above one means the eyes' label errors
    are not independent (here: errors of opposite sign in the two eyes on the same frames), and the estimate keeps
    its own scale instead of being shrunk by it; with independent errors a gain below one is still divided out."""
    rng = np.random.default_rng(5)
    n = 600
    y = np.repeat(rng.uniform(-3, 3, n // 10), 10)  # fixations at random heights
    use = np.ones(n, bool)
    # the right eye's estimate follows the motion itself, the left eye's 0.7 of it (a shrunk regression)
    est = np.zeros((n, 2, 2))
    est[:, 0, 1] = y + rng.normal(0, 0.1, n)
    est[:, 1, 1] = 0.7 * y + rng.normal(0, 0.1, n)
    for shared_sd, independent_sd in ((1.2, 0.3), (0.0, 1.2)):
        shared = rng.normal(0, 1.0, n) * shared_sd  # one error per frame, of opposite sign in the two eyes
        labels = np.zeros((n, 2, 2))
        labels[:, 0, 1] = y + shared + rng.normal(0, independent_sd, n)
        labels[:, 1, 1] = y - shared + rng.normal(0, independent_sd, n)
        labels[..., 0] = est[..., 0] = rng.normal(0, 1, (n, 2))
        out, gains = IA.instrument_rescale(est, labels, use)
        if shared_sd:
            # measured gains var(y) / (var(y) - var(shared)) and 0.7 times that, both above one: not divided out
            assert gains["right_y"] == pytest.approx(1.0) and gains["left_y"] == pytest.approx(1.0)
            np.testing.assert_allclose(out[..., 1], est[..., 1])
        else:
            assert gains["right_y"] == pytest.approx(1.0, abs=0.1)
            assert np.polyfit(y, out[:, 1, 1], 1)[0] == pytest.approx(1.0, abs=0.1)  # the shrinkage divided out
