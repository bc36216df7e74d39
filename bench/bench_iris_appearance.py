"""The iris centre learnt from each clip's own eye appearance, against the limbus fit (issue 15).

Measures :mod:`aspectus.webcam.iris_appearance` (``GazeParams(iris_combine="appearance")``) and variants of it.
Renders held-out classroom-like clips (H.264 CRF 28, lids that follow vertical gaze, lighting drift and
gradient, head drift and rotation; eyes on hand-coded trials of Andersson et al. 2017 and seeds that the gaze grid's tests do not use), runs the
pipeline once per clip (the per-frame eye crops and landmarks kept, as bench/bench_iris_localiser.py does),
replays the per-frame geometry to get the eye anchors' picture positions, samples both eyes into 24 x 16
patches in the anchors' head-fixed frame, and learns per clip and eye the map from the patch's pixels to the
limbus fit's centre (principal components + ridge, 10 cross-fitted time blocks, labels more than 3 robust SD
from a first cross-fit dropped; closed eyes and failed fits are not labels). Prints per clip:

* the iris centre in px against the renderer's truth, per eye and axis (``gain`` of the eye's own motion and
  error ``sd``, as bench/bench_iris_localiser.py measures them), for the limbus fit and the appearance
  estimate (``app``), the appearance estimate rescaled by its gain measured with the other eye's limbus
  fit as instrument (``app_iv``) and that blended with the limbus fit by the weight that agrees best with the
  other eye's fit (``app_w``, what ``iris_combine=appearance`` uses vertically);
* the gaze figures of the grid (tests/_gaze_grid.py: RMS-S2S, yaw/pitch r and gain, kappa) for the default
  (limbus fit, mesh point where it fails), ``iris_combine=fuse``, ``app`` (the appearance estimate in place of
  the limbus fit), ``app_iv``, ``app_iv_y`` (``app_iv`` vertically, the default horizontally), ``appearance``
  (the option: ``app_w`` vertically, the default horizontally), ``app+fuse``
  (the appearance estimate fused with the mesh point as ``iris_combine=fuse`` does with the limbus fit), and
  the true iris centres;
* the CPU cost (``time.process_time``) per frame of the patch sampling and of the regression.

    python bench/bench_iris_appearance.py                 # eight 10-s clips, about 5 minutes
    python bench/bench_iris_appearance.py --long          # also four 40-s clips (four trials end to end)
    python bench/bench_iris_appearance.py --cache DIR     # keep the processed clips in DIR and reuse them
"""
from __future__ import annotations

import argparse
import pickle
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

import _gaze_grid as G  # noqa: E402
from bench_iris_localiser import LUND, capture, eye_jobs, gaze_with, pixel_figures  # noqa: E402

#: name: size, distance (mm), trial, face, seed - trials and seeds the grid's tests do not use
CLIPS = {
    "12h": ((640, 480), 550.0, "UH29_img_Europe", "hopper", 2),
    "12a": ((640, 480), 550.0, "UL31_img_konijntjes", "astronaut", 4),
    "12h6": ((640, 480), 550.0, "UL31_img_konijntjes", "hopper", 6),
    "8a": ((640, 480), 780.0, "UL43_img_Rome", "astronaut", 3),
    "8h": ((640, 480), 780.0, "UH47_img_Europe", "hopper", 5),
    "8a7": ((640, 480), 780.0, "UH47_img_Europe", "astronaut", 7),
    "25h": ((1280, 720), 530.0, "UH29_img_Europe", "hopper", 5),
    "25a": ((1280, 720), 530.0, "UL43_img_Rome", "astronaut", 6),
}
#: 40-s clips: four trials end to end (``--long``)
LONG_TRIALS = "UH29_img_Europe+UL31_img_konijntjes+UL43_img_Rome+UH47_img_Europe"
LONG_CLIPS = {
    "L12h": ((640, 480), 550.0, LONG_TRIALS, "hopper", 8),
    "L8a": ((640, 480), 780.0, LONG_TRIALS, "astronaut", 9),
    "L12a": ((640, 480), 550.0, LONG_TRIALS, "astronaut", 10),
    "L8h": ((640, 480), 780.0, LONG_TRIALS, "hopper", 11),
}


