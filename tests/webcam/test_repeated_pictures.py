"""Frames whose picture repeats the one before: the camera delivered no new picture and the recording kept its
frame rate by storing the last one again. The decoder flags them (``Frame.repeat``), the samples mark them not
valid (``repeated_picture``), the verdict counts them. Only an exact repeat is flagged: a codec that codes every
frame on its own (Motion JPEG at a fixed quantiser, as a webcam's own encoder) repeats a picture exactly; a
predicting codec re-codes it with small changes (docs/notes/frame-loss.md)."""
from __future__ import annotations

from fractions import Fraction

import av
import numpy as np
import pytest

from aspectus.errors import ParameterError
from aspectus.synth.render import lost_frames, read_truth, render_clip
from aspectus.synth.trajectory import synth_trajectory
from aspectus.webcam.video import DecodeReport, iter_frames, same_picture


def _pictures(n: int, repeat_at: set[int], *, size=(96, 64), seed=0) -> list[np.ndarray]:
    rng = np.random.default_rng(seed)
    out = []
    for i in range(n):
        if i in repeat_at:
            out.append(out[-1])
        else:  # a textured picture with sensor-like noise: every new one differs somewhere
            out.append(rng.integers(0, 256, (size[1], size[0], 3), dtype=np.uint8))
    return out


def _write(path, pictures, codec: str) -> None:
    with av.open(str(path), "w") as out:
        st = out.add_stream(codec, rate=30)
        h, w = pictures[0].shape[:2]
        st.width, st.height = w, h
        st.pix_fmt = "yuvj420p" if codec == "mjpeg" else "yuv420p"
        if codec == "mjpeg":
            st.options = {"flags": "+qscale", "global_quality": str(4 * 118)}
        tb = Fraction(1, 30)
        st.codec_context.time_base = tb
        for i, img in enumerate(pictures):
            fr = av.VideoFrame.from_ndarray(img, format="rgb24")
            fr.pts, fr.time_base = i, tb
            for p in st.encode(fr):
                out.mux(p)
        for p in st.encode():
            out.mux(p)


def test_same_picture_is_exact():
    a = np.random.default_rng(1).integers(0, 256, (50, 70, 3), dtype=np.uint8)
    assert same_picture(a.copy(), a)
    b = a.copy()
    b[1, 1, 2] ^= 1  # one grey level in one channel of one pixel, off the strided look's grid
    assert not same_picture(b, a)
    assert not same_picture(a, None)
    assert not same_picture(a[:, :60], a)  # another picture size is never a repeat


def test_decoder_flags_exact_repeats_of_a_jpeg_clip(tmp_path):
    repeat_at = {3, 4, 9, 15}
    clip = tmp_path / "camera.avi"
    _write(clip, _pictures(20, repeat_at), "mjpeg")
    report = DecodeReport()
    frames = list(iter_frames(clip, report=report))
    assert len(frames) == 20
    assert {f.index for f in frames if f.repeat} == repeat_at
    assert report.repeated_pictures == len(repeat_at)


def test_new_pictures_are_not_flagged_in_a_predicting_codec(tmp_path):
    clip = tmp_path / "new.mp4"
    _write(clip, _pictures(20, set()), "libx264")
    report = DecodeReport()
    assert not any(f.repeat for f in iter_frames(clip, report=report))
    assert report.repeated_pictures == 0


def test_unchanged_predicted_frames_are_not_taken_for_repeats(tmp_path):
    # a still scene coded by a predicting encoder: its predicted frames decode unchanged from a new (but equal)
    # picture, which a decoder cannot tell from a repeat - so they are not flagged
    still = _pictures(1, set())[0]
    clip = tmp_path / "still.mp4"
    _write(clip, [still] * 12, "libx264")
    frames = list(iter_frames(clip))
    assert sum(np.array_equal(f.image, frames[0].image) for f in frames[1:]) >= 5  # unchanged pictures exist
    assert not any(f.repeat for f in frames)


def test_renderer_repeats_the_stored_picture_and_marks_the_truth(tmp_path):
    traj = synth_trajectory(duration_s=1.0, seed=2)
    rep = np.zeros(30, bool)
    rep[[5, 6, 20]] = True
    res = render_clip(tmp_path / "r.avi", traj, size_px=(160, 120), codec="mjpeg", repeated_frames=rep, seed=2)
    truth = read_truth(res.truth_path)
    assert truth["repeated_frame"].tolist() == rep.tolist()
    assert res.params["repeated_frames"] == 3
    flagged = [f.index for f in iter_frames(res.path) if f.repeat]
    assert flagged == [5, 6, 20]
    # the truth keeps the true gaze at the repeated frame's own time, not the picture's
    assert truth["t_s"].is_monotonic_increasing


