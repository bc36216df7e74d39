"""Property-based tests (hypothesis) of the reference readers and the segment/manifest parsers.

Two kinds of property:

* robustness - for any bytes, and for near-valid tables with odd cells, each
  parser returns a well-formed result or raises ``AspectusInputError`` naming
  the file (``tests/fuzz/targets.py`` states the rule; the atheris target in
  ``tests/fuzz/fuzz_readers.py`` uses the same rule);
* correctness - a table written from known numbers reads back as those numbers
  (times in seconds from the first sample, angles unchanged, lost samples
  invalid), whatever the delimiter, line endings and missing-value spelling.
"""
from __future__ import annotations

import gzip
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "fuzz"))
import targets  # noqa: E402

from aspectus.errors import AspectusInputError  # noqa: E402

FUZZ = settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                        HealthCheck.too_slow])

#: characters lab exports are made of, plus some trouble
CSV_CHARS = st.sampled_from(list("0123456789.,;\t -+eE\n\r\"#abxyt_") + ["nan", "n/a", "inf", "\x00", "é", "\ufeff"])


def _csvish(min_size=0, max_size=400):
    return st.lists(CSV_CHARS, min_size=min_size, max_size=max_size).map("".join).map(lambda s: s.encode("utf-8"))


CELL = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True, width=32).map(lambda v: f"{v:.6g}"),
    st.integers(-10**12, 10**12).map(str),
    st.sampled_from(["", "n/a", "NA", "NaN", "-", ".", "LOST", "1e400", "-0", "0x1f", " 3.5 ", "1,5", '"2"', "∞"]),
)


@st.composite
def near_valid_table(draw, header=("t", "x", "y")):
    """A header and rows that are mostly numbers, sometimes not; odd delimiters and line ends."""
    sep = draw(st.sampled_from([",", ";", "\t", " "]))
    eol = draw(st.sampled_from(["\n", "\r\n"]))
    n = draw(st.integers(0, 40))
    rows = [sep.join(header)]
    t = 0.0
    for _ in range(n):
        t += draw(st.sampled_from([4.0, 4.0, 4.0, 0.0, -4.0, 1e-3]))
        cells = [f"{t:.3f}", draw(CELL), draw(CELL)]
        if draw(st.integers(0, 20)) == 0:
            cells = cells[: draw(st.integers(0, 4))] + [draw(CELL)] * draw(st.integers(0, 2))
        rows.append(sep.join(cells))
    if draw(st.booleans()):
        rows.insert(0, "# recorded at Linden Brook Primary School, reading pilot")
    return (eol.join(rows) + eol).encode(draw(st.sampled_from(["utf-8", "utf-8-sig", "latin-1"])), errors="replace")


@pytest.mark.parametrize("target", sorted(targets.TARGETS))
@FUZZ
@given(data=st.one_of(st.binary(max_size=600), _csvish()))
@example(data=b"")
@example(data=b"\x00" * 64)
@example(data=b"\xff\xfe\x00t\x00,\x00x\x00")  # UTF-16 with BOM
def test_any_bytes_give_a_result_or_a_clear_error(target, data):
    targets.check_outcome(target, data)


@FUZZ
@given(data=near_valid_table())
@example(data=b"t,x,y\n0,1,2\n0,1,2\n")
@example(data=b"t,x,y\n0,1e400,2\n4,1,2\n")
@example(data=b"t;x;y\r\n0,0;1,5;2,0\r\n")
def test_near_valid_gaze_tables(data):
    targets.check_outcome("table", data)


@FUZZ
@given(data=near_valid_table(header=("label", "onset_s", "offset_s")))
@example(data=b"label,onset_s,offset_s\n,0,1\n")
@example(data=b"label,onset_s,offset_s\nq,inf,1\n")
def test_near_valid_segment_files(data):
    targets.check_outcome("segments", data)


@FUZZ
@given(data=near_valid_table(header=("timestamp", "x_coordinate", "y_coordinate")))
def test_near_valid_bids_recordings(data):
    # BIDS physio files have no header row: drop it, keep the rows
    body = b"\n".join(data.splitlines()[1:]) + b"\n"
    targets.check_outcome("bids", body)


@FUZZ
@given(rows=st.lists(st.tuples(st.sampled_from(["p01", "p02", "p03", "", "../x", "a b", ".hidden", "é"]),
                               st.sampled_from(["s01", "s02", ""]),
                               st.sampled_from(["clip.mp4", "p01/clip.mp4", "../clip.mp4", "", "clip.MP4",
                                                "sub dir/clip.mov", "/abs/clip.mp4", "clip.mp4;x"])),
                     min_size=0, max_size=8),
       sep=st.sampled_from([",", ";", "\t"]))
def test_manifests_give_safe_distinct_output_keys(rows, sep):
    text = sep.join(("participant", "session", "clip")) + "\n"
    text += "".join(sep.join(r) + "\n" for r in rows)
    targets.check_outcome("manifest", text.encode())


