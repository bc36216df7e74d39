"""Speed refactors change no number: the samples table of a demo clip, computed with the refactored code and
with the code as it was before (tests/_geometry_reference.py: verbatim copies), is the same to the last bit.

The same for the cuts outside the geometry: the face mesh called on its graph directly with the picture by
reference (aspectus.webcam.landmarks: ``mesh_input``, ``_GraphCall``) against MediaPipe's public ``process``
with its own copy of the picture, and the decoder reading a frame's side data only where it can hold a
display matrix (aspectus.webcam.video: ``_Upright``) against reading it on every frame; and every output
table of the ``process`` command with all of these against all of them switched off.

The demo clip (sample_clips/linden_brook_p02_s01.mp4, 12 s of 720p) is decoded and landmarked in each run on
this machine, so the comparison holds whatever the face mesh's numbers on another CPU.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import _geometry_reference as ref
from aspectus.atomic import HashingReader
from aspectus.webcam import landmarks, limbus, video
from aspectus.webcam.eye_anchors import EyeAnchorTracker
from aspectus.webcam.frame_geometry import _BATCH, FrameGeometry, frame_item
from aspectus.webcam.landmarks import FaceTracker
from aspectus.webcam.pipeline import ProcessParams, extract_samples, process_clip
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


def _mesh_as_mediapipe_documents_it(monkeypatch) -> None:
    """The face mesh through MediaPipe's public ``process``, which copies the (writeable) picture."""
    monkeypatch.setattr(landmarks, "DIRECT_GRAPH_CALLS", False)
    monkeypatch.setattr(landmarks, "mesh_input", lambda image: image)


def _side_data_of_every_frame(monkeypatch) -> None:
    """The decoder reading each frame's side data for its display matrix, as it did before."""
    monkeypatch.setattr(video._Upright, "__call__", lambda self, fr: video.upright_rgb(fr, self.reformatter))


def test_face_tracker_gives_the_landmarks_of_mediapipes_public_call(demo_clip, monkeypatch):
    frames = [fr.image for fr in iter_frames(demo_clip)]

    def track():
        out = []
        with FaceTracker(max_faces=2) as tracker:  # with the face detector's checks, as the pipeline runs it
            direct = tracker._mesh_call is not None and tracker._detector_call is not None
            for img in frames:
                obs = tracker.process(img)
                out.append(None if obs is None else (obs.points_px, obs.face_count))
        return out, direct

    fast, direct = track()
    _mesh_as_mediapipe_documents_it(monkeypatch)
    slow, public = track()
    assert direct and not public  # the two ways were taken
    assert sum(o is not None for o in fast) == 360
    for a, b in zip(fast, slow, strict=True):
        assert (a is None) == (b is None)
        if a is not None:
            np.testing.assert_array_equal(a[0], b[0])
            assert a[1] == b[1]
    assert all(img.flags.writeable for img in frames)  # the caller's pictures stay theirs


def test_frames_are_those_of_reading_every_frames_side_data(demo_clip, monkeypatch):
    reads = []
    real = video._display_matrix
    monkeypatch.setattr(video, "_display_matrix", lambda fr: reads.append(1) or real(fr))
    fast = [fr.image for fr in iter_frames(demo_clip)]
    assert 0 < len(reads) <= 3  # the first frame's only (a clip without a display matrix)
    _side_data_of_every_frame(monkeypatch)
    slow = [fr.image for fr in iter_frames(demo_clip)]
    assert len(reads) > 360
    assert len(fast) == len(slow) == 360
    for a, b in zip(fast, slow):
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("stages", ["serial", "overlapped"])
def test_every_output_table_is_that_of_the_code_without_the_cuts(demo_clip, tmp_path, monkeypatch, stages):
    """The whole command's tables (samples, events, features) with the cuts and without any of them."""
    fast = process_clip(demo_clip, tmp_path / "fast", stages=stages, reuse=False)
    _mesh_as_mediapipe_documents_it(monkeypatch)
    _side_data_of_every_frame(monkeypatch)
    _use_reference(monkeypatch)
    process_clip(demo_clip, tmp_path / "slow", stages=stages, reuse=False)
    assert fast.samples["valid"].mean() > 0.8 and len(fast.analysis.events) > 10
    for name in ("samples", "events", "features"):
        pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "fast" / f"{name}.parquet"),
                                      pd.read_parquet(tmp_path / "slow" / f"{name}.parquet"), check_exact=True)
        assert (tmp_path / "fast" / f"{name}.csv").read_bytes() == (tmp_path / "slow" / f"{name}.csv").read_bytes()
