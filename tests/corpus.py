"""A corpus of bad and awkward inputs, written from scratch into a folder.

Each entry is a :class:`Case`: a file (or folder) plus the outcome the
``aspectus`` command line must give for it - either a clear error naming the
file and the cause (exit status and a message pattern), or a result whose
quality figures report the problem (a check on ``run.json``'s ``quality``
block and the samples). ``tests/cli/test_corpus_cli.py`` runs every case through
the CLI.

Video cases are rendered with :func:`aspectus.synth.render.render_clip` (real H.264
through the real encoder), kept tiny - 320x240 (a few at 640x360), 1-3 s - so
the whole corpus renders and runs in a couple of minutes. Reader cases are
gaze tables, BIDS eye-tracking recordings and task-segment files with the
faults lab exports really have.

Run as a script to write the corpus somewhere for a look::

    .venv/bin/python tests/corpus.py /tmp/aspectus-corpus
"""
from __future__ import annotations

import gzip
import json
import sys
from dataclasses import dataclass, field
from pathlib import Path
from collections.abc import Callable

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

SMALL = (320, 240)
MEDIUM = (640, 360)


@dataclass
class Case:
    """One corpus input and the outcome expected from the CLI.

    Attributes
    ----------
    name : str
        Short identifier (also the test id).
    path : Path
        The input file or folder.
    command : str
        ``"process"`` (a clip), ``"events"`` (a gaze table), ``"validate"``
        (a reference recording against a processed clip) or
        ``"segments"`` (a task-segments file given to ``process``).
    exit_code : int
        Expected exit status.
    message : str or None
        Regular expression the error output must match (case-insensitive).
    args : list of str
        Extra command-line arguments.
    check : callable, optional
        ``check(out_dir) -> None`` with asserts on the outputs of a run that
        succeeded.
    why : str
        What real-world fault the case stands for.
    warns : str, optional
        ``"module:Class"`` of a warning the run must give (e.g. features
        that are NaN because a scope holds no valid sample).
    names_file : bool
        Whether the error must name the file (not for an option's error).
    """

    name: str
    path: Path
    command: str
    exit_code: int
    message: str | None = None
    args: list[str] = field(default_factory=list)
    check: Callable | None = None
    why: str = ""
    warns: str | None = None
    #: False for an option's error (it names the option, not a file)
    names_file: bool = True


# ----------------------------------------------------------------------------------------------
# helpers that write clips

def _trajectory(duration_s: float, *, seed: int = 0, **kw):
    from aspectus.synth.render import synth_trajectory

    return synth_trajectory(duration_s=duration_s, seed=seed, blink_rate_per_min=0.0, **kw)


def _render(path: Path, duration_s: float = 1.5, *, size_px=SMALL, fps: float = 30.0, seed: int = 0,
            trajectory=None, **kw):
    from aspectus.synth.render import render_clip

    tr = trajectory if trajectory is not None else _trajectory(duration_s + 0.5 / fps, seed=seed)
    return render_clip(path, tr, size_px=size_px, fps=fps, seed=seed, noise_sd=1.5, **kw)


def _extreme_yaw_trajectory(duration_s: float, head_yaw_deg: float):
    """A still head turned ``head_yaw_deg`` to the subject's right, the eyes on the task."""
    tr = _trajectory(duration_s, seed=5)
    s = tr.samples.copy()
    s["head_yaw_deg"] = float(head_yaw_deg)
    tr.samples = s
    return tr


def _zero_frame_clip(path: Path) -> None:
    """An AVI with a video stream in its header but not one frame (mp4 and Matroska drop such a stream)."""
    import av

    with av.open(str(path), "w", format="avi") as c:
        st = c.add_stream("mpeg4", rate=30)
        st.width, st.height, st.pix_fmt = 320, 240, "yuv420p"
        c.start_encoding()


