"""`aspectus events TABLE -o OUTDIR` on foreign gaze tables and on aspectus samples tables."""
from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from _signals import step_signal

from aspectus.atomic import sha256_file
from aspectus.cli import main
from aspectus.reference.screen import ScreenGeometry

SCREEN = ScreenGeometry(width_mm=380.0, height_mm=300.0, distance_mm=670.0, width_px=1024, height_px=768)
PX_OPTS = ["--screen-size-mm", "380", "300", "--screen-res-px", "1024", "768", "--distance-mm", "670"]


def _px_table(path, *, delimiter=";", t0_ms=5000.0, rate=60.0):
    df, truth = step_signal(rate_hz=rate, noise_sd_deg=0.02)
    x, y = SCREEN.deg_to_px(df.yaw_deg.to_numpy(), df.pitch_deg.to_numpy())
    rows = ["# Linden Brook Primary School reading pilot, p01 s01 (invented demo data)", f"time{delimiter}gx{delimiter}gy"]
    for k, (t, a, b) in enumerate(zip(df.t_s.to_numpy() * 1000.0 + t0_ms, x, y)):
        if k in (30, 31):
            rows.append(f"{t:.3f}{delimiter}n/a{delimiter}n/a")
        elif k == 32:
            rows.append(f"{t:.3f}{delimiter}{delimiter}")
        else:
            rows.append(f"{t:.3f}{delimiter}{a:.3f}{delimiter}{b:.3f}")
    path.write_text("\n".join(rows) + "\n")
    return df, truth


def test_pixel_table_with_missing_cells(tmp_path, capsys):
    src = tmp_path / "p01_s01_tracker.csv"
    df, truth = _px_table(src)
    out = tmp_path / "out"
    rc = main(["events", str(src), "-o", str(out), "--time-col", "time", "--time-unit", "ms", "--x-col", "gx",
               "--y-col", "gy", "--units", "px", *PX_OPTS, "--detector", "idt"])
    assert rc == 0
    printed = capsys.readouterr().out
    assert "fixations" in printed
    ev = pd.read_csv(out / "events.csv")
    for c in ("type", "onset_s", "offset_s", "duration_ms"):
        assert c in ev.columns
    assert set(ev["type"]) <= {"fixation", "saccade", "blink", "loss"}
    fx = ev[ev.type == "fixation"]
    assert len(fx) == len(truth)
    # own time axis: the table starts at 5000 ms -> 5.0 s; the first sample stands for half an interval either side
    assert fx["onset_s"].iloc[0] == pytest.approx(5.0 - 0.5 / 60.0, abs=1e-6)
    # 3 missing samples at 60 Hz = 50 ms <= 75 ms: filled, not loss
    assert (ev.type == "loss").sum() == 0
    # pixel -> degree conversion recovers the planned positions
    assert fx["yaw_deg"].tolist() == pytest.approx([p[2] for p in truth], abs=0.05)
    assert fx["pitch_deg"].tolist() == pytest.approx([p[3] for p in truth], abs=0.05)
    side = json.loads((out / "events.json").read_text())
    assert side["detector"] == "idt" and side["input"]["sha256"] == sha256_file(src)
    assert side["input"]["kind"] == "gaze table"
    # both precision figures, as the sidecar holds them (Holmqvist, Nystrom & Mulvey 2012: RMS-S2S and SD)
    q = side["quality"]
    # in words, as 'aspectus process' prints them ("deg RMS-S2S" before)
    assert (f"noise {q['noise_rms_s2s_deg']:.3g} deg sample to sample (RMS), SD {q['noise_sd_deg']:.3g} deg within "
            "fixations") in printed
    for name in ("events.parquet", "features.csv", "features.parquet"):
        assert (out / name).is_file()


def test_degree_table_tab_delimited_with_segments_and_windows(tmp_path):
    df, truth = step_signal(rate_hz=30.0)
    src = tmp_path / "p02_s01.tsv"
    df.rename(columns={"t_s": "t", "yaw_deg": "h", "pitch_deg": "v"})[["t", "h", "v"]].to_csv(src, sep="\t", index=False)
    seg = tmp_path / "segments.csv"
    seg.write_text("label,onset_s,offset_s\npage 1,0,1.2\npage 2,1.2,2.4\n")
    out = tmp_path / "out"
    rc = main(["events", str(src), "-o", str(out), "--time-col", "t", "--x-col", "h", "--y-col", "v",
               "--segments", str(seg), "--window-s", "1.0", "--step-s", "0.5"])
    assert rc == 0
    f = pd.read_csv(out / "features.csv")
    assert f["scope"].tolist().count("segment") == 2 and f["scope"].tolist().count("window") == 3  # 2.4 s: windows at 0, 0.5, 1.0 s
    assert f[f.scope == "segment"]["label"].tolist() == ["page 1", "page 2"]
    side = json.loads((out / "events.json").read_text())
    assert side["params"]["window_s"] == 1.0 and side["params"]["step_s"] == 0.5
    assert side["segments"]["sha256"] == sha256_file(seg)


