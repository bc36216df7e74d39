"""Schedule geometry and file, and the check's figures on gaze tables with known properties (no rendering)."""
from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from aspectus.errors import AspectusInputError, ParameterError
from aspectus.synth.target_gaze import schedule_trajectory
from aspectus.targets.analysis import (CheckParams, angle_between_deg, check_samples, find_flashes, find_start,
                                       xcorr_start)
from aspectus.targets.schedule import (SCHEDULE_VERSION, Screen, deg_to_px, make_schedule, px_to_deg,
                                       read_schedule)

SCREEN = Screen(1920, 1080, 344.0, 193.5, 600.0)


def _sched(**kw):
    kw = {"seed": 2, "fixation_s": 1.5, "n_fixations": 9, "pursuit_sweeps": 2, **kw}
    return make_schedule(SCREEN, **kw)


def _samples(sched, *, gain=(1.0, 1.0), offset=(1.5, -4.0), noise_deg=0.3, lead_in_s=2.0, fps=30.0, seed=0,
             loss_frac=0.0):
    tr = schedule_trajectory(sched, lead_in_s=lead_in_s, gain=gain, offset_deg=offset, seed=seed)
    t = np.arange(0, tr.duration_s, 1 / fps)
    s = tr.at(t)
    rng = np.random.default_rng(seed)
    s["yaw_deg"] += rng.normal(0, noise_deg, len(t))
    s["pitch_deg"] += rng.normal(0, noise_deg, len(t))
    s["valid"] = rng.random(len(t)) >= loss_frac
    return s[["t_s", "valid", "yaw_deg", "pitch_deg"]]


# --- schedule -------------------------------------------------------------------------------------------------

def test_degrees_by_hand():
    """Worked by hand (plane trigonometry): a 344 mm wide screen at 600 mm; the point 10 % in from the left
    edge is 0.4 * 344 = 137.6 mm left of the centre: atan(137.6 / 600) = 12.917 deg; the top edge 96.75 mm
    above it: atan(96.75 / 600) = 9.160 deg."""
    x, y = px_to_deg(SCREEN, 0.1 * 1920, 0.0)
    assert x == pytest.approx(-12.917, abs=0.001) and y == pytest.approx(9.160, abs=0.001)
    xp, yp = deg_to_px(SCREEN, x, y)
    assert xp == pytest.approx(192.0, abs=1e-9) and yp == pytest.approx(0.0, abs=1e-9)


def test_schedule_is_reproducible_and_round_trips(tmp_path):
    a, b, c = _sched(), _sched(), _sched(seed=3)
    pd.testing.assert_frame_equal(a.targets, b.targets)
    assert not a.targets[["x0_deg"]].equals(c.targets[["x0_deg"]])
    assert (a.fixations.iloc[0][["x0_deg", "y0_deg"]] == 0).all()  # the centre comes first
    p = a.write(tmp_path / "schedule.json")
    d = json.loads(p.read_text())
    assert d["format_version"] == SCHEDULE_VERSION and d["flash"] == {"onset_s": 0.0, "offset_s": 0.25}
    back = read_schedule(p)
    assert back.screen == a.screen and back.duration_s == pytest.approx(a.duration_s)
    np.testing.assert_allclose(back.targets["x0_px"], a.targets["x0_px"], atol=1e-5)
    # every still dot's pixels and degrees agree; moving dots move at the stated speed
    for r in back.targets.itertuples():
        xp, yp = deg_to_px(back.screen, r.x0_deg, r.y0_deg)
        assert abs(xp - r.x0_px) < 1e-3 and abs(yp - r.y0_px) < 1e-3
        if r.kind == "pursuit":
            amp = math.hypot(r.x1_deg - r.x0_deg, r.y1_deg - r.y0_deg)
            assert amp / (r.offset_s - r.onset_s) == pytest.approx(r.speed_deg_s, rel=1e-4)


