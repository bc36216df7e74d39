"""The eye anchors' point sets compared on held-out clips with the default chain (issue 15).

For each clip (the dev clips of bench/bench_iris_appearance.py - trials and seeds no test uses - and small
faces, 8.5 and 12 px at 640 x 480, whose head turns +-15 deg in yaw, both faces, H.264 CRF 28, lids following)
the per-frame geometry is run again on the captured eye crops and landmarks once per anchor set
(:data:`aspectus.webcam.eye_anchors.ANCHOR_SETS`), the clip-level chain as the pipeline runs it with the default
``iris_combine="auto"`` (the appearance estimate of the iris height below a 16.8 px iris) and the figures of
tests/_gaze_grid.py are measured: RMS-S2S, yaw / pitch r and gain, kappa against the hand-coders; then the same
with the renderer's true iris centres, and the error of the head origin's picture position (sideways / vertical
SD, mm at the true depth, after the clip's median: bench/bench_head_translation.py), which places the eyeball
centres, and the per-frame geometry's CPU time (process_time per frame, the whole geometry: limbus fit, anchors,
eye patches; the sets differ only in the placement) and the placement's own part (the anchors' matching, the
region's registration). The eye crops are cut to cover every set's points.
(``--from``: bench_iris_appearance.py's clips were cut for the default sets only; the sets with points further out,
``below_low_cheeks_and_beside`` and ``skin_region``, need clips processed here.)

    python bench/bench_anchor_sets.py --cache DIR       # sixteen 10-s clips; processed clips kept in DIR
    python bench/bench_anchor_sets.py --cache DIR --from /tmp/appear   # reuse bench_iris_appearance's cache
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
from bench_head_translation import picture_error_mm  # noqa: E402
from bench_iris_appearance import CLIPS as APPEARANCE_CLIPS  # noqa: E402
from bench_iris_localiser import LUND, capture  # noqa: E402

#: the head turning +-15 deg in yaw (the renderer clips yaw there), the rest of the default drift
TURNING = {"yaw_deg": 22.0, "period_s": 6.0}
#: name: size, distance (mm), trial, face, seed, head motion - small faces turning, seeds no test uses
TURNING_CLIPS = {
    "T12h": ((640, 480), 550.0, "UH47_img_Europe", "hopper", 12, TURNING),
    "T12a": ((640, 480), 550.0, "UH29_img_Europe", "astronaut", 13, TURNING),
    "T8h": ((640, 480), 780.0, "UL31_img_konijntjes", "hopper", 14, TURNING),
    "T8a": ((640, 480), 780.0, "UL43_img_Rome", "astronaut", 15, TURNING),
    "T12h2": ((640, 480), 550.0, "UL43_img_Rome", "hopper", 16, TURNING),
    "T12a2": ((640, 480), 550.0, "UL31_img_konijntjes", "astronaut", 17, TURNING),
    "T8h2": ((640, 480), 780.0, "UH29_img_Europe", "hopper", 18, TURNING),
    "T8a2": ((640, 480), 780.0, "UH47_img_Europe", "astronaut", 19, TURNING),
}


def processed(name, spec, seconds, cache: Path | None, reuse: Path | None, out_dir: Path) -> dict:
    """The clip rendered and processed (bench_iris_localiser.capture), from ``reuse`` or ``cache`` when there."""
    for d in (reuse, cache):
        path = None if d is None else d / f"{name}_{seconds:.0f}s.pkl"
        if path is not None and path.exists():
            with open(path, "rb") as fh:
                return pickle.load(fh)
    size, dist, trial, face, seed, *motion = spec
    kw = {"head_motion": dict(motion[0])} if motion else {}
    cond = G.Condition(name, size_px=size, distance_mm=dist, trial=trial, face=face, seed=seed, duration_s=seconds,
                       **kw)
    from aspectus.webcam import frame_geometry as FG
    from aspectus.webcam.eye_anchors import ANCHOR_POINTS

    # the eye crops cover the points of every set (the pipeline's cover only the sets its setting may use); the
    # default chain's own figures do not depend on it (its templates and fits lie well inside either crop)
    orig = FG._crop_points
    FG._crop_points = lambda anchor_set, skin_pose: np.array(FG._IRIS_CROP_POINTS + ANCHOR_POINTS)
    try:
        items, cap, samples, truth, tr = capture(cond, out_dir)
    finally:
        FG._crop_points = orig
    d = {"cond": cond, "items": items, "cap": cap, "samples": samples, "truth": truth, "trial": tr}
    if cache is not None:
        with open(cache / f"{name}_{seconds:.0f}s.pkl", "wb") as fh:
            pickle.dump(d, fh)
    return d


def chain(items, anchor_set: str) -> tuple[dict, dict]:
    """The per-frame geometry with ``anchor_set`` and the pipeline's clip-level iris estimate (``auto``):
    estimate_gaze's inputs and the iris estimate's record."""
    from aspectus.webcam import pipeline as PL
    from aspectus.webcam.frame_geometry import APPEARANCE_COLUMNS, LIMBUS_DIAM, RECORD_WIDTH, FrameGeometry
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX
    from aspectus.webcam.iris_appearance import small_iris

    geo = FrameGeometry(fov_deg=60.0, refine_iris=True, eye_anchors=True, anchor_set=anchor_set, appearance=True,
                        appearance_below_px=SMALL_FACE_BELOW_PX)
    from aspectus.webcam.eye_anchors import EyeAnchorTracker
    from aspectus.webcam.skin_region import SkinRegionTracker

    spent = [0.0]  # the placement's own CPU time: the anchors' matching and the region's registration

    def timed(f):
        def g(*a, **k):
            c = time.process_time()
            try:
                return f(*a, **k)
            finally:
                spent[0] += time.process_time() - c
        return g

    originals = EyeAnchorTracker.update, SkinRegionTracker.update
    EyeAnchorTracker.update, SkinRegionTracker.update = timed(originals[0]), timed(originals[1])
    c0 = time.process_time()
    try:
        rows = np.vstack([geo.rows(items[i:i + 8]) for i in range(0, len(items), 8)])
    finally:
        EyeAnchorTracker.update, SkinRegionTracker.update = originals
    cpu_ms = 1e3 * (time.process_time() - c0) / max(1, len(items))
    placement_ms = 1e3 * spent[0] / max(1, len(items))
    w = RECORD_WIDTH + sum(k for nm, k in APPEARANCE_COLUMNS if nm != "patches")
    a = rows[:, :w]
    n = len(a)
    found = a[:, 1] > 0.5
    R = np.nan_to_num(a[:, 3:12]).reshape(n, 3, 3)
    R[~found] = np.eye(3)
    t = np.nan_to_num(a[:, 12:15], nan=1.0)
    iris = a[:, 15:19].reshape(n, 2, 2).copy()
    small, size = small_iris(found, a[:, 19:21], a[:, LIMBUS_DIAM], a[:, 29:31], SMALL_FACE_BELOW_PX)
    used = "limbus"
    if small:
        patches = np.ascontiguousarray(rows[:, w:]).view(np.uint8)
        iris_app, info = PL._appearance_iris(a, patches, found)
        if any(b[e].get("fitted") for b in info["blocks"] for e in ("right", "left")):
            iris, used = iris_app, "appearance"
    kw = {"K": np.asarray(geo.state()["K"]), "found": found, "R": R, "t": t, "iris_px": iris,
          "iris_diam_px": a[:, 19:21], "corners_px": a[:, 21:29].reshape(n, 2, 2, 2), "ear": a[:, 29:31],
          "t_s": a[:, 0], "iris_mesh_px": a[:, 31:35].reshape(n, 2, 2), "limbus_diam_px": a[:, LIMBUS_DIAM]}
    return kw, {"used": used, "iris_px": size["iris_px"], "geometry_ms_per_frame": cpu_ms,
                "placement_ms_per_frame": placement_ms}


def figures(kw, samples, truth, trial, true_iris: bool = False) -> dict:
    kw = dict(kw) | ({"iris_px": G.true_iris_px(truth)} if true_iris else {})
    return G.measure(G.with_gaze(samples, **kw), truth, trial)


def head_error_sd(kw, truth) -> np.ndarray:
    from aspectus.webcam.gaze import smooth_pose

    _, ts = smooth_pose(kw["R"], kw["t"], kw["found"], kw["t_s"], 300.0)
    e = picture_error_mm(ts, truth)
    ok = kw["found"] & np.isfinite(e).all(axis=1)
    return (e[ok] - np.median(e[ok], axis=0)).std(axis=0)


def main(argv=None) -> int:
    from aspectus.webcam.eye_anchors import ANCHOR_SETS

    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seconds", type=float, default=10.0, help="length of the clips (default 10)")
    ap.add_argument("--only", nargs="*", help="clip names to run (default all)")
    ap.add_argument("--cache", type=Path, help="folder to keep the processed clips in and reuse them from")
    ap.add_argument("--from", dest="reuse", type=Path,
                    help="a folder of bench_iris_appearance.py's processed clips to read (never written)")
    ap.add_argument("--sets", nargs="*", default=list(ANCHOR_SETS), help="anchor sets (default all)")
    args = ap.parse_args(argv)
    if not LUND.is_dir():
        print(f"the hand-coded recordings are not at {LUND}", file=sys.stderr)
        return 2
    if args.cache:
        args.cache.mkdir(parents=True, exist_ok=True)
    out_dir = Path(tempfile.mkdtemp(prefix="anchor_sets_"))
    clips = dict(APPEARANCE_CLIPS) | TURNING_CLIPS
    for name, spec in clips.items():
        if args.only and name not in args.only:
            continue
        d = processed(name, spec, args.seconds, args.cache, args.reuse, out_dir)
        truth = d["truth"]
        hy = truth["head_yaw_deg"].to_numpy()
        print(f"{name}: {d['cond'].label()}  iris {truth['iris_diameter_px'].median():.1f} px (truth), head yaw "
              f"{hy.min():+.1f}..{hy.max():+.1f} deg", flush=True)
        for s in args.sets:
            kw, est = chain(d["items"], s)
            sd = head_error_sd(kw, truth)
            for label, true_iris in (("default", False), ("true iris", True)):
                m = figures(kw, d["samples"], truth, d["trial"], true_iris)
                print(f"  {s:24s} {label:9s} rms_s2s {m['rms_s2s_deg']:4.2f}  yaw r {m['yaw_r']:5.3f} gain "
                      f"{m['yaw_gain']:4.2f}  pitch r {m['pitch_r']:5.3f} gain {m['pitch_gain']:4.2f}  kappa "
                      f"{m['kappa']:5.2f}" + (f"  head x/y SD {sd[0]:.2f}/{sd[1]:.2f} mm  iris {est['used']}"
                                              + f"  geometry {est['geometry_ms_per_frame']:.2f} ms/frame, of it "
                                                f"placement {est['placement_ms_per_frame']:.2f}"
                                              if not true_iris else ""), flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