@pytest.mark.parametrize("suffix", [".parquet", ".csv"])
def test_aspectus_samples_table_needs_no_column_options(tmp_path, suffix):
    df, truth = step_signal(rate_hz=30.0)
    df["t_s"] += 3.0
    df["blink"] = False
    df.loc[40:45, ["valid", "blink"]] = [False, True]
    src = tmp_path / f"samples{suffix}"
    if suffix == ".parquet":
        df.to_parquet(src)
    else:
        df.to_csv(src, index=False)
    out = tmp_path / "out"
    assert main(["events", str(src), "-o", str(out)]) == 0
    ev = pd.read_csv(out / "events.csv")
    b = ev[ev.type == "blink"]
    dt = df.t_s.iloc[1] - df.t_s.iloc[0]
    assert len(b) == 1 and b["onset_s"].iloc[0] == pytest.approx(df.t_s.iloc[40] - dt / 2)
    assert json.loads((out / "events.json").read_text())["input"]["kind"] == "samples"


def test_bad_input_is_one_clear_line(tmp_path, capsys):
    src = tmp_path / "p03_s02.csv"
    src.write_text("time,gx,gy\n0,1,1\n10,2,2\n5,3,3\n20,4,4\n")
    out = tmp_path / "out"
    rc = main(["events", str(src), "-o", str(out), "--time-col", "time", "--time-unit", "ms", "--x-col", "gx",
               "--y-col", "gy"])
    err = capsys.readouterr().err
    assert rc == 2 and "p03_s02.csv" in err and "back" in err.lower() and "Traceback" not in err
    src.write_text("time,gx,gy\n0,1,1\n10,2,2\n15,3,3\n20,4,4\n")
    rc = main(["events", str(src), "-o", str(out), "--time-col", "time", "--x-col", "nope", "--y-col", "gy"])
    err = capsys.readouterr().err
    assert rc == 2 and "nope" in err
    rc = main(["events", str(src), "-o", str(out), "--time-col", "time", "--x-col", "gx", "--y-col", "gy",
               "--units", "px"])
    err = capsys.readouterr().err
    assert rc == 2 and "screen" in err
    rc = main(["events", str(src), "-o", str(out)])
    err = capsys.readouterr().err
    assert rc == 2 and "--time-col" in err
    rc = main(["events", str(tmp_path / "absent.csv"), "-o", str(out)])
    assert rc == 2 and "not found" in capsys.readouterr().err
    clip = tmp_path / "p03_s02.mp4"  # a video given where a table belongs: the error says to process it first
    clip.write_bytes(b"\x00\x00\x00\x18ftypmp42")
    rc = main(["events", str(clip), "-o", str(out)])
    err = capsys.readouterr().err
    assert rc == 2 and "p03_s02.mp4: is a video clip, not a gaze table" in err and "aspectus process" in err
    rc = main(["events", str(src), "-o", str(out), "--time-col", "time", "--x-col", "gx", "--y-col", "gy",
               "--detector", "magic"])
    assert rc == 2 and "unknown detector" in capsys.readouterr().err
    assert not (out / "events.csv").exists()


def test_entry_point_runs_as_a_program(tmp_path):
    df, _ = step_signal(rate_hz=30.0)
    src = tmp_path / "samples.csv"
    df.to_csv(src, index=False)
    r = subprocess.run([sys.executable, "-m", "aspectus", "events", str(src), "-o", str(tmp_path / "o")],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "o" / "events.csv").is_file()
    ev = pd.read_csv(tmp_path / "o" / "events.csv")
    assert (ev.type == "fixation").sum() >= 5 and np.isfinite(ev.duration_ms).all()


def test_saved_mapping_keeps_the_tables_own_clock(tmp_path):
    from aspectus.reference import TableMapping

    src = tmp_path / "p04_s01.csv"
    _px_table(src, delimiter=",", t0_ms=120000.0)
    m = TableMapping(time_col="time", time_unit="ms", x_col="gx", y_col="gy", units="px", screen=SCREEN)
    m.save(tmp_path / "mapping.json")
    out = tmp_path / "out"
    assert main(["events", str(src), "-o", str(out), "--mapping", str(tmp_path / "mapping.json")]) == 0
    ev = pd.read_csv(out / "events.csv")
    dt = 1.0 / 60.0
    assert ev["onset_s"].min() == pytest.approx(120.0 - dt / 2, abs=1e-6)