def _audio_only_clip(path: Path) -> None:
    """A Matroska file with one second of silence and no video stream."""
    import av

    with av.open(str(path), "w", format="matroska") as c:
        st = c.add_stream("pcm_s16le", rate=8000)
        st.layout = "mono"
        fr = av.AudioFrame.from_ndarray(np.zeros((1, 8000), np.int16), format="s16", layout="mono")
        fr.sample_rate = 8000
        for pkt in st.encode(fr):
            c.mux(pkt)
        for pkt in st.encode(None):
            c.mux(pkt)


def _huge_clip(path: Path, w: int = 8704, h: int = 4896) -> None:
    """One black frame larger than 8K UHD (42.6 Mpx)."""
    import av

    with av.open(str(path), "w") as c:
        st = c.add_stream("libx264", rate=30, options={"preset": "ultrafast"})
        st.width, st.height, st.pix_fmt = w, h, "yuv420p"
        fr = av.VideoFrame.from_ndarray(np.zeros((h, w, 3), np.uint8), format="rgb24")
        for pkt in st.encode(fr):
            c.mux(pkt)
        for pkt in st.encode(None):
            c.mux(pkt)


def _truncate(src: Path, dst: Path, frac: float) -> None:
    data = src.read_bytes()
    dst.write_bytes(data[: int(len(data) * frac)])


def _damage_middle(src: Path, dst: Path, *, seed: int = 3) -> None:
    """Overwrite a few kilobytes in the middle of the file with random bytes (bad sectors, a broken copy)."""
    data = bytearray(src.read_bytes())
    rng = np.random.default_rng(seed)
    n = len(data)
    for start in (int(n * 0.45), int(n * 0.6)):
        data[start:start + 2048] = rng.integers(0, 256, 2048, dtype=np.uint8).tobytes()
    dst.write_bytes(bytes(data))


# ----------------------------------------------------------------------------------------------
# checks on a successful clip run

def _run(out_dir: Path) -> dict:
    return json.loads((out_dir / "run.json").read_text())


def _samples(out_dir: Path) -> pd.DataFrame:
    return pd.read_parquet(out_dir / "samples.parquet")


def _check_usable(out_dir: Path) -> None:
    q = _run(out_dir)["quality"]
    assert q["face_found_frac"] > 0.9, q
    assert q["usable"] is True, q["verdict"]


def _check_times(truth_csv: Path, *, step_s: float | None = None, tol_s: float = 1e-3):
    def check(out_dir: Path) -> None:
        s = _samples(out_dir)
        truth = pd.read_csv(truth_csv)
        assert len(s) == len(truth), (len(s), len(truth))
        want = truth["t_s"].to_numpy() - truth["t_s"].iloc[0]
        np.testing.assert_allclose(s["t_s"].to_numpy(), want, atol=tol_s)
        if step_s is not None:
            assert abs(float(np.median(np.diff(s["t_s"]))) - step_s) < tol_s
        assert _run(out_dir)["quality"]["face_found_frac"] > 0.9
    return check


def _check_rotated(out_dir: Path) -> None:
    run = _run(out_dir)
    assert run["quality"]["face_found_frac"] > 0.9, run["quality"]
    # decoded upright: portrait storage, landscape picture
    w, h = run["extraction"]["video"]["decoded_size_px"]
    assert w > h, (w, h)


def _check_sparse_face(out_dir: Path) -> None:
    q = _run(out_dir)["quality"]
    assert q["face_found_frac"] <= 0.05, q
    assert q["usable"] is False
    assert q["verdict"].startswith("Not usable"), q["verdict"]
    assert "tracked in only" in q["verdict"]


def _check_two_faces(out_dir: Path) -> None:
    q = _run(out_dir)["quality"]
    assert q["multi_face_frac"] > 0.5, q  # the bystander is reported
    # the followed face is the subject at 600 mm, not the smaller one (about 1.8x further away)
    assert 450 < q["median_distance_mm"] < 800, q
    assert q["face_found_frac"] > 0.9


def _check_extreme_pose(out_dir: Path) -> None:
    s = _samples(out_dir)
    q = _run(out_dir)["quality"]
    ok = s["valid"].to_numpy()
    # The renderer warps a frontal photograph, so a 60 deg turn comes out as a distorted, nearly frontal
    # face: the face mesh cannot see the turn. What must hold is that the clip is not passed as usable,
    # and that no valid sample carries a head pose beyond the model's 45 deg limit.
    assert q["usable"] is False and q["verdict"].startswith("Not usable"), q["verdict"]
    if ok.any():
        assert np.nanmax(np.abs(s.loc[ok, "head_yaw_deg"].to_numpy())) <= 45.0


