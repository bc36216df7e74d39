"""Where the vertical gaze gain is lost: the iris localiser against the rest of the chain, per gaze-grid cell (issue 15).

Renders the gaze grid's cells (bench/bench_gaze_grid.py, seed 0 by default; tests/_gaze_grid.py), runs the pipeline
once per cell with the default settings and keeps the clip-level gaze estimate's inputs, then measures:

* ``pitch``: the default's pitch r / gain against the renderer's truth (as the grid does);
* ``true_height``: the same with the renderer's true iris height put in place of the localiser's (horizontal as the
  pipeline): what the rest of the chain - head pose, eyeball centres, :func:`aspectus.webcam.gaze.decouple_reference`
  - gives with a perfect vertical localiser (for pitch the true height and the true iris centre read the same);
* ``nodecouple``: the default without the decoupling of the eyeball centres (``decouple_reference=False``) and the
  couplings it measured;
* per eye (right, left in the face mesh's order), the localiser's vertical gain / r / error SD (px) against the
  eye's own motion in the picture: the iris's height minus the true eyeball centre's picture height (the truth's
  iris centre minus 10.5 mm along the true gaze, projected), regressed on the same offset of the true iris - for the
  iris centres the default handed to the gaze estimate (``used``: the appearance estimate below a 16.8 px iris, the
  limbus fit above), the limbus fit (``limbus``, open-eye frames where it succeeded; below 16.8 px only, where the
  pipeline keeps it apart) and the face mesh's iris point (``mesh``);
* ``--bins``: the same offsets, mean per sixth of the clip's frames sorted by the true eye-in-head pitch (true ->
  measured, px): a gain loss that is a scale shows as a line of slope below one, one that depends on where the lids
  cross the iris as a bend.

    python bench/bench_vertical_gain.py                       # the grid's cells without the 25 px drift ones
    python bench/bench_vertical_gain.py --cells 12px_crf28 12px_crf28_60fps --bins
"""
from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

import _gaze_grid as G  # noqa: E402
import bench_gaze_grid as B  # noqa: E402

LUND = B.LUND


def true_eyeball_px(truth, K: np.ndarray, mirrored: bool = False) -> np.ndarray:
    """(N, 2, 2) the true eyeball centres' picture positions, in the pipeline's eye order: each true iris centre
    moved back by the iris plane's radius (10.5 mm) along the true gaze (the renderer turns both eyes alike), its
    depth from the truth's head depth."""
    from aspectus.geometry import angles_to_gaze_vector
    from aspectus.webcam.gaze import IRIS_PLANE_RADIUS_MM

    ti = G.true_iris_px(truth, mirrored)
    g = angles_to_gaze_vector(truth["yaw_deg"].to_numpy(), truth["pitch_deg"].to_numpy())
    if mirrored:
        g = g * [-1.0, 1.0, 1.0]
    z_iris = truth["head_z_mm"].to_numpy() + IRIS_PLANE_RADIUS_MM * g[:, 2]
    f, cx, cy = K[0, 0], K[0, 2], K[1, 2]
    out = np.empty_like(ti)
    for e in range(2):
        P = np.c_[(ti[:, e, 0] - cx) * z_iris / f, (ti[:, e, 1] - cy) * z_iris / f, z_iris]
        C = P - IRIS_PLANE_RADIUS_MM * g
        out[:, e] = np.c_[f * C[:, 0] / C[:, 2] + cx, f * C[:, 1] / C[:, 2] + cy]
    return out


def _fit(x, y):
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.sum() < 10:
        return float("nan"), float("nan"), float("nan")
    g = float(np.polyfit(x[ok], y[ok], 1)[0])
    return float(np.corrcoef(x[ok], y[ok])[0, 1]), g, float(np.std(y[ok] - x[ok]))


def run_cell(cond: G.Condition, out_dir: Path) -> dict:
    """Render and process one cell; the default's samples, the gaze estimate's inputs, the limbus fit, the truth."""
    from aspectus.webcam import pipeline
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    res, trial = G.render_condition(cond, out_dir, LUND)
    cap: dict = {}
    orig_app = pipeline._appearance_iris

    def app_spy(a, patches, found):
        n = len(a)
        lim = a[:, 15:19].reshape(n, 2, 2).copy()
        lim[~(a[:, pipeline.RECORD_WIDTH:pipeline.RECORD_WIDTH + 2] > 0.5)] = np.nan  # failed fits
        cap["limbus"] = lim
        return orig_app(a, patches, found)

    with G.gaze_inputs() as kw:
        pipeline._appearance_iris = app_spy
        try:
            samples, meta = extract_samples(res.path, params=ProcessParams(gaze=GazeParams(mirrored=cond.mirror)))
        finally:
            pipeline._appearance_iris = orig_app
        cap["kw"] = dict(kw)
    cap.update(samples=samples, meta=meta, truth=res.truth, trial=trial, cond=cond)
    return cap