def test_schedule_file_errors(tmp_path):
    p = _sched().write(tmp_path / "s.json")
    d = json.loads(p.read_text())
    d["format_version"] = SCHEDULE_VERSION + 1
    p.write_text(json.dumps(d))
    with pytest.raises(AspectusInputError, match="format version"):
        read_schedule(p)
    p.write_text("{broken")
    with pytest.raises(AspectusInputError, match=r"JSON.*the schedule.json that `aspectus targets make`"):
        read_schedule(p)
    p.write_text('{"format": "aspectus.study"}')  # another file of the project: says which file belongs here
    with pytest.raises(AspectusInputError, match=r"not a target schedule.*wrote beside the targets.html"):
        read_schedule(p)
    with pytest.raises(AspectusInputError, match="not found"):
        read_schedule(tmp_path / "none.json")
    with pytest.raises(ParameterError, match="shape in mm"):
        Screen(1920, 1080, 344.0, 300.0, 600.0)
    with pytest.raises(ParameterError, match="viewing_distance_mm"):
        Screen(1920, 1080, 344.0, 193.5, 0.0)
    with pytest.raises(ParameterError, match="n_fixations"):
        make_schedule(SCREEN, n_fixations=3)


# --- figures ----------------------------------------------------------------------------------------------------

def test_offset_and_gain_are_recovered_and_a_wrong_gain_is_flagged():
    sched = _sched()
    good = check_samples(_samples(sched, noise_deg=0.0), sched, start_s=2.0)
    m = good.mapping
    assert m.gain_yaw == pytest.approx(1.0, abs=0.01) and m.gain_pitch == pytest.approx(1.0, abs=0.01)
    assert m.offset_yaw_deg == pytest.approx(1.5, abs=0.05) and m.offset_pitch_deg == pytest.approx(-4.0, abs=0.05)
    assert good.summary["accuracy_offset_gain_deg"] < 0.1 and good.flags == []
    bad = check_samples(_samples(sched, noise_deg=0.0, gain=(0.6, 0.7)), sched, start_s=2.0)
    assert bad.mapping.gain_yaw == pytest.approx(0.6, abs=0.01) and bad.mapping.gain_pitch == pytest.approx(0.7, abs=0.01)
    assert not bad.summary["gain_in_range"]
    assert any("yaw gain 0.60" in f for f in bad.flags) and any("pitch gain 0.70" in f for f in bad.flags)
    # offset only cannot absorb a gain: the error grows with the dot's distance from the centre
    assert bad.summary["accuracy_offset_deg"] > 2.0 > bad.summary["accuracy_offset_gain_deg"] * 10
    mirrored = check_samples(_samples(sched, noise_deg=0.0, gain=(-1.0, 1.0)), sched, start_s=2.0)
    assert any("mirrored" in f for f in mirrored.flags)


def test_gain_interval_is_the_textbook_slope_interval():
    """The gain's 95 % interval against scipy.stats.linregress (its slope and standard error; the half-width is
    t(0.975, n - 2) times the standard error, the textbook interval for a regression slope), and its coverage:
    over 4000 simulated sequences of 9 dots with independent Gaussian errors it holds the true gain in 95 % of
    them (binomial SD 0.34 points, so 93.5-96.5 % is a 4.4 SD band)."""
    from scipy import stats

    from aspectus.targets.analysis import fit_mapping, gain_ci95

    rng = np.random.default_rng(7)
    x = np.array([-12.0, -6.0, 0.0, 6.0, 12.0, -12.0, 0.0, 12.0, 3.0])
    y = np.array([-8.0, -8.0, -8.0, 0.0, 0.0, 8.0, 8.0, 8.0, -2.0])
    gx = 1.5 + 0.9 * x + rng.normal(0, 0.8, len(x))
    gy = -3.0 + 1.2 * y + rng.normal(0, 0.8, len(y))
    m = fit_mapping(x, y, gx, gy)
    for tgt, g, gain, lo, hi in ((x, gx, m.gain_yaw, m.gain_yaw_ci_low, m.gain_yaw_ci_high),
                                 (y, gy, m.gain_pitch, m.gain_pitch_ci_low, m.gain_pitch_ci_high)):
        ref = stats.linregress(tgt, g)
        half = stats.t.ppf(0.975, len(tgt) - 2) * ref.stderr
        assert gain == pytest.approx(ref.slope, rel=1e-9)
        assert (lo, hi) == pytest.approx((ref.slope - half, ref.slope + half), rel=1e-9)
    covered = 0
    for _ in range(4000):
        g = 0.8 * x + rng.normal(0, 1.0, len(x))
        lo, hi = gain_ci95(x, g)
        covered += lo <= 0.8 <= hi
    assert 0.935 <= covered / 4000 <= 0.965
    # too few dots, or no spread: no interval rather than a number
    assert all(math.isnan(v) for v in gain_ci95([1.0, 2.0], [1.0, 2.0]) + gain_ci95([3.0] * 5, [1, 2, 3, 4, 5]))
    # exact data: the interval closes on the gain
    lo, hi = gain_ci95(x, 0.6 * x + 2)
    assert lo == pytest.approx(0.6) and hi == pytest.approx(0.6)


