"""The eye anchors on a face with spectacles: a rim crossing a template must not drag the head translation.

The anchors (aspectus.webcam.eye_anchors) follow skin below and beside the eyes by template matching; on a face
with glasses the rendered rims (aspectus.synth.frame, 24 mm in front of the eyeball centres, some 10 mm in front
of that skin) cross those templates, and a plain normalised correlation follows the dark rim, which slides over
the skin by parallax as the head turns: on a 16.3 px dev clip the anchors' offsets from the mesh moved with head
yaw by 0.2-0.5 px/deg more than without glasses, and gaze yaw r fell from 0.986 to 0.810
(docs/notes/gaze-measurement.md). The check is against the renderer's truth (its gaze angles).
"""
from __future__ import annotations

import numpy as np
import pytest

import _gaze_grid as G


def _patch(line_contrast: float, across: bool = True, size: int = 41) -> np.ndarray:
    """A skin-like grey patch (level 180, fine texture) with a 3-px dark line, ``line_contrast`` of the level."""
    rng = np.random.default_rng(0)
    img = 180.0 + 4.0 * rng.standard_normal((size, size))
    y = size // 2 + 6
    x0 = 0 if across else size // 2 - 2
    img[y - 1:y + 2, x0:] -= line_contrast * 180.0
    return np.clip(img, 0, 255).astype(np.uint8)


def test_a_dark_rim_across_the_template_is_seen_a_fold_is_not():
    from aspectus.webcam import eye_anchors as EA

    r = 8.0
    half = int(round(EA.PATCH_RADII * r))
    c = 41 // 2
    # a rim (80 % darker than the skin, as the rendered rims read: 0.78-1.30 of the median grey) crossing it
    assert EA.crossed_by_rim(_patch(0.8), c, c, half, r)
    # a fold 40 % darker (the darkest lines crossing a template without glasses read 0.50-0.57), a short dark
    # mark that does not cross the template (an eye's corner) and plain skin: matched as before
    assert not EA.crossed_by_rim(_patch(0.4), c, c, half, r)
    assert not EA.crossed_by_rim(_patch(0.8, across=False), c, c, half, r)
    assert not EA.crossed_by_rim(_patch(0.0), c, c, half, r)


def test_noise_in_a_dark_picture_is_not_a_rim():
    """The contrasts are fractions of the grey level; in a dark, noisy picture the noise alone exceeds them. Before
    the noise bound (LINE_NOISE_SDS) a uniform grey of 20 with noise SD 5 was read as crossed in 41 of 50 boxes
    and a grey of 10 with SD 3 in 50 of 50, so no anchor there was ever matched."""
    from aspectus.webcam import eye_anchors as EA

    r, size = 5.0, 41
    half, c = int(round(EA.PATCH_RADII * r)), size // 2
    for level, sd in ((10, 2), (10, 3), (20, 5)):
        flagged = sum(EA.crossed_by_rim(np.clip(level + sd * np.random.default_rng(k).standard_normal((size, size)),
                                                0, 255).astype(np.uint8), c, c, half, r) for k in range(50))
        assert flagged <= 2, (level, sd, flagged)
    # a rim well above the noise in a dim picture is still seen (grey 40, SD 5, the rim 32 darker: 6 SDs)
    seen = 0
    for k in range(20):
        img = 40.0 + 5.0 * np.random.default_rng(100 + k).standard_normal((size, size))
        img[c + 2:c + 5] -= 32.0
        seen += EA.crossed_by_rim(np.clip(img, 0, 255).astype(np.uint8), c, c, half, r)
    assert seen >= 18


def test_a_template_on_a_rim_is_not_matched():
    from aspectus.webcam import eye_anchors as EA

    # two frames of a skin patch with a rim; in the second the rim has slid 2 px down over the still skin
    rng = np.random.default_rng(1)
    skin = 180.0 + 6.0 * rng.standard_normal((80, 80))
    import cv2

    skin = cv2.GaussianBlur(skin, (0, 0), 1.0)
    a, b = skin.copy(), skin.copy()
    a[44:47] -= 150.0
    b[46:49] -= 150.0
    a, b = (np.clip(x, 0, 255).astype(np.uint8) for x in (a, b))
    pts = np.zeros((468, 2))
    tr = EA.EyeAnchorTracker((229,))
    pts[229] = (40.0, 40.0)
    tr.update(a, pts, 8.0)
    assert tr.on_rim[0]
    out = tr.update(b, pts, 8.0)
    # a plain match follows the rim down; the template is left unmatched and the point stays put
    assert not tr.last_matched[0] and np.allclose(out[0], (40.0, 40.0))
    plain = EA.EyeAnchorTracker((229,))
    old = EA.RIM_CONTRAST
    try:
        EA.RIM_CONTRAST = np.inf  # the rule off: what the tracker did before
        plain.update(a, pts, 8.0)
        moved = plain.update(b, pts, 8.0)
    finally:
        EA.RIM_CONTRAST = old
    assert plain.last_matched[0] and moved[0, 1] - 40.0 > 1.0


