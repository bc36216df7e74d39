"""The clip's SHA-256 computed while it is decoded (aspectus.atomic.HashingReader) equals hashlib's over the
whole file (reference: Python's hashlib), and decoding from it gives the same frames as decoding by path."""
from __future__ import annotations

import hashlib
import json
import os

import numpy as np
import pytest

from aspectus.atomic import HashingReader, sha256_file
from aspectus.errors import AspectusInputError
from aspectus.webcam.video import DecodeReport, iter_frames


def _hashlib(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


@pytest.fixture(scope="module")
def demo_clip(repo_root):
    return repo_root / "sample_clips" / "linden_brook_p02_s01.mp4"


def test_decoding_through_the_reader_hashes_the_whole_file_and_gives_the_same_frames(demo_clip):
    by_path = [(f.pts_s, f.image) for f in iter_frames(demo_clip)]
    with HashingReader(demo_clip) as reader:
        through = [(f.pts_s, f.image) for f in iter_frames(demo_clip, source=reader)]
        # this mp4 keeps its index at the end: the demuxer reads it first, so the reads are not all in order
        # and the digest has to take the bytes it skipped
        assert reader.hexdigest() == _hashlib(demo_clip) == sha256_file(demo_clip)
    assert len(through) == len(by_path) == 360
    assert all(a[0] == b[0] and np.array_equal(a[1], b[1]) for a, b in zip(by_path, through))


def test_a_cut_file_is_hashed_whole_though_decoding_stops_early(demo_clip, tmp_path):
    cut = tmp_path / "cut.mkv"
    import av

    with av.open(str(demo_clip)) as src, av.open(str(cut), "w") as dst:  # an index-first container, then cut
        ist = src.streams.video[0]
        ost = dst.add_stream_from_template(ist)
        for p in src.demux(ist):
            if p.dts is not None:
                p.stream = ost
                dst.mux(p)
    data = cut.read_bytes()
    cut.write_bytes(data[: len(data) * 2 // 3])
    report = DecodeReport()
    with HashingReader(cut) as reader:
        n = sum(1 for _ in iter_frames(cut, report=report, source=reader))
        assert reader.hexdigest() == _hashlib(cut)
    assert 0 < n < 360


def test_reads_in_any_order_give_the_files_digest(tmp_path):
    p = tmp_path / "blob.bin"
    p.write_bytes(np.random.default_rng(0).integers(0, 256, 300_000, dtype=np.uint8).tobytes())
    with HashingReader(p, first=1000) as r:
        for off, n in [(0, 500), (250_000, 60_000), (1000, 7000), (4000, 100_000), (299_990, 50)]:
            r.seek(off)
            assert r.read(n) == p.read_bytes()[off:off + n]
        assert r.hexdigest() == _hashlib(p)
        assert r.hexdigest() == _hashlib(p)  # asked again: the same
    empty = tmp_path / "empty.bin"
    empty.write_bytes(b"")
    with HashingReader(empty) as r:
        assert r.hexdigest() == hashlib.sha256(b"").hexdigest()


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs here")
def test_a_fifo_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "p01.mp4"
    os.mkfifo(fifo)
    with pytest.raises(AspectusInputError, match="not a regular file"):
        HashingReader(fifo)


@pytest.mark.slow
def test_run_json_holds_the_clips_sha256_with_the_clip_hashed_while_decoded(demo_clip, tmp_path):
    from aspectus.webcam.pipeline import process_clip

    res = process_clip(demo_clip, tmp_path / "out", stages="serial")
    run = json.loads((tmp_path / "out" / "run.json").read_text())
    assert run["input_sha256"] == _hashlib(demo_clip)
    assert not res.reused_samples
    again = process_clip(demo_clip, tmp_path / "out", stages="serial")  # the hash taken first decides the reuse
    assert again.reused_samples
    assert json.loads((tmp_path / "out" / "run.json").read_text())["input_sha256"] == _hashlib(demo_clip)
