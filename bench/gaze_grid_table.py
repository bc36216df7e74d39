"""The gaze grid's rows as the Markdown table in README ("Gaze precision at classroom scale").

    python bench/bench_gaze_grid.py --csv grid.csv
    python bench/gaze_grid_table.py grid.csv

One line per variant row: the default first (named by the iris estimate it took, with the iris size it took it
on: ``fit`` the limbus fit's, ``mesh`` the face mesh's - in grids measured before 2026-12-05 always the mesh's;
where it took the limbus fit its row stands for ``limbus`` too, which is then left out), then ``limbus`` and
``fuse``. Columns as bench_gaze_grid.py prints them (definitions in tests/_gaze_grid.py).
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


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("csv", help="rows written by bench_gaze_grid.py --csv")
    args = ap.parse_args(argv)
    try:
        df = pd.read_csv(args.csv)
    except (OSError, pd.errors.ParserError) as e:
        print(f"{args.csv}: cannot read the grid's rows ({e})", file=sys.stderr)
        return 2
    need = {"label", "variant", "rms_s2s_deg", "rms_s2s_fix_deg", "noise_rms_s2s_deg", "yaw_r", "yaw_gain", "pitch_r", "pitch_gain",
            "kappa", "kappa_truth", "iris_px", "iris_px_measured", "iris_estimate"}
    if not need <= set(df.columns):
        print(f"{args.csv}: not a grid CSV from bench_gaze_grid.py --csv (missing {sorted(need - set(df.columns))})",
              file=sys.stderr)
        return 2
    print("\n".join(lines(df)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