def _check_dark(out_dir: Path) -> None:
    q = _run(out_dir)["quality"]
    s = _samples(out_dir)
    ok = s["valid"].to_numpy()
    if q["usable"]:
        assert q["face_found_frac"] > 0.8 and q["noise_rms_s2s_deg"] <= 3.0
    else:
        assert q["verdict"].startswith("Not usable:"), q["verdict"]
    if ok.any():
        assert np.nanmax(np.abs(s.loc[ok, ["yaw_deg", "pitch_deg"]].to_numpy())) < 60.0


def _check_decode_problems(out_dir: Path) -> None:
    q = _run(out_dir)["quality"]
    assert q["frames"] > 0
    assert q["decode_problems"], f"a damaged clip gave no decode problems: {q}"


def _check_truncated(out_dir: Path) -> None:
    _check_decode_problems(out_dir)
    q = _run(out_dir)["quality"]
    assert "truncated" in q["decode_problems"]["stopped_early"], q["decode_problems"]
    assert q["frames"] < 60


# ----------------------------------------------------------------------------------------------
# the video corpus

def write_video_corpus(folder) -> list[Case]:
    """Write the bad and awkward clips into ``folder``; return their cases."""
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    cases: list[Case] = []

    def add(*a, **kw):
        cases.append(Case(*a, **kw))

    (d / "empty.mp4").write_bytes(b"")
    add("empty", d / "empty.mp4", "process", 1, r"empty\.mp4.*empty \(0 bytes\)", why="recording not saved")
    (d / "notes_renamed.mp4").write_text("Linden Brook reading pilot - session notes\np01 s01 ok\n")
    add("text_renamed", d / "notes_renamed.mp4", "process", 1, r"notes_renamed\.mp4.*not a readable video",
        why="a text file renamed to .mp4")
    (d / "folder.mp4").mkdir(exist_ok=True)
    add("folder", d / "folder.mp4", "process", 1, r"folder\.mp4.*is a folder", why="a folder named like a clip")
    add("missing", d / "missing.mp4", "process", 1, r"missing\.mp4.*file not found", why="wrong path")
    import os

    if hasattr(os, "mkfifo") and not (d / "fifo.mp4").exists():
        os.mkfifo(d / "fifo.mp4")
    add("fifo", d / "fifo.mp4", "process", 1, r"fifo\.mp4.*not a regular file",
        why="a named pipe called .mp4: reading it would wait for ever (issue 17.8)")
    _audio_only_clip(d / "audio_only.mkv")
    add("audio_only", d / "audio_only.mkv", "process", 1, r"audio_only\.mkv.*no video stream",
        why="the sound track exported instead of the video")
    _zero_frame_clip(d / "zero_frames.avi")
    add("zero_frames", d / "zero_frames.avi", "process", 1, r"zero_frames\.avi.*no frames",
        why="recording stopped at once")
    _huge_clip(d / "huge_8k.mp4")
    add("huge", d / "huge_8k.mp4", "process", 1, r"huge_8k\.mp4.*8704x4896.*larger than aspectus accepts",
        why="a camera's full-sensor export")

    good = _render(d / "good.mp4", 1.5, seed=1)
    add("good", good.path, "process", 0, check=_check_usable, why="control: an ordinary clip")
    add("face_index_absent", good.path, "process", 1, r"good\.mp4.*index:1.*1 face\(s\)", args=["--face", "index:1"],
        why="--face names a face that is not in the picture: never follow another one (issue 17.13)")
    _truncate(good.path, d / "truncated_moov.mp4", 0.6)
    add("truncated_mp4", d / "truncated_moov.mp4", "process", 1, r"truncated_moov\.mp4.*not a readable video",
        why="copy interrupted: the mp4 index (moov) is at the end and missing")
    mkv = _render(d / "good.mkv", 2.0, seed=2)
    _truncate(mkv.path, d / "truncated.mkv", 0.85)  # keeps the key frame and a third of the clip
    add("truncated_mkv", d / "truncated.mkv", "process", 0, check=_check_truncated,
        why="copy interrupted: Matroska is readable up to the cut, the loss must be reported")
    _damage_middle(good.path, d / "damaged_middle.mp4")
    add("damaged_middle", d / "damaged_middle.mp4", "process", 0,
        check=lambda o: (_check_decode_problems(o) if _run(o)["quality"]["frames"] < 45 else None),
        why="bad sectors in the middle")
    import shutil

    shutil.copyfile(good.path, d / "good_renamed.avi")
    add("wrong_extension", d / "good_renamed.avi", "process", 0, check=_check_usable,
        why="an mp4 renamed .avi: the content decides, not the name")

    r5 = _render(d / "fps5.mp4", 2.0, fps=5.0, seed=3)
    add("fps5", r5.path, "process", 0, check=_check_times(r5.truth_path, step_s=0.2), why="a 5 fps screen recorder")
    r120 = _render(d / "fps120.mp4", 1.0, fps=120.0, seed=4)
    add("fps120", r120.path, "process", 0, check=_check_times(r120.truth_path, step_s=1 / 120),
        why="a high-speed phone mode")
    rng = np.random.default_rng(11)
    vt = np.cumsum(rng.uniform(1 / 60, 1 / 15, 40))
    vt = vt - vt[0]
    rv = _render(d / "vfr.mkv", float(vt[-1]) + 0.05, frame_times_s=vt, seed=6)
    add("vfr", rv.path, "process", 0, check=_check_times(rv.truth_path), why="variable frame rate (browser recording)")
    rr = _render(d / "rotated90.mp4", 1.5, rotation_deg=90, seed=7)
    add("rotated90", rr.path, "process", 0, check=_check_rotated, why="a phone clip with a rotation tag")

    n = 45
    _render(d / "no_face.mp4", 1.5, face_visible=np.zeros(n, bool), seed=8)
    add("no_face", d / "no_face.mp4", "process", 1, r"no_face\.mp4.*no face found", why="the camera saw the wall")
    vis = np.zeros(100, bool)
    vis[50:52] = True
    _render(d / "face_2pct.mp4", 100 / 30.0, face_visible=vis, seed=9)
    add("face_2pct", d / "face_2pct.mp4", "process", 0, check=_check_sparse_face,
        why="the student left the picture almost at once")
    _render(d / "two_faces.mp4", 1.5, size_px=MEDIUM, extra_faces=1, seed=10)
    add("two_faces", d / "two_faces.mp4", "process", 0, check=_check_two_faces, why="a classmate in the picture")
    _render(d / "head_yaw60.mp4", 1.5, size_px=MEDIUM, trajectory=_extreme_yaw_trajectory(1.6, 60.0), seed=12)
    add("extreme_pose", d / "head_yaw60.mp4", "process", 0, check=_check_extreme_pose,
        why="the student turned to the neighbour")
    _render(d / "dark.mp4", 1.5, darkness=0.15, seed=13)
    add("dark", d / "dark.mp4", "process", 0, check=_check_dark, why="a dim classroom")
    return cases


