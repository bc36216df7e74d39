"""The limbus candidate from a model of the edge profile (aspectus.webcam.limbus, ``edge="model"``).

Why the steepest point is biased (the derivation is elementary; stated here so the test's premise can be checked):
a step of height b at s0 from a flat level, whose bright side also falls off linearly with slope d (a shading
that darkens the sclera away from the iris), blurred by a Gaussian of SD sigma, has the profile
``a + b Phi(u) + d sigma (u Phi(u) + phi(u))``, u = (s - s0) / sigma, and the slope ``b phi(u) / sigma + d Phi(u)``;
its maximum lies where ``-b u phi / sigma + d phi = 0``, at ``s - s0 = d sigma^2 / b``: with d < 0 inside the step,
by more the weaker the step and the wider the blur. The midpoint of a fitted step-plus-ramp model does not move.
"""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.webcam.landmarks import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE
from aspectus.webcam.limbus import _model_edges, limbus_centres_many

cv2 = pytest.importorskip("cv2")

_SS = 8
R_PX = 11.0  # iris radius (a 22 px iris, as on the rendered target clips)


def _profile(s, s0, b, d, sigma, a=60.0):
    from math import erf

    u = (s - s0) / sigma
    Phi = 0.5 * (1.0 + np.vectorize(erf)(u / np.sqrt(2.0)))
    phi = np.exp(-0.5 * u * u) / np.sqrt(2 * np.pi)
    return a + b * Phi + d * sigma * (u * Phi + phi)


@pytest.mark.parametrize("b, d, sigma", [(120.0, -12.0, 1.2), (60.0, -10.0, 1.4), (40.0, -8.0, 1.0)])
def test_a_step_on_a_shading_ramp_is_located_at_its_midpoint(b, d, sigma):
    rng = np.random.default_rng(3)
    step_px = 0.5
    s = np.arange(-6.0, 8.0, step_px)
    shift_true = []
    shift_fit = []
    shift_steep = []
    for k in range(20):
        s0 = rng.uniform(-0.25, 0.25)
        p = _profile(s, s0, b, d, sigma) + rng.normal(0, 1.0, len(s))
        ds = np.diff(p)
        i = int(np.argmax(ds[2:-2])) + 2  # the steepest step, between samples i and i + 1
        a_, m_, c_ = ds[i - 1], ds[i], ds[i + 1]
        steep = s[i] + step_px * (0.5 + 0.5 * (a_ - c_) / (a_ - 2 * m_ + c_))  # as limbus._fit_many reads it
        shift, ok = _model_edges(p[None, None, :], np.array([[i]]), np.array([step_px]))
        assert ok[0, 0]
        shift_fit.append(s[i] + 0.5 * step_px + shift[0, 0] - s0)
        shift_steep.append(steep - s0)
        shift_true.append(d * sigma ** 2 / b)
    # the premise: the steepest point lies d sigma^2 / b inside the step (0.14, 0.33, 0.20 px here)
    assert np.mean(shift_steep) == pytest.approx(shift_true[0], abs=0.06)
    assert np.mean(shift_steep) < -0.1
    # the model's midpoint: within 0.05 px on average, every profile within 0.15 px
    assert abs(np.mean(shift_fit)) < 0.05, np.mean(shift_fit)
    assert np.abs(shift_fit).max() < 0.15, np.abs(shift_fit).max()


def _shaded_eye(centre, rng, size=80):
    """A grey eye: an iris disc (60) on a sclera (210) whose brightness falls by 5 % per px above the iris's
    centre (a lid's shading), lids hiding the top sixth and bottom twentieth, drawn at 8x, blurred (SD 1.3 px),
    with noise; and the eye's outline as the face mesh's 16 points."""
    a = R_PX
    cx, cy = centre
    ew = 2.6 * a
    top, bot = cy - a + 0.33 * a, cy + a - 0.1 * a
    xs = np.linspace(cx - ew, cx + ew, 9)
    u = (xs - cx) / ew
    upper = np.c_[xs, cy + (top - cy) * (1 - u ** 2)]
    lower = np.c_[xs, cy + (bot - cy) * (1 - u ** 2)]
    outline = np.vstack([upper, lower[1:-1][::-1]])
    n = size * _SS
    m = np.zeros((n, n), np.uint8)
    cv2.fillPoly(m, [np.round(outline * _SS * 16).astype(np.int32)], 1, cv2.LINE_8, 4)
    yy, xx = np.mgrid[0:n, 0:n].astype(np.float32)
    X, Y = (xx + 0.5) / _SS - cx, (yy + 0.5) / _SS - cy  # picture coordinates: pixel i spans [i, i + 1)
    sclera = 210.0 * np.clip(1.0 - 0.05 * np.maximum(-Y, 0.0), 0.2, 1.0)
    eye = np.where(X * X + Y * Y <= a * a, 60.0, sclera).astype(np.float32)
    img = cv2.resize(np.where(m > 0, eye, 150.0).astype(np.float32), (size, size), interpolation=cv2.INTER_AREA)
    img = cv2.GaussianBlur(img, (0, 0), 1.3) + rng.normal(0, 2.0, (size, size))
    return np.clip(img, 0, 255).astype(np.uint8), outline


