"""How precise the gaze could be from the decoded picture itself: the grid's cells measured by an estimator that
knows everything the renderer drew except the gaze (issue 15's "push toward the physical limit").

For each grid cell (tests/_gaze_grid.py, the same renders and seeds as bench/bench_gaze_grid.py) the clip is
rendered and processed by the pipeline (rows ``default`` and ``true_iris``: the chain fed the renderer's true iris
centres), and then each open-eye frame's gaze is estimated again from the decoded picture by a **model fit**: yaw and
pitch chosen so that the renderer's own picture at that gaze (the same face, iris texture, head pose and distance,
lid closure, glasses, mirroring and lighting as the frame had, all taken from the truth) best matches the decoded
picture over the two eyes' boxes (RGB, least squares on the picture's first-order change about the true gaze: one
Gauss-Newton step, :func:`linearised_fit`). For Gaussian pixel noise that is the maximum-likelihood estimate to
first order (Kay 1993, *Fundamentals of Statistical Signal Processing: Estimation Theory*, ch. 7-8; from memory),
and its error is the picture's error projected on the picture's own change with the gaze. It is what an estimator
with a perfect model of the face, the head and the light reaches on the picture the codec left: a reference for how
far the pipeline is from the picture's own limit, not a bound every method must respect (an estimator that uses the
eyes' motion over time can do better; one that must also find the head does worse).

Also printed: the **Cramér-Rao bound** (Kay 1993, ch. 3; from memory) of the picture before compression for the
renderer's sensor noise (Gaussian, 2 grey levels a channel): per axis the square root of the diagonal of
``(J^T J / sigma^2)^-1``, ``J`` the eye boxes' derivative in yaw and pitch (central differences of 1 deg), given
here as the RMS-S2S it implies for white noise (``sqrt(2 (sd_yaw^2 + sd_pitch^2))``), and the RMS difference
between the decoded picture and the renderer's picture at the true gaze (``codec_residual``, grey levels: sensor
noise plus what the codec changed).

Columns: ``rms_s2s`` (deg) and ``rms_fix`` as in tests/_gaze_grid.py, yaw / pitch r and gain against the truth,
``kappa`` against the coders (``kappa_truth``: the detector on the true gaze) - for the model fit (``fit_``), the
pipeline (``default_``) and the pipeline fed the true iris centres (``true_iris_``).

    python bench/gaze_picture_limit.py --seed 0 --only 12px_crf28 8px_crf28 --csv limit.csv
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

import _gaze_grid as G  # noqa: E402
from bench_gaze_grid import LUND, cells_or_exit_code  # noqa: E402

#: step of the central differences, deg (about 0.2 px of iris motion at a 12 px iris: well above the rendered
#: picture's 8-bit rounding, well inside the picture's linear range)
DELTA_DEG = 1.0
#: the renderer's sensor noise, grey levels a channel (aspectus.synth.render.render_clip's default noise_sd)
SENSOR_NOISE_SD = 2.0
#: half-size of each eye's box in iris diameters (x, y): the iris's travel, the lids and the sclera beside it
BOX_HALF_IRIS = (1.6, 1.1)


@dataclass
class FrameModel:
    """The renderer's picture of one frame's eye boxes as a function of the gaze (everything else from the truth)."""

    render: Callable[[float, float], np.ndarray]  # (yaw_deg, pitch_deg) -> (n_pixels * 3,) float
    box: tuple  # (y0, y1, x0, x1)
    mask: np.ndarray  # (y1 - y0, x1 - x0) bool: the two eye boxes

    def observed(self, picture: np.ndarray) -> np.ndarray:
        y0, y1, x0, x1 = self.box
        return picture[y0:y1, x0:x1][self.mask].astype(float).ravel()

    def jacobian(self, yaw_deg: float, pitch_deg: float, delta_deg: float = DELTA_DEG) -> np.ndarray:
        """(n, 2): the picture's derivative in yaw and pitch (grey levels per deg), central differences."""
        d = float(delta_deg)
        return np.stack([(self.render(yaw_deg + d, pitch_deg) - self.render(yaw_deg - d, pitch_deg)) / (2 * d),
                         (self.render(yaw_deg, pitch_deg + d) - self.render(yaw_deg, pitch_deg - d)) / (2 * d)], 1)


