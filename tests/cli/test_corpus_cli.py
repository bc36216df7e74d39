"""Every input of the bad-input corpus (tests/corpus.py) through the ``aspectus`` command line.

Each case must end as its :class:`corpus.Case` says: a clear error naming the
file and the cause (exit status + message), or a result whose quality
figures report the problem (checks on run.json and the outputs). Never a
traceback, a hang (each case has a timeout) or a silent wrong number.
"""
from __future__ import annotations

import importlib
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import corpus  # noqa: E402

from aspectus.cli import main as cli_main  # noqa: E402

VIDEO_CASES = ("empty", "text_renamed", "folder", "missing", "fifo", "face_index_absent", "audio_only", "zero_frames", "huge", "good",
               "truncated_mp4", "truncated_mkv", "damaged_middle", "wrong_extension", "fps5", "fps120", "vfr",
               "rotated90", "no_face", "face_2pct", "two_faces", "extreme_pose", "dark")
TABLE_CASES = ("table_good", "table_empty", "table_header_only", "table_binary", "table_text_cell",
               "table_backwards", "table_bad_time", "table_ragged", "table_missing_col", "table_bom_crlf",
               "table_semicolon", "table_decimal_comma", "table_latin1", "table_gaps", "table_dup_time",
               "table_one_row", "mapping_broken", "table_ms_as_s", "table_nul", "table_utf16", "table_gzip_bomb",
               "table_wide_dup", "table_windows_unbounded", "table_bad_delimiter")
BIDS_CASES = ("bids_truncated_gzip", "bids_no_sidecar", "bids_bad_json", "bids_columns_mismatch", "bids_no_screen")
MANIFEST_CASES = ("manifest_good", "manifest_empty", "manifest_binary", "manifest_no_clip_col", "manifest_dup",
                  "manifest_extra_cells", "manifest_case_clash", "manifest_bom")
SEGMENT_CASES = ("segments_good", "segments_empty", "segments_missing_col", "segments_reversed", "segments_text",
                 "segments_binary", "segments_bom")


