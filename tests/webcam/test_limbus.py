"""The limbus fit when the lids cover part of the iris (aspectus.webcam.limbus)."""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.webcam.landmarks import RIGHT_EYE_OUTLINE
from aspectus.webcam.limbus import EDGE_NOISE_PX, fit_circle, limbus_centres

from _drawn_eye import lid_line_points


def _rim_and_lid(centre, r, lid_below_px, rng):
    """Edge points of an iris whose lower part is hidden by a straight lower lid ``lid_below_px`` under the centre.

    The rim is seen from 25 deg above to 30 deg below the horizontal on both sides (picture y points down);
    the rays between meet the lid line instead, inside the circle (lid/iris junctions).
    """
    a_rim = np.r_[np.radians(np.linspace(-25, 30, 8)), np.pi - np.radians(np.linspace(-25, 30, 8))]
    rim = centre + r * np.c_[np.cos(a_rim), np.sin(a_rim)]
    a_lid = np.radians(np.linspace(40, 140, 9))
    d = lid_below_px / np.sin(a_lid)  # where each ray meets the lid line
    lid = centre + d[:, None] * np.c_[np.cos(a_lid), np.sin(a_lid)]
    assert np.all(d < r)  # the junctions lie inside the iris circle
    pts = np.vstack([rim, lid])
    return pts + rng.normal(0, 0.05, pts.shape)


def test_one_sided_weights_ignore_lid_junctions_inside_the_circle():
    rng = np.random.default_rng(4)
    centre, r = np.array([30.2, 25.6]), 10.0
    pts = _rim_and_lid(centre, r, 6.0, rng)
    start = centre + [0.5, -1.0]
    c_sym, _, _ = fit_circle(pts, start, 1.1 * r, r_tol=0.15)
    c_one, r_one, rms = fit_circle(pts, start, 1.1 * r, r_tol=0.15, inside_px=EDGE_NOISE_PX)
    # the symmetric (Huber) fit is pulled up by the junctions (the bias seen on rendered clips looking down):
    # measured 2.6 px too high here
    assert c_sym[1] < centre[1] - 2.0
    # the one-sided fit takes them as lid edges in front of the iris. Measured 0.58 px too high: nine
    # junctions against sixteen rim points still pull a little through the weights' 1 / |res| tail, and the
    # short rim arcs fix the height only weakly
    assert abs(c_one[0] - centre[0]) < 0.1, c_one
    assert centre[1] - 0.7 < c_one[1] < centre[1] + 0.2, c_one
    assert r_one == pytest.approx(r, abs=0.15)
    assert rms < 0.5  # weighted: the junctions hardly count


def test_one_sided_weights_keep_an_outside_outlier_harmless():
    centre, r = np.array([0.0, 0.0]), 5.0
    a = np.linspace(0, 2 * np.pi, 30, endpoint=False)
    pts = np.c_[np.cos(a), np.sin(a)] * r
    pts[0] = [9.0, 0.0]  # an edge outside the iris: still Huber-weighted, one of 30
    c, rr, _ = fit_circle(pts, centre + 0.5, r, inside_px=EDGE_NOISE_PX)
    assert np.allclose(c, centre, atol=0.15) and rr == pytest.approx(r, abs=0.2)


def test_start_radius_is_kept_within_the_bounds():
    rng = np.random.default_rng(1)
    centre, r = np.array([10.0, 10.0]), 6.0
    a = np.linspace(0, 2 * np.pi, 24, endpoint=False)
    pts = centre + r * np.c_[np.cos(a), np.sin(a)] + rng.normal(0, 0.05, (24, 2))
    # a start far outside r0 * (1 +- r_tol) is clipped into it; the fit still converges on the circle
    c, rr, _ = fit_circle(pts, centre + 0.3, r, r_tol=0.15, r_start=3 * r)
    assert np.allclose(c, centre, atol=0.1) and rr == pytest.approx(r, abs=0.1)


def _drawn_eye(centre, r, upper_px, lower_px, size=(90, 64)):
    """Grey picture: skin, an eye opening between two straight lids, a dark iris disc (anti-aliased).

    ``centre`` in aspectus's picture convention (aspectus.schema: pixel i spans [i, i + 1)): each pixel's
    value is taken at its centre, i + 0.5."""
    w, h = size
    yy, xx = np.mgrid[0:h, 0:w].astype(float) + 0.5
    d = np.hypot(xx - centre[0], yy - centre[1])
    iris = np.clip(r - d + 0.5, 0, 1)
    eye = 220.0 * (1 - iris) + 60.0 * iris  # sclera, iris
    opening = np.clip(np.minimum(yy - (centre[1] - upper_px), centre[1] + lower_px - yy) + 0.5, 0, 1)
    opening *= np.abs(xx - centre[0]) < 2.4 * r
    img = 150.0 * (1 - opening) + eye * opening  # skin around the opening
    return np.clip(img, 0, 255).astype(np.uint8)


