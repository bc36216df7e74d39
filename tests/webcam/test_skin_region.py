"""The head's picture placement from a masked region of skin (``eye_anchor_set="skin_region"``) and from the anchors.

Synthetic pictures with a known shift (the registration must find it, whatever the mesh's points do, and must not
see what moves inside the eye openings), then a rendered classroom-scale clip (aspectus.synth; the renderer's head
origin is the truth) on which the head placement's error is measured for the default small-face set and the two
sets measured against it (docs/notes/gaze-measurement.md, "The head's placement at classroom scale").
"""
from __future__ import annotations

import numpy as np
import pytest

from aspectus.face_mesh import LEFT_EYE_OUTLINE, RIGHT_EYE_OUTLINE
from aspectus.webcam.skin_region import REGION_POINTS, SkinRegionTracker


def _texture(shape=(200, 320), seed=0):
    """A smooth random texture (skin-like: blobs a few pixels wide), float RGB."""
    from scipy.ndimage import gaussian_filter

    rng = np.random.default_rng(seed)
    g = gaussian_filter(rng.normal(size=shape), 2.0)
    g = (g - g.min()) / (g.max() - g.min())
    return np.repeat((40 + 180 * g)[..., None], 3, axis=2)


def _shifted(img, dx, dy):
    from scipy.ndimage import shift

    return np.stack([shift(img[..., c], (dy, dx), order=3, mode="nearest") for c in range(3)], axis=2)


EYES = ((130.0, 90.0), (200.0, 90.0))  # eye centres (px); an eye opening 24 x 10 px, iris radius 5 px


def _points(dx=0.0, dy=0.0) -> np.ndarray:
    """Face-mesh points: both eye outlines as ellipses, the region's points below, beside and between the eyes."""
    pts = np.zeros((478, 3))
    for (cx, cy), outline in zip(EYES, (RIGHT_EYE_OUTLINE, LEFT_EYE_OUTLINE)):
        a = np.linspace(0, 2 * np.pi, len(outline), endpoint=False)
        pts[list(outline), 0] = cx + 12 * np.cos(a)
        pts[list(outline), 1] = cy + 5 * np.sin(a)
    xy = {229: (120, 102), 230: (130, 103), 231: (140, 102), 449: (210, 102), 450: (200, 103), 451: (190, 102),
          117: (112, 110), 118: (122, 112), 119: (134, 112), 346: (218, 110), 347: (208, 112), 348: (196, 112),
          226: (112, 92), 35: (108, 95), 446: (218, 92), 265: (222, 95), 6: (165, 92), 168: (165, 84),
          197: (165, 100)}
    assert set(xy) == set(REGION_POINTS)
    for j, (x, y) in xy.items():
        pts[j, :2] = (x, y)
    pts[:, 0] += dx
    pts[:, 1] += dy
    return pts


def _with_irises(img, dx, dy):
    """Dark iris discs in both eye openings, moved by (dx, dy) px from the eye centres."""
    out = img.copy()
    yy, xx = np.mgrid[:img.shape[0], :img.shape[1]]
    for cx, cy in EYES:
        out[np.hypot(xx - cx - dx, yy - cy - dy) < 5] = 20.0
    return out


def test_the_region_follows_the_picture_not_the_mesh():
    base = _with_irises(_texture(), 0, 0)
    tr = SkinRegionTracker()
    first = tr.update(base.round().astype(np.uint8), _points(), 5.0)  # cuts the key frame
    np.testing.assert_allclose(first, _points()[list(REGION_POINTS), :2])
    # the skin moves by (1.3, -0.6) px while the mesh's points move by (3, 2) px: the region follows the skin
    moved = _shifted(base, 1.3, -0.6).round().astype(np.uint8)
    got = tr.update(moved, _points(3.0, 2.0), 5.0)
    np.testing.assert_allclose(got, _points()[list(REGION_POINTS), :2] + [1.3, -0.6], atol=0.05)
    assert tr.registered == 1 and tr.failed == 0


