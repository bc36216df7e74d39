"""The hostile-input findings (issue 17): nothing leaked, nothing lost, no hangs, no silent wrong numbers.

Each test here failed on the code before its fix. Clips are rendered tiny
(320x240, 1-1.5 s) so the whole file runs in well under a minute of CPU.
"""
from __future__ import annotations

import gzip
import json
import os
import re
import stat
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from _tagged_clips import tagged_clip

from aspectus.cli import main
from aspectus.errors import AspectusInputError, ParameterError

REPO = Path(__file__).resolve().parents[2]
# the batch tests' stand-in clip function (tests/studies/test_batch.py) is reused below, in workers too
sys.path.insert(0, str(REPO / "tests" / "studies"))
TABLE_ARGS = ["--time-col", "time_ms", "--time-unit", "ms", "--x-col", "gx_deg", "--y-col", "gy_deg"]


def _table(n: int = 200, rate_hz: float = 100.0) -> str:
    rng = np.random.default_rng(0)
    t = np.arange(n) * 1000.0 / rate_hz
    x = np.repeat(rng.uniform(-8, 8, n // 25 + 1), 25)[:n] + rng.normal(0, 0.05, n)
    y = np.repeat(rng.uniform(-4, 4, n // 25 + 1), 25)[:n] + rng.normal(0, 0.05, n)
    return "time_ms,gx_deg,gy_deg\n" + "".join(f"{a:.1f},{b:.4f},{c:.4f}\n" for a, b, c in zip(t, x, y))


@pytest.fixture(scope="module")
def small_clip(tmp_path_factory) -> Path:
    from aspectus.synth.render import render_clip, synth_trajectory

    d = tmp_path_factory.mktemp("hostile_clip")
    tr = synth_trajectory(duration_s=1.5 + 1 / 60, seed=17, blink_rate_per_min=0.0)
    return render_clip(d / "linden_p07_s02.mp4", tr, size_px=(320, 240), fps=30.0, seed=17, noise_sd=1.5).path


@pytest.fixture(scope="module")
def processed_once(small_clip, tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("hostile_out")
    assert main(["process", str(small_clip), "-o", str(out), "--quiet"]) == 0
    return out


def _copy(src: Path, dst: Path) -> Path:
    import shutil

    shutil.copytree(src, dst)
    return dst


def _run_json_holds(d: Path) -> dict:
    """run.json is there and every output it lists matches its checksum: a complete, valid result."""
    from aspectus.atomic import sha256_file

    run = json.loads((d / "run.json").read_text())
    for name, rec in run["outputs"].items():
        assert sha256_file(d / name) == rec["sha256"], name
    return run


# --- privacy -------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def bystanders_frame(tmp_path_factory):
    """A frame of `aspectus render --extra-faces 2`: the subject and two classmates, noise-free."""
    from aspectus.synth.render import render_clip, synth_trajectory
    from aspectus.webcam.video import read_frame_at

    d = tmp_path_factory.mktemp("bystanders")
    tr = synth_trajectory(duration_s=0.5 + 1 / 60, seed=31)
    clip = render_clip(d / "linden_p03_s01.mp4", tr, size_px=(640, 360), noise_sd=0.0, extra_faces=2, seed=31).path
    return clip, read_frame_at(clip, 0.2).image


def _bystander_boxes(w: int, h: int, half_px: int = 45) -> list[tuple[int, int, int, int]]:
    # where the renderer pastes the two classmates (aspectus/synth/render.py: 13 % and 87 % across, 58 % down)
    return [(int(fx * w) - half_px, int(0.58 * h) - half_px, int(fx * w) + half_px, int(0.58 * h) + half_px)
            for fx in (0.13, 0.87)]


def test_overlay_blurs_the_bystanders_too(bystanders_frame):
    """Issue 17.1: draw_overlay blurred only the followed face; the two classmates showed sharp."""
    from test_privacy import MAX_HF_SHARE, hf_energy

    from aspectus.webcam.overlay import FrameLandmarker, draw_overlay

    _, frame = bystanders_frame
    lm = FrameLandmarker()
    try:
        pts = lm(frame)  # the largest face: the subject
    finally:
        lm.close()
    assert pts is not None
    shown = draw_overlay(frame, landmarks_px=pts, show_mesh=False)
    for box in _bystander_boxes(frame.shape[1], frame.shape[0]):
        raw = hf_energy(frame, box)
        assert raw > 20, box  # a face with edges to lose
        assert hf_energy(shown, box) < MAX_HF_SHARE * raw, box
    # the caller's own boxes are used as given (the clip view passes the detector's boxes of each frame)
    from aspectus.privacy.blur import find_face_boxes

    boxes = find_face_boxes(frame)
    again = draw_overlay(frame, landmarks_px=pts, show_mesh=False, face_boxes=boxes)
    assert np.array_equal(again, shown)


@pytest.mark.gui
@pytest.mark.timeout(120)
def test_clip_view_blurs_every_face_of_an_extra_faces_clip(qtbot, bystanders_frame):
    """Issue 17.1 in the app: with "Show faces unblurred" unticked no face is shown sharp."""
    from test_privacy import MAX_HF_SHARE, hf_energy

    from ui.clip_view import ClipView

    clip, frame = bystanders_frame
    view = ClipView()
    qtbot.addWidget(view)
    assert view.mesh.isChecked() and not view.unblur.isChecked()  # the defaults: the followed face is found
    with qtbot.waitSignal(view.frame_shown, timeout=60000):
        view.set_clip(clip, position_s=0.2)
    if view._lms is None:  # the face mesh runs on a paused frame: wait for the frame that carries it
        with qtbot.waitSignal(view.frame_shown, timeout=60000):
            view.seek(0.2)
    assert view._lms is not None
    shown = view.shown_image()
    for box in _bystander_boxes(frame.shape[1], frame.shape[0]):
        assert hf_energy(shown, box) < MAX_HF_SHARE * hf_energy(frame, box), box
    view.shutdown()


def test_outputs_follow_the_umask(tmp_path):
    """Issue 17.3: mkstemp made every output owner-only (0600) whatever the umask."""
    from aspectus.atomic import write_json, write_text

    old = os.umask(0o022)
    try:
        p = write_text(tmp_path / "a.txt", "x")
        q = write_json(tmp_path / "b.json", {"a": 1})
    finally:
        os.umask(old)
    assert stat.S_IMODE(p.stat().st_mode) == 0o644
    assert stat.S_IMODE(q.stat().st_mode) == 0o644
    old = os.umask(0o077)
    try:
        r = write_text(tmp_path / "c.txt", "x")
    finally:
        os.umask(old)
    assert stat.S_IMODE(r.stat().st_mode) == 0o600


# --- data loss -----------------------------------------------------------------------------------

def test_purge_leaves_folders_without_our_run_json_alone(tmp_path, capsys):
    """Issue 17.4: any folder with a file named samples.csv counted as a clip folder and was emptied."""
    d = tmp_path / "d" / "a"
    (d / "frames").mkdir(parents=True)
    (d / "samples.csv").write_text("mine\n")
    (d / "preview_fig.png").write_text("x\n")
    (d / "frames" / "1.png").write_text("y\n")
    assert main(["purge", str(tmp_path / "d"), "--yes"]) == 2
    assert "holds no clip output folders" in capsys.readouterr().err
    assert (d / "samples.csv").read_text() == "mine\n"
    assert (d / "preview_fig.png").exists() and (d / "frames" / "1.png").exists()
    # a run.json that is not ours (any JSON) does not make it ours either
    (d / "run.json").write_text('{"note": "my own run log"}')
    assert main(["purge", str(tmp_path / "d"), "--yes"]) == 2
    assert (d / "samples.csv").exists()


def test_purge_deletes_only_what_run_json_lists(processed_once, tmp_path, capsys):
    out = _copy(processed_once, tmp_path / "out")
    d = out / "linden_p07_s02"
    (d / "preview_fig.png").write_text("the user's own figure\n")
    (d / "frames").mkdir()
    (d / "frames" / "1.png").write_text("y\n")
    (d / ".samples.parquet.k3j4.part").write_bytes(b"half a table")
    assert main(["purge", str(out), "--yes"]) == 0
    assert not (d / "samples.parquet").exists() and not (d / "samples.csv").exists()
    assert not (d / ".samples.parquet.k3j4.part").exists()
    assert (d / "preview_fig.png").exists() and (d / "frames" / "1.png").exists()


def test_a_failed_rerun_keeps_the_earlier_result(processed_once, small_clip, tmp_path, monkeypatch, capsys):
    """Issue 17.5: a re-run deleted run.json first; a full disk or a kill then left no valid result."""
    import errno

    import aspectus.atomic as atomic

    out = _copy(processed_once, tmp_path / "out")
    d = out / "linden_p07_s02"
    before = _run_json_holds(d)
    real = atomic.write_csv

    def disk_full(target, df, **kw):
        if Path(target).name == "features.csv":
            raise OSError(errno.ENOSPC, "No space left on device", str(target))
        return real(target, df, **kw)

    monkeypatch.setattr(atomic, "write_csv", disk_full)
    assert main(["process", str(small_clip), "-o", str(out), "--quiet", "--no-reuse", "--window-s", "0.5"]) == 1
    err = capsys.readouterr().err
    assert "No space left" in err and "earlier result" in err, err
    after = _run_json_holds(d)  # still there, and every file it lists is the one it vouches for
    assert after["created_utc"] == before["created_utc"]
    assert not any(p.name.endswith(".part") for p in d.rglob("*"))
    assert not (d / ".next").exists()


def test_a_run_killed_mid_install_is_finished_or_discarded(processed_once, small_clip, tmp_path):
    """Issue 17.5: stale .part files and a half-built result of a killed run are cleaned by the next run."""
    from aspectus.webcam.pipeline import STAGING_DIR, recover_output_dir

    out = _copy(processed_once, tmp_path / "out")
    d = out / "linden_p07_s02"
    # killed while building: an incomplete staging folder and a stray temporary file
    (d / STAGING_DIR).mkdir()
    (d / STAGING_DIR / "events.csv").write_text("half\n")
    (d / ".samples.parquet.a8b9.part").write_bytes(b"half")
    assert "discarded" in recover_output_dir(d)
    assert not (d / STAGING_DIR).exists() and not (d / ".samples.parquet.a8b9.part").exists()
    _run_json_holds(d)
    # killed while moving a complete new result in: the move is finished
    st = d / STAGING_DIR
    st.mkdir()
    run = json.loads((d / "run.json").read_text())
    from aspectus.atomic import sha256_file, write_json

    (st / "events.csv").write_text("type,onset_s\n")
    run["outputs"]["events.csv"] = {"sha256": sha256_file(st / "events.csv"), "bytes": 13}
    run["created_utc"] = "2026-01-01T00:00:00+00:00"
    write_json(st / "run.json", run)
    assert "finished" in recover_output_dir(d)
    assert _run_json_holds(d)["created_utc"] == "2026-01-01T00:00:00+00:00"
    # and `process` does it itself before anything else
    (d / ".events.csv.zz.part").write_bytes(b"x")
    assert main(["process", str(small_clip), "-o", str(out), "--quiet"]) == 0
    assert not (d / ".events.csv.zz.part").exists()
    _run_json_holds(d)


@pytest.mark.timeout(120)
def test_sigkill_during_a_rerun_never_leaves_the_folder_without_a_valid_result(processed_once, small_clip, tmp_path):
    """A real SIGKILL at several moments of a re-run: afterwards run.json holds (old or new), always."""
    import signal
    import time

    out = _copy(processed_once, tmp_path / "out")
    d = out / "linden_p07_s02"
    env = dict(os.environ, PYTHONPATH=str(REPO))
    for delay_s in (0.3, 1.5, 3.0):
        proc = subprocess.Popen([sys.executable, "-m", "aspectus", "process", str(small_clip), "-o", str(out),
                                 "--quiet", "--no-reuse"], env=env, stdout=subprocess.DEVNULL,
                                stderr=subprocess.DEVNULL)
        time.sleep(delay_s)
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        # what a reader sees at once: the earlier result, or a new complete one being moved in
        if not (d / ".next" / "run.json").exists():
            _run_json_holds(d)
    assert main(["process", str(small_clip), "-o", str(out), "--quiet"]) == 0
    _run_json_holds(d)
    assert not (d / ".next").exists() and not list(d.glob(".*.part"))


# --- hangs and runaway memory --------------------------------------------------------------------

@pytest.mark.timeout(60)
def test_a_fifo_named_like_a_clip_is_refused_not_waited_on(small_clip, tmp_path, capsys):
    """Issue 17.8: a FIFO named .mp4 hung `process` in open() for hashing, and every clip after it."""
    fifo = tmp_path / "pipe.mp4"
    os.mkfifo(fifo)
    from aspectus.atomic import sha256_file

    with pytest.raises(AspectusInputError, match="not a regular file"):
        sha256_file(fifo)
    code = main(["process", str(fifo), str(small_clip), "-o", str(tmp_path / "out"), "--quiet"])
    assert code == 1
    err = capsys.readouterr().err
    assert re.search(r"pipe\.mp4.*not a regular file", err), err
    assert (tmp_path / "out" / small_clip.stem / "run.json").is_file()  # the clip after it still ran


def test_unbounded_feature_windows_are_refused(tmp_path, capsys):
    """Issue 17.9: --window-s 1 --step-s 1e-7 grew memory without bound."""
    src = tmp_path / "t.csv"
    src.write_text(_table())
    assert main(["events", str(src), "-o", str(tmp_path / "o"), *TABLE_ARGS, "--window-s", "1", "--step-s", "1e-7"]) == 2
    err = capsys.readouterr().err
    assert "--step-s" in err and "--window-s" in err and "Traceback" not in err
    from aspectus.events.segments import MAX_WINDOWS, fixed_windows

    with pytest.raises(ParameterError, match="windows"):
        fixed_windows(0.0, 10 * 3600.0, window_s=0.1, step_s=0.1)
    assert MAX_WINDOWS >= 36_000  # 10 hours in 1 s steps still work
    assert len(fixed_windows(0.0, 3600.0, window_s=10.0, step_s=1.0)) == 3591


def test_gzip_bomb_is_refused_before_it_inflates(tmp_path, capsys):
    """Issue 17.10: a 0.29 MB gzip table inflated to 2.8 GB of memory before the error."""
    from aspectus.reference.table import GZIP_MAX_RATIO, _gunzip_bounded

    head = b"time_ms,gx_deg,gy_deg\n"
    bomb = gzip.compress(head + b"0" * (300 << 20), compresslevel=9)  # 300 MB of zeros, 0.3 MB packed
    p = tmp_path / "bomb.csv.gz"
    p.write_bytes(bomb)
    assert len(bomb) * GZIP_MAX_RATIO < 300 << 20
    assert main(["events", str(p), "-o", str(tmp_path / "o"), *TABLE_ARGS]) == 2
    err = capsys.readouterr().err
    assert "bomb.csv.gz" in err and "inflates to more than" in err
    # an honest gzip table still reads, also as two concatenated members
    good = _table().encode()
    assert _gunzip_bounded(gzip.compress(good), p) == good
    assert _gunzip_bounded(gzip.compress(good[:100]) + gzip.compress(good[100:]), p) == good
    with pytest.raises(AspectusInputError, match="damaged"):
        _gunzip_bounded(gzip.compress(good)[:-12], p)


def test_duplicate_column_check_on_a_huge_header(tmp_path):
    """Issue 17.10: the duplicate-column check counted each name in the whole header (quadratic)."""
    from aspectus.reference.table import read_raw_table

    names = [f"c{i}" for i in range(60_000)] + ["c7", "c9"]
    p = tmp_path / "wide.csv"
    p.write_text(",".join(names) + "\n" + ",".join("1" for _ in names) + "\n")
    with pytest.raises(AspectusInputError, match=r"c7, c9 appear more than once"):
        read_raw_table(p, delimiter=",")


# --- silent wrong results ------------------------------------------------------------------------

def test_nul_byte_inside_a_number_is_an_error_not_a_truncated_number(tmp_path, capsys):
    """Issue 17.12: 6.7\\x00574 was read as 6.0."""
    text = _table().splitlines()
    text[5] = "40.0,6.7\x00574,1.0"
    p = tmp_path / "nul.csv"
    p.write_bytes(("\n".join(text) + "\n").encode())
    assert main(["events", str(p), "-o", str(tmp_path / "o"), *TABLE_ARGS]) == 2
    err = capsys.readouterr().err
    assert "nul.csv" in err and "line 6" in err and "NUL" in err
    assert not (tmp_path / "o" / "events.csv").exists()


def test_utf16_table_gets_one_line_saying_so(tmp_path, capsys):
    p = tmp_path / "u16.csv"
    p.write_bytes(_table().encode("utf-16"))
    assert main(["events", str(p), "-o", str(tmp_path / "o"), *TABLE_ARGS]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "UTF-16" in err and "u16.csv" in err


def test_face_index_beyond_the_faces_in_view_is_refused(small_clip, tmp_path, capsys):
    """Issue 17.13: --face index:99 silently followed the only face."""
    from aspectus.webcam.pipeline import ProcessParams

    with pytest.raises(ParameterError, match="max_faces"):
        ProcessParams(face="index:99")
    assert main(["process", str(small_clip), "-o", str(tmp_path / "o"), "--quiet", "--face", "index:99"]) == 2
    assert "index:99" in capsys.readouterr().err
    # within max_faces but not in the picture (one face): refused naming the clip, no result written
    assert main(["process", str(small_clip), "-o", str(tmp_path / "o"), "--quiet", "--face", "index:1"]) == 1
    err = capsys.readouterr().err
    assert "linden_p07_s02.mp4" in err and "index:1" in err and "1 face(s)" in err
    assert not (tmp_path / "o" / small_clip.stem / "run.json").exists()


# --- one-line errors -----------------------------------------------------------------------------

@pytest.mark.parametrize("delim", [",,", "\n", ""])
def test_bad_delimiter_is_a_one_line_error(delim, tmp_path, capsys):
    p = tmp_path / "t.csv"
    p.write_text(_table())
    assert main(["events", str(p), "-o", str(tmp_path / "o"), *TABLE_ARGS, "--delimiter", delim]) == 2
    err = capsys.readouterr().err
    assert "delimiter" in err and "Traceback" not in err and len(err.strip().splitlines()) == 1


def test_bom_prefixed_segments_mapping_and_sidecar_are_read(small_clip, tmp_path):
    """Excel writes CSV UTF-8 with a byte-order mark: accepted everywhere a text file is read."""
    from aspectus.events.segments import read_segments
    from aspectus.reference.bids import _load_json
    from aspectus.reference.table import TableMapping

    seg = tmp_path / "seg.csv"
    seg.write_bytes("\ufefflabel,onset_s,offset_s\npassage_1,0.0,0.7\n".encode())
    assert list(read_segments(seg)["label"]) == ["passage_1"]
    m = tmp_path / "map.json"
    m.write_bytes(("\ufeff" + json.dumps({"time_col": "t", "x_col": "x", "y_col": "y"})).encode())
    assert TableMapping.load(m).time_col == "t"
    side = tmp_path / "sub-p01_physio.json"
    side.write_bytes(("\ufeff" + json.dumps({"SamplingFrequency": 250})).encode())
    assert _load_json(side)["SamplingFrequency"] == 250



# --- batch: status as clips finish, identity by content, no host names ---------------------------

def test_status_csv_follows_each_finished_clip(tmp_path):
    """Issue 17.7: after a kill, status.csv said "pending" for clips complete on disk (rewritten every 30 s)."""
    import threading

    from test_batch import _clips, _run

    src = _clips(tmp_path / "clips", {"p01.mp4": b"clip one", "p02.mp4": b"WAIT"})
    out = tmp_path / "out"
    stop = threading.Event()
    t = threading.Thread(target=lambda: _run(src, out, workers=2, cancel=stop))
    t.start()
    seen = None
    try:
        for _ in range(400):  # while p02 still runs (it waits to be cancelled)
            threading.Event().wait(0.05)
            try:
                st = pd.read_csv(out / "status.csv").set_index("key")["status"].to_dict()
            except (OSError, ValueError, KeyError):
                continue
            if st.get("p01") == "done":
                seen = st
                break
    finally:
        stop.set()
        t.join(timeout=60)
    assert seen is not None and seen["p02"] == "pending", seen


def test_a_clip_changed_in_place_with_same_size_and_mtime_is_redone(tmp_path):
    """Issue 17.6: the hash cache trusted (size, mtime); run.json's SHA differed from the file's."""
    from test_batch import _clips, _run

    src = _clips(tmp_path / "clips", {"p01.mp4": b"clip one", "p02.mp4": b"clip two"})
    out = tmp_path / "out"
    assert _run(src, out).counts["done"] == 2
    clip = src / "p02.mp4"
    st = clip.stat()
    with open(clip, "r+b") as fh:  # rewritten in place: same size, and the modification time put back
        fh.write(b"CLIP")
    os.utime(clip, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert clip.stat().st_size == st.st_size and clip.stat().st_mtime_ns == st.st_mtime_ns
    again = _run(src, out)
    assert again.status.set_index("key")["status"].to_dict() == {"p01": "skipped", "p02": "done"}


def test_no_host_name_in_status_or_lock(tmp_path):
    import socket

    from test_batch import _clips, _run

    src = _clips(tmp_path / "clips", {"p01.mp4": b"clip one"})
    out = tmp_path / "out"
    _run(src, out, workers=1)
    host = socket.gethostname()
    assert host not in (out / "status.csv").read_text()
    assert host not in (out / ".batch" / "lock").read_text()
    assert str(tmp_path) not in (out / "status.csv").read_text()


def test_outputs_hold_no_absolute_paths_unless_asked(processed_once, small_clip, tmp_path):
    """Issue 17.2: run.json and the Parquet metadata carried absolute paths (user and student names)."""
    import pyarrow.parquet as pq

    d = processed_once / small_clip.stem
    secret = str(small_clip.parent)  # the folder the clip is in: stands for /home/<user>/<student>/
    for p in d.iterdir():
        if p.suffix in (".json", ".csv"):
            assert secret not in p.read_text(), p
        if p.suffix == ".parquet":
            meta = pq.read_schema(p).metadata or {}
            assert all(secret.encode() not in v for v in meta.values()), p
    run = json.loads((d / "run.json").read_text())
    assert (d / run["clip"]).resolve() == small_clip.resolve() and len(run["input_sha256"]) == 64
    assert "clip_resolved" not in run
    # on request: full paths too
    out = tmp_path / "full"
    assert main(["process", str(small_clip), "-o", str(out), "--quiet", "--full-paths"]) == 0
    run = json.loads((out / small_clip.stem / "run.json").read_text())
    assert run["clip_resolved"] == str(small_clip.resolve())


def test_events_output_records_the_table_relative(tmp_path):
    src = tmp_path / "in" / "t.csv"
    src.parent.mkdir()
    src.write_text(_table())
    assert main(["events", str(src), "-o", str(tmp_path / "o"), *TABLE_ARGS]) == 0
    side = json.loads((tmp_path / "o" / "events.json").read_text())
    assert side["input"]["path"] == "../in/t.csv"
    assert str(tmp_path) not in (tmp_path / "o" / "events.json").read_text()


# --- one-line errors for the output folder, --labels, --scheduler, a closed pipe ----------------

@pytest.mark.parametrize("command", ["events", "validate", "batch", "process"])
@pytest.mark.parametrize("what", ["file", "read-only"])
def test_outdir_that_is_a_file_or_read_only_is_one_line(command, what, tmp_path, capsys):
    if what == "read-only" and os.geteuid() == 0:
        pytest.skip("root writes into read-only folders")
    src = tmp_path / "t.csv"
    src.write_text(_table())
    out = tmp_path / "out"
    if what == "file":
        out.write_text("x")
    else:
        out.mkdir()
        out.chmod(0o555)
    argv = {"events": ["events", str(src), "-o", str(out), *TABLE_ARGS],
            "validate": ["validate", str(tmp_path), str(src), "-o", str(out)],
            "batch": ["batch", str(tmp_path), "-o", str(out), "--quiet"],
            "process": ["process", str(tmp_path / "a.mp4"), "-o", str(out), "--quiet"]}[command]
    try:
        code = main(argv)
    finally:
        if what == "read-only":
            out.chmod(0o755)
    err = capsys.readouterr().err
    assert code == 2, err
    assert "OUTDIR" in err and str(out) in err and len(err.strip().splitlines()) == 1, err


def test_outdir_read_only_as_an_ordinary_user(tmp_path):
    """The same check as a non-root user (the test machine may run as root, who may write anywhere)."""
    from aspectus.cli.outdir import prepare_out_dir

    out = tmp_path / "ro"
    out.mkdir()
    real = os.access
    try:
        os.access = lambda p, mode: False if Path(p) == out else real(p, mode)
        with pytest.raises(AspectusInputError, match="not writable"):
            prepare_out_dir(out)
    finally:
        os.access = real


def test_bad_label_pattern_and_scheduler_are_one_line(tmp_path, capsys):
    assert main(["batch", str(tmp_path), "-o", str(tmp_path / "o"), "--labels", r"(?P<participant>p\d+"]) == 2
    err = capsys.readouterr().err
    assert "--labels" in err and "not a regular expression" in err and len(err.strip().splitlines()) == 1
    assert main(["batch", str(tmp_path), "-o", str(tmp_path / "o"), "--scheduler", "not a url"]) == 2
    err = capsys.readouterr().err
    assert "not a scheduler address" in err and len(err.strip().splitlines()) == 1


@pytest.mark.timeout(60)
def test_output_into_a_closed_pipe_is_quiet(tmp_path):
    """`aspectus batch ... | head -1` gave a BrokenPipeError traceback."""
    clips = tmp_path / "clips"
    clips.mkdir()
    for i in range(300):
        (clips / f"p{i:03d}.mp4").write_bytes(b"x")
    env = dict(os.environ, PYTHONPATH=str(REPO))
    proc = subprocess.run(f"'{sys.executable}' -m aspectus batch '{clips}' -o '{tmp_path / 'o'}' --dry-run | head -1",
                          shell=True, capture_output=True, text=True, env=env, timeout=50)
    assert proc.stdout.count("\n") == 1
    assert "Traceback" not in proc.stderr and "BrokenPipe" not in proc.stderr, proc.stderr


def test_worker_warnings_are_one_line(tmp_path, capsys):
    import warnings

    from aspectus.studies.task import run_clip_task

    clip = tmp_path / "c.mp4"
    clip.write_bytes(b"x")
    old = warnings.formatwarning
    try:
        res = run_clip_task({"clip": str(clip), "out_dir": str(tmp_path / "o"), "params": None,
                             "clip_fn": "test_hostile:_warning_clip_fn"}, lambda f, m: None, None)
        assert res["status"] == "done"
        text = warnings.formatwarning("few valid samples", UserWarning, "x.py", 3)
    finally:
        warnings.formatwarning = old
    assert text == "aspectus: warning: few valid samples\n"


def _warning_clip_fn(clip, out, **kw):
    class R:
        summary = {}
    return R()


# --- containers: mirrored pictures and sound tracks that outlast the video -----------------------

def test_a_horizontal_flip_is_not_read_as_a_half_turn(tmp_path):
    """Issue 17.14: a mirroring display matrix was read as 180 deg (face upside down, 58 deg noise)."""
    from aspectus.webcam.video import iter_frames, probe

    flip = tagged_clip(tmp_path / "hflip.mp4", matrix=[-65536, 0, 0, 0, 65536, 0, 0, 0, 1 << 30])
    img = next(iter(iter_frames(flip))).image
    assert img[:, -40:, 0].mean() > 200 and img[60:, :40, 0].mean() < 30  # white moved right ...
    assert img[:30, 60:100, 0].mean() < 200 and abs(img[:25, 60:100, 0].mean() - 128) < 20  # ... grey stays on top
    assert probe(flip).rotation_deg == 0
    turned = tagged_clip(tmp_path / "rot180.mp4", rotation_deg=180)  # a real half turn still is one
    img = next(iter(iter_frames(turned))).image
    assert img[-25:, 60:100, 0].mean() == pytest.approx(128, abs=20) and probe(turned).rotation_deg == 180


def test_sound_longer_than_the_video_is_not_called_truncation(tmp_path):
    """Issue 17.14: an MKV whose audio runs on got "file is damaged, probably truncated"."""
    from aspectus.webcam.video import DecodeReport, iter_frames

    p = tagged_clip(tmp_path / "long_sound.mkv", video_s=1.0, audio_s=3.0, fmt="matroska")
    r = DecodeReport()
    assert sum(1 for _ in iter_frames(p, report=r)) == 30
    assert r.stopped_early is None and any("sound track runs on" in n for n in r.notes), r
    cut = tmp_path / "cut.mkv"  # the same file cut short: the loss is still reported
    cut.write_bytes(p.read_bytes()[: int(p.stat().st_size * 0.7)])
    r = DecodeReport()
    list(iter_frames(cut, report=r))
    assert r.stopped_early and "truncated" in r.stopped_early, r


# --- validation against an unrelated reference ---------------------------------------------------

@pytest.fixture(scope="module")
def unrelated_pair(tmp_path_factory):
    """A webcam recording, its true lab recording, and the lab recording shuffled in 1 s blocks (unrelated)."""
    sys.path.insert(0, str(REPO / "tests" / "validation"))
    from test_validate import _webcam_folder

    from aspectus.synth.lab_recording import write_demo_reference
    from aspectus.synth.trajectory import synth_trajectory

    root = tmp_path_factory.mktemp("unrelated")
    truth = synth_trajectory(duration_s=42.0, seed=3, task="reading").samples
    true_ref = write_demo_reference(truth, root / "lab", stem="p01_s01", offset_s=-1.25, rate_hz=250.0, seed=1)
    cam = _webcam_folder(root / "out" / "p01_s01", truth)
    blocks = np.floor(truth["t_s"]).astype(int)
    order = np.random.default_rng(5).permutation(blocks.max() + 1)
    shuffled = pd.concat([truth[blocks == b] for b in order], ignore_index=True)
    fake = truth.copy()
    for c in fake.columns:
        if c != "t_s":
            fake[c] = shuffled[c].to_numpy()
    fake_ref = write_demo_reference(fake, root / "lab2", stem="p01_s01", offset_s=-1.25, rate_hz=250.0, seed=1)
    return cam, true_ref["physio"], fake_ref["physio"]


def test_uncertain_alignment_withholds_the_agreement_figures(unrelated_pair, tmp_path, capsys):
    """Issue 17.15: an unrelated reference validated with ICC 0.79 and no warning beyond a low kappa."""
    from test_validate import _params

    from aspectus.validation.pair import validate_pair

    cam, true_ref, fake_ref = unrelated_pair
    good = validate_pair(cam, true_ref, write=False, params=_params())
    assert not good.meta["agreement_withheld"] and np.isfinite(good.events["kappa"])
    r = validate_pair(cam, fake_ref, tmp_path / "v", params=_params())
    assert r.meta["agreement_withheld"] and r.notes[0].startswith("THE ALIGNMENT IS UNCERTAIN")
    assert not np.isfinite(r.events["kappa"]) and r.agreement["icc"].isna().all()
    assert r.agreement["pearson_r"].isna().all() and (r.agreement["n"] >= 0).all()
    assert json.loads((tmp_path / "v" / "validation.json").read_text())["agreement_withheld"] is True
    assert "THE ALIGNMENT IS UNCERTAIN" in (tmp_path / "v" / "report.html").read_text()
    forced = validate_pair(cam, fake_ref, write=False, params=_params(force_agreement=True))
    assert not forced.meta["agreement_withheld"] and np.isfinite(forced.events["kappa"])
    assert "--force-agreement was given" in forced.notes[0]
    # the command line says so on its first lines
    code = main(["validate", str(cam), str(fake_ref), "-o", str(tmp_path / "cli"), "--no-figures"])
    out = capsys.readouterr().out
    assert code == 0 and "WARNING: the alignment is uncertain - agreement figures withheld" in out


def test_damaged_parquet_is_one_line(tmp_path, capsys):
    p = tmp_path / "samples.parquet"
    p.write_bytes(b"PAR1" + bytes(range(256)) * 4 + b"PAR1")
    assert main(["events", str(p), "-o", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "samples.parquet" in err and "Parquet" in err, err


def test_too_short_reference_error_names_the_file(unrelated_pair, tmp_path, capsys):
    cam, _, _ = unrelated_pair
    ref = tmp_path / "p01_s01_short.csv"
    ref.write_text("time_ms,gx_deg,gy_deg\n" + "".join(f"{i * 4},{i % 3},{i % 2}\n" for i in range(5)))
    code = main(["validate", str(cam), str(ref), "-o", str(tmp_path / "v"), "--time-col", "time_ms",
                 "--time-unit", "ms", "--x-col", "gx_deg", "--y-col", "gy_deg", "--no-figures"])
    err = capsys.readouterr().err
    assert code == 2 and "p01_s01_short.csv" in err and "too short" in err, err


@pytest.mark.timeout(60)
def test_a_scheduler_that_talks_garbage_is_one_line(tmp_path):
    """Issue 17.16: an address that answers, but not as a Dask scheduler, gave a traceback."""
    import socket
    import threading

    from aspectus.errors import AspectusError
    from aspectus.studies.engines import DaskEngine

    srv = socket.socket()
    srv.bind(("127.0.0.1", 0))
    srv.listen(4)
    port = srv.getsockname()[1]

    def answer():
        for _ in range(4):
            try:
                conn, _ = srv.accept()
            except OSError:
                return
            conn.sendall(b"\xff" * 64)  # a length prefix of some exabytes, then nothing useful
            conn.close()

    threading.Thread(target=answer, daemon=True).start()
    try:
        with pytest.raises(AspectusError) as info:
            DaskEngine(address=f"tcp://127.0.0.1:{port}", connect_timeout_s=3)._connect()
    finally:
        srv.close()
    msg = str(info.value)
    assert "cannot reach the Dask scheduler" in msg and "\n" not in msg


def test_batch_hash_index_holds_no_clip_path(tmp_path):
    """The clip hash cache in OUTDIR/.batch/ keys its entries by a hash of the path, not the path itself."""
    from aspectus.studies.state import HashIndex

    clip = tmp_path / "student_anna_smith" / "p01.mp4"
    clip.parent.mkdir()
    clip.write_bytes(b"clip bytes")
    idx = HashIndex(tmp_path / "out" / ".batch" / "hash_index.json")
    (tmp_path / "out" / ".batch").mkdir(parents=True)
    h = idx.sha256(clip)
    idx.save()
    text = (tmp_path / "out" / ".batch" / "hash_index.json").read_text()
    assert "anna" not in text and str(tmp_path) not in text and "p01" not in text
    assert HashIndex(tmp_path / "out" / ".batch" / "hash_index.json").lookup(clip) == h