class PictureModel:
    """The renderer's pictures of a rendered grid clip, frame by frame (same face, seed, head, lids and light)."""

    def __init__(self, cond: G.Condition, truth: pd.DataFrame):
        from aspectus.synth.face import load_face
        from aspectus.synth.frame import IRIS_COLOURS, Camera, CornealReflection, FaceRig
        from aspectus.synth.render import _background, _light_level, _light_ramp

        if cond.exposure_ms:
            raise ValueError(f"cell {cond.name}: a {cond.exposure_ms:g} ms exposure (sub-frames) is not modelled")
        self.cond, self.truth = cond, truth.reset_index(drop=True)
        w, h = cond.size_px
        self.w, self.h = int(w), int(h)
        cam = Camera(self.w, self.h, 60.0)
        rest = tuple(float(truth[c].median()) for c in ("head_x_mm", "head_y_mm", "head_z_mm"))
        self.rig = FaceRig(load_face(cond.face), cam, rest_head_mm=rest, background=_background(self.w, self.h),
                           seed=cond.seed, lower_skin_follow=0.0, lid_follow=cond.lid_follow, glasses=cond.glasses,
                           iris_rgb=IRIS_COLOURS[cond.iris_colour] if cond.iris_colour else None,
                           corneal_reflection=CornealReflection() if cond.corneal_reflection else None,
                           **({"iris_sampling": cond.iris_sampling} if cond.iris_sampling else {}))
        self.light = _light_level(self.truth["t_s"].to_numpy(), seed=cond.seed, drift=float(cond.lighting_drift))
        self.ramp = _light_ramp(self.w)

    def frame(self, i: int) -> FrameModel:
        from aspectus.synth.frame import gaze_vector, head_rotation
        from aspectus.synth.render import _light_gain

        r = self.truth.iloc[i]
        R = head_rotation(r.head_yaw_deg, r.head_pitch_deg, r.head_roll_deg)
        T = (r.head_x_mm, r.head_y_mm, r.head_z_mm)
        cond = self.cond
        lit = bool(cond.lighting_drift or cond.lighting_gradient)
        gain = _light_gain(self.light[i], cond.lighting_gradient, self.ramp) if lit else None
        d = float(r.iris_diameter_px)
        bx, by = BOX_HALF_IRIS[0] * d, BOX_HALF_IRIS[1] * d
        xs = np.array([r.right_iris_x_px, r.left_iris_x_px])
        ys = np.array([r.right_iris_y_px, r.left_iris_y_px])
        x0, x1 = int(max(0, xs.min() - bx)), int(min(self.w, xs.max() + bx))
        y0, y1 = int(max(0, ys.min() - by)), int(min(self.h, ys.max() + by))
        mask = np.zeros((y1 - y0, x1 - x0), bool)
        for x, y in zip(xs, ys):
            mask[int(max(0, y - by - y0)):int(max(0, y + by - y0)), int(max(0, x - bx - x0)):int(max(0, x + bx - x0))] = True
        closure = float(r.lid_closure)

        def render(yaw_deg: float, pitch_deg: float) -> np.ndarray:
            im, _ = self.rig.render(R=R, T_mm=T, gaze=gaze_vector(yaw_deg, pitch_deg), closure=closure)
            if cond.mirror:
                im = im[:, ::-1]
            im = im.astype(np.float32)
            if gain is not None:
                im = im * gain
            return im[y0:y1, x0:x1][mask].astype(float).ravel()

        return FrameModel(render, (y0, y1, x0, x1), mask)


def cramer_rao_sd(J: np.ndarray, noise_sd: float = SENSOR_NOISE_SD) -> np.ndarray:
    """(2,) the Cramér-Rao bound's SD of yaw and pitch (deg) for independent Gaussian pixel noise of ``noise_sd``
    grey levels, from the picture's derivative ``J`` (:meth:`FrameModel.jacobian`)."""
    fisher = J.T @ J / float(noise_sd) ** 2
    try:
        return np.sqrt(np.diag(np.linalg.inv(fisher)))
    except np.linalg.LinAlgError:
        return np.full(2, np.inf)


def linearised_fit(fm: FrameModel, observed: np.ndarray, at_deg, J: np.ndarray | None = None
                   ) -> tuple[np.ndarray, float]:
    """(2,) the gaze (yaw, pitch, deg) that the picture's first-order model about ``at_deg`` fits best to
    ``observed`` by least squares - one Gauss-Newton step from ``at_deg``: ``at + (J^T J)^-1 J^T (observed -
    model(at))`` - and the RMS residual at ``at_deg`` (grey levels).

    From the true gaze this is the maximum-likelihood estimate to first order (the picture is linear in the gaze
    over the errors measured here, tenths of a degree: a 12 px iris moves about 0.2 px a degree), and its error is
    the picture's error - sensor noise and what the codec changed - projected on the picture's own change with the
    gaze. One step, rather than iterating to the minimum: the renderer rounds its picture to whole grey levels and
    draws the lids' lines with vertices on a 1/16 px grid, so the exact cost is jagged on the scale of a tenth of
    a degree and an iterated search ends wherever the jags catch it. ``J``: the derivative at ``at_deg`` if
    already computed."""
    g = np.asarray(at_deg, float)
    J = fm.jacobian(*g) if J is None else J
    r = observed - fm.render(*g)
    step, *_ = np.linalg.lstsq(J, r, rcond=None)
    return g + step, float(np.sqrt(np.mean(r ** 2)))