def test_what_moves_inside_the_eye_openings_does_not_move_the_region():
    skin = _texture(seed=3)
    tr = SkinRegionTracker()
    tr.update(_with_irises(skin, 0, 0).round().astype(np.uint8), _points(), 5.0)
    # the irises move by 3 px down and 2 px sideways, the skin stays: the region stays (the eyes are masked out)
    got = tr.update(_with_irises(skin, 2.0, 3.0).round().astype(np.uint8), _points(), 5.0)
    np.testing.assert_allclose(got, _points()[list(REGION_POINTS), :2], atol=0.02)
    # without the mask (no eye openings left out, the whole box used) the same step is read as skin motion
    import aspectus.webcam.skin_region as SR

    unmasked = SkinRegionTracker()
    unmasked._eyes = ()
    keep = SR.HULLS
    try:
        SR.HULLS = ()
        unmasked.update(_with_irises(skin, 0, 0).round().astype(np.uint8), _points(), 5.0)
        moved = unmasked.update(_with_irises(skin, 2.0, 3.0).round().astype(np.uint8), _points(), 5.0)
    finally:
        SR.HULLS = keep
    assert np.abs(moved - _points()[list(REGION_POINTS), :2]).max() > 0.1


def test_a_failed_registration_keeps_the_last_shift():
    base = _texture(seed=5)
    tr = SkinRegionTracker()
    tr.update(base.round().astype(np.uint8), _points(), 5.0)
    held = tr.update(_shifted(base, 0.7, 0.4).round().astype(np.uint8), _points(), 5.0)
    flat = np.full(base.shape, 128, np.uint8)  # nothing to register on (a hand in front of the face)
    np.testing.assert_allclose(tr.update(flat, _points(), 5.0), held)
    assert tr.failed == 1


def _fine_texture(seed, sigma=0.7, shape=(200, 320)):
    """A random texture finer than the skin's (blobs about a pixel wide), float RGB."""
    from scipy.ndimage import gaussian_filter

    g = gaussian_filter(np.random.default_rng(seed).normal(size=shape), sigma)
    g = (g - g.min()) / (g.max() - g.min())
    return np.repeat((40 + 180 * g)[..., None], 3, axis=2)


def test_a_registration_that_does_not_converge_is_a_miss():
    # something else in front of the region (a hand, hair: another texture, nothing of the key frame's skin), and a
    # fine texture moved by 4 px, beyond the reach of its gradients: the iteration wanders and has not settled
    # within its MAX_STEPS steps. Such a frame is a miss (the last shift kept, counted in ``failed`` and so in
    # run.json's eye_anchor_region_frac), not a registered frame with a shift from wherever the steps stopped.
    unsettled = 0
    for seed in range(6):
        tr = SkinRegionTracker()
        tr.update(_texture(seed=seed).round().astype(np.uint8), _points(), 5.0)
        got = tr.update(_texture(seed=100 + seed).round().astype(np.uint8), _points(), 5.0)
        assert (tr.registered, tr.failed) == (0, 1), seed
        np.testing.assert_allclose(got, _points()[list(REGION_POINTS), :2])
        unsettled += tr.unconverged
    assert unsettled >= 3  # most of them by the step limit (5 of 6 when written), the rest by the shift limit
    for seed in (0, 2):
        base = _fine_texture(seed)
        tr = SkinRegionTracker()
        tr.update(base.round().astype(np.uint8), _points(), 5.0)
        got = tr.update(_shifted(base, 4.0, 0.0).round().astype(np.uint8), _points(), 5.0)
        assert (tr.registered, tr.failed, tr.unconverged) == (0, 1, 1), seed
        np.testing.assert_allclose(got, _points()[list(REGION_POINTS), :2])
    # the same fine texture moved by 2 px is within reach: registered, to the shift
    base = _fine_texture(0)
    tr = SkinRegionTracker()
    tr.update(base.round().astype(np.uint8), _points(), 5.0)
    got = tr.update(_shifted(base, 2.0, 0.0).round().astype(np.uint8), _points(), 5.0)
    assert (tr.registered, tr.failed) == (1, 0)
    np.testing.assert_allclose(got, _points()[list(REGION_POINTS), :2] + [2.0, 0.0], atol=0.05)