# ----------------------------------------------------------------------------------------------
# the reader corpus: gaze tables, BIDS recordings, task segments

_TABLE_ARGS = ["--time-col", "time_ms", "--time-unit", "ms", "--x-col", "gx_deg", "--y-col", "gy_deg"]


def _table_text(n: int = 200, *, sep: str = ",", rate_hz: float = 100.0, seed: int = 0) -> str:
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 1000.0 / rate_hz
    x = np.repeat(rng.uniform(-8, 8, n // 25 + 1), 25)[:n] + rng.normal(0, 0.05, n)
    y = np.repeat(rng.uniform(-4, 4, n // 25 + 1), 25)[:n] + rng.normal(0, 0.05, n)
    lines = [sep.join(("time_ms", "gx_deg", "gy_deg"))]
    lines += [sep.join((f"{a:.1f}", f"{b:.4f}", f"{c:.4f}")) for a, b, c in zip(t, x, y)]
    return "\n".join(lines) + "\n"


def _replace_line(text: str, line_no: int, new: str) -> str:
    lines = text.splitlines()
    lines[line_no - 1] = new
    return "\n".join(lines) + "\n"


def _check_events_ok(min_fix: int = 3, valid_max: float = 1.0):
    def check(out_dir: Path) -> None:
        ev = pd.read_csv(out_dir / "events.csv")
        assert (ev["type"] == "fixation").sum() >= min_fix, ev["type"].value_counts()
        f = pd.read_csv(out_dir / "features.csv")
        clip = f[f["scope"] == "clip"].iloc[0]
        assert 0.0 < clip["valid_frac"] <= valid_max + 1e-9, clip["valid_frac"]
    return check


def _check_no_numbers(out_dir: Path) -> None:
    assert len(pd.read_csv(out_dir / "events.csv")) == 0
    clip = pd.read_csv(out_dir / "features.csv").iloc[0]
    for col in ("fixation_rate_per_s", "fixation_duration_mean_ms", "blink_rate_per_min", "noise_rms_s2s_deg"):
        assert not np.isfinite(clip[col]), (col, clip[col])


def write_reader_corpus(folder) -> list[Case]:
    """Write the bad and awkward gaze tables, BIDS recordings and segment files; return their cases."""
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    cases: list[Case] = []

    def add(*a, **kw):
        cases.append(Case(*a, **kw))

    good = _table_text()
    (d / "table_good.csv").write_text(good)
    add("table_good", d / "table_good.csv", "events", 0, args=_TABLE_ARGS, check=_check_events_ok(),
        why="control: an ordinary lab export")
    (d / "table_empty.csv").write_bytes(b"")
    add("table_empty", d / "table_empty.csv", "events", 2, r"table_empty\.csv.*empty", args=_TABLE_ARGS)
    (d / "table_header_only.csv").write_text("time_ms,gx_deg,gy_deg\n")
    add("table_header_only", d / "table_header_only.csv", "events", 2, r"table_header_only\.csv.*(no (data )?rows|no samples|empty)",
        args=_TABLE_ARGS)
    (d / "table_binary.csv").write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 8)
    add("table_binary", d / "table_binary.csv", "events", 2, r"table_binary\.csv", args=_TABLE_ARGS,
        why="a picture renamed .csv")
    (d / "table_text_cell.csv").write_text(_replace_line(good, 8, "60.0,LOST,0.1"))
    add("table_text_cell", d / "table_text_cell.csv", "events", 2, r"table_text_cell\.csv.*row 8.*gx_deg.*LOST",
        args=_TABLE_ARGS, why="a tracker's word for a lost sample: named, with row and column, never guessed")
    (d / "table_backwards.csv").write_text(_replace_line(good, 12, "5.0,1.0,1.0"))
    add("table_backwards", d / "table_backwards.csv", "events", 2, r"table_backwards\.csv.*(line|row) 12.*backwards",
        args=_TABLE_ARGS, why="clock reset mid-recording")
    (d / "table_bad_time.csv").write_text(_replace_line(good, 9, "abc,1.0,1.0"))
    add("table_bad_time", d / "table_bad_time.csv", "events", 2, r"table_bad_time\.csv.*(line|row) 9",
        args=_TABLE_ARGS, why="garbage in the time column")
    (d / "table_ragged.csv").write_text(_replace_line(good, 20, "190.0,1.0,1.0,7,8"))
    add("table_ragged", d / "table_ragged.csv", "events", 2, r"table_ragged\.csv.*(line|row) 20",
        args=_TABLE_ARGS, why="an odd row with extra fields (a message line)")
    (d / "table_missing_col.csv").write_text(good.replace("gy_deg", "gz_deg"))
    add("table_missing_col", d / "table_missing_col.csv", "events", 2, r"table_missing_col\.csv.*gy_deg",
        args=_TABLE_ARGS, why="column renamed by a newer tracker software")
    crlf = "\ufeff" + good.replace("\n", "\r\n")
    (d / "table_bom_crlf.csv").write_bytes(crlf.encode("utf-8"))
    add("table_bom_crlf", d / "table_bom_crlf.csv", "events", 0, args=_TABLE_ARGS, check=_check_events_ok(),
        why="Windows export: byte-order mark and CRLF")
    (d / "table_semicolon.csv").write_text(_table_text(sep=";"))
    add("table_semicolon", d / "table_semicolon.csv", "events", 0, args=_TABLE_ARGS, check=_check_events_ok(),
        why="semicolon-separated export")
    comma = _table_text(sep=";").replace(".", ",")
    (d / "table_decimal_comma.csv").write_text(comma)
    add("table_decimal_comma", d / "table_decimal_comma.csv", "events", 2, r"table_decimal_comma\.csv.*(line|row) 2",
        args=_TABLE_ARGS, why="a European spreadsheet export with decimal commas must not be misread")
    latin = _table_text().replace("gx_deg", "gx_deg").splitlines()
    latin.insert(0, "# Versuchsperson p01 - Linden Brook Grundschule, Lesepilot (Übung)")
    (d / "table_latin1.csv").write_bytes(("\n".join(latin) + "\n").encode("latin-1"))
    add("table_latin1", d / "table_latin1.csv", "events", 0, args=_TABLE_ARGS, check=_check_events_ok(),
        why="a Latin-1 comment line")
    gaps = good.splitlines()
    for i in range(30, 60):
        t = gaps[i].split(",")[0]
        gaps[i] = f"{t},,n/a" if i % 2 else f"{t},NaN,"
    (d / "table_gaps.csv").write_text("\n".join(gaps) + "\n")
    add("table_gaps", d / "table_gaps.csv", "events", 0, args=_TABLE_ARGS, check=_check_events_ok(valid_max=0.9),
        why="lost samples as empty cells, n/a and NaN")
    (d / "table_dup_time.csv").write_text(_replace_line(good, 15, good.splitlines()[13]))
    add("table_dup_time", d / "table_dup_time.csv", "events", 2, r"table_dup_time\.csv.*(line|row) 15.*(duplicate|repeated|same)",
        args=_TABLE_ARGS, why="a repeated sample")
    (d / "table_one_row.csv").write_text("time_ms,gx_deg,gy_deg\n0.0,1.0,1.0\n")
    add("table_one_row", d / "table_one_row.csv", "events", 0, args=_TABLE_ARGS, check=_check_no_numbers,
        warns="aspectus.events.features:DegenerateWindowWarning",
        why="a recording that stopped after one sample: no events, features NaN, never a made-up rate")
    (d / "table_ms_as_s.csv").write_text(good)
    add("table_ms_as_s", d / "table_ms_as_s.csv", "events", 2, r"table_ms_as_s\.csv.*0\.1 Hz.*look like ms",
        args=[a if a != "ms" else "s" for a in _TABLE_ARGS],
        why="milliseconds declared as seconds: 0.1 Hz and minute-long fixations (issue 17.11)")
    nul = good.splitlines()
    nul[5] = nul[5][:6] + "\x00" + nul[5][6:]
    (d / "table_nul.csv").write_bytes(("\n".join(nul) + "\n").encode())
    add("table_nul", d / "table_nul.csv", "events", 2, r"table_nul\.csv.*line 6.*NUL", args=_TABLE_ARGS,
        why="a NUL byte inside a number was read as a shorter number (issue 17.12)")
    (d / "table_utf16.csv").write_bytes(good.encode("utf-16"))
    add("table_utf16", d / "table_utf16.csv", "events", 2, r"table_utf16\.csv.*UTF-16", args=_TABLE_ARGS,
        why="a spreadsheet's 'Unicode text' export")
    (d / "table_bomb.csv.gz").write_bytes(gzip.compress(b"time_ms,gx_deg,gy_deg\n" + b"0" * (120 << 20), 9))
    add("table_gzip_bomb", d / "table_bomb.csv.gz", "events", 2, r"table_bomb\.csv\.gz.*inflates to more than",
        args=_TABLE_ARGS, why="a small gzip file that inflates a thousandfold (issue 17.10)")
    wide = ",".join([f"c{i}" for i in range(40_000)] + ["c1"])
    (d / "table_wide_dup.csv").write_text(wide + "\n" + ",".join("1" for _ in range(40_001)) + "\n")
    add("table_wide_dup", d / "table_wide_dup.csv", "events", 2, r"table_wide_dup\.csv.*c1 appear",
        args=_TABLE_ARGS, why="a 40,000-field single-line table (issue 17.10: the check was quadratic)")
    add("table_windows_unbounded", d / "table_good.csv", "events", 2, r"--step-s .*less than 1/1000 of --window-s",
        args=_TABLE_ARGS + ["--window-s", "1", "--step-s", "1e-7"], why="windows without bound (issue 17.9)",
        names_file=False)
    add("table_bad_delimiter", d / "table_good.csv", "events", 2, r"delimiter ',,'",
        args=_TABLE_ARGS + ["--delimiter", ",,"], why="two characters as the delimiter", names_file=False)
    (d / "mapping_broken.json").write_text('{"time_col": "time_ms", ')
    add("mapping_broken", d / "mapping_broken.json", "events_mapping", 2, r"mapping_broken\.json",
        args=[str(d / "table_good.csv")], why="a hand-edited mapping file with a syntax error")
    return cases


def write_bids_corpus(folder) -> list[Case]:
    """BIDS eye-tracking recordings with broken sidecars or data (run with ``aspectus validate``)."""
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    cases: list[Case] = []
    base = "sub-p01_ses-s01_task-reading"
    rows = "\n".join(f"{i * 4.0:.1f}\t{512 + i % 7}\t{384 - i % 5}" for i in range(300)) + "\n"
    side = {"SamplingFrequency": 250, "StartTime": 0, "Columns": ["timestamp", "x_coordinate", "y_coordinate"],
            "PhysioType": "eyetrack", "RecordedEye": "right", "SampleCoordinateSystem": "gaze-on-screen",
            "timestamp": {"Units": "ms"}, "x_coordinate": {"Units": "pixel"}, "y_coordinate": {"Units": "pixel"}}

    def rec(sub: str, *, data: bytes | None = None, sidecar=side, sidecar_text: str | None = None) -> Path:
        f = d / sub
        f.mkdir(parents=True, exist_ok=True)
        p = f / f"{base}_recording-eye1_physio.tsv.gz"
        p.write_bytes(gzip.compress(rows.encode()) if data is None else data)
        sj = f / f"{base}_recording-eye1_physio.json"
        if sidecar_text is not None:
            sj.write_text(sidecar_text)
        elif sidecar is not None:
            sj.write_text(json.dumps(sidecar))
        return p

    cases.append(Case("bids_truncated_gzip", rec("trunc_gzip", data=gzip.compress(rows.encode())[:200]), "validate", 2,
                      r"physio\.tsv\.gz", why="a copy cut short"))
    cases.append(Case("bids_no_sidecar", rec("no_sidecar", sidecar=None), "validate", 2,
                      r"physio\.tsv\.gz.*(sidecar|json)", why="the JSON sidecar was not copied"))
    cases.append(Case("bids_bad_json", rec("bad_json", sidecar_text='{"SamplingFrequency": 250,'), "validate", 2,
                      r"physio\.json", why="a hand-edited sidecar with a syntax error"))
    cases.append(Case("bids_columns_mismatch", rec("cols", sidecar=dict(side, Columns=["timestamp", "x_coordinate"])),
                      "validate", 2, r"physio\.(json|tsv\.gz).*Columns", why="the sidecar names 2 columns, the data has 3"))
    cases.append(Case("bids_no_screen", rec("no_screen"), "validate", 2, r"physio\.tsv\.gz.*(screen|Screen)",
                      why="pixel data without the screen geometry"))
    return cases


def write_segments_corpus(folder, clip: Path) -> list[Case]:
    """Task-segment files with the faults hand-made spreadsheets have (given to ``aspectus process``)."""
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    cases = []

    def add(name, text, code, msg=None, check=None, why=""):
        p = d / f"{name}.csv"
        p.write_bytes(text.encode("utf-8") if isinstance(text, str) else text)
        cases.append(Case(name, p, "segments", code, msg, args=[str(clip)], check=check, why=why))

    def seg_check(labels):
        def check(out_dir: Path) -> None:
            f = pd.read_csv(out_dir / "features.csv")
            assert sorted(f.loc[f["scope"] == "segment", "label"]) == sorted(labels), f[["scope", "label"]]
        return check

    add("segments_good", "label,onset_s,offset_s\npassage_1,0.0,0.7\nquestions,0.7,1.4\n", 0,
        check=seg_check(["passage_1", "questions"]), why="control")
    # a bad segment file is refused once, before any clip is processed: an input error (exit 2), not a failed clip
    add("segments_empty", "", 2, r"segments_empty\.csv.*empty")
    add("segments_missing_col", "label,onset_s\npassage_1,0.0\n", 2, r"segments_missing_col\.csv.*offset_s")
    add("segments_reversed", "label,onset_s,offset_s\npassage_1,1.0,0.5\n", 2,
        r"segments_reversed\.csv.*(row|line) (1|2)", why="offset before onset")
    add("segments_text", "label,onset_s,offset_s\npassage_1,zero,0.5\n", 2, r"segments_text\.csv.*(row|line) (1|2)")
    add("segments_binary", b"\x00\x01\x02PK\x03\x04" * 50, 2, r"segments_binary\.csv.*binary", why="a spreadsheet saved as .xlsx, renamed")
    add("segments_bom", "\ufefflabel,onset_s,offset_s\npassage_1,0.0,0.7\nquestions,0.7,1.4\n".encode("utf-8"), 0,
        check=seg_check(["passage_1", "questions"]), why="Excel's CSV UTF-8 starts with a byte-order mark")
    return cases


def write_manifest_corpus(folder, clip: Path) -> list[Case]:
    """Study manifests with the faults hand-made spreadsheets have (planned with ``aspectus batch --dry-run``)."""
    d = Path(folder)
    d.mkdir(parents=True, exist_ok=True)
    cases = []

    def add(name, data, code, msg=None, why=""):
        p = d / f"{name}.csv"
        p.write_bytes(data.encode("utf-8") if isinstance(data, str) else data)
        cases.append(Case(name, p, "batch", code, msg, why=why))

    add("manifest_good", f"participant,session,clip\np01,s01,{clip}\n", 0, why="control")
    add("manifest_empty", "", 2, r"manifest_empty\.csv.*empty")
    add("manifest_binary", bytes(range(256)) * 2, 2, r"manifest_binary\.csv.*not a UTF-8 text", why="a spreadsheet file renamed")
    add("manifest_no_clip_col", "who,file\np01,a.mp4\n", 2, r"manifest_no_clip_col\.csv.*line 1.*'clip'")
    add("manifest_dup", f"participant,clip\np01,{clip}\np01,{clip}\n", 2, r"manifest_dup\.csv.*line 3.*twice")
    add("manifest_extra_cells", f"participant,clip\np01,{clip},x,y\n", 2, r"manifest_extra_cells\.csv.*line 2.*cells",
        why="an unquoted comma in a cell")
    add("manifest_bom", f"\ufeffparticipant,session,clip\np01,s01,{clip}\n", 0, why="Excel's CSV UTF-8 (byte-order mark)")
    add("manifest_case_clash", "participant,clip\np01,a.mp4\np02,A.MP4\n", 2,
        r"manifest_case_clash\.csv.*same output folder", why="two clips whose folders would collide on Windows/macOS")
    return cases


def main(argv=None) -> int:
    out = Path((argv or sys.argv[1:] or ["aspectus-corpus"])[0])
    cases = write_video_corpus(out / "video") + write_reader_corpus(out / "tables") + write_bids_corpus(out / "bids")
    for c in cases:
        print(f"{c.name:22s} {c.command:9s} exit {c.exit_code}  {c.path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
