"""The default ``GazeParams(iris_combine="auto")``: the appearance estimate of the iris height on small irises,
the limbus fit on large ones and wherever the appearance estimate cannot run, recorded in run.json.

The rule's threshold (17.3 px, the geometric middle of 12 and 25 px) sits between the iris sizes where the
appearance estimate was measured to help and not to (docs/notes/gaze-measurement.md); the clips here are
rendered (aspectus.synth) at sizes well on either side of it: 640 x 360 at 60 cm (about 11 px) and
1280 x 720 at 60 cm (about 22 px). The sizes read are the face mesh's, as the pipeline reads them.
"""
from __future__ import annotations

import json

import numpy as np
import pytest


def _choice(out_dir, clip):
    run = json.loads((out_dir / clip.stem / "run.json").read_text())
    return run["extraction"]["gaze_model"], run["params"]["gaze"]


def test_the_default_is_auto_and_the_setting_is_checked():
    from aspectus.errors import ParameterError
    from aspectus.webcam.gaze import AUTO_APPEARANCE_BELOW_PX, GazeParams

    assert GazeParams().iris_combine == "auto"
    # between the 12 px where the appearance estimate helped and the 25 px where it did not
    assert 12.0 < AUTO_APPEARANCE_BELOW_PX < 25.0
    assert AUTO_APPEARANCE_BELOW_PX == pytest.approx(np.sqrt(12.0 * 25.0), abs=0.05)
    # "auto" needs nothing: it falls back; "appearance" asked for explicitly still needs its inputs
    assert GazeParams(iris_combine="auto", refine_iris=False).iris_combine == "auto"
    assert GazeParams(iris_combine="auto", eye_anchors=False).iris_combine == "auto"
    with pytest.raises(ParameterError, match="needs refine_iris and eye_anchors"):
        GazeParams(iris_combine="appearance", refine_iris=False)
    with pytest.raises(ParameterError, match="auto, limbus, rescale, fuse, appearance"):
        GazeParams(iris_combine="automatic")
    for v in ("limbus", "rescale", "fuse", "appearance"):
        assert GazeParams(iris_combine=v).iris_combine == v


def test_patch_file_gives_back_the_rows_in_blocks(tmp_path):
    from aspectus.webcam.iris_appearance import PATCH_BYTES, PATCH_SIZE
    from aspectus.webcam.pipeline import _PatchFile

    rng = np.random.default_rng(3)
    rows = rng.integers(0, 256, size=(2500, PATCH_BYTES), dtype=np.uint8)
    f = _PatchFile(PATCH_BYTES)
    for r in rows:
        f.append(r)
    W, H = PATCH_SIZE
    assert len(f) == 2500
    assert np.array_equal(f[1000:2100], rows[1000:2100].reshape(-1, 2, H, W))
    assert np.array_equal(f[2400:2500], rows[2400:].reshape(-1, 2, H, W))  # rows still in the write buffer
    f.clear()
    assert len(f) == 0 and f[0:10].shape == (0, 2, H, W)
    f.close()


@pytest.mark.slow
def test_auto_takes_the_appearance_estimate_on_a_small_iris(rendered_clip, tmp_path):
    from aspectus.webcam.pipeline import process_clip

    clip = rendered_clip(duration_s=10.0, seed=21, size_px=(640, 360), name="p21_s01.mp4").path
    process_clip(clip, tmp_path / clip.stem)
    gm, gaze = _choice(tmp_path, clip)
    c = gm["iris_estimate"]
    assert gaze["iris_combine"] == "auto"
    assert c["used"] == "appearance", c
    assert c["median_iris_px"] < c["threshold_px"] and c["first_frames_median_iris_px"] < c["threshold_px"]
    assert 9.0 <= c["median_iris_px"] <= 13.0  # 11.7 mm at 60 cm through a 60 deg lens 640 px wide: 10.8 px
    assert "below" in c["reason"]
    assert any(gm["iris_appearance"]["blocks"][0][e]["fitted"] for e in ("right", "left"))
    verdict = json.loads((tmp_path / clip.stem / "run.json").read_text())["quality"]["verdict"]
    assert "eyes' own appearance" in verdict  # the clip's verdict says how its iris height was read


