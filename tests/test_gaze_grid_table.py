"""bench/gaze_grid_table.py: the README's grid table from the grid bench's CSV rows."""
from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "bench"))

import gaze_grid_table as T  # noqa: E402


def _row(label, variant, **kw):
    base = dict(name="12px_crf28", size_px="(640, 480)", codec="libx264", crf=28, lid_follow=1.0, glasses=False,
                mirror=False, face="hopper", trial="UH21_img_Rome", seed=0, fps=30.0, label=label, variant=variant,
                iris_px=12.06, rms_s2s_deg=1.234, rms_s2s_fix_deg=0.812, noise_rms_s2s_deg=0.9, noise_sd_deg=0.654,
                yaw_r=0.9671, yaw_gain=0.96, pitch_r=0.9174,
                pitch_gain=0.79, kappa=0.271, kappa_truth=0.629, iris_estimate=None, iris_px_measured=float("nan"))
    return base | kw


def test_rows_name_the_estimate_and_leave_out_the_duplicate_limbus_row(tmp_path):
    rows = [_row("a", "default", iris_estimate="appearance", iris_px_measured=12.9),
            _row("a", "limbus", rms_s2s_deg=4.13), _row("a", "fuse", rms_s2s_deg=1.4),
            _row("b", "default", name="25px_drift_TL20", size_px="(1280, 720)", codec="mpeg4", iris_px=25.4,
                 iris_estimate="limbus", iris_px_measured=26.9, glasses=True, mirror=True),
            _row("b", "limbus"), _row("b", "fuse")]
    path = tmp_path / "grid.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    out = T.lines(pd.read_csv(path))
    assert out[0].startswith("| iris |") and len(out) == 2 + 3 + 2
    assert out[2] == ("| 12.1 px | 640x480 CRF 28, hopper, UH21 | **default**: appearance (mesh 12.9 px) | 1.23 | 0.81 "
                      "| 0.90 / 0.65 | 0.967 / 0.96 | 0.917 / 0.79 | 0.27 (0.63) |")
    assert out[3].startswith("|  |  | limbus | 4.13 |")
    assert "MPEG-4 part 2, hopper, UH21, glasses, mirrored, drift without turning" in out[5]
    assert "**default** = limbus (mesh 26.9 px)" in out[5]
    assert not any("| limbus |" in line for line in out[5:])


def test_the_size_the_default_chose_on_is_named_by_its_source(tmp_path):
    # since 2026-12-05 the default's choice reads the limbus fit's iris size (the face mesh's with too few fits);
    # grids measured before name no source and read the mesh's (the test above)
    rows = [_row("a", "default", iris_estimate="appearance", iris_px_measured=15.97, iris_px_measured_from="limbus fit",
                 iris_px_mesh=17.35),
            _row("b", "default", iris_estimate="limbus", iris_px_measured=24.9, iris_px_measured_from="face mesh",
                 iris_px_mesh=24.9)]
    path = tmp_path / "grid.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    out = T.lines(pd.read_csv(path))
    assert "**default**: appearance (fit 16.0 px)" in out[2]
    assert "**default** = limbus (mesh 24.9 px)" in out[3]


def test_iris_colour_reflection_and_exposure_are_named(tmp_path):
    rows = [_row("a", "default", iris_estimate="appearance", iris_px_measured=16.0, iris_colour="light_blue_grey"),
            _row("b", "default", iris_estimate="appearance", iris_px_measured=16.1, iris_colour="hazel"),
            _row("c", "default", iris_estimate="appearance", iris_px_measured=11.8, corneal_reflection=True),
            _row("d", "default", iris_estimate="appearance", iris_px_measured=11.7, exposure_ms=33.0),
            _row("e", "default", iris_estimate="appearance", iris_px_measured=11.5, exposure_ms=0.0)]
    path = tmp_path / "grid.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    out = T.lines(pd.read_csv(path))
    assert "640x480 CRF 28, hopper, UH21, light blue-grey irises |" in out[2]
    assert "UH21, hazel irises |" in out[3]
    assert "UH21, screen mirrored by the corneas |" in out[4]
    assert "UH21, 33 ms exposure |" in out[5]
    assert "| 640x480 CRF 28, hopper, UH21 |" in out[6]  # no exposure set: nothing added


def test_a_grid_measured_before_the_clips_sd_existed_shows_a_dash(tmp_path):
    path = tmp_path / "old.csv"
    pd.DataFrame([{k: v for k, v in _row("a", "default", iris_estimate="appearance", iris_px_measured=12.9).items()
                   if k != "noise_sd_deg"}]).to_csv(path, index=False)
    out = T.lines(pd.read_csv(path))
    assert "| 1.23 | 0.81 | 0.90 / - | 0.967 / 0.96 |" in out[2]


def test_a_file_that_is_not_a_grid_csv_is_refused_with_its_name(tmp_path, capsys):
    bad = tmp_path / "other.csv"
    bad.write_text("a,b\n1,2\n")
    assert T.main([str(bad)]) == 2
    err = capsys.readouterr().err
    assert "other.csv" in err and "missing" in err
    assert T.main([str(tmp_path / "absent.csv")]) == 2