def test_a_wrong_gain_flag_says_whether_the_interval_is_clear_of_the_range():
    """A gain outside 0.8-1.25 is flagged either way; the note says whether the dots' scatter leaves room for a
    plausible gain (the interval reaches into the range) or not."""
    sched = _sched(n_fixations=5, pursuit_sweeps=0)
    clear = check_samples(_samples(sched, gain=(0.6, 0.6), noise_deg=0.05), sched, start_s=2.0)
    assert not clear.summary["gain_in_range"]
    assert clear.mapping.gain_yaw_ci_high < 0.8
    assert any(f.startswith("yaw gain 0.6") and "outside the range too" in f for f in clear.flags)
    # the same eyes, with each dot's median off by a few degrees: the gain is still below 0.8, the interval is not
    rng = np.random.default_rng(3)
    s = _samples(sched, gain=(0.6, 0.6), noise_deg=0.05)
    ts = s["t_s"].to_numpy() - 2.0
    for r in sched.fixations.itertuples(index=False):
        w = (ts >= r.onset_s) & (ts < r.offset_s)
        s.loc[w, "yaw_deg"] += rng.normal(0, 2.5)
    loose = check_samples(s, sched, start_s=2.0)
    m = loose.mapping
    assert m.gain_yaw < 0.8 <= m.gain_yaw_ci_high, (m.gain_yaw, m.gain_yaw_ci_low, m.gain_yaw_ci_high)
    assert any(f.startswith("yaw gain") and "too much to be sure" in f for f in loose.flags)
    # the terminal's lines give the interval; a check written before the interval was kept reads without it
    from aspectus.targets.check import summary_lines

    doc = json.loads(json.dumps(loose.to_dict()))
    line = next(x for x in summary_lines(doc) if x.startswith("offset"))
    assert f"gain yaw {m.gain_yaw:.2f} (95 % interval {m.gain_yaw_ci_low:.2f} to {m.gain_yaw_ci_high:.2f})" in line
    for k in [k for k in doc["mapping"] if "_ci_" in k]:
        del doc["mapping"][k]
    line = next(x for x in summary_lines(doc) if x.startswith("offset"))
    assert "interval" not in line and f"gain yaw {m.gain_yaw:.2f}, pitch" in line


def test_precision_on_white_noise():
    """White noise of SD s per axis: SD precision sqrt(2) s, RMS-S2S 2 s (successive differences of independent
    samples have variance 2 s^2 per axis), so RMS-S2S / SD = sqrt(2) - the ratio Holmqvist et al. (2012) name
    for white noise (from memory)."""
    sched = _sched(fixation_s=3.0)
    s = _samples(sched, noise_deg=0.5, gain=(1.0, 1.0))
    c = check_samples(s, sched, start_s=2.0, run_events=False)
    assert c.summary["precision_sd_deg"] == pytest.approx(math.sqrt(2) * 0.5, rel=0.12)
    assert c.summary["precision_rms_s2s_deg"] == pytest.approx(2 * 0.5, rel=0.12)
    # the accuracy from noise alone: what the mapped medians of this noise give
    assert c.summary["accuracy_offset_gain_deg"] == pytest.approx(c.summary["accuracy_noise_floor_deg"], rel=0.6)