def test_the_convergence_step_is_the_finest_shift_the_warp_resolves():
    # OpenCV's bilinear warpAffine puts its samples on a 1/32 px grid (INTER_BITS = 5; OpenCV imgproc
    # documentation): a shift of 0.01 px leaves the warped picture unchanged, 0.05 px does not. A stopping step
    # below that grid could be met only by chance (docs/notes/gaze-measurement.md).
    import aspectus.webcam.skin_region as SR
    from aspectus._env import import_cv2

    cv2 = import_cv2()
    g = _texture(seed=1)[..., 0].astype(np.float32)

    def warp(dx):
        M = np.array([[1.0, 0.0, 40.0 + dx], [0.0, 1.0, 40.0]])
        return cv2.warpAffine(g, M, (60, 40), flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP)

    assert np.array_equal(warp(0.01), warp(0.0))
    assert not np.array_equal(warp(0.05), warp(0.0))
    assert SR.STOP_STEP_PX >= 1 / 32


# --- the head placement against the renderer's truth on a rendered classroom-scale clip -----------------------


@pytest.fixture(scope="module")
def placements(lund_dir, tmp_path_factory):
    """One 4-s clip (640 x 480 H.264 CRF 28 at 78 cm: iris 8.5 px, astronaut face, lids following, lighting drift,
    head drift and rotation; eyes following hand-coded trial UL43 of ../shared/reference/lund2013, a trial and
    seed no other test uses), processed with each placement: the head origin's picture-position error (mm at the
    true depth, after the clip's median; bench/bench_head_translation.py) per setting."""
    import _gaze_grid as G

    from aspectus.webcam.gaze import GazeParams, smooth_pose
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    cond = G.Condition("placement", size_px=(640, 480), distance_mm=780.0, trial="UL43_img_Rome", face="astronaut",
                       seed=22, duration_s=4.0)
    res, _ = G.render_condition(cond, tmp_path_factory.mktemp("placement"), lund_dir)
    tru = res.truth[["head_x_mm", "head_y_mm", "head_z_mm"]].to_numpy()
    out = {"iris_px": float(res.truth["iris_diameter_px"].median())}
    for name, gaze in (("mesh", {"eye_anchors": False}), ("auto", {}),
                       ("below_low_cheeks_and_beside", {"eye_anchor_set": "below_low_cheeks_and_beside"}),
                       ("skin_region", {"eye_anchor_set": "skin_region"})):
        with G.gaze_inputs() as cap:
            _, meta = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(**gaze)))
        _, t = smooth_pose(cap["R"], cap["t"], cap["found"], cap["t_s"], 300.0)
        e = (t[:, :2] / t[:, 2:3] - tru[:, :2] / tru[:, 2:3]) * tru[:, 2:3]
        ok = cap["found"] & np.isfinite(e).all(axis=1)
        out[name] = (e[ok] - np.median(e[ok], axis=0)).std(axis=0)
        out[name + "_used"] = meta["gaze_model"]["eye_anchor_set"]["used"]
        out[name + "_region_frac"] = meta["eye_anchor_region_frac"]
    return out


