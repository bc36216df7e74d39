"""The head translation that places the eyeball centres, against the renderer's truth, at classroom scale.

Renders the two cells of tests/webcam/test_gaze_grid.py (640 x 480 H.264 CRF 28, lids following, lighting drift,
head drift and rotation; iris 12 and 8.5 px, 8 s) and the three clips of bench/bench_iris_localiser.py (other
trials and seeds, 5 s), runs the pipeline once with the eye anchors (the default) and once without them (the
translation from PnP on the face mesh's landmarks), and prints:

* the error of the head origin's picture position (sideways x, vertical y; in mm at the true depth, after
  the clip's median - the eyeball-centre offsets take up a constant) - its SD, its white part (robust
  sample-to-sample SD / sqrt 2), its 0.15-2 s band (5-frame minus 61-frame moving average: what the I-DT
  threshold sees as fixation-scale wander) and its slower part (61-frame moving average);
* how much of it the PnP rotation's error explains through the lever from the anchors to the eyeball centres
  (``-w x R a``, with w the rotation error against the rendered head rotation and a the anchors' centroid in
  the model): r, and the SD left;
* the gaze figures of tests/_gaze_grid.py with the pipeline's iris centres and with the true ones, for the
  translation as it is and for candidates: a 1-s moving average or a 1-s local quadratic (Savitzky-Golay) on
  top of the 300-ms smoothing, the sideways part averaged with the PnP translation's, the anchors below and
  beside the eyes (``eye_anchor_set="below_and_beside"``, a third pipeline run), and the true sideways and
  vertical motion (the truth minus its median difference from the estimate: the ceiling).

    python bench/bench_head_translation.py          # five clips, about 4 minutes of CPU
"""
from __future__ import annotations

import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

import _gaze_grid as G  # noqa: E402

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"

#: name, distance (mm), trial, face, seed, seconds: the grid test's two cells, then the localiser bench's clips
CLIPS = (("test 12px", 550.0, "UH21_img_Rome", "hopper", 0, 8.0),
         ("test 8px", 780.0, "UL23_img_Europe", "astronaut", 0, 8.0),
         ("dev 12px hopper", 550.0, "UH29_img_Europe", "hopper", 2, 5.0),
         ("dev 8px astronaut", 780.0, "UL43_img_Rome", "astronaut", 3, 5.0),
         ("dev 12px astronaut", 550.0, "UL31_img_konijntjes", "astronaut", 4, 5.0))


def capture(path, anchors: bool, anchor_set: str = "below") -> tuple[dict, object]:
    from aspectus.webcam.gaze import GazeParams
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    with G.gaze_inputs() as cap:
        samples, _ = extract_samples(path, params=ProcessParams(gaze=GazeParams(eye_anchors=anchors,
                                                                                      eye_anchor_set=anchor_set)))
    return cap, samples


def picture_error_mm(t, truth) -> np.ndarray:
    """(N, 2) error of the head origin's picture position, sideways and vertical, in mm at the true depth."""
    tru = truth[["head_x_mm", "head_y_mm", "head_z_mm"]].to_numpy()
    return (t[:, :2] / t[:, 2:3] - tru[:, :2] / tru[:, 2:3]) * tru[:, 2:3]


def structure(e, ok) -> str:
    from scipy.ndimage import uniform_filter1d

    e = e[ok] - np.median(e[ok], axis=0)
    white = 1.4826 * np.median(np.abs(np.diff(e, axis=0)), axis=0) / np.sqrt(2)
    band = uniform_filter1d(e, 5, axis=0) - uniform_filter1d(e, 61, axis=0)
    slow = uniform_filter1d(e, 61, axis=0)
    f = lambda a: "/".join(f"{v:.2f}" for v in a)  # noqa: E731
    return f"SD {f(e.std(0))}  white {'/'.join(f'{v:.3f}' for v in white)}  0.15-2 s {f(band.std(0))}  >2 s {f(slow.std(0))}"