def processed(name, spec, seconds, cache: Path | None, out_dir: Path) -> dict:
    """The clip rendered and processed (bench_iris_localiser.capture), from ``cache`` when it is there."""
    path = None if cache is None else cache / f"{name}_{seconds:.0f}s.pkl"
    if path is not None and path.exists():
        with open(path, "rb") as fh:
            return pickle.load(fh)
    size, dist, trial, face, seed = spec
    cond = G.Condition(name, size_px=size, distance_mm=dist, trial=trial, face=face, seed=seed, duration_s=seconds)
    items, cap, samples, truth, tr = capture(cond, out_dir)
    d = {"cond": cond, "items": items, "cap": cap, "samples": samples, "truth": truth, "trial": tr}
    if path is not None:
        with open(path, "wb") as fh:
            pickle.dump(d, fh)
    return d


def replay(items) -> tuple[np.ndarray, np.ndarray]:
    """The eye anchors' picture positions (N, 6, 2) and the limbus fits (N, 2, 2; NaN where a fit failed),
    from the per-frame geometry run again on the captured items (the same code and order as the pipeline)."""
    from aspectus.webcam import frame_geometry as FG
    from aspectus.webcam.eye_anchors import ANCHOR_SETS
    from aspectus.webcam.limbus import limbus_centres_many

    geo = FG.FrameGeometry(fov_deg=60.0, refine_iris=True)
    rows = np.array(ANCHOR_SETS["below"])
    anchors = np.full((len(items), 6, 2), np.nan)
    cur = {}
    orig = FG.FrameGeometry._anchored_translation

    def spy(self, R, t, m, eyes, P, org):
        before = self.anchored_frames
        out = orig(self, R, t, m, eyes, P, org)
        if self.anchored_frames > before:
            anchors[cur["k"]] = P[rows, :2] + self.anchors.offsets_px
        return out

    FG.FrameGeometry._anchored_translation = spy
    try:
        for k, it in enumerate(items):
            cur["k"] = k
            geo.rows([it])
    finally:
        FG.FrameGeometry._anchored_translation = orig
    jobs = eye_jobs(items)
    idx = [i for i, j in enumerate(jobs) if j is not None]
    lim = np.full((len(items), 2, 2), np.nan)
    for i, (c, ok) in zip(idx, limbus_centres_many([jobs[i][:4] for i in idx])):
        lim[i] = np.where(ok[:, None], c + jobs[i][4], np.nan)
    return anchors, lim