@pytest.mark.slow
def test_auto_keeps_the_limbus_fit_and_no_patches_on_a_large_iris(rendered_clip, tmp_path):
    from aspectus.webcam.pipeline import AUTO_DECIDE_FRAMES, process_clip

    clip = rendered_clip(duration_s=6.0, seed=22, size_px=(1280, 720), name="p22_s01.mp4").path
    process_clip(clip, tmp_path / clip.stem)
    gm, _ = _choice(tmp_path, clip)
    c = gm["iris_estimate"]
    assert c["used"] == "limbus", c
    assert c["first_frames_median_iris_px"] >= c["threshold_px"]  # about 22 px
    assert c["first_frames"] == AUTO_DECIDE_FRAMES
    assert "appearance" not in json.loads((tmp_path / clip.stem / "run.json").read_text())["quality"]["verdict"]
    assert "no eye patches kept" in c["reason"]
    assert "iris_appearance" not in gm


@pytest.mark.slow
def test_auto_falls_back_to_the_limbus_fit_where_appearance_cannot_run(rendered_clip, tmp_path):
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    # 3 s at about 11 px: the regression needs 150 open-eye frames with a limbus fit per eye, and 90 are recorded
    clip = rendered_clip(duration_s=3.0, seed=23, size_px=(640, 360), name="p23_s01.mp4").path
    s_auto, meta = extract_samples(clip)
    c = meta["gaze_model"]["iris_estimate"]
    assert c["used"] == "limbus" and "not fitted" in c["reason"], c
    assert "iris_appearance" not in meta["gaze_model"]
    s_limbus, _ = extract_samples(clip, params=ProcessParams(gaze=GazeParams(iris_combine="limbus")))
    np.testing.assert_allclose(s_auto["pitch_deg"], s_limbus["pitch_deg"], equal_nan=True)
    # without the eye picture (refine_iris off) it falls back without an error and says why
    _, meta = extract_samples(clip, params=ProcessParams(gaze=GazeParams(refine_iris=False)))
    c = meta["gaze_model"]["iris_estimate"]
    assert c["used"] == "face mesh" and "refine_iris" in c["reason"], c


@pytest.mark.slow
def test_on_a_large_iris_the_geometry_stops_sampling_patches_after_the_first_frames(rendered_clip, monkeypatch):
    """The per-frame geometry settles by the same rule as the pipeline (aspectus.webcam.iris_appearance.small_iris)
    and samples no patches past the deciding frames; in a child process (the argument passed on) the samples
    are the same as in a thread."""
    from aspectus.webcam import iris_appearance
    from aspectus.webcam.pipeline import AUTO_DECIDE_FRAMES, extract_samples

    clip = rendered_clip(duration_s=6.0, seed=22, size_px=(1280, 720), name="p22_s01.mp4").path
    calls = []
    orig = iris_appearance.EyePatchSampler.sample

    def counting(self, *a, **kw):
        calls.append(1)
        return orig(self, *a, **kw)

    monkeypatch.setattr(iris_appearance.EyePatchSampler, "sample", counting)
    s_thread, meta = extract_samples(clip, geometry_mode="thread")
    assert meta["gaze_model"]["iris_estimate"]["used"] == "limbus"
    assert 0 < len(calls) <= AUTO_DECIDE_FRAMES < len(s_thread)
    s_proc, meta = extract_samples(clip, geometry_mode="process")
    assert meta["geometry_ran_in"] == "process" and meta["gaze_model"]["iris_estimate"]["used"] == "limbus"
    np.testing.assert_allclose(s_proc["pitch_deg"], s_thread["pitch_deg"], equal_nan=True)
