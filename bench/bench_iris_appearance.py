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
    python bench/bench_iris_appearance.py --stages        # where the vertical gain is lost, stage by stage

``--stages`` measures, per clip, the iris height's vertical gain / error SD / mean bias (px) per eye against the
truth at each stage of the default chain below 16.8 px and with candidate changes at each: the limbus fit (the
regression's labels) with its radius free within 15 % of the mesh's (the pipeline), fixed per clip at the median
of its fitted radii or at the true radius, and its rays cast first from the true centre instead of the mesh
point (how much of the starting point's error a fit keeps); the fitted radius against the mesh's and the true
one; the appearance estimate learnt from the limbus fit and, as a bound, from the true centres (is it the
labels or the regression that loses gain?); and the gaze pitch (r, gain) with the appearance height, with the
true height (horizontal as the pipeline) and with the true iris.
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


def _vertical(est, truth):
    """[(gain, sd, mean bias)] per eye of the iris height (px) against the truth (pixel_figures' gain and sd)."""
    tp = G.true_iris_px(truth)
    figs = [f for f in pixel_figures(est, truth) if f[1] == "y"]
    open_ = truth["lid_closure"].to_numpy() < 0.2
    bias = [float(np.nanmean(np.where(open_, est[:, e, 1] - tp[:, e, 1], np.nan))) for e in range(2)]
    return [(f[2], f[3], b) for f, b in zip(figs, bias)]


def _limbus_variant(items, *, diam=None, start=None):
    """The limbus fits (N, 2, 2; NaN where one failed) and their radii (N, 2), with the rays first cast from
    ``start`` (N, 2, 2 picture px) instead of the mesh point and, with ``diam`` (N, 2), the radius fixed at half
    of it instead of free within 15 % of the mesh's."""
    from aspectus.webcam import limbus as LB

    jobs = eye_jobs(items)
    idx = [i for i, j in enumerate(jobs) if j is not None]
    radii: dict = {}
    orig_fit, orig_tol = LB._fit_many, LB._R_TOL

    def spy(cv2, eyes, *a, **k):
        out = orig_fit(cv2, eyes, *a, **k)
        for eye, nxt in zip(eyes, out):
            if nxt is not None:
                radii[(eye.frame, eye.eye)] = nxt[1]
        return out

    args = []
    for i in idx:
        img, P, mesh, dm, off = jobs[i]
        args.append((img, P, mesh if start is None else start[i] - off, dm if diam is None else diam[i]))
    LB._fit_many = spy
    if diam is not None:
        LB._R_TOL = 1e-9
    try:
        fits = LB.limbus_centres_many(args)
    finally:
        LB._fit_many, LB._R_TOL = orig_fit, orig_tol
    lim = np.full((len(items), 2, 2), np.nan)
    rad = np.full((len(items), 2), np.nan)
    for f, (i, (c, ok)) in enumerate(zip(idx, fits)):
        lim[i] = np.where(ok[:, None], c + jobs[i][4], np.nan)
        for e in range(2):
            if ok[e] and (f, e) in radii:
                rad[i, e] = radii[(f, e)]
    return lim, rad


def _appearance_from(d, anchors, labels_px):
    """The appearance chain of iris_combine=appearance (one block) learnt from ``labels_px``: (unscaled, blended)."""
    app, _iv, app_w, _ms, _mf, _recs = appearance_estimate(d, anchors, labels_px)
    return app, app_w


def stages(name, d) -> None:
    """``--stages``: the vertical figures stage by stage (module docstring)."""
    truth, cap, items = d["truth"], d["cap"], d["items"]
    anchors, limbus = replay(items)
    tp = G.true_iris_px(truth)
    true_d = truth["iris_diameter_px"].to_numpy()
    mesh_d = np.array([j[3] if j is not None else (np.nan, np.nan) for j in eye_jobs(items)], float)
    print(f"{name}: {d['cond'].label()}  iris {np.median(true_d):.1f} px (truth)", flush=True)

    def line(label, est):
        print(f"  {label:22s} " + "  ".join(f"{'RL'[e]} gain {g:4.2f} sd {sd:4.2f} bias {b:+5.2f}"
                                          for e, (g, sd, b) in enumerate(_vertical(est, truth))), flush=True)

    lim, rad = _limbus_variant(items)
    line("limbus (pipeline)", lim)
    med = np.nanmedian(rad, axis=0)
    print("  fitted radius median " + ", ".join(
        f"{'RL'[e]} {med[e]:.2f} px (p10-p90 {np.nanpercentile(rad[:, e], 10):.2f}-{np.nanpercentile(rad[:, e], 90):.2f}; "
        f"mesh {np.nanmedian(mesh_d[:, e]) / 2:.2f}, true {np.median(true_d) / 2:.2f})" for e in range(2)), flush=True)
    line("limbus r = median fit", _limbus_variant(items, diam=np.tile(2 * med, (len(items), 1)))[0])
    line("limbus r = true", _limbus_variant(items, diam=np.c_[true_d, true_d])[0])
    line("limbus from true start", _limbus_variant(items, start=tp)[0])
    app, app_w = _appearance_from(d, anchors, limbus)
    line("appearance (unscaled)", app)
    line("appearance (default)", app_w)
    app_t, _ = _appearance_from(d, anchors, tp)
    line("appearance, true labels", app_t)
    base = cap["iris_px"]
    for label, y in (("appearance", app_w[..., 1]), ("true height", tp[..., 1]), ("true iris", None)):
        iris = tp if y is None else base.copy()
        if y is not None:
            iris[..., 1] = np.where(np.isfinite(y), y, base[..., 1])
        m = gaze_with(cap, iris, d["samples"], truth, d["trial"], iris_combine="limbus")
        print(f"  gaze, {label:15s} rms_s2s {m['rms_s2s_deg']:4.2f}  pitch r {m['pitch_r']:5.3f} gain "
              f"{m['pitch_gain']:4.2f}  yaw r {m['yaw_r']:5.3f}  kappa {m['kappa']:5.2f}", flush=True)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seconds", type=float, default=10.0, help="length of the short clips (default 10)")
    ap.add_argument("--long", action="store_true", help="also the four 40-s clips")
    ap.add_argument("--only", nargs="*", help="clip names to run (default all)")
    ap.add_argument("--cache", type=Path, help="folder to keep the processed clips in and reuse them from")
    ap.add_argument("--stages", action="store_true",
                    help="the iris height's vertical gain and SD stage by stage, with candidate changes at each")
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
        if args.stages:
            stages(name, d)
            continue
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