def test_limbus_centre_with_the_lower_lid_over_the_iris():
    """The eye looking down: both lids cut the iris, and the mesh's lower lid outline lies 3 px too low.

    (Measured on rendered clips: the face mesh's lower lid sits about 3 px below the drawn lid when the eye
    looks down, so the lid/iris junctions pass the 2 px lid margin.)
    """
    centre, r = np.array([45.3, 31.6]), 10.0
    img = _drawn_eye(centre, r, upper_px=8.0, lower_px=6.0)
    pts = lid_line_points(centre, 2.4 * r, 8.0, 6.0 + 3.0)
    iris_px = np.array([centre + [0.8, -1.2], [np.nan, np.nan]])  # the mesh point, off (and too high)
    out, fitted = limbus_centres(img, pts, iris_px, np.array([2.2 * r, np.nan]))
    assert fitted[0] and not fitted[1]
    assert abs(out[0, 0] - centre[0]) < 0.3, out[0]
    # measured 0.6 px too high; the fit with symmetric weights (before the one-sided ones) ended 2.2 px too high
    assert abs(out[0, 1] - centre[1]) < 0.8, out[0]


def test_many_frames_at_once_give_what_each_frame_gives_alone():
    """limbus_centres_many fits all eyes of several frames together; each result is that of its frame alone."""
    from aspectus.webcam.limbus import limbus_centres_many

    items = []
    for k, (r, dx, dy, lower) in enumerate([(10.0, 0.3, -0.2, 6.0), (7.5, -1.1, 0.8, 5.0), (12.5, 0.0, 0.0, 9.0),
                                            (2.0, 0.0, 0.0, 6.0), (9.0, 1.5, 1.0, 4.0)]):
        centre = np.array([45.3 + 0.1 * k, 31.6 - 0.2 * k])
        img = _drawn_eye(centre, r, upper_px=8.0, lower_px=lower)
        pts = lid_line_points(centre, 2.4 * r, 8.0, lower + 3.0)
        # radii differ, so the rays carry different numbers of samples (the batch pads them); the
        # 2 px iris is too small to fit and keeps the mesh point; the left eye is missing throughout
        items.append((img, pts, np.array([centre + [dx, dy], [np.nan, np.nan]]), np.array([2 * r, np.nan])))
    together = limbus_centres_many(items)
    alone = [limbus_centres(*it) for it in items]
    assert len(together) == len(items)
    for (c_t, f_t), (c_a, f_a) in zip(together, alone):
        np.testing.assert_array_equal(f_t, f_a)
        np.testing.assert_allclose(c_t, c_a, atol=1e-9, equal_nan=True)
    fitted = np.array([f[0] for _, f in together])
    assert fitted.tolist() == [True, True, True, False, True]
    assert np.allclose(together[3][0][0], items[3][2][0])  # too small: the mesh point is kept
    assert limbus_centres_many([]) == []


def test_circle_fit_matches_a_reference_robust_least_squares():
    """The symmetric fit is a Huber M-estimate: it must land where scipy.optimize.least_squares does.

    Outside reference: scipy's ``least_squares(loss="huber", f_scale=1)`` on the geometric distances (a
    general-purpose solver; its Huber loss has the same minimiser as the Huber weights used here).
    """
    from scipy.optimize import least_squares

    rng = np.random.default_rng(11)
    centre, r = np.array([20.0, 15.0]), 8.0
    a = rng.uniform(0, 2 * np.pi, 40)
    pts = centre + (r + rng.normal(0, 0.3, 40))[:, None] * np.c_[np.cos(a), np.sin(a)]
    pts[:4] += rng.normal(0, 3.0, (4, 2))  # a few gross outliers
    c, rr, _ = fit_circle(pts, centre + [1.0, -0.8], r, r_tol=0.5, iterations=50)

    def dist(p):
        return np.hypot(pts[:, 0] - p[0], pts[:, 1] - p[1]) - p[2]

    ref = least_squares(dist, x0=[21.0, 14.2, r], loss="huber", f_scale=1.0, xtol=1e-12, ftol=1e-12).x
    assert np.allclose(c, ref[:2], atol=2e-3), (c, ref)
    assert rr == pytest.approx(ref[2], abs=2e-3)


def test_degenerate_point_sets_do_not_raise():
    from aspectus.webcam.limbus import fit_circles

    pts = np.zeros((3, 10, 2))
    pts[1] = np.c_[np.cos(np.linspace(0, 6, 10)), np.sin(np.linspace(0, 6, 10))] * 5  # a proper circle
    pts[2, :, 0] = np.nan  # no usable coordinates
    valid = np.ones((3, 10), bool)
    valid[0] = False  # no points at all
    with np.errstate(all="raise"):  # nothing may warn either
        try:
            c, rr, rms = fit_circles(pts, valid, np.array([[0.5, 0.5], [0.5, 0.5], [0.0, 0.0]]),
                                     np.array([5.0, 5.0, 5.0]), r_tol=0.3)
        except FloatingPointError as exc:  # pragma: no cover - the assertion below explains
            raise AssertionError(f"the fit warned on a degenerate set: {exc}") from None
    assert np.allclose(c[1], [0.0, 0.0], atol=1e-3) and rr[1] == pytest.approx(5.0, abs=1e-3)
    assert np.isnan(rms[0])  # no points: no residual
    assert np.allclose(c[2], [0.0, 0.0]) and np.isnan(rms[2])  # no usable coordinates: the start is kept


