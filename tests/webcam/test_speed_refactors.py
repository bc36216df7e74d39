"""Speed refactors change no number: the samples table of a demo clip, computed with the refactored code and
with the code as it was before (tests/_geometry_reference.py: verbatim copies), is the same to the last bit.

The demo clip (sample_clips/linden_brook_p02_s01.mp4, 12 s of 720p) is decoded and landmarked in each run on
this machine, so the comparison holds whatever the face mesh's numbers on another CPU.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import _geometry_reference as ref
from aspectus.atomic import HashingReader
from aspectus.webcam import limbus
from aspectus.webcam.eye_anchors import EyeAnchorTracker
from aspectus.webcam.frame_geometry import _BATCH, FrameGeometry, frame_item
from aspectus.webcam.landmarks import FaceTracker
from aspectus.webcam.pipeline import ProcessParams, extract_samples
from aspectus.webcam.video import iter_frames

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def demo_clip(repo_root):
    return repo_root / "sample_clips" / "linden_brook_p02_s01.mp4"


def _use_reference(monkeypatch) -> None:
    monkeypatch.setattr(limbus, "_fit_many", ref.fit_many)
    monkeypatch.setattr(EyeAnchorTracker, "update", ref.anchors_update)


def test_geometry_rows_are_those_of_the_reference_code(demo_clip, monkeypatch):
    p = ProcessParams()
    with FaceTracker(max_faces=p.max_faces, face=p.face) as tracker:
        items = [frame_item(fr.pts_s, fr.image, obs, refine_iris=True, faces_in_view=tracker.faces_in_view)
                 for fr in iter_frames(demo_clip) for obs in [tracker.process(fr.image)]]

    def rows():
        geo = FrameGeometry(fov_deg=p.fov_deg, refine_iris=True, eye_anchors=True)
        out = np.concatenate([geo.rows(items[i:i + _BATCH]) for i in range(0, len(items), _BATCH)])
        return out, geo.state()

    fast, fast_state = rows()
    _use_reference(monkeypatch)
    slow, slow_state = rows()
    assert len(fast) == 360 and np.isfinite(fast[:, 15:19]).mean() > 0.9  # a real run: irises measured
    assert fast_state["anchor_matches"] > 1000  # the anchors were followed, not just cut
    np.testing.assert_array_equal(fast, slow)
    assert {k: v for k, v in fast_state.items() if k != "K"} == {k: v for k, v in slow_state.items() if k != "K"}


def test_samples_table_is_that_of_the_reference_code(demo_clip, monkeypatch):
    """As the process command runs it (the clip hashed while decoded), against the code as it was (the clip
    decoded by path, the geometry's reference copies)."""
    p = ProcessParams()
    with HashingReader(demo_clip) as reader:
        fast, _ = extract_samples(demo_clip, params=p, stages="serial", source=reader)
    _use_reference(monkeypatch)
    slow, _ = extract_samples(demo_clip, params=p, stages="serial")
    assert fast["valid"].mean() > 0.8
    pd.testing.assert_frame_equal(fast, slow, check_exact=True)