def test_dots_with_too_few_samples_have_no_precision_and_are_counted():
    """A still dot with 2-4 valid samples gives no SD or RMS-S2S (NaN, missing; an SD from 3 samples of white
    noise scatters by a third of itself), nor one with 5 samples none of them successive; 5 in a row do. The
    minimum is the count that admits a dot to the fit (CheckParams.min_valid_samples), and the summary counts
    the dots with precision figures."""
    from aspectus.targets.check import summary_lines

    sched = _sched(fixation_s=3.0)
    s = _samples(sched, noise_deg=0.5)
    fx = sched.fixations
    keep = {1: [0, 1], 2: [0, 1, 2], 3: [0, 1, 2, 3], 4: [0, 2, 4, 6, 8], 5: [0, 1, 2, 3, 4]}
    for k, kept in keep.items():
        r = fx.iloc[k]
        idx = np.flatnonzero((s["t_s"] - 2.0 >= r.onset_s + 0.5) & (s["t_s"] - 2.0 < r.offset_s))
        s.loc[np.setdiff1d(idx, idx[kept]), "valid"] = False
    c = check_samples(s, sched, start_s=2.0, run_events=False)
    tab = c.targets[c.targets["kind"] == "fixation"].reset_index(drop=True)
    cols = ["precision_rms_s2s_deg", "precision_sd_deg", "precision_rms_s2s_raw_deg", "accuracy_noise_floor_deg"]
    for k in (1, 2, 3, 4):
        assert tab.loc[k, cols].isna().all(), (k, tab.loc[k, cols].tolist())
    assert tab.loc[5, cols].notna().all() and tab.loc[5, "n_valid"] == 5
    others = tab.drop(index=[1, 2, 3, 4])
    assert others[cols].notna().all().all()
    assert c.summary["n_targets_precision"] == len(others) == len(fx) - 4
    # the medians are over those dots only (white noise, SD 0.5 per axis: RMS-S2S 2 x 0.5)
    assert c.summary["precision_rms_s2s_deg"] == pytest.approx(float(np.median(others["precision_rms_s2s_deg"])))
    assert c.summary["precision_rms_s2s_deg"] == pytest.approx(1.0, rel=0.15)
    line = next(x for x in summary_lines(c.to_dict() | {"summary": c.summary}) if x.startswith("precision"))
    assert f"({len(others)} of {len(fx)} still dots)" in line
    assert " deg sample to sample (RMS), SD " in line and "RMS-S2S" not in line  # in words, as the clip view's noise


def test_data_loss_fixations_and_pursuit_gain():
    sched = _sched()
    s = _samples(sched, noise_deg=0.1, loss_frac=0.2, seed=3)
    c = check_samples(s, sched, start_s=2.0)
    assert c.summary["loss_frac"] == pytest.approx(0.2, abs=0.03)
    assert c.summary["pursuit_gain"] == pytest.approx(1.0, abs=0.05)
    n = c.summary["n_fixation_targets"]
    assert c.summary["n_targets_fixated"] == n  # every still dot got a fixation on it
    assert n <= c.summary["n_fixations_on_targets"] <= 2 * n
    # a student who lets the moving dot run ahead: eyes at 70 % of its speed on the sweeps
    tr = schedule_trajectory(sched, lead_in_s=2.0, offset_deg=(1.5, -4.0))
    t = np.arange(0, tr.duration_s, 1 / 30)
    g = tr.at(t)
    ts = t - 2.0 - 0.2
    for r in sched.pursuits.itertuples():
        sel = (ts >= r.onset_s) & (ts < r.offset_s)
        f = 0.7 * (ts[sel] - r.onset_s) / (r.offset_s - r.onset_s)
        g.loc[sel, "yaw_deg"] = 1.5 + r.x0_deg + f * (r.x1_deg - r.x0_deg)
        g.loc[sel, "pitch_deg"] = -4.0 + r.y0_deg + f * (r.y1_deg - r.y0_deg)
    g["valid"] = True
    slow = check_samples(g, sched, start_s=2.0, run_events=False)
    assert slow.summary["pursuit_gain"] == pytest.approx(0.7, abs=0.03)