# --- correctness: known numbers read back unchanged -----------------------------------------

@settings(max_examples=60, deadline=None)
@given(t0_ms=st.floats(0, 1e7), dt_ms=st.sampled_from([1.0, 2.0, 4.0, 16.667, 33.3]),
       xy=st.lists(st.tuples(st.floats(-40, 40), st.floats(-30, 30)), min_size=2, max_size=60),
       lost=st.sets(st.integers(0, 59), max_size=10), sep=st.sampled_from([",", ";", "\t"]),
       eol=st.sampled_from(["\n", "\r\n"]), missing=st.sampled_from(["", "n/a", "NaN", "NA"]))
def test_a_written_table_reads_back_as_written(tmp_path_factory, t0_ms, dt_ms, xy, lost, sep, eol, missing):
    from aspectus.reference import TableMapping, read_gaze_table

    folder = tmp_path_factory.mktemp("roundtrip")
    n = len(xy)
    t_ms = t0_ms + dt_ms * np.arange(n)
    lines = [sep.join(("t", "x", "y"))]
    for i, ((x, y), t) in enumerate(zip(xy, t_ms)):
        cells = (f"{t:.6f}", missing, missing) if i in lost else (f"{t:.6f}", f"{x:.6f}", f"{y:.6f}")
        lines.append(sep.join(cells))
    p = folder / "gaze_table.csv"
    p.write_bytes((eol.join(lines) + eol).encode())
    mapping = TableMapping(time_col="t", time_unit="ms", x_col="x", y_col="y", units="deg")
    want_valid = np.array([i not in lost for i in range(n)])
    if not want_valid.any():
        with pytest.raises(AspectusInputError, match="gaze_table.csv.*no valid gaze sample"):
            read_gaze_table(p, mapping)
        return
    df = read_gaze_table(p, mapping)
    assert len(df) == n
    np.testing.assert_allclose(df["t_s"].to_numpy(), (t_ms - t_ms[0]) / 1000.0, atol=2e-6)
    np.testing.assert_array_equal(df["valid"].to_numpy(), want_valid)
    got = df.loc[want_valid, ["yaw_deg", "pitch_deg"]].to_numpy()
    want = np.round(np.array(xy, float)[want_valid], 6)
    np.testing.assert_allclose(got, want, atol=1e-6)  # deg in, deg out (y up for degrees)


@settings(max_examples=60, deadline=None)
@given(segs=st.lists(st.tuples(st.text(st.characters(whitelist_categories=("L", "N")), min_size=1, max_size=12),
                               st.floats(0, 1e4), st.floats(1e-3, 1e3)), min_size=1, max_size=12))
def test_a_written_segment_file_reads_back_as_written(tmp_path_factory, segs):
    from aspectus.events.segments import read_segments

    p = tmp_path_factory.mktemp("seg") / "segments.csv"
    p.write_text("label,onset_s,offset_s\n" + "".join(f"{lab},{on:.6f},{on + d:.6f}\n" for lab, on, d in segs),
                 encoding="utf-8")
    df = read_segments(p)
    assert list(df["label"]) == [lab for lab, _, _ in segs]
    np.testing.assert_allclose(df["onset_s"], [round(on, 6) for _, on, _ in segs])
    np.testing.assert_allclose(df["offset_s"], [float(f"{on + d:.6f}") for _, on, d in segs])


@settings(max_examples=60, deadline=None)
@given(t0_ms=st.floats(0, 1e6), n=st.integers(5, 40), row=st.integers(0, 39), col=st.integers(0, 30))
def test_a_nul_byte_anywhere_in_a_table_is_refused_never_read(tmp_path_factory, t0_ms, n, row, col):
    """Issue 17.12: a NUL ended a cell early (6.7\\x00574 was read as 6.0); wherever it is, the file is refused."""
    from aspectus.reference import TableMapping, read_gaze_table

    lines = ["t,x,y"] + [f"{t0_ms + 4.0 * i:.3f},{np.sin(i):.4f},{np.cos(i):.4f}" for i in range(n)]
    k = 1 + row % n
    c = col % len(lines[k])
    lines[k] = lines[k][:c] + "\x00" + lines[k][c:]
    p = tmp_path_factory.mktemp("nul") / "gaze_table.csv"
    p.write_bytes(("\n".join(lines) + "\n").encode())
    with pytest.raises(AspectusInputError, match=rf"gaze_table\.csv \(line {k + 1}\).*NUL"):
        read_gaze_table(p, TableMapping(time_col="t", time_unit="ms", x_col="x", y_col="y", units="deg"))


@settings(max_examples=40, deadline=None)
@given(segs=st.lists(st.tuples(st.sampled_from(["passage_1", "questions", "Übung"]), st.floats(0, 100),
                               st.floats(0.01, 10)), min_size=1, max_size=6))