def appearance_estimate(d: dict, anchors: np.ndarray, limbus: np.ndarray):
    """(app, app_iv) iris centres (N, 2, 2) in picture px, the CPU ms per frame of sampling and fitting, and
    the fits' records (one block: the clips are short)."""
    from aspectus.webcam import iris_appearance as AP

    cap, items = d["cap"], d["items"]
    n = len(items)
    sampler = AP.EyePatchSampler()
    W, H = sampler.size
    A = np.full((n, 2, 2, 3), np.nan)
    P = np.zeros((n, 2, H, W), np.uint8)
    have = np.zeros(n, bool)
    t0 = time.process_time()
    for k, it in enumerate(items):
        if it[4] is None or not cap["found"][k]:
            continue
        a = sampler.affines(anchors[k], cap["corners_px"][k])
        if a is None:
            continue
        s = sampler.sample(it[4], it[5], a)
        if s is not None:
            A[k], P[k], have[k] = a, s, True
    ms_sample = (time.process_time() - t0) / max(int(have.sum()), 1) * 1e3
    labels = AP.to_patch(limbus, A)
    ear = np.nanmean(cap["ear"], axis=1)
    found = np.asarray(cap["found"], bool)
    eyes_open = found & (ear / np.nanmedian(ear[found]) >= 0.8)  # as aspectus.webcam.gaze.estimate_gaze
    est = np.full((n, 2, 2), np.nan)
    recs = []
    t0 = time.process_time()
    for e in range(2):
        train = have & eyes_open & np.isfinite(labels[:, e]).all(axis=1)
        pred, rec = AP.crossfit_predict(AP.normalise(P[:, e]), labels[:, e], train, have & eyes_open)
        pred[~have] = np.nan
        est[:, e] = pred
        recs.append(rec)
    ms_fit = (time.process_time() - t0) / max(int(have.sum()), 1) * 1e3
    est_iv, _ = AP.instrument_rescale(est, labels, have & eyes_open)
    weights = AP.blend_weights(est_iv, labels, have & eyes_open)
    recs.append(weights)
    app_w = AP.to_picture(est_iv, A)
    for e, w in weights.items():  # as aspectus.webcam.iris_appearance.appearance_iris: applied in the picture
        lab = limbus[:, e, 1]
        app_w[:, e, 1] = np.where(np.isfinite(lab), w * app_w[:, e, 1] + (1.0 - w) * lab, app_w[:, e, 1])
    return AP.to_picture(est, A), AP.to_picture(est_iv, A), app_w, ms_sample, ms_fit, recs


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seconds", type=float, default=10.0, help="length of the short clips (default 10)")
    ap.add_argument("--long", action="store_true", help="also the four 40-s clips")
    ap.add_argument("--only", nargs="*", help="clip names to run (default all)")
    ap.add_argument("--cache", type=Path, help="folder to keep the processed clips in and reuse them from")
    args = ap.parse_args(argv)
    if not LUND.is_dir():
        print(f"the hand-coded recordings are not at {LUND}", file=sys.stderr)
        return 2
    out_dir = Path(tempfile.mkdtemp(prefix="iris_app_"))
    if args.cache:
        args.cache.mkdir(parents=True, exist_ok=True)
    clips = [(n, s, args.seconds) for n, s in CLIPS.items()]
    if args.long:
        clips += [(n, s, 40.0) for n, s in LONG_CLIPS.items()]
    for name, spec, secs in clips:
        if args.only and name not in args.only:
            continue
        d = processed(name, spec, secs, args.cache, out_dir)
        anchors, limbus = replay(d["items"])
        app, app_iv, app_w, ms_s, ms_f, recs = appearance_estimate(d, anchors, limbus)
        truth, cap = d["truth"], d["cap"]
        print(f"{name}: {d['cond'].label()}  iris {truth['iris_diameter_px'].median():.1f} px, {len(d['items'])} "
              f"frames; sampling {ms_s:.2f} ms/frame, regression {ms_f:.2f} ms/frame; components "
              f"{[r.get('components') for r in recs[:2]]} ridge {[r.get('ridge') for r in recs[:2]]}; blend {recs[2]}", flush=True)
        for loc, est in (("limbus", limbus), ("app", app), ("app_iv", app_iv), ("app_w", app_w)):
            print(f"  {loc:8s} " + "  ".join(f"{eye}{axis} gain {g:4.2f} sd {sd:4.2f}"
                                             for eye, axis, g, sd, _f in pixel_figures(est, truth)), flush=True)
        base = cap["iris_px"]
        app, app_iv = (np.where(np.isfinite(e), e, base) for e in (app, app_iv))  # no patch: the pipeline's
        vert = base.copy()
        vert[..., 1] = app_iv[..., 1]
        vert_w = base.copy()
        vert_w[..., 1] = np.where(np.isfinite(app_w[..., 1]), app_w[..., 1], base[..., 1])
        for label, iris, over in (("default", base, {}), ("fuse", base, {"iris_combine": "fuse"}),
                                  ("app", app, {}), ("app_iv", app_iv, {}),
                                  ("app_iv_y", vert, {}), ("appearance", vert_w, {}),
                                  ("app+fuse", app, {"iris_combine": "fuse"}),
                                  ("true iris", G.true_iris_px(truth), {})):
            m = gaze_with(cap, iris, d["samples"], truth, d["trial"], **over)
            print(f"  gaze {label:9s} rms_s2s {m['rms_s2s_deg']:4.2f}  yaw r {m['yaw_r']:5.3f} gain "
                  f"{m['yaw_gain']:4.2f}  pitch r {m['pitch_r']:5.3f} gain {m['pitch_gain']:4.2f}  kappa "
                  f"{m['kappa']:5.2f}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