def _supersampled_disc(centre, r, size=(64, 48), n=8):
    """Grey picture of a dark disc on a bright ground, each pixel the mean of n x n samples at
    ``(i + (k + 0.5) / n, j + (l + 0.5) / n)``: the disc's area in the pixel, with ``centre`` in aspectus's
    picture convention (pixel i spans [i, i + 1); aspectus.schema), as a camera or the renderer forms it."""
    w, h = size
    s = (np.arange(n) + 0.5) / n
    ys = (np.arange(h)[:, None] + s[None, :]).ravel()
    xs = (np.arange(w)[:, None] + s[None, :]).ravel()
    inside = np.hypot(xs[None, :] - centre[0], ys[:, None] - centre[1]) <= r
    cover = inside.reshape(h, n, w, n).mean(axis=(1, 3))
    return np.clip(np.rint(210.0 - 150.0 * cover), 0, 255).astype(np.uint8)


@pytest.mark.parametrize("centre", [(31.3, 23.7), (32.0, 24.0), (30.5, 22.5), (32.81, 23.14)])
def test_limbus_centre_of_a_disc_at_a_known_sub_pixel_centre(centre):
    """A disc drawn by its area in each pixel at a known centre (aspectus.schema's picture convention, the face
    mesh's and the renderer's) comes back from the limbus fit within 0.1 px of that centre: the fit's
    positions are in the same convention as the mesh point it starts from. (Before the fit's region origin
    was taken at its first pixel's centre, the centres came back 0.5 px up and left.)"""
    centre, r = np.array(centre), 9.0
    img = _supersampled_disc(centre, r)
    pts = np.zeros((478, 3))
    outline = np.array(RIGHT_EYE_OUTLINE)
    a = np.linspace(0, 2 * np.pi, len(outline), endpoint=False)
    pts[outline, 0] = centre[0] + 2.2 * r * np.cos(a)  # the lids' outline well outside the iris
    pts[outline, 1] = centre[1] + 2.2 * r * np.sin(a)
    iris_px = np.array([centre + [0.7, -0.6], [np.nan, np.nan]])  # the mesh point, off
    out, fitted = limbus_centres(img, pts, iris_px, np.array([2.0 * r, np.nan]))
    assert fitted[0]
    assert np.all(np.abs(out[0] - centre) < 0.1), (out[0], centre)


def test_fits_with_and_without_the_side_arc_rule_at_once_give_each_alone():
    """limbus_centres_variants prepares the eye regions once and fits each frame without, with or both ways
    (GazeParams ``side_arcs``); each result is that of its own run, and without the rule it is the fit as
    before (the appearance estimate's labels must not move)."""
    from aspectus.webcam.limbus import limbus_centres_many, limbus_centres_variants

    items = []
    for k, (r, dx, dy, upper, lower) in enumerate([(10.0, 0.3, -0.2, 8.0, 6.0), (12.5, 0.6, 1.2, 6.0, 5.0),
                                                   (9.0, -0.8, 0.9, 4.0, 7.0), (2.0, 0.0, 0.0, 8.0, 6.0)]):
        centre = np.array([45.3 + 0.1 * k, 31.6 - 0.2 * k])
        img = _drawn_eye(centre, r, upper_px=upper, lower_px=lower)
        pts = lid_line_points(centre, 2.4 * r, upper, lower + 3.0)
        items.append((img, pts, np.array([centre + [dx, dy], [np.nan, np.nan]]), np.array([2 * r, np.nan])))
    without, with_ = limbus_centres_variants(items, ["both"] * len(items), diameters=True)
    mixed_plain, mixed_side = limbus_centres_variants(items, ["plain", "side", "both", "plain"], diameters=True)
    assert mixed_plain[1] is None and mixed_side[0] is None and mixed_side[3] is None
    for both, side_arcs in ((without, False), (with_, True)):
        alone = limbus_centres_many(items, diameters=True, side_arcs=side_arcs)
        mixed = mixed_side if side_arcs else mixed_plain
        for f, (got, want) in enumerate(zip(both, alone)):
            for g, w in zip(got, want):
                np.testing.assert_array_equal(g, w)
            if mixed[f] is not None:
                for g, w in zip(mixed[f], want):
                    np.testing.assert_array_equal(g, w)
    for got, want in zip(without, limbus_centres_many(items, diameters=True)):  # the default: no rule
        for g, w in zip(got, want):
            np.testing.assert_array_equal(g, w)
    assert [f[0] for _, f, _ in with_] == [True, True, True, False]  # 2 px: too small, the mesh point kept
    # the drawn lids are straight and the rim round: the two fits agree to a fraction of a pixel
    for (c0, _, _), (c1, _, _) in zip(without, with_):
        assert np.nanmax(np.abs(c0 - c1)) < 0.3
    with pytest.raises(ValueError, match="variants"):
        limbus_centres_variants(items, ["plain"], diameters=True)