def test_a_byte_order_mark_changes_nothing(tmp_path_factory, segs):
    """Excel's "CSV UTF-8" starts with a byte-order mark: segments, mappings and sidecars read the same with it."""
    import json

    from aspectus.events.segments import read_segments
    from aspectus.reference import TableMapping
    from aspectus.reference.bids import _load_json

    d = tmp_path_factory.mktemp("bom")
    text = "label,onset_s,offset_s\n" + "".join(f"{lab},{on:.4f},{on + dur:.4f}\n" for lab, on, dur in segs)
    (d / "a.csv").write_bytes(text.encode("utf-8"))
    (d / "b.csv").write_bytes(text.encode("utf-8-sig"))
    assert read_segments(d / "a.csv").equals(read_segments(d / "b.csv"))
    m = json.dumps({"time_col": "t", "x_col": "x", "y_col": "y", "time_unit": "ms"})
    (d / "m.json").write_bytes(m.encode("utf-8-sig"))
    assert TableMapping.load(d / "m.json").time_unit == "ms"
    (d / "s_physio.json").write_bytes(json.dumps(targets.BIDS_SIDECAR).encode("utf-8-sig"))
    assert _load_json(d / "s_physio.json") == targets.BIDS_SIDECAR


def test_plain_tsv_named_tsv_gz_reads_like_the_gzipped_file(tmp_path):
    """A recording saved uncompressed under a .tsv.gz name gives the same samples as the real gzip file."""
    rows = "".join(f"{i * 4.0}\t{np.sin(i / 5):.4f}\t{np.cos(i / 5):.4f}\n" for i in range(100)).encode()
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    targets.read_bids_target(rows, tmp_path / "a", compress=True)
    targets.read_bids_target(rows, tmp_path / "b", compress=False)
    from aspectus.reference.bids import read_bids_physio

    name = "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz"
    a = read_bids_physio(tmp_path / "a" / name).samples
    b = read_bids_physio(tmp_path / "b" / name).samples
    np.testing.assert_allclose(a["t_s"], b["t_s"])
    np.testing.assert_allclose(a["yaw_deg"], b["yaw_deg"])
    assert gzip.decompress((tmp_path / "a" / name).read_bytes()) == rows


def test_atheris_target_runs_without_atheris():
    """The fuzz script's entry point loads and refuses cleanly when atheris is absent or no target is given."""
    import runpy

    mod = runpy.run_path(str(Path(__file__).resolve().parents[1] / "fuzz" / "fuzz_readers.py"), run_name="not_main")
    try:
        import atheris  # noqa: F401
    except ImportError:
        assert mod["main"](["fuzz_readers.py", "table"]) == 2
    else:
        assert mod["main"](["fuzz_readers.py"]) == 2


def test_the_rule_catches_a_parser_that_crashes(monkeypatch):
    """The outcome rule is not vacuous: a parser raising KeyError, or an error not naming the file, is a failure."""
    from aspectus.errors import AspectusInputError

    def crashes(data, folder):
        raise KeyError("x")

    def vague(data, folder):
        raise AspectusInputError("bad value")

    monkeypatch.setitem(targets.TARGETS, "table", crashes)
    with pytest.raises(targets.FuzzFailure, match="KeyError"):
        targets.check_outcome("table", b"t,x,y\n")
    monkeypatch.setitem(targets.TARGETS, "table", vague)
    with pytest.raises(targets.FuzzFailure, match="does not name the file"):
        targets.check_outcome("table", b"t,x,y\n")


def test_outcomes_of_known_inputs():
    good = b"t,x,y\n" + b"".join(f"{i * 4},{i % 3},{i % 5}\n".encode() for i in range(20))
    assert targets.check_outcome("table", good) == "ok"
    assert targets.check_outcome("table", b"") == "input error"
    assert targets.check_outcome("segments", b"label,onset_s,offset_s\nq,0,1\n") == "ok"
    assert targets.check_outcome("segments", b"label,onset_s,offset_s\nq,1,0\n") == "input error"
    assert targets.check_outcome("manifest", b"clip\na.mp4\nb/a.mp4\n") == "ok"
    assert targets.check_outcome("manifest", b"clip\na.mp4\na.mp4\n") == "input error"
    assert targets.check_outcome("gzip_table", gzip.compress(good)) == "ok"
    assert targets.check_outcome("gzip_table", gzip.compress(good)[:-9]) == "input error"  # cut short
    assert targets.check_outcome("gzip_table", gzip.compress(b"t,x,y\n" + b"0" * (80 << 20))) == "input error"
    assert targets.check_outcome("table", b"t,x,y\n0,6.7\x00574,1\n4,1,1\n8,1,1\n") == "input error"
    assert targets.check_outcome("study", b"{") == "input error"
