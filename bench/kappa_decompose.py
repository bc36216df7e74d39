"""What in the webcam gaze's error costs fixation agreement with the Lund coders: the true gaze with one part of the
measured error put in at a time.

Each clip (the gaze grid's 30 fps cells at seed 0 without reflection, light iris or exposure, and 16 held-out clips
whose eyes follow other hand-coded trials of Andersson et al. (2017), ../shared/reference/lund2013) is rendered and
processed once; its per-frame measurements (the clip-level gaze estimate's inputs, the limbus fit's centres, the eye
patches) are kept in ``--cache`` and re-run through today's gaze estimate (and today's appearance estimate of the
iris height where ``iris_combine=auto`` takes it), so that a second run only re-estimates.

``M`` is the measured gaze, ``T`` the renderer's true gaze at the frame times (its own blinks invalid). Parts of
``M - T``, per axis: ``gain``, ``T`` times the slope of ``M`` on ``T`` less one; ``step``, how the gain-free
estimate follows a saccade (:func:`step_response`: the median over the clip's saccades of at least 3 deg of ``M``
and ``T`` scaled from the fixation before to the one after, at frames -2..+4 from the saccade's first frame) put
on each saccade of the truth (:func:`step_part`); of the rest, ``slow`` (0.5 s running mean after a 5-frame
median), ``spikes`` (frames beyond 3 robust SDs of what is left) and ``fast``. Rows, the default detector's sample
kappa against both coders (mean; the I-DT threshold each got is printed below the row):

* ``truth``; ``lag`` (the truth delayed by the lag where the 2-D velocities cross-correlate best, read from the
  500 Hz truth); ``mask`` (the measured valid and blink flags); ``gain`` ... ``fast``: the truth plus that part;
* ``+gain`` ... ``+fast``, ``+mask``: the parts added in turn (the last is the measured gaze); ``f+fast`` ...
  ``f+gain``: added in the other order, the noise-like part first;
* ``-gain`` ... ``-mask``: the measured gaze with that part taken out;
* ``measured``; ``noise``: the truth plus white Gaussian noise of the measured error's RMS-S2S inside the
  fixations both coders agree on (mean of 5 seeds: the premise of this note's Lund noise tables);
  ``measured@noise_thr``: the measured gaze with the I-DT threshold the ``noise`` row got; ``noise_fix``: white
  noise as spread about the coders' fixations' means as the measured error; ``noise0.7``: white noise of RMS-S2S
  0.7 deg.

The last lines print the measured minus true scaled step at frames -1, +1, +2 from each saccade's start, pooled over
the clips, by whether that frame was decoded as a B-frame (the renderer's H.264 writes 3 of every 4 frames so).
Figures: docs/notes/lund-30hz-limits.md ("What in the webcam error costs agreement").

    python bench/kappa_decompose.py --cache DIR                   # the 25 clips, default gaze settings
    python bench/kappa_decompose.py --cache DIR --gaze iris_combine=fuse
    python bench/kappa_decompose.py --cache DIR --no-b-frames [--crf-offset 3]   # H.264 clips without B-frames
    python bench/kappa_decompose.py --cache DIR --only 12px_crf28 ho_8px_s21_ --csv rows.csv

A clip not in the cache is rendered and processed (some 10-80 s of CPU each; the 25 clips about 10 minutes on two
shared cores); from the cache a run takes about a minute.
"""
from __future__ import annotations

import argparse
import pickle
import sys
import time
from contextlib import contextmanager, nullcontext
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "bench"))

import _gaze_grid as G  # noqa: E402
import _lund  # noqa: E402
from _bench_args import gaze_overrides_or_exit_code, only_named  # noqa: E402

LUND = ROOT.parent / "shared" / "reference" / "lund2013" / "img"

#: the gaze grid's 30 fps cells at seed 0 without reflection, light iris or exposure (bench_gaze_grid.grid)
GRID = ("12px_crf28", "16px_crf28", "8px_crf28", "12px_crf23", "12px_crf33", "12px_mp4v", "16px_still_lids",
        "16px_glasses_mirror", "12px_crf28_other_seed")

