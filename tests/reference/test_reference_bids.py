"""BIDS eye-tracking recordings: write, read back, inheritance, and files that break the standard's rules.

The file layout follows the BIDS specification's eye-tracking appendix (from
memory, as summarised in the field notes): headerless ``*_physio.tsv.gz``,
columns named in the sidecar, ``n/a`` for missing, screen geometry in the
task's ``*_events.json`` ``StimulusPresentation``.
"""
from __future__ import annotations

import gzip
import json

import numpy as np
import pandas as pd
import pytest

from aspectus.errors import ReferenceFormatError
from aspectus.reference import read_bids_physio, read_reference, write_bids_physio
from aspectus.reference.screen import ScreenGeometry

SCREEN = ScreenGeometry(width_mm=380.0, height_mm=300.0, distance_mm=670.0, width_px=1024, height_px=768)
BASE = "sub-p02_ses-s01_task-reading"


def _table(n=50, rate=500.0):
    t_ms = 777_000.0 + np.arange(n) * 1e3 / rate
    x = np.full(n, 512.0)
    x[n // 2:] = 612.0
    y = np.full(n, 384.0)
    x[5] = y[5] = np.nan
    return pd.DataFrame({"timestamp": t_ms, "x_coordinate": x, "y_coordinate": y, "pupil_size": np.full(n, 900.0)})


def _write(tmp_path, n=50, rate=500.0, events=None):
    return write_bids_physio(tmp_path, _table(n, rate), base=BASE, sampling_frequency_hz=rate, screen=SCREEN,
                             events=events)


def test_round_trip_samples_screen_events(tmp_path):
    ev = pd.DataFrame({"onset": [777_000.0, 777_050.0, 777_052.0, 777_020.0], "duration": [50.0, 2.0, 46.0, 0.0],
                       "trial_type": ["fixation", "saccade", "fixation", "n/a"], "blink": [0, 0, 0, 0],
                       "message": ["n/a", "n/a", "n/a", "page_1"]})
    paths = _write(tmp_path, events=ev)
    raw = gzip.decompress(paths["physio"].read_bytes()).decode()
    first = raw.splitlines()[0].split("\t")
    assert first[0] == "777000.0" and len(first) == 4  # no header row, four columns
    assert "n/a" in raw.splitlines()[5]
    rec = read_bids_physio(paths["physio"])
    s = rec.samples
    assert rec.rate_hz == pytest.approx(500.0)
    assert rec.screen == ScreenGeometry(width_mm=380.0, height_mm=300.0, distance_mm=670.0, width_px=1024,
                                        height_px=768)
    assert rec.clock_start_s == pytest.approx(777.0)
    assert s["t_s"].iloc[1] == pytest.approx(0.002)
    assert not s["valid"].iloc[5]
    assert s["yaw_deg"].iloc[0] == pytest.approx(0.0, abs=1e-12)
    # 100 px right on a 1024 px / 380 mm screen at 670 mm (field notes, "Visual angle")
    assert s["yaw_deg"].iloc[-1] == pytest.approx(np.degrees(np.arctan(100 * 380 / 1024 / 670)), rel=1e-12)
    assert rec.events["type"].tolist() == ["fixation", "saccade", "fixation"]
    assert rec.events["onset_s"].tolist() == pytest.approx([0.0, 0.05, 0.052])
    assert rec.events["duration_ms"].tolist() == pytest.approx([50.0, 2.0, 46.0])
    assert rec.messages["label"].tolist() == ["page_1"]
    assert rec.messages["t_s"].tolist() == pytest.approx([0.02])
    assert read_reference(paths["physio"]).samples.equals(s)


def test_inherited_events_json_from_parent_folder(tmp_path):
    sub = tmp_path / "sub-p02" / "ses-s01" / "beh"
    paths = _write(sub)
    paths["events_json"].unlink()
    (tmp_path / "task-reading_events.json").write_text(json.dumps({"StimulusPresentation": {
        "ScreenDistance": 0.67, "ScreenSize": [0.38, 0.30], "ScreenResolution": [1024, 768],
        "ScreenOrigin": ["top", "left"]}}))
    rec = read_bids_physio(paths["physio"])
    assert rec.screen.distance_mm == pytest.approx(670.0)


def test_no_timestamp_column_uses_sampling_frequency(tmp_path):
    tab = _table().drop(columns=["timestamp"])
    paths = write_bids_physio(tmp_path, tab, base=BASE, sampling_frequency_hz=250.0, screen=SCREEN)
    rec = read_bids_physio(paths["physio"])
    assert rec.samples["t_s"].iloc[-1] == pytest.approx(49 / 250.0)


def _edit_sidecar(path, **changes):
    d = json.loads(path.read_text())
    for k, v in changes.items():
        if v is None:
            d.pop(k, None)
        else:
            d[k] = v
    path.write_text(json.dumps(d))


@pytest.mark.parametrize("change, words", [
    (dict(Columns=["timestamp", "x_coordinate", "y_coordinate"]), "4 columns but the sidecar's \"Columns\" names 3"),
    (dict(SamplingFrequency=1000.0), "SamplingFrequency\" says 1000 Hz but the timestamps run at 500 Hz"),
    (dict(Columns=None), "no \"Columns\""),
    (dict(SamplingFrequency="fast"), "SamplingFrequency"),
    (dict(PhysioType="ecg"), "PhysioType"),
    (dict(x_coordinate={"Units": "furlong"}, y_coordinate={"Units": "furlong"}), "'furlong' is not understood"),
    (dict(x_coordinate={"Units": "deg"}), "x_coordinate is in 'deg' but y_coordinate in 'pixel'"),
    (dict(timestamp={"Units": "hours"}), "not a time unit"),
])
def test_sidecar_disagreeing_with_data(tmp_path, change, words):
    paths = _write(tmp_path)
    _edit_sidecar(paths["physio_json"], **change)
    with pytest.raises(ReferenceFormatError) as ei:
        read_bids_physio(paths["physio"])
    assert words in str(ei.value)
    assert ".json" in str(ei.value) or ".tsv.gz" in str(ei.value)


def test_missing_sidecar_and_missing_screen(tmp_path):
    paths = _write(tmp_path)
    paths["events_json"].unlink()
    with pytest.raises(ReferenceFormatError, match="need the screen geometry"):
        read_bids_physio(paths["physio"])
    rec = read_bids_physio(paths["physio"], screen=SCREEN)  # the user can supply it
    assert rec.samples["valid"].sum() == 49
    paths["physio_json"].unlink()
    with pytest.raises(ReferenceFormatError, match=r"no JSON sidecar \(\*_physio.json\)"):
        read_bids_physio(paths["physio"])


def test_screen_given_in_millimetres_is_caught(tmp_path):
    paths = _write(tmp_path)
    paths["events_json"].write_text(json.dumps({"StimulusPresentation": {
        "ScreenDistance": 670, "ScreenSize": [380, 300], "ScreenResolution": [1024, 768]}}))
    with pytest.raises(ReferenceFormatError, match="BIDS wants metres"):
        read_bids_physio(paths["physio"])


def _rewrite_rows(path, fn):
    lines = gzip.decompress(path.read_bytes()).decode().splitlines()
    path.write_bytes(gzip.compress(("\n".join(fn(lines)) + "\n").encode()))


def test_backwards_timestamps_name_the_row(tmp_path):
    paths = _write(tmp_path)
    _rewrite_rows(paths["physio"], lambda ls: ls[:10] + [ls[11], ls[10]] + ls[12:])
    with pytest.raises(ReferenceFormatError, match=r"\(row 12\): timestamps go backwards"):
        read_bids_physio(paths["physio"])


def test_all_na_and_empty_and_bad_cell(tmp_path):
    paths = _write(tmp_path)
    _rewrite_rows(paths["physio"], lambda ls: [ln.split("\t")[0] + "\tn/a\tn/a\tn/a" for ln in ls])
    with pytest.raises(ReferenceFormatError, match="no valid gaze sample"):
        read_bids_physio(paths["physio"])
    _rewrite_rows(paths["physio"], lambda ls: ls[:3] + ["777006.0\tleft\t3\t4"] + ls[4:])
    with pytest.raises(ReferenceFormatError, match=r"\(row 4\).*'left', expected a number"):
        read_bids_physio(paths["physio"])
    paths["physio"].write_bytes(gzip.compress(b""))
    with pytest.raises(ReferenceFormatError, match="empty"):
        read_bids_physio(paths["physio"])


def test_wrong_units_in_sidecar_are_caught(tmp_path):
    paths = _write(tmp_path)  # pixel data labelled as degrees
    _edit_sidecar(paths["physio_json"], x_coordinate={"Units": "deg"}, y_coordinate={"Units": "deg"},
                  SampleCoordinateUnits="deg")
    with pytest.raises(ReferenceFormatError, match="not a plausible position in deg"):
        read_bids_physio(paths["physio"])


def test_not_a_physio_file(tmp_path):
    p = tmp_path / "gaze.tsv"
    p.write_text("0\t1\t2\n")
    with pytest.raises(ReferenceFormatError, match="_physio.tsv.gz"):
        read_bids_physio(p)
    with pytest.raises(ReferenceFormatError, match="not found"):
        read_bids_physio(tmp_path / "sub-x_task-y_physio.tsv.gz")