@pytest.mark.parametrize("argv, said", [
    (["--window-s", "0"], "--window-s must be a number of seconds > 0, got 0.0"),
    (["--window-s", "10", "--step-s", "0.001"], "--step-s 0.001 s is less than 1/1000 of --window-s 10.0 s"),
])
def test_window_options_are_named_as_typed(tmp_path, capsys, argv, said):
    """A refused window setting names the option the user typed, not the parameter's inner name."""
    df, _ = step_signal(rate_hz=30.0)
    src = tmp_path / "p02_s01.csv"
    df[["t_s", "yaw_deg", "pitch_deg"]].to_csv(src, index=False)
    rc = main(["events", str(src), "-o", str(tmp_path / "out")] + argv)
    err = capsys.readouterr().err
    assert rc == 2 and said in err, err
    assert "window_s" not in err and "step_s" not in err
    assert not (tmp_path / "out" / "features.csv").exists()


def test_a_precision_figure_that_cannot_be_read_prints_n_a(tmp_path, capsys):
    """The sample-to-sample noise needs two consecutive valid samples of one fixation: a table whose every other
    row is missing (filled by the gap filling, not valid) has none, and the printed line says 'n/a' for it rather
    than 'nan deg', beside the SD within fixations, which it can read."""
    rng = np.random.default_rng(0)
    t = np.arange(0, 6.0, 1 / 30)
    x = np.repeat(rng.uniform(-8, 8, 12), 15) + rng.normal(0, 0.2, len(t))
    y = np.repeat(rng.uniform(-5, 5, 12), 15) + rng.normal(0, 0.2, len(t))
    x[1::2] = y[1::2] = np.nan
    src = tmp_path / "every_other.csv"
    pd.DataFrame({"time": t, "gx": x, "gy": y}).to_csv(src, index=False)
    rc = main(["events", str(src), "-o", str(tmp_path / "out"), "--time-col", "time", "--x-col", "gx",
               "--y-col", "gy"])
    assert rc == 0
    printed = capsys.readouterr().out
    assert "nan" not in printed.lower(), printed
    assert "noise n/a sample to sample (RMS), SD 0.2" in printed and " deg within fixations" in printed, printed


def test_window_length_alone_gives_windows_side_by_side(tmp_path):
    """--window-s without --step-s: the windows follow one another (the default step is the default window length,
    10 s; with 2 s windows it left 8 s between them, unseen in the features table)."""
    from _signals import PLAN

    df, _ = step_signal(rate_hz=30.0, plan=PLAN * 6)  # 14.2 s
    src = tmp_path / "p02_s01.csv"
    df[["t_s", "yaw_deg", "pitch_deg"]].to_csv(src, index=False)
    out = tmp_path / "out"
    cols = ["--time-col", "t_s", "--x-col", "yaw_deg", "--y-col", "pitch_deg", "--units", "deg"]
    assert main(["events", str(src), "-o", str(out), "--window-s", "2", *cols]) == 0
    w = pd.read_csv(out / "features.csv").query("scope == 'window'")
    span = df["t_s"].iloc[-1] - df["t_s"].iloc[0]
    assert len(w) >= int(span // 2) - 1 >= 5
    assert np.allclose(np.diff(w["start_s"]), 2.0) and np.allclose(w["end_s"] - w["start_s"], 2.0)
    # a step given as well is kept
    assert main(["events", str(src), "-o", str(tmp_path / "o2"), "--window-s", "2", "--step-s", "1", *cols]) == 0
    w = pd.read_csv(tmp_path / "o2" / "features.csv").query("scope == 'window'")
    assert np.allclose(np.diff(w["start_s"]), 1.0)


@pytest.mark.parametrize("argv, said", [
    (["--set", "min_fixaton_ms=80"], "unknown analysis parameter 'min_fixaton_ms' - did you mean min_fixation_ms"),
    (["--set", "smoothing_window=100"], "did you mean smoothing_window_ms"),
    (["--set", "edge_speed_low_rates=maybe"], "expected true or false - e.g. --set edge_speed_low_rates=false"),
])
def test_a_misspelt_setting_is_answered_with_the_nearest_names(tmp_path, capsys, argv, said):
    """A mistyped --set names the closest parameters first (then all of them), and a bad true/false value is
    answered with an example as it would be typed, not Python's False."""
    df, _ = step_signal(rate_hz=30.0)
    src = tmp_path / "p02_s01.csv"
    df[["t_s", "yaw_deg", "pitch_deg"]].to_csv(src, index=False)
    rc = main(["events", str(src), "-o", str(tmp_path / "out"), "--time-col", "t_s", "--x-col", "yaw_deg",
               "--y-col", "pitch_deg", "--units", "deg"] + argv)
    err = capsys.readouterr().err
    assert rc == 2 and said in err, err
    assert "False" not in err