HO_SIZES = {"8px": ((640, 480), 780.0), "12px": ((640, 480), 550.0), "16px": ((1280, 720), 800.0)}
HO_TRIALS = ["UH29_img_Europe", "UL31_img_konijntjes", "UL43_img_Rome", "UH47_img_Europe"]


def held_out() -> list:
    """Clips on trials the grid does not use: twelve of 10 s (seeds 21-32) and four of 40 s (seeds 51-54)."""
    out = []
    extras = [{}, {"crf": 23}, {"crf": 33}, {"codec": "mpeg4"}, {"lid_follow": 0.0}, {"glasses": True, "mirror": True}]
    for i, seed in enumerate(range(21, 33)):
        size = list(HO_SIZES)[i % 3]
        sz, dist = HO_SIZES[size]
        ex = extras[i % len(extras)] if i >= 3 else {}
        tag = "_".join(f"{k}{v}" for k, v in ex.items())
        out.append(G.Condition(f"ho_{size}_s{seed}_{tag}", size_px=sz, distance_mm=dist, trial=HO_TRIALS[i % 4],
                               face=("hopper", "astronaut")[(i // 2) % 2], seed=seed, duration_s=10.0, **ex))
    t1, t2 = "+".join(HO_TRIALS), "+".join(HO_TRIALS[2:] + HO_TRIALS[:2])
    out += [G.Condition("long_12px_s51", size_px=(640, 480), distance_mm=550.0, trial=t1, face="astronaut", seed=51,
                        duration_s=40.0),
            G.Condition("long_8px_s52", size_px=(640, 480), distance_mm=780.0, trial=t2, face="hopper", seed=52,
                        duration_s=40.0),
            G.Condition("long_16px_s53", size_px=(1280, 720), distance_mm=800.0, trial=t1, face="hopper", seed=53,
                        duration_s=40.0),
            G.Condition("long_12px_s54_crf23", size_px=(640, 480), distance_mm=550.0, trial=t2, face="hopper",
                        seed=54, duration_s=40.0, crf=23)]
    return out


def conditions() -> list:
    import bench_gaze_grid as B

    grid = {c.name: c for c in B.grid(False, 0)}
    return [grid[n] for n in GRID] + held_out()


@contextmanager
def no_b_frames():
    """While the block runs, libx264 clips are written without B-frames (``bframes=0``; the renderer's default
    ``veryfast`` preset writes 3 of every 4 frames as B-frames)."""
    from aspectus.synth import clip_writer

    orig = clip_writer.x264_options

    def opts(crf):
        o = dict(orig(crf))
        o["x264-params"] = ":".join(filter(None, [o.get("x264-params"), "bframes=0"]))
        return o

    clip_writer.x264_options = opts
    try:
        yield
    finally:
        clip_writer.x264_options = orig


def capture(cond, cache: Path, clips: Path, b_frames: bool = True, crf_offset: int = 0) -> dict:
    """The clip's per-frame measurements (the clip-level gaze estimate's inputs, the limbus fit and the eye patches
    the appearance estimate reads), its samples, truth and trial; read from ``cache`` or rendered and processed.
    ``b_frames`` False: an H.264 clip is written without B-frames (its name ends in ``_nob``), at its CRF plus
    ``crf_offset`` (name ``_nob_crfN``)."""
    if not b_frames:
        name = f"{cond.name}_nob" + (f"_crf{cond.crf + crf_offset}" if crf_offset else "")
        cond = G.Condition(**{**cond.__dict__, "name": name, "crf": cond.crf + crf_offset})
    p = cache / f"{cond.name}.pkl"
    if p.exists():
        with open(p, "rb") as f:
            return pickle.load(f)
    from aspectus.webcam import pipeline
    from aspectus.webcam.gaze import GazeParams, estimate_gaze
    from aspectus.webcam.pipeline import ProcessParams, extract_samples

    with no_b_frames() if not b_frames else nullcontext():
        res, trial = G.render_condition(cond, clips, LUND)
    cap: dict = {}
    orig_app = pipeline._appearance_iris

    def spy(**kw):
        cap["kw"] = {k: v for k, v in kw.items() if k != "params"}
        return estimate_gaze(**kw)

    def app_spy(a, patches, found):
        n = len(a)
        w = pipeline.RECORD_WIDTH
        cap["limbus_iris_px"] = a[:, 15:19].reshape(n, 2, 2).copy()
        cap["limbus_ok"] = a[:, w:w + 2] > 0.5
        cap["affines"] = a[:, w + 2:w + 14].reshape(n, 2, 2, 3).copy()
        cap["patches"] = np.asarray(patches[0:n]).copy()
        cap["found"] = found.copy()
        return orig_app(a, patches, found)

    pipeline.estimate_gaze, pipeline._appearance_iris = spy, app_spy
    try:  # iris_combine=appearance keeps the eye patches at every iris size; the default is re-estimated from them
        samples, meta = extract_samples(res.path, params=ProcessParams(
            gaze=GazeParams(mirrored=cond.mirror, iris_combine="appearance")))
    finally:
        pipeline.estimate_gaze, pipeline._appearance_iris = estimate_gaze, orig_app
    cap.update(cond=cond, samples=samples, meta=meta, truth=res.truth, trial=trial, clip=str(res.path))
    cache.mkdir(parents=True, exist_ok=True)
    with open(p, "wb") as f:
        pickle.dump(cap, f)
    return cap


def reestimate(cap: dict, gaze: dict) -> pd.DataFrame:
    """The clip's samples from today's gaze estimate on its stored measurements, with settings ``gaze``: the
    pipeline's ``auto`` choice of iris estimate (appearance below the threshold, by the face mesh's median iris)
    as in :func:`aspectus.webcam.pipeline.extract_samples`."""
    from aspectus.webcam.gaze import SMALL_FACE_BELOW_PX, OPEN_EYE_REL, GazeParams, relative_aperture, switch_iris_px
    from aspectus.webcam.iris_appearance import PATCH_SIZE, appearance_iris

    kw = dict(cap["kw"])
    combine = gaze.get("iris_combine", "auto")
    if "limbus_iris_px" not in cap:  # stored without eye patches: the limbus fit as the pipeline used it (marked
        # missing where it failed)
        if combine == "appearance":
            raise ValueError(f"{cap['cond'].name}: stored without the eye patches the appearance estimate reads")
        over = {k: v for k, v in gaze.items() if k != "iris_combine"}
        if combine in ("fuse", "rescale"):
            over["iris_combine"] = combine
        return G.with_gaze(cap["samples"], **kw, params=GazeParams(mirrored=cap["cond"].mirror, **over))
    limbus = cap["limbus_iris_px"].copy()
    iris = limbus.copy()
    use_app = combine == "appearance"
    if combine == "auto":
        # the pipeline's rule (gaze.switch_iris_px: the limbus fit's median over the open-eye frames)
        use_app = switch_iris_px(cap["found"], kw["iris_diam_px"], kw.get("limbus_diam_px"),
                                 kw["ear"])["iris_px"] < SMALL_FACE_BELOW_PX
    if use_app:
        masked = limbus.copy()
        masked[~cap["limbus_ok"]] = np.nan
        rel, _ = relative_aperture(cap["found"], kw["ear"])
        usable = cap["found"] & (rel >= OPEN_EYE_REL)
        W, H = PATCH_SIZE
        patches = np.asarray(cap["patches"]).reshape(len(limbus), 2, H, W)
        pred, _ = appearance_iris(patches, cap["affines"], masked, usable)
        y = pred[..., 1]
        iris[..., 1] = np.where(np.isfinite(y), y, iris[..., 1])
    else:  # the limbus fit alone: where it failed, the gaze estimate bridges (pipeline.extract_samples)
        iris[~np.isfinite(kw["limbus_diam_px"])] = np.nan
    kw["iris_px"] = iris
    over = {k: v for k, v in gaze.items() if k != "iris_combine"}
    if combine in ("fuse", "rescale"):
        over["iris_combine"] = combine
    return G.with_gaze(cap["samples"], **kw, params=GazeParams(mirrored=cap["cond"].mirror, **over))


def _detect(t_s, yaw, pitch, valid, blink, coders, dispersion=None) -> tuple[float, float]:
    from aspectus.events.analysis import AnalysisParams, run_analysis

    s = pd.DataFrame({"t_s": t_s, "valid": valid, "yaw_deg": yaw, "pitch_deg": pitch, "blink": blink})
    res = run_analysis(s, AnalysisParams(idt_dispersion_deg=dispersion))
    fix = np.asarray(res.labels == "fixation")
    thr = res.quality["detector_thresholds"].get("dispersion_deg", np.nan)
    return float(np.mean([_lund.cohen_kappa(fix, m) for m in coders.values()])), float(thr)


def saccades(coders: dict, min_fix: int = 4, max_gap: int = 3) -> list[tuple[int, int, int, int]]:
    """(a0, a1, b0, b1): a fixation both coders agree on over frames a0..a1-1 and the next one over b0..b1-1, each
    at least ``min_fix`` frames, at most ``max_gap`` frames apart - the saccade between them starts at frame a1."""
    both = np.logical_and.reduce([np.asarray(v, bool) for v in coders.values()])
    m = np.concatenate([[0], both.astype(int), [0]])
    on, off = np.flatnonzero(np.diff(m) == 1), np.flatnonzero(np.diff(m) == -1)
    return [(on[i], off[i], on[i + 1], off[i + 1]) for i in range(len(on) - 1)
            if off[i] - on[i] >= min_fix and off[i + 1] - on[i + 1] >= min_fix and on[i + 1] - off[i] <= max_gap]


#: frames around a saccade's first frame whose measured step response is taken (k = -2..+4)
STEP_FRAMES = np.arange(-2, 5)


def step_response(m: np.ndarray, t: np.ndarray, sacc: list, min_amp_deg: float = 3.0):
    """Median over the clip's saccades of at least ``min_amp_deg`` on this axis of the measured and the true gaze
    around the saccade's first frame (frames :data:`STEP_FRAMES`), each scaled to go from 0 (the mean over the
    fixation before) to 1 (the mean over the one after): gain-free, so what is left is how the estimate follows a
    step - its delay, anticipation and catch-up. Returns (measured, truth, number of saccades)."""
    rm, rt = [], []
    n = len(t)
    for a0, a1, b0, b1 in sacc:
        tb, ta = t[a0:a1].mean(), t[b0:b1].mean()
        if abs(ta - tb) < min_amp_deg:
            continue
        idx = a1 + STEP_FRAMES
        if idx[0] < 0 or idx[-1] >= n:
            continue
        with np.errstate(invalid="ignore"):
            mb, ma = np.nanmean(m[a0:a1]), np.nanmean(m[b0:b1])
        if not (np.isfinite(mb) and np.isfinite(ma)) or abs(ma - mb) < 0.25 * abs(ta - tb):
            continue
        rm.append((m[idx] - mb) / (ma - mb))
        rt.append((t[idx] - tb) / (ta - tb))
    if not rm:
        return np.full(len(STEP_FRAMES), np.nan), np.full(len(STEP_FRAMES), np.nan), 0
    return np.nanmedian(rm, axis=0), np.median(rt, axis=0), len(rm)


def step_part(t: np.ndarray, sacc: list, shape: np.ndarray) -> np.ndarray:
    """The error a step response ``shape`` (measured minus true, per frame of :data:`STEP_FRAMES`) adds to each
    saccade of the truth ``t``, scaled by the saccade's amplitude."""
    out = np.zeros_like(t)
    if not np.isfinite(shape).all():
        return out
    for a0, a1, b0, b1 in sacc:
        amp = t[b0:b1].mean() - t[a0:a1].mean()
        idx = a1 + STEP_FRAMES
        keep = (idx >= 0) & (idx < len(t))
        out[idx[keep]] += amp * shape[keep]
    return out


def frame_types(clip: str) -> np.ndarray:
    """Each decoded frame's picture type (PyAV's: 1 I, 2 P, 3 B), in display order."""
    import av

    with av.open(clip) as c:
        return np.array([int(f.pict_type) for f in c.decode(c.streams.video[0])])


def step_errors_by_frame_type(m: np.ndarray, t: np.ndarray, sacc: list, types: np.ndarray,
                              min_amp_deg: float = 3.0) -> list[tuple[int, bool, float]]:
    """Per saccade of at least ``min_amp_deg`` on an axis and per frame k = -1, +1, +2 from its first frame: (k,
    whether that frame is a B-frame, the measured gaze's scaled step minus the truth's there; positive at k = -1:
    the estimate moves before the eye, negative at k > 0: it has not yet arrived)."""
    out = []
    for a0, a1, b0, b1 in sacc:
        for ax in range(t.shape[1]):
            tb, ta = t[a0:a1, ax].mean(), t[b0:b1, ax].mean()
            if abs(ta - tb) < min_amp_deg:
                continue
            with np.errstate(invalid="ignore"):
                mb, ma = np.nanmean(m[a0:a1, ax]), np.nanmean(m[b0:b1, ax])
            for kk in (-1, 1, 2):
                i = a1 + kk
                if 0 <= i < len(t) and i < len(types) and np.isfinite(m[i, ax]) and abs(ma - mb) > 0:
                    out.append((kk, bool(types[i] == 3),
                                float((m[i, ax] - mb) / (ma - mb) - (t[i, ax] - tb) / (ta - tb))))
    return out


def xcorr_lag_s(m: np.ndarray, t: np.ndarray, ok: np.ndarray, fps: float) -> float:
    """The delay of m behind t (s), (N, 2) each, where their 2-D velocities cross-correlate best (the sum of the
    two axes' products; parabolic peak within +-5 frames)."""
    dm, dt = np.diff(m, axis=0), np.diff(t, axis=0)
    use = ok[1:] & ok[:-1] & np.isfinite(dm).all(axis=1)
    dm, dt = np.where(use[:, None], dm, 0.0), np.where(use[:, None], dt, 0.0)
    ks = np.arange(-5, 6)
    n = len(dm)
    cc = np.array([np.sum(dm[max(k, 0):n + min(k, 0)] * dt[max(-k, 0):n - max(k, 0)]) for k in ks])
    i = int(np.argmax(cc))
    off = 0.0
    if 0 < i < len(ks) - 1:
        den = cc[i - 1] - 2 * cc[i] + cc[i + 1]
        off = 0.5 * (cc[i - 1] - cc[i + 1]) / den if den != 0 else 0.0
    return (ks[i] + off) / fps


def running_mean(x: np.ndarray, n: int) -> np.ndarray:
    from scipy.ndimage import median_filter, uniform_filter1d

    return uniform_filter1d(median_filter(x, size=5, mode="nearest"), size=n, mode="nearest")


def decompose(cap: dict, gaze: dict, noise_seeds: int = 5) -> dict:
    """One clip's row: kappa of the truth with each part of the measured error put in (module docstring)."""
    samples = reestimate(cap, gaze)
    truth, trial = cap["truth"], cap["trial"]
    t_s = truth["t_s"].to_numpy(float)
    fps = 1.0 / float(np.median(np.diff(t_s)))
    coders = G._labels_at(trial, t_s)
    valid = samples["valid"].to_numpy(bool)
    blink = samples["blink"].to_numpy(bool) if "blink" in samples else np.zeros(len(samples), bool)
    M = np.column_stack([samples["yaw_deg"].to_numpy(float), samples["pitch_deg"].to_numpy(float)])
    T = np.column_stack([truth["yaw_deg"].to_numpy(float), truth["pitch_deg"].to_numpy(float)])
    hi = pd.read_csv(str(cap["clip"]).replace(".mp4", "_truth_hi.csv"))
    ok = valid & np.isfinite(M).all(axis=1)
    # the truth's own blinks (closed lids) are the baseline's invalid frames; ``mask`` puts the measured flags in
    tb = truth["blink"].to_numpy(bool) if "blink" in truth else np.zeros(len(T), bool)
    allv, nob = ~tb, tb
    sacc = saccades(coders)
    row: dict = {"clip": cap["cond"].name, "label": cap["cond"].label(), "saccades": len(sacc),
                 "iris_px": float(truth["iris_diameter_px"].median()), "valid_frac": float(valid.mean())}

    def k(parts: dict, name: str, base=T, v=allv, b=nob):
        x = base + sum(parts.values()) if parts else base
        row[name], row[f"thr_{name}"] = _detect(t_s, x[:, 0], x[:, 1], v, b, coders)

    k({}, "truth")
    # gain: the least-squares slope of the measured on the true gaze, per axis (the offset is immaterial)
    gain = np.array([np.polyfit(T[ok, a], M[ok, a], 1)[0] for a in range(2)])
    row["yaw_gain"], row["pitch_gain"] = gain
    parts = {"gain": T * (gain - 1.0)}
    # step response: how the (gain-free) estimate follows a saccade, as an error added to the truth's saccades
    step = np.zeros_like(T)
    for a, ax in enumerate(("yaw", "pitch")):
        rm, rt, n = step_response(M[:, a], T[:, a], sacc)
        row[f"{ax}_step_n"] = n
        row[f"{ax}_step"] = " ".join(f"{v:.2f}" for v in rm)
        row[f"{ax}_step_truth"] = " ".join(f"{v:.2f}" for v in rt)
        step[:, a] = gain[a] * step_part(T[:, a], sacc, rm - rt)
    parts["step"] = step
    # what is left of the error: its slow part (0.5 s running mean after a 5-frame median), its spikes (beyond
    # 3 robust SDs of the rest) and the rest
    E = np.where(ok[:, None], M - T * gain - step, 0.0)
    E -= np.median(E[ok], axis=0)
    E[~ok] = 0.0
    slow = np.column_stack([running_mean(E[:, a], int(round(0.5 * fps))) for a in range(2)])
    fast = E - slow
    sd = 1.4826 * np.median(np.abs(fast[ok] - np.median(fast[ok], axis=0)), axis=0)
    spike_rows = (np.abs(fast) > 3 * sd).any(axis=1) & ok
    parts["slow"] = slow
    parts["spikes"] = np.where(spike_rows[:, None], fast, 0.0)
    parts["fast"] = fast - parts["spikes"]
    row["spike_frac"] = float(spike_rows.mean())
    for name, part in parts.items():
        row[f"rms_{name}"] = float(np.sqrt(np.mean(np.sum(part[ok] ** 2, axis=1))))
    lag_s = xcorr_lag_s(M, T, ok, fps)
    row["xcorr_lag_ms"] = 1000.0 * lag_s
    th = hi["t_s"].to_numpy(float)
    Tl = np.column_stack([np.interp(t_s - lag_s, th, hi[c].to_numpy(float)) for c in ("yaw_deg", "pitch_deg")])
    # one part at a time, on the truth
    k({}, "lag", base=Tl)
    k({}, "mask", v=valid, b=blink)
    for name, part in parts.items():
        k({name: part}, name)
    # cumulative, in this order; the last is the measured gaze (up to its constant offset)
    acc: dict = {}
    for name in ("gain", "step", "slow", "spikes", "fast"):
        acc[name] = parts[name]
        k(dict(acc), f"+{name}")
    k(dict(acc), "+mask", v=valid, b=blink)
    # cumulative the other way round: the noise-like part first, then what is systematic
    acc = {}
    for name in ("fast", "spikes", "slow", "step", "gain"):
        acc[name] = parts[name]
        k(dict(acc), f"f+{name}")
    # one part at a time taken out of the measured gaze (the rest kept, the measured valid and blink flags)
    for name in parts:
        k({n: p for n, p in parts.items() if n != name}, f"-{name}", v=valid, b=blink)
    k(dict(parts), "-mask")
    row["measured"], row["thr_measured"] = _detect(t_s, M[:, 0], M[:, 1], valid, blink, coders)
    # the measured error's RMS-S2S inside the fixations both coders agree on, as white noise on the truth
    fix = G._within_fixations(M[:, 0] - T[:, 0], M[:, 1] - T[:, 1], ok, coders)
    row["rms_s2s_fix_deg"], row["rms_fix_deg"] = fix["rms_s2s_fix_deg"], fix["rms_fix_deg"]
    sd_axis = fix["rms_s2s_fix_deg"] / 2.0  # white noise of per-axis SD s: 2-D RMS-S2S 2 s
    ks, thrs = [], []
    for seed in range(noise_seeds):
        rng = np.random.default_rng(seed)
        kk, tt = _detect(t_s, T[:, 0] + rng.normal(0, sd_axis, len(T)), T[:, 1] + rng.normal(0, sd_axis, len(T)),
                         allv, nob, coders)
        ks.append(kk)
        thrs.append(tt)
    row["noise"], row["thr_noise"] = float(np.mean(ks)), float(np.mean(thrs))
    # white noise as spread out about the fixations' means as the measured error is (rms_fix: per-axis SD
    # rms_fix / sqrt 2): what the noise row shows if the error's steps under-read its spread
    ks = []
    for seed in range(noise_seeds):
        rng = np.random.default_rng(seed)
        sd_fix = fix["rms_fix_deg"] / np.sqrt(2.0)
        ks.append(_detect(t_s, T[:, 0] + rng.normal(0, sd_fix, len(T)), T[:, 1] + rng.normal(0, sd_fix, len(T)),
                          allv, nob, coders)[0])
    row["noise_fix"] = float(np.mean(ks))
    # and at the RMS-S2S of 0.7 deg where the Lund trials at 30 Hz reach kappa 0.5 (docs/notes/lund-30hz-limits.md)
    ks = []
    for seed in range(noise_seeds):
        rng = np.random.default_rng(seed)
        ks.append(_detect(t_s, T[:, 0] + rng.normal(0, 0.35, len(T)), T[:, 1] + rng.normal(0, 0.35, len(T)),
                          allv, nob, coders)[0])
    row["noise0.7"] = float(np.mean(ks))
    # the measured gaze with the threshold the white noise of its own in-fixation RMS-S2S was given, and with the
    # truth's (the floor, 1.5 deg)
    row["step_by_type"] = step_errors_by_frame_type(M, T, sacc, frame_types(cap["clip"]))
    row["measured@noise_thr"], _ = _detect(t_s, M[:, 0], M[:, 1], valid, blink, coders, row["thr_noise"])
    return row


KAPPA_COLS = ["truth", "lag", "mask", "gain", "step", "slow", "spikes", "fast",
              "+gain", "+step", "+slow", "+spikes", "+fast", "+mask",
              "f+fast", "f+spikes", "f+slow", "f+step", "f+gain",
              "-gain", "-step", "-slow", "-spikes", "-fast", "-mask",
              "measured", "noise", "measured@noise_thr", "noise_fix", "noise0.7"]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--cache", required=True, help="folder of the clips' stored per-frame measurements (made if missing)")
    ap.add_argument("--clips", help="folder for rendered clips (default: the cache folder)")
    ap.add_argument("--only", nargs="+", metavar="CLIP", help="these clips only (names as printed)")
    ap.add_argument("--gaze", action="append", default=[], metavar="NAME=VALUE",
                    help="a gaze setting (aspectus.webcam.gaze.GazeParams) for the re-estimate, e.g. iris_combine=fuse")
    ap.add_argument("--csv", help="write the rows to this CSV file as well")
    ap.add_argument("--no-b-frames", action="store_true",
                    help="the H.264 clips written without B-frames (rendered and processed again; cached as NAME_nob)")
    ap.add_argument("--crf-offset", type=int, default=0,
                    help="with --no-b-frames: write at the clip's CRF plus this (e.g. 3: about the size with B-frames)")
    args = ap.parse_args(argv)
    gaze = gaze_overrides_or_exit_code(args.gaze)
    if isinstance(gaze, int):
        return gaze
    conds = conditions()
    conds = only_named(conds, args.only, "clip")
    if isinstance(conds, int):
        return conds
    cache = Path(args.cache)
    clips = Path(args.clips) if args.clips else cache
    rows = []
    print(f"{'clip':36s} {'iris':>5s} " + " ".join(f"{c[:8]:>8s}" for c in KAPPA_COLS), flush=True)
    for cond in conds:
        t0 = time.process_time()
        if args.no_b_frames and cond.codec != "libx264":
            continue
        row = decompose(capture(cond, cache, clips, b_frames=not args.no_b_frames, crf_offset=args.crf_offset), gaze)
        rows.append(row)
        print(f"{row['clip'][:36]:36s} {row['iris_px']:5.1f} " + " ".join(f"{row[c]:8.3f}" for c in KAPPA_COLS),
              flush=True)
        print("  I-DT threshold deg: " + " ".join(f"{c}={row['thr_' + c]:.2f}" for c in KAPPA_COLS
                                                   if "thr_" + c in row), flush=True)
        print(f"  gain yaw/pitch {row['yaw_gain']:.2f}/{row['pitch_gain']:.2f}; xcorr lag "
              f"{row['xcorr_lag_ms']:.0f} ms; step response k={STEP_FRAMES[0]}.."
              f"{STEP_FRAMES[-1]} yaw [{row['yaw_step']}] (truth [{row['yaw_step_truth']}], {row['yaw_step_n']}), "
              f"pitch [{row['pitch_step']}] (truth [{row['pitch_step_truth']}], {row['pitch_step_n']}); RMS deg "
              + "/".join(f"{row['rms_' + c]:.2f}" for c in ("gain", "step", "slow", "spikes", "fast"))
              + f" (gain/step/slow/spikes/fast); spikes {100 * row['spike_frac']:.1f} % of frames; in-fixation "
              f"RMS-S2S {row['rms_s2s_fix_deg']:.2f} ({time.process_time() - t0:.0f} s CPU)", flush=True)
    df = pd.DataFrame(rows)
    grid = df["clip"].str.replace(r"_nob(_crf\d+)?$", "", regex=True).isin(GRID)
    for group, sel in (("grid", grid), ("held-out", ~grid)):
        if sel.any():
            print(f"mean, {group} ({int(sel.sum())} clips): "
                  + " ".join(f"{c}={df.loc[sel, c].mean():.3f}" for c in KAPPA_COLS), flush=True)
    by = pd.DataFrame([(r["clip"], *e) for r in rows for e in r["step_by_type"]],
                      columns=["clip", "k", "b_frame", "error"])
    if len(by):
        print("measured minus true scaled step at frames k around saccades (median, interquartile range; n):")
        for (kk, b), g in by.groupby(["k", "b_frame"]):
            q = g["error"].quantile([0.25, 0.5, 0.75]).to_numpy()
            print(f"  k={kk:+d} {'B-frames  ' if b else 'I/P frames'} {q[1]:+.3f} ({q[0]:+.2f} to {q[2]:+.2f}; "
                  f"{len(g)} from {g['clip'].nunique()} clips)")
    if args.csv:
        df.drop(columns=["step_by_type"]).to_csv(args.csv, index=False)
    return 0


if __name__ == "__main__":
    sys.exit(main())
