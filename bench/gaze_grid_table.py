"""The gaze grid's rows as the Markdown table in README ("Gaze precision at classroom scale").

    python bench/bench_gaze_grid.py --csv grid.csv
    python bench/gaze_grid_table.py grid.csv
    python bench/gaze_grid_table.py --draws grid_s0.csv grid_s1.csv ...   # the default over several draws

With one CSV: one line per variant row: the default first (named by the iris estimate it took, with the iris size it
took it on: ``fit`` the limbus fit's, ``mesh`` the face mesh's - in grids measured before 2026-12-05 always the
mesh's; where it took the limbus fit its row stands for ``limbus`` too, which is then left out), then ``limbus`` and
``fuse``. Columns as bench_gaze_grid.py prints them (definitions in tests/_gaze_grid.py).

With ``--draws`` (one CSV per seed of bench_gaze_grid.py): the default's row of each cell summarised over the
draws - the median with the range - and how many draws earn each precision tier (:func:`_tiers`), then issue 15's
floors with the draws that meet each.
"""
from __future__ import annotations

import argparse
import sys

import pandas as pd

HEADER = ["| iris | picture, compression, face, trial | setting | rms_s2s deg | in fixations deg | noise / SD deg "
          "| yaw r / gain | pitch r / gain | kappa (truth) |", "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]


#: the renderer's iris colours in words (bench_gaze_grid.py's ``iris_colour``; empty for the dark default)
COLOUR_WORDS = {"light_blue_grey": "light blue-grey"}


def describe(r) -> str:
    """The cell's set-up in words, e.g. ``640x480 CRF 28, hopper, UH21, seed 1``."""
    size = str(r["size_px"]).strip("()").replace(", ", "x")
    codec = f"CRF {int(r['crf'])}" if r["codec"] == "libx264" else "MPEG-4 part 2"
    parts = [f"{size} {codec}", str(r["face"]), str(r["trial"]).split("_")[0]]
    if float(r["lid_follow"]) == 0.0:
        parts.append("lids still")
    if bool(r["glasses"]):
        parts.append("glasses")
    if bool(r["mirror"]):
        parts.append("mirrored")
    if str(r["name"]).startswith("25px_drift"):
        parts.append("drift without turning")
    colour = r.get("iris_colour")
    if isinstance(colour, str) and colour:
        parts.append(f"{COLOUR_WORDS.get(colour, colour.replace('_', ' '))} irises")
    reflection = r.get("corneal_reflection")
    if reflection is not None and pd.notna(reflection) and str(reflection) == "True":
        parts.append("screen mirrored by the corneas")
    exposure = r.get("exposure_ms")
    if exposure is not None and pd.notna(exposure) and float(exposure) > 0:
        parts.append(f"{float(exposure):g} ms exposure")
    if "fps" in r and pd.notna(r["fps"]) and float(r["fps"]) != 30.0:
        parts.append(f"{float(r['fps']):g} fps")
    if int(r["seed"]) != 0 and "other_seed" in str(r["name"]):
        parts.append(f"seed {int(r['seed'])}")
    return ", ".join(parts)


def _sd(r) -> str:
    """The clip's own SD within its fixations (``noise_sd_deg``); "-" in grids measured before it existed."""
    v = r.get("noise_sd_deg", float("nan"))
    return "-" if pd.isna(v) else f"{float(v):.2f}"


def _source(r) -> str:
    """``fit`` where the default chose on the limbus fit's iris size, ``mesh`` on the face mesh's (and in grids
    measured before the CSV named the source)."""
    return "fit" if r.get("iris_px_measured_from") == "limbus fit" else "mesh"


def lines(df: pd.DataFrame) -> list[str]:
    out = list(HEADER)
    for _, cell in df.groupby("label", sort=False):
        d = cell.set_index("variant")
        r0 = d.loc["default"]
        took = r0.get("iris_estimate")
        for name, r in d.iterrows():
            if name == "limbus" and took == "limbus":
                continue
            fig = (f"{r['rms_s2s_deg']:.2f} | {r['rms_s2s_fix_deg']:.2f} | {r['noise_rms_s2s_deg']:.2f} / {_sd(r)} | "
                   f"{r['yaw_r']:.3f} / {r['yaw_gain']:.2f} | {r['pitch_r']:.3f} / {r['pitch_gain']:.2f} | {r['kappa']:.2f}")
            if name == "default":
                sep = " =" if took == "limbus" else ":"
                setting = f"**default**{sep} {took} ({_source(r)} {r['iris_px_measured']:.1f} px)"
                out.append(f"| {r['iris_px']:.1f} px | {describe(r)} | {setting} | {fig} ({r['kappa_truth']:.2f}) |")
            else:
                out.append(f"|  |  | {name} | {fig} |")
    return out


#: issue 15's floors: (what, cells it applies to, test on a default row)
GAIN_BAND = (0.85, 1.15)
_LARGE = ("25px_crf28", "16px_crf28", "12px_crf28", "12px_crf28_other_seed", "16px_glasses_mirror")
_DRIFT = ("25px_drift_TL20", "25px_drift_TH34", "25px_drift_UH21")


def _in_band(g) -> bool:
    return GAIN_BAND[0] <= float(g) <= GAIN_BAND[1]


FLOORS = (("RMS-S2S <= 1.5 deg", _LARGE, lambda r: r["rms_s2s_deg"] <= 1.5),
          ("yaw r >= 0.95, gain 0.85-1.15", _LARGE, lambda r: r["yaw_r"] >= 0.95 and _in_band(r["yaw_gain"])),
          ("pitch r >= 0.95, gain 0.85-1.15", _LARGE, lambda r: r["pitch_r"] >= 0.95 and _in_band(r["pitch_gain"])),
          ("fixation kappa >= 0.5", _LARGE, lambda r: r["kappa"] >= 0.5),
          ("8-9 px: RMS-S2S <= 3 deg", ("8px_crf28",), lambda r: r["rms_s2s_deg"] <= 3.0),
          ("large faces drifting: pitch gain 0.85-1.15", _DRIFT, lambda r: _in_band(r["pitch_gain"])))

SUMMARY_HEADER = ["| set-up | iris | draws | rms_s2s deg | yaw r; gain | pitch r; gain | kappa (truth) | tier: events / "
                  "coarse / minimal |", "| --- | --- | --- | --- | --- | --- | --- | --- |"]


def _spread(v, fmt: str) -> str:
    """``median (min-max)`` of the values, in ``fmt``."""
    v = pd.Series(v, dtype=float).dropna()
    if v.empty:
        return "-"
    if len(v) == 1:
        return fmt.format(v.iloc[0])
    return f"{fmt.format(v.median())} ({fmt.format(v.min())}-{fmt.format(v.max())})"


def _tiers(rows: pd.DataFrame) -> str:
    """How many draws earn each precision tier: the pipeline's own verdict (``precision_tier``, in CSVs written since
    2026-12-05) or else the tier rule (:func:`aspectus.webcam.pipeline.precision_tier`) on the row's figures with the
    face mesh's iris size, as the pipeline reads it - "-" then for cells whose irises are not dark, where the pipeline
    also applies its iris-contrast rule, which the figures cannot replay."""
    from aspectus.webcam.pipeline import PRECISION_TIERS, precision_tier

    counts = dict.fromkeys((t[0] for t in PRECISION_TIERS), 0)
    if "precision_tier" in rows and rows["precision_tier"].notna().all():
        for t in rows["precision_tier"]:
            counts[str(t)] += 1
        return " / ".join(str(n) for n in counts.values())
    if "iris_colour" in rows and rows["iris_colour"].map(lambda c: isinstance(c, str) and bool(c)).any():
        return "-"
    if not {"noise_rms_s2s_33ms_deg", "noise_sd_deg", "iris_px_mesh"} <= set(rows.columns):
        return "-"
    for _, r in rows.iterrows():
        counts[precision_tier(r["noise_rms_s2s_33ms_deg"], r["iris_px_mesh"], r["noise_sd_deg"])[0]] += 1
    return " / ".join(str(n) for n in counts.values())


def default_rows(frames: list[pd.DataFrame]) -> pd.DataFrame:
    """The default variant's rows of several draws' CSVs, each tagged with its draw's position (``draw``)."""
    out = []
    for i, df in enumerate(frames):
        d = df[df["variant"] == "default"].copy()
        d["draw"] = i
        out.append(d)
    return pd.concat(out, ignore_index=True)


def summary_lines(frames: list[pd.DataFrame]) -> list[str]:
    """The default per cell over the draws (median and range) and the tiers earned; then issue 15's floors."""
    d = default_rows(frames)
    out = list(SUMMARY_HEADER)
    for _, rows in d.groupby("name", sort=False):
        first = rows.iloc[0].copy()
        first["seed"] = 0  # the set-up, not the draw
        out.append(f"| {describe(first)} | {rows['iris_px'].median():.1f} px | {len(rows)} | "
                   f"{_spread(rows['rms_s2s_deg'], '{:.2f}')} | "
                   f"{_spread(rows['yaw_r'], '{:.3f}')}; {_spread(rows['yaw_gain'], '{:.2f}')} | "
                   f"{_spread(rows['pitch_r'], '{:.3f}')}; {_spread(rows['pitch_gain'], '{:.2f}')} | "
                   f"{_spread(rows['kappa'], '{:.2f}')} ({rows['kappa_truth'].median():.2f}) | {_tiers(rows)} |")
    out += ["", "| issue 15's floor | draws that meet it | by cell |", "| --- | --- | --- |"]
    for what, cells, test in FLOORS:
        rows = d[d["name"].isin(cells)]
        if rows.empty:
            continue
        ok = pd.Series([bool(test(r)) for _, r in rows.iterrows()], index=rows.index)
        by_cell = ", ".join(f"{c} {int(ok[rows['name'] == c].sum())}/{int((rows['name'] == c).sum())}"
                            for c in cells if c in set(rows["name"]))
        out.append(f"| {what} | {int(ok.sum())} of {len(rows)} | {by_cell} |")
    return out


NEED = {"label", "variant", "rms_s2s_deg", "rms_s2s_fix_deg", "noise_rms_s2s_deg", "yaw_r", "yaw_gain", "pitch_r",
        "pitch_gain", "kappa", "kappa_truth", "iris_px", "iris_px_measured", "iris_estimate"}


def _read(path: str) -> pd.DataFrame | str:
    """The grid CSV, or the message that says why it cannot be used."""
    try:
        df = pd.read_csv(path)
    except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError) as e:
        return f"{path}: cannot read the grid's rows ({e})"
    if not NEED <= set(df.columns):
        return f"{path}: not a grid CSV from bench_gaze_grid.py --csv (missing {sorted(NEED - set(df.columns))})"
    return df


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("csv", nargs="+", help="rows written by bench_gaze_grid.py --csv (several with --draws)")
    ap.add_argument("--draws", action="store_true",
                    help="summarise the default over the CSVs' draws (one CSV per seed) instead of one draw's table")
    args = ap.parse_args(argv)
    if len(args.csv) > 1 and not args.draws:
        print("several CSVs: give --draws to summarise them as draws of one grid", file=sys.stderr)
        return 2
    frames = []
    for path in args.csv:
        df = _read(path)
        if isinstance(df, str):
            print(df, file=sys.stderr)
            return 2
        frames.append(df)
    print("\n".join(summary_lines(frames) if args.draws else lines(frames[0])))
    return 0


if __name__ == "__main__":
    sys.exit(main())