@pytest.fixture(scope="session")
def corpus_dir(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("corpus")


@pytest.fixture(scope="session")
def video_cases(corpus_dir):
    return {c.name: c for c in corpus.write_video_corpus(corpus_dir / "video")}


@pytest.fixture(scope="session")
def reader_cases(corpus_dir):
    return {c.name: c for c in corpus.write_reader_corpus(corpus_dir / "tables")}


@pytest.fixture(scope="session")
def processed_good(video_cases, corpus_dir):
    """The control clip processed once: the webcam side for the reference-reader cases."""
    out = corpus_dir / "out_good"
    code = cli_main(["process", str(video_cases["good"].path), "-o", str(out), "--quiet"])
    assert code == 0
    return out / video_cases["good"].path.stem


@pytest.fixture(scope="session")
def bids_cases(corpus_dir):
    return {c.name: c for c in corpus.write_bids_corpus(corpus_dir / "bids")}


@pytest.fixture(scope="session")
def segment_cases(corpus_dir, video_cases):
    return {c.name: c for c in corpus.write_segments_corpus(corpus_dir / "segments", video_cases["good"].path)}


@pytest.fixture(scope="session")
def manifest_cases(corpus_dir, video_cases):
    return {c.name: c for c in corpus.write_manifest_corpus(corpus_dir / "manifests", video_cases["good"].path)}


def _argv(case: corpus.Case, out: Path, *, webcam: Path | None = None) -> list[str]:
    if case.command == "process":
        return ["process", str(case.path), "-o", str(out), "--quiet", "--no-reuse", *case.args]
    if case.command == "segments":
        return ["process", case.args[0], "--segments", str(case.path), "-o", str(out), "--quiet", "--no-reuse"]
    if case.command == "events":
        return ["events", str(case.path), "-o", str(out), *case.args]
    if case.command == "events_mapping":
        return ["events", case.args[0], "--mapping", str(case.path), "-o", str(out)]
    if case.command == "batch":
        return ["batch", str(case.path), "-o", str(out), "--dry-run", "--quiet"]
    if case.command == "validate":
        return ["validate", str(webcam), str(case.path), "-o", str(out), "--no-figures", *case.args]
    raise AssertionError(f"unknown corpus command {case.command}")


def _result_dir(case: corpus.Case, out: Path) -> Path:
    if case.command == "process":
        return out / case.path.stem
    if case.command == "segments":
        return out / Path(case.args[0]).stem
    return out


def _run_case(case: corpus.Case, out: Path, capsys, *, webcam: Path | None = None) -> None:
    capsys.readouterr()
    if case.warns:
        mod, _, cls = case.warns.partition(":")
        with pytest.warns(getattr(importlib.import_module(mod), cls)):
            code = cli_main(_argv(case, out, webcam=webcam))
    else:
        code = cli_main(_argv(case, out, webcam=webcam))
    err = capsys.readouterr().err
    assert "Traceback" not in err, err
    assert code == case.exit_code, f"{case.name} ({case.why}): exit {code}, expected {case.exit_code}\n{err}"
    if case.message:
        assert re.search(case.message, err, re.I | re.S), f"{case.name}: message {err!r} does not match {case.message!r}"
        line = [ln for ln in err.splitlines() if "error:" in ln][0]
        # the file itself, or (BIDS) its sidecar beside it
        if case.names_file:
            assert str(case.path) in line or str(case.path.parent) in line, f"the error does not name the file: {line}"
        assert all(ch.isprintable() for ch in line), f"control characters in the message: {line!r}"
    if case.exit_code == 0:
        if case.check is not None:
            case.check(_result_dir(case, out))
    else:
        # a failed input leaves no finished-looking result behind
        assert not (_result_dir(case, out) / "run.json").exists()


def test_corpus_lists_every_case(video_cases, reader_cases, bids_cases, segment_cases, manifest_cases):
    assert set(manifest_cases) == set(MANIFEST_CASES)
    assert set(video_cases) == set(VIDEO_CASES)
    assert set(reader_cases) == set(TABLE_CASES)
    assert set(bids_cases) == set(BIDS_CASES)
    assert set(segment_cases) == set(SEGMENT_CASES)


@pytest.mark.slow
@pytest.mark.timeout(180)
@pytest.mark.parametrize("name", VIDEO_CASES)
def test_video_case(name, video_cases, tmp_path, capsys):
    _run_case(video_cases[name], tmp_path / "out", capsys)


@pytest.mark.timeout(60)
@pytest.mark.parametrize("name", TABLE_CASES)
def test_table_case(name, reader_cases, tmp_path, capsys):
    _run_case(reader_cases[name], tmp_path / "out", capsys)


@pytest.mark.slow
@pytest.mark.timeout(120)
@pytest.mark.parametrize("name", BIDS_CASES)
def test_bids_case(name, bids_cases, processed_good, tmp_path, capsys):
    _run_case(bids_cases[name], tmp_path / "out", capsys, webcam=processed_good)


@pytest.mark.slow
@pytest.mark.timeout(120)
@pytest.mark.parametrize("name", SEGMENT_CASES)
def test_segments_case(name, segment_cases, tmp_path, capsys):
    _run_case(segment_cases[name], tmp_path / "out", capsys)


def test_a_bad_segment_file_is_said_once_for_all_clips(segment_cases, tmp_path, capsys):
    """The file applies to every clip: it is read before any clip runs (the error was printed once per clip)."""
    case = segment_cases["segments_missing_col"]
    clips = [tmp_path / "p01_s01.mp4", tmp_path / "p02_s01.mp4"]  # never opened: the segment file stops the run
    code = cli_main(["process", *map(str, clips), "--segments", str(case.path), "-o", str(tmp_path / "out"), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and err.count("segments_missing_col.csv") == 1 and "offset_s" in err, err
    assert not (tmp_path / "out").exists()


@pytest.mark.slow
@pytest.mark.timeout(60)
@pytest.mark.parametrize("name", MANIFEST_CASES)
def test_manifest_case(name, manifest_cases, tmp_path, capsys):
    _run_case(manifest_cases[name], tmp_path / "out", capsys)


@pytest.mark.slow
@pytest.mark.timeout(240)
def test_several_bad_clips_in_one_run_do_not_stop_the_good_one(video_cases, tmp_path):
    """A real process: bad clips fail one line each, the good clip still finishes, exit status 1."""
    clips = [video_cases[n].path for n in ("empty", "text_renamed", "good", "no_face")]
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[2]))
    proc = subprocess.run([sys.executable, "-m", "aspectus", "process", *map(str, clips), "-o", str(tmp_path),
                           "--quiet"], capture_output=True, text=True, env=env, timeout=220)
    assert proc.returncode == 1, proc.stderr
    assert "Traceback" not in proc.stderr
    errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("aspectus: error:")]
    assert len(errors) == 3, proc.stderr
    assert "3 of 4 clip(s) failed" in proc.stderr
    assert (tmp_path / "good" / "run.json").is_file()
    assert not (tmp_path / "no_face" / "run.json").exists()
