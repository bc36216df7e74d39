"""The iris's size in pixels - the gaze chain's metric scale - against the renderer's truth (issue 15).

The gaze model takes the eye's distance and the iris centre's displacement in millimetres from the iris
diameter in pixels (11.7 mm visible iris; aspectus/webcam/gaze.py, step 1), so a diameter read too large
shrinks every gaze angle by the same factor. Per rendered clip this prints, over open-eye frames (the
truth's lid closure below 0.2, the pipeline's aperture at least its open-eye level), the median diameter of

* ``truth``: the renderer's (``iris_diameter_px`` of ``*_truth.csv``: focal x 11.7 mm / iris distance; a
  diameter, so the truth file's pixel-edge convention does not enter it),
* ``mesh``: the face mesh's (the horizontal ends of its iris outline, both eyes' mean),
* ``limbus``: the limbus fit's circle (both eyes pooled), and ``fit%`` the share of those eye-frames fitted,

each as a ratio to the truth, then the limbus fit's ratio in the third of frames with the eyes lowest (the
upper lid furthest down over the iris when the lids follow) and highest, and the gaze figures of
tests/_gaze_grid.py re-estimated on the same per-frame measurements with ``iris_scale`` ``mesh`` and
``limbus`` (yaw and pitch r and gain, RMS-S2S; ``dist%``: median error of the head's distance against the
truth's head origin).

Dev clips: trials and seeds no test uses (the grid's tests: seed 0, trials UH21 and UL23; the rendered gaze
tests: seeds 0, 1, 3, 5). Five seconds each; about two minutes on two cores.

    python bench/bench_iris_scale.py             # the dev clips
    python bench/bench_iris_scale.py --csv x.csv # also write the rows
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

import _gaze_grid as G  # noqa: E402

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"

_720, _480 = (1280, 720), (640, 480)
#: name, picture, distance (mm), codec, crf, face, lids following, glasses, trial, seed
DEV = (
    ("25px_crf28", _720, 530.0, "libx264", 28, "hopper", 1.0, False, "UH29_img_Europe", 6),
    ("25px_mp4v_astro", _720, 530.0, "mpeg4", 28, "astronaut", 1.0, False, "UL43_img_Rome", 7),
    ("16px_crf28_astro", _720, 800.0, "libx264", 28, "astronaut", 1.0, False, "UL31_img_konijntjes", 8),
    ("16px_still_lids", _720, 800.0, "libx264", 28, "hopper", 0.0, False, "UH47_img_Europe", 9),
    ("16px_glasses", _720, 800.0, "libx264", 28, "astronaut", 1.0, True, "UH29_img_Europe", 10),
    ("12px_crf23", _480, 550.0, "libx264", 23, "hopper", 1.0, False, "UL43_img_Rome", 11),
    ("12px_crf33_astro", _480, 550.0, "libx264", 33, "astronaut", 1.0, False, "UH47_img_Europe", 12),
    ("12px_mp4v", _480, 550.0, "mpeg4", 28, "hopper", 1.0, False, "UL31_img_konijntjes", 13),
    ("12px_still_lids_astro", _480, 550.0, "libx264", 28, "astronaut", 0.0, False, "UH29_img_Europe", 14),
    ("8.5px_crf28_astro", _480, 780.0, "libx264", 28, "astronaut", 1.0, False, "UL31_img_konijntjes", 15),
    ("8.5px_crf28", _480, 780.0, "libx264", 28, "hopper", 1.0, False, "UH47_img_Europe", 16),
    ("8.5px_glasses", _480, 780.0, "libx264", 28, "hopper", 1.0, True, "UL43_img_Rome", 17),
)


def capture(cond: G.Condition, out_dir: Path):
    """Render and process one clip: the gaze estimate's inputs, the samples, the truth and the trial."""
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    res, trial = G.render_condition(cond, out_dir, LUND)
    with G.gaze_inputs() as cap:
        samples, _ = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(mirrored=cond.mirror)),
                                     geometry_mode="inline")
    return cap, samples, res.truth, trial


