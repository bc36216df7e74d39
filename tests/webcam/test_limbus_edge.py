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

from _drawn_eye import eye_opening, right_eye_only

from aspectus.webcam.limbus import _model_edges, limbus_centres_many

cv2 = pytest.importorskip("cv2")

R_PX = 11.0  # iris radius (a 22 px iris, as on the rendered target clips)


def _profile(s, s0, b, d, sigma, a=60.0):
    from math import erf

    u = (s - s0) / sigma
    Phi = 0.5 * (1.0 + np.vectorize(erf)(u / np.sqrt(2.0)))
    phi = np.exp(-0.5 * u * u) / np.sqrt(2 * np.pi)
    return a + b * Phi + d * sigma * (u * Phi + phi)


@pytest.mark.parametrize("b, d, sigma", [(120.0, -12.0, 1.2), (80.0, -10.0, 1.3), (50.0, -6.0, 1.0)])
def test_a_step_on_a_shading_ramp_is_located_at_its_midpoint(b, d, sigma):
    rng = np.random.default_rng(3)
    step_px = 0.5
    s = np.arange(-6.0, 8.0, step_px)
    fit, steep = [], []
    for _ in range(40):
        s0 = rng.uniform(-0.25, 0.25)
        p = _profile(s, s0, b, d, sigma) + rng.normal(0, 0.5, len(s))
        ds = np.diff(p)
        i = int(np.argmax(ds[2:-2])) + 2  # the steepest step, between samples i and i + 1
        a_, m_, c_ = ds[i - 1], ds[i], ds[i + 1]
        steep.append(s[i] + step_px * (0.5 + 0.5 * (a_ - c_) / (a_ - 2 * m_ + c_)) - s0)  # as limbus._fit_many
        shift, ok = _model_edges(p[None, None, :], np.array([[i]]), np.array([step_px]))
        assert ok[0, 0]
        fit.append(s[i] + 0.5 * step_px + shift[0, 0] - s0)
    # the premise: the steepest point lies d sigma^2 / b inside the step (0.14, 0.21, 0.12 px here); measured
    # mean -0.153, -0.219, -0.108 px
    assert np.mean(steep) == pytest.approx(d * sigma ** 2 / b, abs=0.05)
    assert np.mean(steep) < -0.1
    # the fitted midpoint: measured mean +0.021, +0.002, +0.006 px, 90th percentile of |error| 0.12, 0.05, 0.11
    assert abs(np.mean(fit)) < 0.04, np.mean(fit)
    assert np.percentile(np.abs(fit), 90) < 0.15


def _eye(centre, rng, shading, upper_only=False, size=80):
    """A grey eye: an iris disc (60) on a sclera (210) darkened by ``shading`` per px of distance from the rim
    (down to 0.3 of its level; above the iris only with ``upper_only``, as a lid's shadow), the whole iris in the
    eye opening, drawn at 8x and averaged down, blurred (SD 1.3 px), with noise; and the eye's outline as the face
    mesh's 16 points."""
    a = R_PX
    outline, m, X, Y = eye_opening(cv2, centre, a, centre[1] - 1.5 * a, centre[1] + 1.5 * a, size)
    rho = np.hypot(X, Y)
    f = np.clip(1.0 - shading * (rho - a), 0.3, 1.0)
    if upper_only:
        f = np.where(Y < 0, f, 1.0)
    eye = np.where(rho <= a, 60.0, 210.0 * f).astype(np.float32)
    img = cv2.resize(np.where(m > 0, eye, 150.0).astype(np.float32), (size, size), interpolation=cv2.INTER_AREA)
    img = cv2.GaussianBlur(img, (0, 0), 1.3) + rng.normal(0, 2.0, (size, size))
    return np.clip(img, 0, 255).astype(np.uint8), outline


def _fits(shading, upper_only, edge):
    """Centre errors (12, 2) and radius errors (12,) px of the right eye fitted in 12 drawn pictures."""
    rng = np.random.default_rng(11)
    items, truth = [], []
    for _ in range(12):
        c = np.array([40.0, 40.0]) + rng.uniform(-0.5, 0.5, 2)
        img, outline = _eye(c, rng, shading, upper_only)
        pts = right_eye_only(outline)
        items.append((img, pts, np.array([c + rng.normal(0, 0.5, 2), c + 1000.0]), np.array([2 * R_PX, 2 * R_PX])))
        truth.append(c)
    res = limbus_centres_many(items, edge=edge, diameters=True)
    assert all(r[1][0] for r in res)
    return np.array([r[0][0] for r in res]) - np.array(truth), np.array([0.5 * r[2][0] - R_PX for r in res])


def test_a_shaded_sclera_no_longer_shrinks_the_fitted_circle():
    """The sclera darkened away from the iris all round (8 % per px): the steepest points lie inside the rim."""
    _, r_steep = _fits(0.08, False, "steepest")
    _, r_model = _fits(0.08, False, "model")
    _, r_flat = _fits(0.0, False, "steepest")
    # measured: mean radius error steepest -0.40 px (-0.10 without the shading), model -0.10
    assert r_steep.mean() < -0.3 and r_steep.mean() < r_flat.mean() - 0.2, (r_steep.mean(), r_flat.mean())
    assert r_model.mean() > -0.15, r_model.mean()


def test_a_lid_shading_above_the_iris_no_longer_pulls_the_fitted_centre_down():
    """The sclera darkened above the iris only (15 % per px from the rim, a lid's shadow): the upper candidates
    lie inside the rim with the steepest point, and the circle's centre moves down."""
    e_steep, _ = _fits(0.15, True, "steepest")
    e_model, _ = _fits(0.15, True, "model")
    # measured: mean vertical error (+ = down) steepest +0.335 px, model +0.056; horizontal +0.016 / 0.000
    assert e_steep[:, 1].mean() > 0.25, e_steep.mean(axis=0)
    assert abs(e_model[:, 1].mean()) < 0.1 and abs(e_model[:, 1].mean()) < e_steep[:, 1].mean() / 3, e_model.mean(axis=0)
    assert np.abs(e_model[:, 0]).max() < 0.1


def test_an_unshaded_disc_is_fitted_as_well_by_the_model():
    e_steep, _ = _fits(0.0, False, "steepest")
    e_model, _ = _fits(0.0, False, "model")
    # measured: mean |error| steepest 0.053 px, model 0.012 px; largest 0.12 / 0.03 px
    assert np.abs(e_model).max() < 0.15
    assert np.abs(e_model).mean() <= np.abs(e_steep).mean() + 0.02
    with pytest.raises(ValueError, match="edge"):
        limbus_centres_many([], edge="nearest")