def test_accuracy_is_the_angle_on_the_sphere():
    # straight ahead vs 10 deg right: 10 deg; (10, 10) vs (0, 0): atan(sqrt(2) tan 10) = atan(0.24936) = 14.002 deg
    # (by hand)
    assert angle_between_deg(0.0, 0.0, 10.0, 0.0) == pytest.approx(10.0, abs=1e-9)
    assert angle_between_deg(10.0, 10.0, 0.0, 0.0) == pytest.approx(14.002, abs=0.001)


def test_flash_found_within_a_frame_and_a_lamp_is_not_a_flash():
    rng = np.random.default_rng(1)
    t = np.arange(900) / 30.0
    b = 90 + rng.normal(0, 0.4, len(t))
    b[300:] += 0.0
    b[400:] += 25.0  # a lamp switched on: a lasting rise
    on = 612  # the flash: 8 frames
    b[on:on + 8] += 30.0
    fl = find_flashes(t, b, flash_s=0.25)
    assert [f.frame_index for f in fl] == [on]
    assert find_flashes(t, b, flash_s=0.25, search_from_s=25.0) == []


def test_start_found_by_cross_correlation_without_a_flash():
    sched = _sched()
    s = _samples(sched, noise_deg=0.4, lead_in_s=3.3)
    start, r = xcorr_start(s["t_s"], s["yaw_deg"], s["pitch_deg"], s["valid"], sched)
    assert r > 0.9
    # the gaze lags the dot by the eyes' latency (0.2 s here) and half a saccade: within two frames of 3.5 s
    assert start == pytest.approx(3.3 + 0.2, abs=2 / 30)
    al = find_start(sched, s, params=CheckParams(align="auto"), brightness=(s["t_s"].to_numpy(), np.full(len(s), 90.0)))
    assert al["method"] == "xcorr" and al["start_s"] == pytest.approx(3.3, abs=2 / 30)


def test_degenerate_gaze_is_flagged_not_a_crash():
    sched = _sched(n_fixations=5, pursuit_sweeps=1)
    t = np.arange(0, sched.duration_s + 3, 1 / 30)
    s = pd.DataFrame({"t_s": t, "valid": False, "yaw_deg": np.nan, "pitch_deg": np.nan})
    c = check_samples(s, sched, start_s=1.0)
    assert c.summary["loss_frac"] == 1.0 and math.isnan(c.summary["accuracy_offset_gain_deg"])
    assert any("could not be fitted" in f for f in c.flags)
    s = s.assign(valid=True, yaw_deg=0.0, pitch_deg=0.0)  # a gaze that never moves
    c = check_samples(s, sched, start_s=1.0)
    assert not c.mapping.usable and any("hardly moves" in f for f in c.flags)
    assert math.isnan(c.summary["accuracy_offset_gain_deg"]) and math.isnan(c.summary["pursuit_gain"])
    with pytest.raises(AspectusInputError, match="does not follow the dots") as err:
        find_start(sched, s, params=CheckParams(align="xcorr"))
    assert "--align given --start-s S" in str(err.value)  # the command's options, not an internal name


def test_schedule_with_a_bad_position_is_refused(tmp_path):
    p = _sched().write(tmp_path / "s.json")
    d = json.loads(p.read_text())
    d["targets"][3]["x0_deg"] = None
    p.write_text(json.dumps(d))
    with pytest.raises(AspectusInputError, match="target 3"):
        read_schedule(p)


def test_clip_too_short_is_an_error_not_a_number():
    sched = _sched()
    s = _samples(sched)
    with pytest.raises(AspectusInputError, match="before the sequence's end"):
        check_samples(s[s["t_s"] < 10], sched, start_s=2.0)