def diameters(cap: dict, truth: pd.DataFrame) -> dict:
    """The diameter figures of one clip (module docstring)."""
    from aspectus.webcam.gaze import OPEN_EYE_REL, relative_aperture

    found = np.asarray(cap["found"], bool)
    rel, _ = relative_aperture(found, cap["ear"])
    ok = found & (rel >= OPEN_EYE_REL) & (truth["lid_closure"].to_numpy() < 0.2)
    t = truth["iris_diameter_px"].to_numpy(float)
    mesh = np.nanmean(cap["iris_diam_px"], axis=1)
    lim = np.asarray(cap["limbus_diam_px"], float)
    t_med = float(np.median(t[ok]))
    fit = np.isfinite(lim[ok])
    out = {"n_open": int(ok.sum()), "truth_px": t_med, "mesh_px": float(np.nanmedian(mesh[ok])),
           "limbus_px": float(np.median(lim[ok][fit])) if fit.any() else np.nan, "fit_frac": float(fit.mean())}
    out["mesh_ratio"] = out["mesh_px"] / t_med
    out["limbus_ratio"] = out["limbus_px"] / t_med
    # per frame against the truth, by where the eyes look (the lids follow vertical gaze)
    ratio = lim / t[:, None]
    pitch = truth["eye_in_head_pitch_deg"].to_numpy(float)
    lo, hi = np.nanpercentile(pitch[ok], [33.3, 66.7])
    for name, sel in (("down", pitch <= lo), ("up", pitch >= hi)):
        r = ratio[ok & sel]
        out[f"limbus_ratio_{name}"] = float(np.nanmedian(r)) if np.isfinite(r).any() else np.nan
    return out


def gaze_figures(cap: dict, samples: pd.DataFrame, truth: pd.DataFrame, trial, scale: str, mirror: bool) -> dict:
    from aspectus.webcam.gaze import GazeParams, estimate_gaze

    cols, info = estimate_gaze(**cap, params=GazeParams(mirrored=mirror, iris_scale=scale))
    s = samples.copy()
    for c, v in cols.items():
        if c in s.columns:
            s[c] = v
    m = G.measure(s, truth, trial)
    head = np.linalg.norm(truth[["head_x_mm", "head_y_mm", "head_z_mm"]].to_numpy(float), axis=1)
    m["dist_err_pct"] = float(np.nanmedian(s["distance_mm"].to_numpy() / head - 1.0) * 100)
    m["scale_used"] = info["iris_scale"]["used"]
    return m


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--csv", type=Path, help="also write the rows to this CSV file")
    ap.add_argument("--only", nargs="*", help="names of the clips to run (default all)")
    ap.add_argument("--duration", type=float, default=5.0, help="clip length, s (default 5)")
    args = ap.parse_args(argv)
    rows = []
    t0 = time.process_time()
    with tempfile.TemporaryDirectory() as tmp:
        for name, size, dist, codec, crf, face, lids, glasses, trial_name, seed in DEV:
            if args.only and name not in args.only:
                continue
            cond = G.Condition(name, size_px=size, distance_mm=dist, codec=codec, crf=crf, face=face,
                               lid_follow=lids, glasses=glasses, trial=trial_name, seed=seed,
                               duration_s=args.duration)
            cap, samples, truth, trial = capture(cond, Path(tmp))
            row = {"clip": name, "seed": seed, "trial": trial_name} | diameters(cap, truth)
            for scale in ("mesh", "limbus"):
                g = gaze_figures(cap, samples, truth, trial, scale, cond.mirror)
                row |= {f"{k}_{scale}": v for k, v in g.items() if k in ("yaw_r", "yaw_gain", "pitch_r", "pitch_gain",
                                                                          "rms_s2s_deg", "kappa", "dist_err_pct",
                                                                          "scale_used")}
            rows.append(row)
            print(f"{name:24s} truth {row['truth_px']:5.2f} mesh {row['mesh_ratio']:.3f} limbus "
                  f"{row['limbus_ratio']:.3f} (fit {row['fit_frac']:.0%}; eyes down {row['limbus_ratio_down']:.3f} "
                  f"up {row['limbus_ratio_up']:.3f}) | yaw gain {row['yaw_gain_mesh']:.2f}->{row['yaw_gain_limbus']:.2f}"
                  f" r {row['yaw_r_mesh']:.3f}->{row['yaw_r_limbus']:.3f} | pitch gain {row['pitch_gain_mesh']:.2f}->"
                  f"{row['pitch_gain_limbus']:.2f} r {row['pitch_r_mesh']:.3f}->{row['pitch_r_limbus']:.3f} | S2S "
                  f"{row['rms_s2s_deg_mesh']:.2f}->{row['rms_s2s_deg_limbus']:.2f} | kappa {row['kappa_mesh']:.2f}->"
                  f"{row['kappa_limbus']:.2f} | dist {row['dist_err_pct_mesh']:+.1f}->{row['dist_err_pct_limbus']:+.1f}%"
                  f" ({row['scale_used_limbus']})", flush=True)
    print(f"CPU {time.process_time() - t0:.0f} s")
    if args.csv:
        pd.DataFrame(rows).to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