def _draw(seed, **over):
    """One draw's CSV rows: a 12 px floor cell, the 8.5 px cell and a drifting large face (default rows only)."""
    rows = [_row(f"12 s{seed}", "default", name="12px_crf28", seed=seed, iris_estimate="appearance",
                 iris_px_measured=11.5, iris_px_mesh=12.8, noise_rms_s2s_33ms_deg=0.9, **over.get("12", {})),
            _row(f"12 s{seed}", "limbus", name="12px_crf28", seed=seed, rms_s2s_deg=9.0),
            _row(f"8 s{seed}", "default", name="8px_crf28", seed=seed, iris_px=8.5, iris_estimate="appearance",
                 iris_px_measured=8.1, iris_px_mesh=9.0, noise_rms_s2s_33ms_deg=2.0, noise_sd_deg=1.5,
                 **over.get("8", {})),
            _row(f"25d s{seed}", "default", name="25px_drift_TL20", seed=seed, iris_px=25.4, codec="mpeg4",
                 iris_estimate="appearance", iris_px_measured=24.9, iris_px_mesh=26.0, noise_rms_s2s_33ms_deg=0.5,
                 noise_sd_deg=0.4, **({"pitch_gain": 1.0} | over.get("25d", {})))]
    return pd.DataFrame(rows)


def test_draws_are_summarised_by_median_and_range_with_the_floors_counted():
    frames = [_draw(0, **{"12": dict(rms_s2s_deg=1.2, pitch_r=0.96, pitch_gain=0.9, kappa=0.3)}),
              _draw(1, **{"12": dict(rms_s2s_deg=2.0, pitch_r=0.90, pitch_gain=1.2, kappa=0.2),
                          "8": dict(rms_s2s_deg=3.5), "25d": dict(pitch_gain=1.17)}),
              _draw(2, **{"12": dict(rms_s2s_deg=1.6, pitch_r=0.97, pitch_gain=1.0, kappa=0.55)})]
    out = T.summary_lines(frames)
    row12 = next(line for line in out if line.startswith("| 640x480 CRF 28, hopper, UH21 |"))
    # the limbus rows (9.0 deg) are not the default's and stay out of the summary
    assert "| 12.1 px | 3 | 1.60 (1.20-2.00) |" in row12
    assert "0.960 (0.900-0.970); 1.00 (0.90-1.20)" in row12
    assert "| 0.30 (0.20-0.55) (0.63) |" in row12
    # the tier rule on each draw's figures, the face mesh's iris size as the pipeline reads it (12.8 px: events)
    assert row12.endswith("| 3 / 0 / 0 |")
    row8 = next(line for line in out if "| 8.5 px |" in line)
    assert row8.endswith("| 0 / 3 / 0 |")  # 2.0 deg at 33 ms, SD 1.5: the coarse tier
    floors = {line.split(" | ")[0].lstrip("| "): line.split(" | ")[1] for line in out if " of " in line}
    assert any(line.endswith("| 2 of 3 | 25px_drift_TL20 2/3 |") for line in out)
    assert floors["RMS-S2S <= 1.5 deg"] == "1 of 3"
    assert floors["pitch r >= 0.95, gain 0.85-1.15"] == "2 of 3"
    assert floors["fixation kappa >= 0.5"] == "1 of 3"
    assert floors["8-9 px: RMS-S2S <= 3 deg"] == "2 of 3"
    assert floors["large faces drifting: pitch gain 0.85-1.15"] == "2 of 3"


def test_the_pipelines_own_tier_is_taken_where_the_csv_has_it():
    frames = [_draw(s, **{"12": dict(precision_tier="minimal")}) for s in range(2)]
    row12 = next(line for line in T.summary_lines(frames) if line.startswith("| 640x480 CRF 28, hopper, UH21 |"))
    assert row12.endswith("| 0 / 0 / 2 |")
    light = [_draw(s, **{"12": dict(iris_colour="light_blue_grey")}) for s in range(2)]
    row = next(line for line in T.summary_lines(light) if "light blue-grey irises" in line)
    assert row.endswith("| - |")  # the contrast rule cannot be replayed from the figures


def test_several_csvs_need_draws_and_every_file_is_checked(tmp_path, capsys):
    a, b = tmp_path / "s0.csv", tmp_path / "s1.csv"
    _draw(0).to_csv(a, index=False)
    _draw(1).to_csv(b, index=False)
    assert T.main([str(a), str(b)]) == 2
    assert "--draws" in capsys.readouterr().err
    assert T.main(["--draws", str(a), str(b)]) == 0
    assert "| issue 15's floor |" in capsys.readouterr().out
    (tmp_path / "bad.csv").write_text("x\n1\n")
    assert T.main(["--draws", str(a), str(tmp_path / "bad.csv")]) == 2
    assert "bad.csv" in capsys.readouterr().err


def test_the_figure_of_several_draws_is_drawn(tmp_path):
    import plot_gaze_grid as P

    paths = []
    for s in range(3):
        p = tmp_path / f"s{s}.csv"
        _draw(s, **{"12": dict(rms_s2s_deg=1.0 + s)}).to_csv(p, index=False)
        paths.append(str(p))
    out = tmp_path / "grid.png"
    assert P.main(paths + [str(out)]) == 0
    assert out.stat().st_size > 10_000
    assert P.main([str(tmp_path / "absent.csv"), str(out)]) == 2