def test_a_lid_shading_no_longer_pulls_the_fitted_centre_down():
    rng = np.random.default_rng(11)
    items, truth = [], []
    for _ in range(12):
        c = np.array([40.0, 40.0]) + rng.uniform(-0.5, 0.5, 2)
        img, outline = _shaded_eye(c, rng)
        pts = np.zeros((478, 3))
        pts[list(RIGHT_EYE_OUTLINE), :2] = outline
        pts[list(LEFT_EYE_OUTLINE), :2] = outline + 1000.0  # the other eye off the picture: not fitted
        items.append((img, pts, np.array([c + rng.normal(0, 0.5, 2), c + 1000.0]), np.array([2 * R_PX, 2 * R_PX])))
        truth.append(c)
    truth = np.array(truth)
    steep = limbus_centres_many(items)
    model = limbus_centres_many(items, edge="model")
    assert all(r[1][0] for r in steep) and all(r[1][0] for r in model)
    err_s = np.array([r[0][0] for r in steep]) - truth
    err_m = np.array([r[0][0] for r in model]) - truth
    # measured: mean vertical error (+ = down) steepest +0.31 px, model +0.04; horizontal 0.00 / 0.00
    assert err_s[:, 1].mean() > 0.2, err_s.mean(axis=0)
    assert abs(err_m[:, 1].mean()) < 0.1 and abs(err_m[:, 1].mean()) < err_s[:, 1].mean() / 3, err_m.mean(axis=0)
    assert np.abs(err_m[:, 0].mean()) < 0.1


def test_the_model_keeps_an_unshaded_disc_where_the_steepest_point_puts_it():
    """Without a shading the two agree on the centre (a flat sclera: the step is symmetric)."""
    from aspectus.webcam import limbus

    rng = np.random.default_rng(5)
    errs = {"steepest": [], "model": []}
    for _ in range(6):
        c = np.array([40.0, 40.0]) + rng.uniform(-0.5, 0.5, 2)
        img, outline = _shaded_eye(c, rng)
        flat, _ = _flat_eye(c, rng)
        pts = np.zeros((478, 3))
        pts[list(RIGHT_EYE_OUTLINE), :2] = outline
        pts[list(LEFT_EYE_OUTLINE), :2] = outline + 1000.0
        item = (flat, pts, np.array([c, c + 1000.0]), np.array([2 * R_PX, 2 * R_PX]))
        for e in errs:
            errs[e].append(limbus.limbus_centres_many([item], edge=e)[0][0][0] - c)
    for e, v in errs.items():
        assert np.abs(np.mean(v, axis=0)).max() < 0.1, (e, np.mean(v, axis=0))
    with pytest.raises(ValueError, match="edge"):
        limbus.limbus_centres_many([item], edge="nearest")


def _flat_eye(centre, rng, size=80):
    img, outline = _shaded_eye(centre, rng, size)
    a = R_PX
    cx, cy = centre
    n = size * _SS
    m = np.zeros((n, n), np.uint8)
    cv2.fillPoly(m, [np.round(outline * _SS * 16).astype(np.int32)], 1, cv2.LINE_8, 4)
    yy, xx = np.mgrid[0:n, 0:n].astype(np.float32)
    X, Y = (xx + 0.5) / _SS - cx, (yy + 0.5) / _SS - cy
    eye = np.where(X * X + Y * Y <= a * a, 60.0, 210.0).astype(np.float32)
    img = cv2.resize(np.where(m > 0, eye, 150.0).astype(np.float32), (size, size), interpolation=cv2.INTER_AREA)
    img = cv2.GaussianBlur(img, (0, 0), 1.3) + rng.normal(0, 2.0, (size, size))
    return np.clip(img, 0, 255).astype(np.uint8), outline