def decoded_frames(path) -> list[np.ndarray]:
    import av

    with av.open(str(path)) as c:
        return [f.to_ndarray(format="rgb24") for f in c.decode(video=0)]


def model_fit_samples(cond: G.Condition, truth: pd.DataFrame, frames: list[np.ndarray], *,
                      max_closure: float = 0.05) -> tuple[pd.DataFrame, dict]:
    """The model fit's samples (``t_s``, ``pts_s``, ``valid``, ``yaw_deg``, ``pitch_deg``; frames whose lids are
    more than ``max_closure`` closed are not valid) and per-clip medians of the Cramér-Rao SDs and the codec
    residual."""
    if len(frames) != len(truth):
        raise ValueError(f"cell {cond.name}: {len(frames)} decoded frames for {len(truth)} truth rows")
    pm = PictureModel(cond, truth)
    n = len(truth)
    est = np.full((n, 2), np.nan)
    crb = np.full((n, 2), np.nan)
    resid = np.full(n, np.nan)
    for i in range(n):
        r = pm.truth.iloc[i]
        if r.lid_closure > max_closure:
            continue
        fm = pm.frame(i)
        obs = fm.observed(frames[i])
        g0 = (float(r.yaw_deg), float(r.pitch_deg))
        J = fm.jacobian(*g0)
        crb[i] = cramer_rao_sd(J)
        est[i], resid[i] = linearised_fit(fm, obs, g0, J)
    ok = np.isfinite(est[:, 0])
    samples = pd.DataFrame({"t_s": truth["t_s"].to_numpy(), "pts_s": truth["pts_s"].to_numpy(), "valid": ok,
                            "yaw_deg": est[:, 0], "pitch_deg": est[:, 1]})
    sd = np.nanmedian(crb, axis=0)
    extra = {"crb_yaw_sd_deg": float(sd[0]), "crb_pitch_sd_deg": float(sd[1]),
             "crb_rms_s2s_deg": float(np.sqrt(2 * (sd[0] ** 2 + sd[1] ** 2))),
             "codec_residual_grey": float(np.nanmedian(resid)), "fit_frames": int(ok.sum())}
    return samples, extra


FIGURES = ("rms_s2s_deg", "rms_fix_deg", "yaw_r", "yaw_gain", "pitch_r", "pitch_gain", "kappa")


def measure_cell(cond: G.Condition, lund_dir: Path) -> dict:
    """One row: the cell, the model fit's figures (``fit_*``), the pipeline's (``default_*``, ``true_iris_*``)."""
    with tempfile.TemporaryDirectory() as tmp:
        rows = G.run_condition(cond, Path(tmp), lund_dir,
                               variants={"default": {}} | G.TRUE_IRIS)
        from aspectus.synth.render import read_truth

        truth = read_truth(Path(tmp) / f"{cond.name}_truth.csv")
        frames = decoded_frames(Path(tmp) / f"{cond.name}.mp4")
    import _lund

    trial = _lund.load_trials(lund_dir, cond.trial)
    samples, extra = model_fit_samples(cond, truth, frames)
    fit = G.measure(samples, truth, trial)
    out = {"cell": cond.name, "seed": cond.seed, "iris_px": fit["iris_px"], **extra,
           "kappa_truth": fit["kappa_truth"]}
    out |= {f"fit_{k}": fit[k] for k in FIGURES}
    for row in rows:
        out |= {f"{row['variant']}_{k}": row[k] for k in FIGURES}
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--only", nargs="+", metavar="CELL", help="these cells of bench/bench_gaze_grid.py's grid")
    ap.add_argument("--csv", type=Path, help="also write the rows here")
    args = ap.parse_args(argv)
    cells = cells_or_exit_code(args.seed, args.only)
    if isinstance(cells, int):
        return cells
    rows = []
    for cond in cells:
        t0 = time.perf_counter()
        row = measure_cell(cond, LUND)
        rows.append(row)
        print(f"{cond.name} seed {cond.seed}: iris {row['iris_px']:.1f} px; Cramér-Rao RMS-S2S "
              f"{row['crb_rms_s2s_deg']:.3f} deg; codec residual {row['codec_residual_grey']:.1f} grey "
              f"({time.perf_counter() - t0:.0f} s)", flush=True)
        for who in ("fit", "true_iris", "default"):
            print(f"  {who:9s} " + "  ".join(f"{k} {row[f'{who}_{k}']:.3f}" for k in FIGURES)
                  + (f"  (kappa on the truth {row['kappa_truth']:.3f})" if who == "fit" else ""), flush=True)
        if args.csv:
            pd.DataFrame(rows).to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