def _skin(size=41, level=180.0, seed=0) -> np.ndarray:
    """A skin-like grey picture (level 180, fine texture), float."""
    return level + 4.0 * np.random.default_rng(seed).standard_normal((size, size))


def _u8(img):
    return np.clip(img, 0, 255).astype(np.uint8)


def test_a_rim_is_seen_at_the_picture_edge_and_plain_skin_is_not():
    """A template whose box lies at the picture's edge (the eye crop's edge, often) with part of the margin the
    top-hat reads outside it: the rule is read on the part inside, so a rim crossing such a box is seen as in the
    middle of the picture, and plain skin, a fold and noise in a dark picture are not."""
    from aspectus.webcam import eye_anchors as EA

    r, size = 8.0, 41
    half = int(round(EA.PATCH_RADII * r))
    lo, hi = half, size - 1 - half  # box centres whose box touches the edge (its margin is outside)
    for xi, yi in ((lo, lo), (hi, lo), (lo, hi), (hi, hi), (lo, size // 2), (size // 2, hi)):
        for seed in range(3):
            # a horizontal rim (80 % darker than the skin) 2 px below the box centre, and a vertical one (a frame's
            # side) 2 px beside it
            across = _skin(seed=seed)
            across[yi + 1:yi + 4] -= 0.8 * 180.0
            down = _skin(seed=seed)
            down[:, xi + 1:xi + 4] -= 0.8 * 180.0
            assert EA.crossed_by_rim(_u8(across), xi, yi, half, r), (xi, yi, seed)
            assert EA.crossed_by_rim(_u8(down), xi, yi, half, r), (xi, yi, seed)
            # plain skin, a fold 40 % darker and a dark picture's noise (grey 20, SD 5): not a rim
            fold = _skin(seed=seed)
            fold[yi + 1:yi + 4] -= 0.4 * 180.0
            dark = 20.0 + 5.0 * np.random.default_rng(50 + seed).standard_normal((size, size))
            for img in (_skin(seed=seed), fold, dark):
                assert not EA.crossed_by_rim(_u8(img), xi, yi, half, r), (xi, yi, seed)
    # a box with none of it inside the picture is not crossed
    assert not EA.crossed_by_rim(_u8(_skin()), -half - 1, 20, half, r)


def test_a_template_on_a_rim_at_the_picture_edge_is_not_matched():
    from aspectus.webcam import eye_anchors as EA

    # as in test_a_template_on_a_rim_is_not_matched, the point 9 or 10 px from the picture's left edge (iris radius
    # 8 px: template box half-width 6, search 3 px, the top-hat's margin 5 px): the match's window is inside the
    # picture, the margin is not
    rng = np.random.default_rng(1)
    import cv2

    skin = cv2.GaussianBlur(180.0 + 6.0 * rng.standard_normal((80, 80)), (0, 0), 1.0)
    a, b = skin.copy(), skin.copy()
    a[44:47] -= 150.0
    b[46:49] -= 150.0
    for x in (9.0, 10.0):
        pts = np.zeros((468, 2))
        pts[229] = (x, 40.0)
        tr = EA.EyeAnchorTracker((229,))
        tr.update(_u8(a), pts, 8.0)
        assert tr.on_rim[0], x
        out = tr.update(_u8(b), pts, 8.0)
        assert not tr.last_matched[0] and np.allclose(out[0], (x, 40.0)), x
        # plain skin at the same place is matched
        plain = EA.EyeAnchorTracker((229,))
        plain.update(_u8(skin), pts, 8.0)
        assert not plain.on_rim[0]
        plain.update(_u8(skin), pts, 8.0)
        assert plain.last_matched[0], x


@pytest.mark.slow
def test_glasses_clip_yaw_follows_the_truth(lund_dir, tmp_path):
    # the dev clip the rule was worked out on ("a16g" in the notes; not a grid cell): 1280 x 720 at 800 mm (iris
    # 16.3 px), CRF 28, lids following, lighting drift, head drift and turns, spectacles, mirrored picture
    cond = G.Condition("glasses", size_px=(1280, 720), distance_mm=800.0, glasses=True, mirror=True,
                       face="astronaut", trial="TH34_img_Europe", duration_s=6.0, seed=11)
    row = G.run_condition(cond, tmp_path, lund_dir, variants={"default": {}})[0]
    # measured: yaw r 0.810 / gain 0.97 before the rim rule, 0.965 / 1.04 with it (0.986 / 0.99 on the same clip
    # without glasses). Issue 15's floor (|r| >= 0.95 with gain 0.85-1.15) is met here but not on every glasses
    # clip (docs/notes/gaze-measurement.md).
    assert row["yaw_r"] >= 0.93
    assert 0.85 <= row["yaw_gain"] <= 1.15
