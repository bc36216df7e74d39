"""Delimited gaze tables into the samples table: mapping, units, and bad files."""
from __future__ import annotations

import gzip
from pathlib import Path

import numpy as np
import pytest

from aspectus.errors import ParameterError, ReferenceFormatError
from aspectus.reference import TableMapping, events_from_labels, read_gaze_table, read_reference
from aspectus.reference.screen import ScreenGeometry

SCREEN = ScreenGeometry(width_mm=531.0, height_mm=299.0, distance_mm=650.0, width_px=1920, height_px=1080)


def _write(tmp_path, text, name="gaze.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


def test_px_table_with_comments_header_and_missing_cells(tmp_path):
    p = _write(tmp_path, "# lab export\n# second comment\nt,gx,gy,ok\n1000,960,540,1\n1004,,540,1\n"
                         "1008,n/a,n/a,1\n1012,1920,540,0\n1016,960,0,1\n")
    m = TableMapping(time_col="t", time_unit="ms", x_col="gx", y_col="gy", units="px", screen=SCREEN,
                     validity_col="ok")
    s = read_gaze_table(p, m)
    assert s["t_s"].tolist() == pytest.approx([0, 0.004, 0.008, 0.012, 0.016])
    assert s.attrs["clock_start_s"] == pytest.approx(1.0)
    assert s["valid"].tolist() == [True, False, False, False, True]
    assert s["yaw_deg"].iloc[0] == pytest.approx(0.0, abs=1e-12)
    # top edge of the screen: 149.5 mm above centre at 650 mm -> atan(149.5/650), up is positive pitch
    assert s["pitch_deg"].iloc[4] == pytest.approx(np.degrees(np.arctan(149.5 / 650.0)), rel=1e-12)
    assert np.isnan(s["yaw_deg"].iloc[3])  # invalid by the validity column


def test_headerless_whitespace_table_with_names_and_degrees(tmp_path):
    p = _write(tmp_path, "0.0  1.5  -2.0\n0.5  3.0  4.0\n1.0  nan  nan\n", name="gaze.txt")
    m = TableMapping(time_col="time", x_col="h", y_col="v", units="deg", column_names=["time", "h", "v"])
    s = read_gaze_table(p, m)
    assert s["yaw_deg"].tolist()[:2] == [1.5, 3.0]
    assert s["pitch_deg"].tolist()[:2] == [-2.0, 4.0]  # degrees: y up by default
    m2 = TableMapping(time_col="time", x_col="h", y_col="v", units="deg", column_names=["time", "h", "v"],
                      y_up=False)
    assert read_gaze_table(p, m2)["pitch_deg"].tolist()[:2] == [2.0, -4.0]


def test_headerless_detected_semicolon_and_index_names(tmp_path):
    p = _write(tmp_path, "0;0.5;0.5\n1;0.75;0.25\n")
    m = TableMapping(time_col="0", x_col="1", y_col="2", units="norm", screen=SCREEN)
    s = read_gaze_table(p, m)
    assert s["yaw_deg"].iloc[0] == pytest.approx(0.0, abs=1e-12)
    # a quarter of the width to the right: atan(132.75 / 650); a quarter of the height up
    assert s["yaw_deg"].iloc[1] == pytest.approx(np.degrees(np.arctan(0.25 * 531 / 650)), rel=1e-12)
    assert s["pitch_deg"].iloc[1] == pytest.approx(np.degrees(np.arctan(0.25 * 299 / 650)), rel=1e-12)


def test_mm_units_and_origins_agree(tmp_path):
    p1 = _write(tmp_path, "t\tx\ty\n0\t265.5\t149.5\n1\t365.5\t49.5\n", "a.tsv")
    p2 = _write(tmp_path, "t\tx\ty\n0\t0\t0\n1\t100\t100\n", "b.tsv")
    a = read_gaze_table(p1, TableMapping(time_col="t", x_col="x", y_col="y", units="mm", screen=SCREEN))
    b = read_gaze_table(p2, TableMapping(time_col="t", x_col="x", y_col="y", units="mm", screen=SCREEN,
                                         origin="center", y_up=True))
    np.testing.assert_allclose(a[["yaw_deg", "pitch_deg"]].to_numpy(), b[["yaw_deg", "pitch_deg"]].to_numpy(),
                               atol=1e-12)
    assert a["pitch_deg"].iloc[1] > 0  # 100 mm above centre is looking up


def test_pixels_read_as_mm_are_an_error_not_a_silent_wrong_angle(tmp_path):
    # px of a 1920 px screen, near its centre, all inside the generous per-row range for mm (-2 to 3 screens):
    # read as mm on a 531 mm screen their median lies 609 mm from its centre, more than half a screen off it
    rows = "".join(f"{k * 4},{874.5 + (k % 5) * 20},{515 + (k % 3) * 10}\n" for k in range(50))
    p = _write(tmp_path, "t,gx,gy\n" + rows)
    ok = read_gaze_table(p, TableMapping(time_col="t", time_unit="ms", x_col="gx", y_col="gy", units="px",
                                         screen=SCREEN))
    assert ok["valid"].all() and abs(ok["yaw_deg"].median()) < 5  # as px: near the screen's centre
    with pytest.raises(ReferenceFormatError) as ei:
        read_gaze_table(p, TableMapping(time_col="t", time_unit="ms", x_col="gx", y_col="gy", units="mm",
                                        screen=SCREEN))
    msg = str(ei.value)
    assert str(p) in msg and "'gx'" in msg and "off the screen" in msg and "perhaps px" in msg
    # measured from the centre, the same mm are off the screen too; small mm offsets from the centre are not
    with pytest.raises(ReferenceFormatError, match="off the screen"):
        read_gaze_table(p, TableMapping(time_col="t", time_unit="ms", x_col="gx", y_col="gy", units="mm",
                                        screen=SCREEN, origin="center"))
    q = _write(tmp_path, "t,gx,gy\n" + "".join(f"{k * 4},{(k % 5) * 20 - 40},{(k % 3) * 10}\n" for k in range(50)),
               "centre.csv")
    assert read_gaze_table(q, TableMapping(time_col="t", time_unit="ms", x_col="gx", y_col="gy", units="mm",
                                           screen=SCREEN, origin="center"))["valid"].all()


def test_gzip_table_and_event_column(tmp_path):
    p = tmp_path / "g.csv.gz"
    body = "time,x,y,ev\n" + "".join(f"{i * 10},{i % 3},{0},{'F' if i < 5 else 'S'}\n" for i in range(8))
    p.write_bytes(gzip.compress(body.encode()))
    m = TableMapping(time_col="time", time_unit="ms", x_col="x", y_col="y", event_col="ev",
                     event_values={"F": "fixation", "S": "saccade"})
    s = read_gaze_table(p, m)
    ev = events_from_labels(s["t_s"], s["event_label"])
    assert ev["type"].tolist() == ["fixation", "saccade"]
    assert ev["onset_s"].tolist() == pytest.approx([0.0, 0.05])
    assert ev["offset_s"].tolist() == pytest.approx([0.05, 0.08])
    assert ev["n_samples"].tolist() == [5, 3]


def test_mapping_round_trip(tmp_path):
    m = TableMapping(time_col="time_ms", time_unit="ms", x_col="x", y_col="y", units="px", screen=SCREEN,
                     validity_values=["ok"], validity_col="status")
    path = m.save(tmp_path / "map.json")
    back = TableMapping.load(path)
    assert back == m
    assert back.screen == SCREEN


@pytest.mark.parametrize("text, mapping, where, words", [
    ("", dict(time_col="t"), None, "empty"),
    ("# only a comment\n", dict(time_col="t"), None, "empty"),
    ("t,x,y\n", dict(time_col="t"), None, "no data rows"),
    ("t,x,y\n0,1,1\n1,2,2\n", dict(time_col="time"), None, "no column 'time'"),
    ("t,x,y\n0,1,1\n1,2,2\n", dict(time_col="t", x_col="gx"), None, "no column 'gx'"),
    ("t,x,y\n0,1,1\n1,abc,2\n", dict(time_col="t"), "row 3", "'abc'"),
    ("t,x,y\n0,1,1\n2,2,2\n1,3,3\n", dict(time_col="t"), "row 4", "backwards"),
    ("t,x,y\n0,1,1\n0,2,2\n", dict(time_col="t"), "row 3", "twice"),
    ("t,x,y\n0,1,1\n,2,2\n", dict(time_col="t"), "row 3", "time column"),
    ("t,x,y\n0,n/a,n/a\n1,,\n", dict(time_col="t"), None, "no valid gaze sample"),
    ("t,x,y\n0,960,540\n1,1200,600\n", dict(time_col="t"), "row 2", "not a plausible position in deg"),
    # a semicolon file read with the comma of a saved mapping: the header is one column, and it says so
    ("t;x;y\n0;1;1\n1;2;2\n", dict(time_col="t", delimiter=","), None, "another delimiter than the one set"),
])
def test_bad_tables_name_file_and_row(tmp_path, text, mapping, where, words):
    p = _write(tmp_path, text)
    m = TableMapping(**{"x_col": "x", "y_col": "y", **mapping})
    with pytest.raises(ReferenceFormatError) as ei:
        read_gaze_table(p, m)
    msg = str(ei.value)
    assert str(p) in msg
    assert words in msg
    if where:
        assert f"({where})" in msg


def test_ragged_rows_are_an_error(tmp_path):
    p = _write(tmp_path, "t,x,y\n0,1,1\n1,2,2,5\n")
    with pytest.raises(ReferenceFormatError, match="different numbers of fields|columns"):
        read_gaze_table(p, TableMapping(time_col="t", x_col="x", y_col="y"))


def test_mapping_errors_before_reading():
    with pytest.raises(ParameterError, match="screen geometry"):
        TableMapping(time_col="t", x_col="x", y_col="y", units="px")
    with pytest.raises(ParameterError, match="resolution"):
        TableMapping(time_col="t", x_col="x", y_col="y", units="px",
                     screen=ScreenGeometry(width_mm=500, height_mm=300, distance_mm=600))
    with pytest.raises(ParameterError, match="position unit"):
        TableMapping(time_col="t", x_col="x", y_col="y", units="inch")
    with pytest.raises(ParameterError, match="time unit"):
        TableMapping(time_col="t", time_unit="min", x_col="x", y_col="y")


def test_bad_mapping_file(tmp_path):
    p = _write(tmp_path, "{not json", "m.json")
    with pytest.raises(ReferenceFormatError, match="not valid JSON"):
        TableMapping.load(p)
    p.write_text('{"time_col": "t", "x_col": "x", "y_col": "y", "colour": "red"}')
    with pytest.raises(ReferenceFormatError, match="unknown table mapping field"):
        TableMapping.load(p)
    with pytest.raises(ReferenceFormatError, match="not found"):
        TableMapping.load(tmp_path / "absent.json")
    # another JSON file given as a mapping (here a study file) is named as such, with where a mapping comes from,
    # not answered with the mapping fields it lacks
    p.write_text('{"format": "aspectus.study", "clips": [], "analysis": {}}')
    with pytest.raises(ReferenceFormatError, match=r"is not a table mapping.*--save-mapping"):
        TableMapping.load(p)


def test_read_reference_needs_a_mapping_for_tables(tmp_path):
    p = _write(tmp_path, "t,x,y\n0,1,1\n")
    with pytest.raises(ReferenceFormatError, match="mapping"):
        read_reference(p)


def test_reference_readers_registry_chooses_by_file_name(tmp_path):
    """read_reference asks the registry (one place) which reader a file name needs; tables need a mapping."""
    from aspectus.errors import ReferenceFormatError
    from aspectus.reference import READERS, ReferenceFormat, read_reference

    assert [f.name for f in READERS] == ["bids"]
    assert READERS[0].matches(Path("sub-p01_task-x_physio.tsv.gz")) and not READERS[0].matches(Path("x.csv"))
    seen = []
    READERS.append(ReferenceFormat("test", lambda p: p.suffix == ".xyz", lambda p, **kw: seen.append(p) or "read"))
    try:
        f = tmp_path / "rec.xyz"
        f.write_text("anything")
        assert read_reference(f) == "read" and seen == [f]
    finally:
        READERS.pop()
    with pytest.raises(ReferenceFormatError, match="no column mapping"):
        read_reference(tmp_path / "rec.xyz")


def test_project_warnings_share_one_base_class():
    from aspectus.errors import AspectusWarning
    from aspectus.events.features import DegenerateWindowWarning
    from aspectus.validation.agreement import AgreementWarning

    assert issubclass(DegenerateWindowWarning, AspectusWarning) and issubclass(AgreementWarning, AspectusWarning)
