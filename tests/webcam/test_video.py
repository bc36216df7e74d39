"""The decoder: true presentation timestamps, rotation metadata, bad files."""
import os
import sys
import threading
from fractions import Fraction
from pathlib import Path

import av
import numpy as np
import pytest

from aspectus.errors import VideoError
from aspectus.webcam.video import FramePrefetcher, iter_frames, probe, read_frame_at


def _write(path, times_s, *, size=(160, 120), rotation=None, codec="libx264", container_opts=None):
    w, h = size
    out = av.open(str(path), "w")
    st = out.add_stream(codec, rate=30)
    st.width, st.height, st.pix_fmt = w, h, "yuv420p"
    tb = Fraction(1, 3000) if codec == "mpeg4" else Fraction(1, 90000)  # MPEG-4 part 2 caps the denominator
    st.codec_context.time_base = tb
    st.time_base = tb
    if rotation is not None:
        st.set_display_rotation(rotation)
    for i, t in enumerate(times_s):
        img = np.zeros((h, w, 3), np.uint8)
        img[: h // 4, : w // 4] = 255  # a white block in the top-left corner
        img[..., 1] = (i * 7) % 256
        fr = av.VideoFrame.from_ndarray(img, format="rgb24")
        fr.pts = int(round(t / tb))
        fr.time_base = tb
        for p in st.encode(fr):
            out.mux(p)
    for p in st.encode():
        out.mux(p)
    out.close()


def test_variable_frame_rate_keeps_true_timestamps(tmp_path):
    # irregular intervals as a webcam under load produces them (common practice: 25-45 ms jitter)
    rng = np.random.default_rng(3)
    times = np.cumsum(np.r_[0.0, rng.uniform(0.020, 0.070, 59)])
    clip = tmp_path / "vfr.mp4"
    _write(clip, times)
    frames = list(iter_frames(clip))
    got = np.array([f.pts_s for f in frames])
    assert len(frames) == len(times)
    assert np.allclose(got - got[0], times - times[0], atol=1.5e-5)
    # not index / fps: a constant-rate reconstruction would be far off
    assert np.abs((got - got[0]) - np.arange(len(times)) / 30.0).max() > 0.05


@pytest.mark.parametrize("ext", [".mp4", ".mkv", ".mov", ".avi", ".webm"])
def test_common_containers_decode(tmp_path, ext):
    clip = tmp_path / f"c{ext}"
    codec = {".webm": "libvpx", ".avi": "mpeg4"}.get(ext, "libx264")
    _write(clip, np.arange(10) / 30.0, codec=codec)
    frames = list(iter_frames(clip))
    assert len(frames) == 10
    assert frames[0].image.shape == (120, 160, 3)
    t = np.array([f.pts_s for f in frames])
    assert np.allclose(np.diff(t), 1 / 30.0, atol=2e-3)


def test_rotation_metadata_is_honoured(tmp_path):
    clip = tmp_path / "rot.mp4"
    # stored landscape, tagged to be shown rotated: FFmpeg's display-matrix convention
    _write(clip, np.arange(5) / 30.0, rotation=90)
    fr = next(iter(iter_frames(clip)))
    assert fr.image.shape[:2] == (160, 120)  # portrait after applying the metadata
    # the white block was top-left in storage; a 90 deg counter-clockwise display rotation puts it bottom-left
    img = fr.image[..., 0].astype(float)
    q = {"tl": img[:40, :30].mean(), "bl": img[-40:, :30].mean(), "tr": img[:40, -30:].mean(), "br": img[-40:, -30:].mean()}
    assert max(q, key=q.get) == "bl"
    # the probe (and so run.json) reports the same rotation and the upright size the frames have
    info = probe(clip)
    assert info.rotation_deg == 90
    assert info.display_size_px == (fr.image.shape[1], fr.image.shape[0]) == (120, 160)


@pytest.mark.parametrize("tag, expected", [(180, 180), (-90, 270), (270, 270)])
def test_probe_rotation_in_quarter_turns(tmp_path, tag, expected):
    """FFmpeg's display-matrix angle, counter-clockwise, as 0/90/180/270 (PyAV reports -90 for 270)."""
    clip = tmp_path / f"rot{tag}.mp4"
    _write(clip, np.arange(3) / 30.0, rotation=tag)
    info = probe(clip)
    fr = next(iter(iter_frames(clip)))
    assert info.rotation_deg == expected
    assert info.display_size_px == (fr.image.shape[1], fr.image.shape[0])


def test_probe_reports_stream(tmp_path):
    clip = tmp_path / "p.mp4"
    _write(clip, np.arange(30) / 30.0)
    info = probe(clip)
    assert (info.width_px, info.height_px) == (160, 120)
    assert info.frame_count_hint == 30


def test_prefetcher_matches_direct_decoding(tmp_path):
    clip = tmp_path / "p.mp4"
    _write(clip, np.arange(40) / 30.0)
    a = [(f.index, f.pts_s) for f in iter_frames(clip)]
    b = [(f.index, f.pts_s) for f in FramePrefetcher(clip, depth=2)]
    assert a == b


def test_read_frame_at_seeks(tmp_path):
    clip = tmp_path / "s.mp4"
    _write(clip, np.arange(60) / 30.0)
    fr = read_frame_at(clip, 1.0)
    assert fr is not None and fr.pts_s == pytest.approx(1.0, abs=0.04)


def test_bad_files_name_the_file_and_problem(tmp_path):
    empty = tmp_path / "empty.mp4"
    empty.write_bytes(b"")
    with pytest.raises(VideoError, match=r"empty\.mp4.*empty"):
        list(iter_frames(empty))
    text = tmp_path / "notes.mp4"
    text.write_text("lesson notes, not a video\n" * 50)
    with pytest.raises(VideoError, match=r"notes\.mp4.*not a readable video"):
        list(iter_frames(text))
    with pytest.raises(VideoError, match="not found"):
        probe(tmp_path / "missing.mp4")


def test_truncated_clip_keeps_frames_before_the_cut(tmp_path):
    # an mkv cut in the middle (a recording that was not closed properly) is demuxable up to the cut
    full_mkv = tmp_path / "full.mkv"
    _write(full_mkv, np.arange(90) / 30.0, codec="mpeg4", size=(320, 240))
    cut = tmp_path / "cut.mkv"
    cut.write_bytes(full_mkv.read_bytes()[: full_mkv.stat().st_size // 2])
    frames = list(iter_frames(cut))
    assert 10 < len(frames) < 90
    t = np.array([f.pts_s for f in frames])
    assert np.all(np.diff(t) > 0)


@pytest.mark.skipif(not (sys.platform.startswith("linux") and hasattr(os, "sched_getaffinity")
                         and len(os.sched_getaffinity(0)) >= 2),
                    reason="CPU placement needs Linux and two or more CPUs")
def test_damaged_clip_decodes_the_same_on_one_cpu_and_on_several(tmp_path):
    """FFmpeg conceals damaged data differently with one decoder thread than with several, and by default
    the count follows the CPUs the decoding thread may use. aspectus fixes the count (DECODER_THREADS), so a
    clip decodes to the same pictures on any machine and wherever the pipeline places its decoder."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    import corpus  # noqa: E402 - the tests' own clip generator

    good = corpus._render(tmp_path / "good.mp4", 1.5, seed=1)
    corpus._damage_middle(good.path, tmp_path / "damaged.mp4")

    def decode(cpus):
        out = {}

        def work():
            if cpus:
                os.sched_setaffinity(0, cpus)
            out["frames"] = [f.image for f in iter_frames(tmp_path / "damaged.mp4")]

        t = threading.Thread(target=work)
        t.start()
        t.join()
        return out["frames"]

    one = decode({max(os.sched_getaffinity(0))})
    several = decode(None)
    assert len(one) == len(several) > 0
    assert all(np.array_equal(a, b) for a, b in zip(one, several))


@pytest.mark.parametrize("rotation", [None, 90])
def test_pictures_are_those_of_pyav_own_conversion(tmp_path, rotation):
    """The decoder keeps one scaler for a clip's frames; the RGB pictures must equal PyAV's own per-frame
    conversion (``VideoFrame.to_ndarray(format="rgb24")``, the general-purpose library as reference) bit for
    bit, rotated the same way. Pictures with detail in every channel, so a changed interpolation would show."""
    clip = tmp_path / "r.mp4"
    w, h = 176, 144
    out = av.open(str(clip), "w")
    st = out.add_stream("libx264", rate=30)
    st.width, st.height, st.pix_fmt = w, h, "yuv420p"
    if rotation is not None:
        st.set_display_rotation(rotation)
    rng = np.random.default_rng(7)
    for _ in range(12):
        fr = av.VideoFrame.from_ndarray(rng.integers(0, 256, (h, w, 3), dtype=np.uint8), format="rgb24")
        for p in st.encode(fr):
            out.mux(p)
    for p in st.encode():
        out.mux(p)
    out.close()
    ours = [f.image for f in iter_frames(clip)]
    with av.open(str(clip)) as c:
        ref = []
        for fr in c.decode(video=0):
            k = int(round(float(fr.rotation or 0) / 90.0)) % 4
            ref.append(np.rot90(fr.to_ndarray(format="rgb24"), k))
    assert len(ours) == len(ref) == 12
    for a, b in zip(ours, ref):
        np.testing.assert_array_equal(a, b)