def lever(cap, truth, t, scale, ok) -> str:
    """How much of the picture-position error the rotation error explains through the anchors' lever."""
    from scipy.spatial.transform import Rotation

    from aspectus.synth.frame import head_rotation
    from aspectus.webcam.eye_anchors import ANCHOR_SETS, DEFAULT_ANCHOR_SET
    from aspectus.webcam.gaze import smooth_pose
    from aspectus.webcam.headpose import face_model

    R, _ = smooth_pose(cap["R"], cap["t"], cap["found"], cap["t_s"], 300.0)
    Rt = np.stack([head_rotation(*r) for r in truth[["head_yaw_deg", "head_pitch_deg", "head_roll_deg"]].to_numpy()])
    R0 = Rotation.from_matrix(np.einsum("nji,njk->nik", Rt[ok], R[ok])).mean().as_matrix()
    w = Rotation.from_matrix(np.einsum("nij,nkj->nik", R, Rt @ R0)).as_rotvec()
    w -= np.median(w[ok], axis=0)
    a = face_model().points_mm[list(ANCHOR_SETS[DEFAULT_ANCHOR_SET])].mean(axis=0)
    pred = -np.cross(w, np.einsum("nij,j->ni", R, a))[:, :2] * scale
    e = picture_error_mm(t, truth)[ok]
    e -= np.median(e, axis=0)
    p = pred[ok] - np.median(pred[ok], axis=0)
    r = [np.corrcoef(e[:, i], p[:, i])[0, 1] for i in range(2)]
    return (f"rotation error SD {'/'.join(f'{v:.2f}' for v in np.degrees(w[ok].std(0)))} deg; "
            f"r(error, lever) {r[0]:.2f}/{r[1]:.2f}, SD left {'/'.join(f'{v:.2f}' for v in (e - p).std(0))} mm")


def gaze(cap, samples, truth, trial, t, true_iris):
    kw = dict(cap) | {"t": t}
    if true_iris:
        kw["iris_px"] = G.true_iris_px(truth)
    return G.measure(G.with_gaze(samples, **kw), truth, trial)


def main() -> int:
    from scipy.ndimage import uniform_filter1d
    from scipy.signal import savgol_filter

    from aspectus.webcam.gaze import estimate_gaze, smooth_pose

    if not LUND.is_dir():
        print(f"the hand-coded recordings are not at {LUND}", file=sys.stderr)
        return 2
    out_dir = Path(tempfile.mkdtemp(prefix="head_t_"))
    for name, dist, trial_name, face, seed, secs in CLIPS:
        cond = G.Condition(name.replace(" ", "_"), size_px=(640, 480), distance_mm=dist, trial=trial_name,
                           face=face, seed=seed, duration_s=secs)
        res, trial = G.render_condition(cond, out_dir, LUND)
        cap, samples = capture(res.path, True)
        cap_pnp, _ = capture(res.path, False)
        cap_bb, samples_bb = capture(res.path, True, "below_and_beside")
        truth = res.truth
        _, info = estimate_gaze(**cap)
        scale = info["model_scale"]
        ok = cap["found"] & cap_pnp["found"]
        print(f"{name}: {cond.label()}, iris {truth['iris_diameter_px'].median():.1f} px", flush=True)
        for label, c in (("anchors", cap), ("PnP", cap_pnp), ("beside", cap_bb)):
            _, ts = smooth_pose(c["R"], c["t"], c["found"], c["t_s"], 300.0)
            print(f"  head origin error x/y (mm), {label:7s}: {structure(picture_error_mm(ts, truth), ok)}")
        _, ts = smooth_pose(cap["R"], cap["t"], cap["found"], cap["t_s"], 300.0)
        print(f"  anchors: {lever(cap, truth, ts, scale, ok)}")
        t0, tp = cap["t"], cap_pnp["t"]
        tp = tp - np.nanmedian(tp - t0, axis=0)
        t_half = t0.copy()
        t_half[:, 0] = 0.5 * (t0[:, 0] + tp[:, 0])
        tru = truth[["head_x_mm", "head_y_mm", "head_z_mm"]].to_numpy() / scale
        t_true = t0.copy()
        t_true[:, :2] = tru[:, :2] - np.nanmedian(tru[:, :2] - t0[:, :2], axis=0)
        for true_iris in (False, True):
            for label, t in (("anchors", t0), ("+MA 1 s", uniform_filter1d(t0, 31, axis=0, mode="nearest")),
                             ("+SG 1 s", savgol_filter(t0, 31, 2, axis=0, mode="nearest")),
                             ("x half PnP", t_half), ("true x/y", t_true)):
                m = gaze(cap, samples, truth, trial, t, true_iris)
                _print(true_iris, label, m)
            _print(true_iris, "beside", gaze(cap_bb, samples_bb, truth, trial, cap_bb["t"], true_iris))
    return 0


def _print(true_iris, label, m):
    print(f"  {'true iris' if true_iris else 'pipeline '} {label:10s} rms_s2s {m['rms_s2s_deg']:4.2f}  yaw r "
          f"{m['yaw_r']:5.3f} gain {m['yaw_gain']:4.2f}  pitch r {m['pitch_r']:5.3f} gain "
          f"{m['pitch_gain']:4.2f}  kappa {m['kappa']:5.2f}", flush=True)


if __name__ == "__main__":
    sys.exit(main())
