"""The grid's true iris centres on a mirrored clip are in the pipeline's eye order.

The pipeline's iris centres follow the face mesh's eye order (its right eye first), which on a mirrored picture
is the subject's left eye (aspectus.webcam.gaze.unmirror); the renderer's truth names the subject's eyes. Put in
the subject's order, the "true iris" re-estimate of a mirrored grid cell (bench/bench_gaze_grid.py's glasses and
mirror cell) swapped the eyes: about 84 px off at 16.5 px iris, yaw r -0.22 against the truth instead of 0.85.
The check is against the renderer's own projection of the iris centres (aspectus.synth.render's truth file).
"""
from __future__ import annotations

import numpy as np
import pytest

import _gaze_grid as G

pytestmark = pytest.mark.slow


@pytest.mark.parametrize("mirror", [True, False])
def test_true_iris_centres_match_the_pipelines_eyes(lund_dir, tmp_path, mirror):
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    cond = G.Condition("m" if mirror else "u", size_px=(640, 480), distance_mm=550.0, mirror=mirror,
                       duration_s=1.0, seed=3)
    res, _ = G.render_condition(cond, tmp_path, lund_dir)
    with G.gaze_inputs() as kw:
        extract_samples(res.path, params=ProcessParams(gaze=GazeParams(mirrored=mirror)))
    est = np.asarray(kw["iris_px"], float)
    # frames without a limbus fit are marked missing (the gaze estimate bridges them): the mesh's point there
    est = np.where(np.isfinite(est), est, np.asarray(kw["iris_mesh_px"], float))
    true = G.true_iris_px(res.truth, mirrored=mirror)
    err = np.linalg.norm(est - true, axis=2)  # (N, 2) px, per eye
    ok = np.isfinite(err).all(axis=1)
    assert ok.sum() >= 20
    # each eye within 2 px (the localiser's error at 12 px is a fraction of a pixel to ~1 px, notes) - an eye
    # swap is about 60 px off at this size
    assert np.median(err[ok], axis=0).max() < 2.0
    # the pipeline's first eye is the face mesh's right eye: the picture's left one, mirrored or not
    assert np.median(true[ok, 0, 0]) < np.median(true[ok, 1, 0])