def measure_cell(cap: dict, bins: bool = False) -> str:
    from aspectus.webcam.gaze import GazeParams, estimate_gaze

    cond, truth, kw, samples = cap["cond"], cap["truth"], cap["kw"], cap["samples"]
    ok = samples["valid"].to_numpy(bool)
    tp = truth["pitch_deg"].to_numpy()
    ti = G.true_iris_px(truth, cond.mirror)
    C = true_eyeball_px(truth, kw["K"], cond.mirror)

    def pitch(cols):
        v = np.asarray(cols["valid"], bool)
        r, g, _ = _fit(tp[v], np.asarray(cols["pitch_deg"])[v])
        return f"{r:.3f} / {g:.2f}"

    def estimate(iris, **over):
        return estimate_gaze(**(kw | {"iris_px": iris}), params=GazeParams(mirrored=cond.mirror, **over))

    height = kw["iris_px"].copy()
    height[..., 1] = ti[..., 1]
    nodec, _ = estimate(kw["iris_px"], decouple_reference=False)
    _, info = estimate(kw["iris_px"])
    lines = [f"{cond.name} ({cond.label()}; iris {truth['iris_diameter_px'].median():.1f} px, "
             f"estimate {cap['meta']['gaze_model']['iris_estimate']['used']})",
             f"  pitch r / gain: default {pitch(samples)}, true height {pitch(estimate(height)[0])}, "
             f"no decoupling {pitch(nodec)} (couplings {info.get('reference_coupling')})"]
    d_true = ti[..., 1] - C[..., 1]
    eip = truth["eye_in_head_pitch_deg"].to_numpy()
    sources = {"used": kw["iris_px"], "limbus": cap.get("limbus"), "mesh": kw.get("iris_mesh_px")}
    for name, src in sources.items():
        if src is None:
            continue
        d = src[..., 1] - C[..., 1]
        per_eye = []
        for e in range(2):
            r, g, sd = _fit(d_true[ok, e], d[ok, e])
            per_eye.append(f"{('right', 'left')[e]} gain {g:.2f} r {r:.3f} sd {sd:.2f} px")
        lines.append(f"  localiser {name:6s}: " + "; ".join(per_eye))
        if bins:
            edges = np.nanpercentile(eip[ok], np.linspace(0, 100, 7))
            for e in range(2):
                cells = []
                for a, b in zip(edges[:-1], edges[1:]):
                    m = ok & (eip >= a) & (eip <= b) & np.isfinite(d[:, e])
                    if m.any():
                        cells.append(f"{eip[m].mean():+5.1f} deg: {d_true[m, e].mean():+5.2f} -> {d[m, e].mean():+5.2f}")
                lines.append(f"    {('right', 'left')[e]:5s} " + " | ".join(cells))
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=0, help="the grid's seed (default 0)")
    ap.add_argument("--cells", nargs="*", help="cell names (bench_gaze_grid.py's), default all but the 25 px drift cells")
    ap.add_argument("--bins", action="store_true", help="also the offsets per sixth of the frames by eye-in-head pitch")
    ap.add_argument("--keep", help="keep the rendered clips in this folder")
    args = ap.parse_args(argv)
    if not LUND.is_dir():
        print(f"the hand-coded recordings are not at {LUND}", file=sys.stderr)
        return 2
    cells = [c for c in B.grid(False, args.seed) if (c.name in args.cells if args.cells else "drift" not in c.name)]
    if args.cells and len(cells) != len(args.cells):
        known = ", ".join(c.name for c in B.grid(False, args.seed))
        print(f"unknown cell name among {args.cells}; known: {known}", file=sys.stderr)
        return 2
    out_dir = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="vertical_gain_"))
    out_dir.mkdir(parents=True, exist_ok=True)
    for cond in cells:
        print(measure_cell(run_cell(cond, out_dir), bins=args.bins), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