def test_study_table_and_exclusion_rule(tmp_path):
    from aspectus.atomic import write_json
    from aspectus.targets.check import CHECK_JSON
    from aspectus.targets.study import ExclusionRule, collect_checks, write_quality_report

    sched = _sched()
    for name, gain, noise in (("linden_brook_p01_s01", 1.0, 0.2), ("linden_brook_p02_s01", 0.6, 0.2),
                              ("linden_brook_p03_s01", 1.0, 1.5)):
        c = check_samples(_samples(sched, gain=(gain, gain), noise_deg=noise), sched, start_s=2.0, run_events=False)
        d = c.to_dict() | {"format": "aspectus.target_check"}
        (tmp_path / name).mkdir()
        write_json(tmp_path / name / CHECK_JSON, d)
    tab = collect_checks(tmp_path)
    assert list(tab["participant"]) == ["p01", "p02", "p03"] and set(tab["session"]) == {"s01"}
    rule = ExclusionRule.parse("max_precision_rms_s2s_deg=1.0")
    out = rule.apply(tab)
    assert list(out["target_excluded"]) == [False, True, True]
    assert "gain" in out["target_exclusion_reasons"][1] and "precision" in out["target_exclusion_reasons"][2]
    # every column of the quality table is defined in the schema, with its unit
    from aspectus.schema import TARGET_QUALITY_COLUMN_NAMES, column_unit

    assert set(out.columns) - {"participant", "session", "clip"} == set(TARGET_QUALITY_COLUMN_NAMES)
    assert column_unit("target_accuracy_offset_gain_deg") == "deg" and column_unit("target_gain_yaw") == "deg/deg"
    # a row without a check is excluded as such, not a crash
    from aspectus.targets.study import check_row

    none = rule.apply(pd.DataFrame([{"participant": "p04", **check_row(None)}]))
    assert none["target_excluded"].tolist() == [True]
    assert none["target_exclusion_reasons"].tolist() == ["no usable target sequence"]
    res = write_quality_report(tmp_path, tmp_path / "report", rule=rule)
    assert res["sessions"] == 3 and res["excluded"] == 2
    md = (tmp_path / "report" / "target_quality.md").read_text()
    assert "worse than 1 deg" in md and "p02" in md
    # a reader's headings and yes/no in the sessions table, the labels beside the column names in the list
    assert "| Participant | Session | Accuracy after offset and gain (deg) |" in md and "count/text" not in md
    assert "- Excluded by the quality rule (`target_excluded`, yes/no):" in md
    rows = [ln for ln in md.splitlines() if ln.startswith("| p0")]
    assert len(rows) == 3 and all(" | yes | " in r or " | no | " in r for r in rows) and "True" not in "".join(rows)
    with pytest.raises(ParameterError, match="unknown exclusion rule"):
        ExclusionRule.parse("max_speed=3")