def test_a_clip_with_repeats_holds_the_pictures_of_the_clip_without_them(tmp_path):
    # the sensor noise is drawn for repeated frames too, so the two clips differ only where a picture repeats:
    # figures measured on them compare the loss itself, not another draw of the noise
    traj = synth_trajectory(duration_s=1.0, seed=3)
    rep = lost_frames(30, 0.2, seed=5)
    a = render_clip(tmp_path / "a.avi", traj, size_px=(160, 120), codec="mjpeg", seed=1)
    b = render_clip(tmp_path / "b.avi", traj, size_px=(160, 120), codec="mjpeg", seed=1, repeated_frames=rep)
    same = [np.array_equal(x.image, y.image) for x, y in zip(iter_frames(a.path), iter_frames(b.path))]
    assert len(same) == 30 and rep.sum() >= 3
    assert same == (~rep).tolist()


@pytest.mark.parametrize("bad, words", [(np.zeros(7, bool), "one entry per frame"),
                                        (np.r_[True, np.zeros(29, bool)], "first frame")])
def test_renderer_refuses_bad_repeat_lists(tmp_path, bad, words):
    traj = synth_trajectory(duration_s=1.0, seed=2)
    with pytest.raises(ParameterError, match=words):
        render_clip(tmp_path / "r.avi", traj, size_px=(160, 120), codec="mjpeg", repeated_frames=bad)
    assert not (tmp_path / "r.avi").exists()


@pytest.mark.parametrize("share", [-0.1, 1.0, float("nan")])
def test_lost_frames_refuses_a_share_outside_0_1(share):
    with pytest.raises(ParameterError, match="share of lost frames"):
        lost_frames(10, share)


def test_pipeline_marks_repeated_pictures_missing_and_says_so(rendered_clip):
    from aspectus.events.analysis import run_analysis
    from aspectus.webcam.pipeline import extract_samples, summarise

    lost = lost_frames(90, 0.1, seed=4)
    assert lost.sum() >= 5
    res = rendered_clip(duration_s=3.0, seed=4, size_px=(640, 360), codec="mjpeg", name="p01_s01.avi",
                        repeated_frames=lost)
    samples, meta = extract_samples(res.path)
    assert samples["repeated_picture"].to_numpy(bool).tolist() == lost.tolist()
    assert not samples.loc[lost, "valid"].any()
    assert samples.loc[lost, "yaw_deg"].isna().all()
    assert meta["decode"]["repeated_pictures"] == int(lost.sum())
    s = summarise(samples, run_analysis(samples), meta)
    assert s["decode_problems"]["repeated_pictures"] == int(lost.sum())
    assert f"{int(lost.sum())} frame(s)" in s["verdict"] and "repeat the picture before them" in s["verdict"]


def test_cli_renders_missed_frames_as_gaps_or_repeats(tmp_path, capsys):
    from aspectus.cli import main

    rc = main(["render", str(tmp_path / "gaps.mp4"), "--duration-s", "1", "--size", "160x120", "--quiet",
               "--lost-frames", "0.3", "--seed", "2"])
    assert rc == 0
    gaps = read_truth(tmp_path / "gaps_truth.csv")
    lost = lost_frames(30, 0.3, seed=2)
    assert len(gaps) == 30 - lost.sum() and not gaps["repeated_frame"].any()
    assert np.allclose(gaps["t_s"], np.flatnonzero(~lost) / 30.0)  # the timestamps keep the gaps
    rc = main(["render", str(tmp_path / "repeats.avi"), "--duration-s", "1", "--size", "160x120", "--quiet",
               "--lost-frames", "0.3", "--lost-as", "repeats", "--codec", "mjpeg", "--seed", "2"])
    assert rc == 0
    assert read_truth(tmp_path / "repeats_truth.csv")["repeated_frame"].tolist() == lost.tolist()
    assert [f.index for f in iter_frames(tmp_path / "repeats.avi") if f.repeat] == np.flatnonzero(lost).tolist()
    capsys.readouterr()
    for bad, words in ((["--lost-frames", "1.5"], "--lost-frames must be a share"),
                       (["--lost-frames", "0.1", "--lost-as", "repeats", "--vfr-jitter-ms", "5"], "constant frame rate")):
        rc = main(["render", str(tmp_path / "bad.mp4"), "--duration-s", "1", "--size", "160x120", "--quiet", *bad])
        assert rc == 2 and words in capsys.readouterr().err
    assert not (tmp_path / "bad.mp4").exists()