@pytest.mark.slow
def test_the_head_placement_at_classroom_scale_against_the_renderer(placements):
    # guards at the levels reached on this clip (SD sideways / vertical, mm), iris drawn by pixel area (the
    # renderer's default since 2026-12-05): the default small-face set (below_and_beside) 0.60 / 0.17; the face
    # mesh's PnP translation 0.10 / 0.35 - on the astronaut face at 8.5 px the mesh errs less sideways, as on the
    # clips of bench/bench_head_translation.py (docs/notes/gaze-measurement.md). On point-sampled irises 0.36 / 0.37
    # and 0.17 / 0.39: the same picture change reshuffles the error draw by draw, with no direction over three
    # draws (notes, "The renderer's aliased small irises")
    p = placements
    assert 8.0 <= p["iris_px"] <= 9.0
    assert p["auto_used"] == "below_and_beside"
    assert p["auto"][0] <= 0.7 and p["auto"][1] <= 0.3
    assert p["mesh"][0] <= 0.2 and p["mesh"][1] <= 0.45


@pytest.mark.slow
def test_the_sets_measured_against_the_default_small_face_set_stay_at_their_levels(placements):
    # neither won on a clear majority of held-out clips (docs/notes/gaze-measurement.md); guarded at the levels
    # reached here (SD sideways / vertical, mm), iris drawn by pixel area: below_low_cheeks_and_beside 0.64 / 0.23,
    # skin_region 0.42 / 0.43 (the default set 0.60 / 0.17); on point-sampled irises 0.34 / 0.32 and 0.40 / 0.29
    # (0.36 / 0.37)
    p = placements
    assert p["below_low_cheeks_and_beside_used"] == "below_low_cheeks_and_beside"
    assert p["skin_region_used"] == "skin_region"
    # run.json says how often the region was registered (the other sets have no region)
    assert p["skin_region_region_frac"] >= 0.8, p["skin_region_region_frac"]
    assert p["below_low_cheeks_and_beside_region_frac"] is None and p["auto_region_frac"] is None
    assert p["below_low_cheeks_and_beside"][0] <= 0.75 and p["below_low_cheeks_and_beside"][1] <= 0.35
    assert p["skin_region"][0] <= 0.5 and p["skin_region"][1] <= 0.5


def test_the_eye_crop_covers_the_points_of_the_chosen_set_and_no_more_for_the_others():
    from aspectus.face_mesh import LEFT_IRIS_CENTRE, LEFT_IRIS_RING, RIGHT_IRIS_CENTRE, RIGHT_IRIS_RING
    from aspectus.webcam.eye_anchors import ANCHOR_SETS, anchor_radius_px, anchor_reach_px
    from aspectus.webcam.frame_geometry import eye_crop_box

    pts = _points()
    for (cx, cy), c, ring in zip(EYES, (RIGHT_IRIS_CENTRE, LEFT_IRIS_CENTRE), (RIGHT_IRIS_RING, LEFT_IRIS_RING)):
        pts[c, :2] = (cx, cy)
        pts[list(ring), :2] = [(cx + 5, cy), (cx, cy - 5), (cx - 5, cy), (cx, cy + 5)]
    size = (640, 480)
    reach = anchor_reach_px(anchor_radius_px([10.0, 10.0]))
    for name in ("skin_region", "below_low_cheeks_and_beside"):
        x0, y0, x1, y1 = eye_crop_box(pts, size, anchor_set=name)
        p = pts[list(ANCHOR_SETS[name]), :2]
        assert (p[:, 0] - reach >= x0 - 1).all() and (p[:, 0] + reach <= x1).all()
        assert (p[:, 1] - reach >= y0 - 1).all() and (p[:, 1] + reach <= y1).all()
    # the other settings cut one crop (so "auto" reads the pixels its set reads alone), smaller than skin_region's
    boxes = {name: eye_crop_box(pts, size, anchor_set=name) for name in (None, "auto", "below", "below_and_beside")}
    assert len(set(boxes.values())) == 1
    x0, y0, x1, y1 = boxes[None]
    X0, Y0, X1, Y1 = eye_crop_box(pts, size, anchor_set="skin_region")
    assert (x1 - x0) * (y1 - y0) < (X1 - X0) * (Y1 - Y0)