def test_cli_make_and_table(tmp_path, capsys):
    from aspectus.cli import main
    from aspectus.targets.check import CHECK_JSON

    assert main(["targets", "make", "-o", str(tmp_path / "seq"), "--screen-px", "1280", "800", "--screen-mm",
                 "286", "179", "--distance-mm", "550", "--seed", "7", "--no-video"]) == 0
    sched = read_schedule(tmp_path / "seq" / "schedule.json")
    # the counts as the README and --targets give them: 13 grid dots of 2 s, and one 1-s dot before each of the
    # 2 sweeps, which the check measures as still targets too (15)
    made = capsys.readouterr().out
    assert "13 still dots of 2 s" in made and "2 sweeps" in made and "(15 still targets in the check)" in made
    assert len(sched.fixations) == 15 and len(sched.pursuits) == 4
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    para = " ".join(readme[readme.index("## Gaze quality without a lab tracker"):].split("\n\n")[1].split())
    assert "13 still dots for 2 s each" in para and "15 still targets" in para, para
    # a results folder without any check: an error that says so and what to do, nothing written
    (tmp_path / "nochecks" / "p01").mkdir(parents=True)
    (tmp_path / "nochecks" / "p01" / "run.json").write_text("{}")
    assert main(["targets", "table", str(tmp_path / "nochecks"), "-o", str(tmp_path / "q0")]) == 2
    err = capsys.readouterr().err
    assert "no known-target checks found (it holds 1 processed clip folder, none with a target_check.json)" in err
    assert "aspectus targets check CLIP" in err and str(tmp_path / "nochecks") in err
    assert not (tmp_path / "q0" / "target_quality.csv").exists()
    assert sched.seed == 7 and sched.screen.viewing_distance_mm == 550.0
    assert (tmp_path / "seq" / "targets.html").exists() and not (tmp_path / "seq" / "targets.mp4").exists()
    # a bad screen is one line naming the problem, exit 2
    assert main(["targets", "make", "-o", str(tmp_path / "bad"), "--screen-px", "1280", "800", "--screen-mm",
                 "286", "400", "--distance-mm", "550", "--no-video"]) == 2
    assert "does not match its pixel grid" in capsys.readouterr().err
    # the study table from two checks
    from aspectus.atomic import write_json

    for name, gain in (("sub-p01_ses-s1", 1.0), ("sub-p02_ses-s1", 0.5)):
        c = check_samples(_samples(sched, gain=(gain, gain), noise_deg=0.2), sched, start_s=2.0, run_events=False)
        (tmp_path / "res" / name).mkdir(parents=True)
        write_json(tmp_path / "res" / name / CHECK_JSON, c.to_dict() | {"format": "aspectus.target_check"})
    assert main(["targets", "table", str(tmp_path / "res"), "-o", str(tmp_path / "q")]) == 0
    assert "2 session(s), 1 excluded" in capsys.readouterr().out
    tab = pd.read_csv(tmp_path / "q" / "target_quality.csv")
    assert list(tab["participant"]) == ["p01", "p02"] and list(tab["target_excluded"]) == [False, True]
    assert main(["targets", "table", str(tmp_path / "res"), "-o", str(tmp_path / "q"), "--rule", "gain_min=2"]) == 2


def test_run_json_gets_the_fitted_parameters(tmp_path):
    """record_in_run_json adds the mapping, alignment, figures and parameters to run.json and keeps the rest;
    a folder without run.json is left alone."""
    from aspectus.atomic import sha256_file, write_json
    from aspectus.targets.check import CHECK_JSON, record_in_run_json

    sched = _sched()
    c = check_samples(_samples(sched, gain=(0.6, 0.6)), sched, start_s=2.0, run_events=False)
    doc = c.to_dict() | {"format": "aspectus.target_check", "format_version": 1, "schedule_sha256": "ab"}
    write_json(tmp_path / CHECK_JSON, doc)
    assert record_in_run_json(tmp_path, doc) is None and not (tmp_path / "run.json").exists()
    write_json(tmp_path / "run.json", {"input_sha256": "x", "outputs": {"samples.parquet": {"sha256": "y"}}})
    block = record_in_run_json(tmp_path, doc)
    run = json.loads((tmp_path / "run.json").read_text())
    assert run["input_sha256"] == "x" and run["outputs"] == {"samples.parquet": {"sha256": "y"}}
    tc = run["target_check"]
    assert tc == json.loads(json.dumps(block))
    assert tc["mapping"]["gain_yaw"] == pytest.approx(c.mapping.gain_yaw) and tc["mapping"]["gain_yaw"] < 0.7
    assert tc["figures"]["gain_in_range"] is False and any("yaw gain" in f for f in tc["flags"])
    assert tc["params"] == CheckParams().to_dict() and tc["sha256"] == sha256_file(tmp_path / CHECK_JSON)


def test_schedule_format_is_documented_in_the_readme():
    """Every key of schedule.json (and of a target in it) is named in README's schedule paragraph, with the
    format's name and version."""
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    para = readme[readme.index("**The schedule file**"):]
    para = para[:para.index("\n\n")]
    d = _sched().to_dict()
    assert f'"format": "{d["format"]}"' in para and f'"format_version": {SCHEDULE_VERSION}' in para
    names = (set(d) | set(d["screen"]) | set(d["targets"][0]) | set(d["flash"])) - {"format", "format_version"}
    missing = [k for k in sorted(names) if f"`{k}`" not in para and not any(
        f"`{k[:-len(suf)]}`" in para or f"`{k[:-len(suf)]}_" in para for suf in ("_px", "_deg") if k.endswith(suf))]
    assert not missing, f"schedule keys not documented in README: {missing}"
