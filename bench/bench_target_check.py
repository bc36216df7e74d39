"""The known-target check end to end, as a user runs it, on rendered target clips: what issue 20 asks of it.

Each clip is rendered with its eyes following a schedule (:func:`aspectus.synth.target_gaze.render_target_clip`),
then checked with :func:`aspectus.targets.check.run_check` (the pipeline's defaults: the face mesh, the gaze
estimate, the sequence found, the offset and gain fitted). Printed per clip:

* ``start``: the sequence's start found against the first flashed frame, in frames, and how it was found;
* ``acc_off`` / ``acc_og``: the check's accuracy after the offset fit and after offset+gain, deg;
* ``eyes``: the same check run on the renderer's own gaze (the eyes' accuracy alone), deg; ``noise``: the noise
  floor of the check's medians; ``implied`` = eyes + noise, what the renderer's noise and gain imply;
* ``margin``: ``acc_og - implied`` (issue 20: within 0.5 deg);
* the fitted gains, the check's precision (RMS-S2S, median over the dots), data loss, pursuit gain, targets
  fixated out of the still dots, and the flags the check raised;
* where the error per dot comes from: over the still dots (the check's windows, valid frames), the SD of the
  per-dot median error against the renderer's truth (``*_truth.csv``, same frames) of the gaze (``sd_gaze``),
  the head rotation (``sd_head``) and the eye-in-head angle (``sd_eye``), yaw / pitch in deg; the gaze is about
  head plus eye-in-head, so the larger of the last two is where the error sits.

Clips (``NAME`` on the command line; all by default):

* ``a``-``e``: bench_target_error.py's clips (720p, 600 mm, about 22 px iris, head still, H.264 CRF 23,
  8 still dots, no sweep); a-c its dev clips, d-e held out;
* ``k16-*``: classroom conditions at a 16.6 px iris (1280x720 at 800 mm), H.264 CRF 28, lids following, lighting
  drift and a side-to-side gradient, slow head drift and turns; 9 dots and a sweep; hopper and astronaut faces;
* ``k12-*``: the same at a 12 px iris (640x480 at 550 mm);
* ``*-g06``: the same clip's eyes with a gain of 0.6 (the check should flag it).

The flash is written by a second encode (H.264 CRF 18) over the rendered clip, as in the test suite.

    python bench/bench_target_check.py                  # every clip (about 1 min of CPU per 720p clip)
    python bench/bench_target_check.py k16-h k12-h      # named clips
    python bench/bench_target_check.py a b --gaze iris_combine=limbus   # other gaze settings (as `aspectus process --gaze`)
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "bench"))

#: the screen the sequence is shown on (as the test suite's: 1280x720 px, 344x193.5 mm at 600 mm)
SCREEN = (1280, 720, 344.0, 193.5, 600.0)
_STILL = dict(size_px=(1280, 720), crf=23, fixations=8, sweeps=0, head_motion=False, distance_mm=None)
_CLASS = dict(crf=28, fixations=9, sweeps=1, head_motion=True, lighting_drift=0.15, lighting_gradient=0.3)
#: name -> (face, schedule seed, render seed, gain, conditions)
CLIPS = {
    "a": ("astronaut", 7, 4, 1.0, _STILL), "b": ("hopper", 11, 5, 1.0, _STILL), "c": ("astronaut", 12, 6, 1.0, _STILL),
    "d": ("hopper", 17, 13, 1.0, _STILL), "e": ("astronaut", 19, 14, 1.0, _STILL),
    "k16-h": ("hopper", 21, 31, 1.0, dict(_CLASS, size_px=(1280, 720), distance_mm=800.0)),
    "k16-a": ("astronaut", 22, 32, 1.0, dict(_CLASS, size_px=(1280, 720), distance_mm=800.0)),
    "k12-h": ("hopper", 23, 33, 1.0, dict(_CLASS, size_px=(640, 480), distance_mm=550.0)),
    "k12-a": ("astronaut", 24, 34, 1.0, dict(_CLASS, size_px=(640, 480), distance_mm=550.0)),
    "k16-h-g06": ("hopper", 21, 31, 0.6, dict(_CLASS, size_px=(1280, 720), distance_mm=800.0)),
    "k12-a-g06": ("astronaut", 24, 34, 0.6, dict(_CLASS, size_px=(640, 480), distance_mm=550.0)),
}


def run(name: str, d: Path, gaze: dict) -> dict:
    from dataclasses import replace

    import numpy as np
    import pandas as pd

    from aspectus.synth.render import read_truth
    from aspectus.synth.target_gaze import render_target_clip
    from aspectus.targets.analysis import check_samples
    from aspectus.targets.check import run_check
    from aspectus.targets.schedule import Screen, make_schedule
    from aspectus.webcam.pipeline import ProcessParams

    face, s_seed, r_seed, gain, c = CLIPS[name]
    sched = make_schedule(Screen(*SCREEN), seed=s_seed, fixation_s=1.2, n_fixations=c["fixations"],
                          pursuit_sweeps=c["sweeps"])
    sched.write(d / "schedule.json")
    extra = {k: c[k] for k in ("lighting_drift", "lighting_gradient") if k in c}
    res, tj = render_target_clip(d / "clip.mp4", sched, lead_in_s=1.5, tail_s=0.5, gain=(gain, gain),
                                 offset_deg=(2.0, -2.0), size_px=c["size_px"], fov_deg=60.0, seed=r_seed, face=face,
                                 crf=c["crf"], head_motion=c["head_motion"], head_distance_mm=c["distance_mm"],
                                 **extra)
    pp = ProcessParams()
    pp = replace(pp, gaze=replace(pp.gaze, **gaze))
    t0 = time.process_time()
    check = run_check(d / "clip.mp4", d / "schedule.json", d / "out", process_params=pp)
    cpu = time.process_time() - t0
    tr = read_truth(res.truth_path).assign(valid=True)
    ideal = check_samples(tr, sched, start_s=tj["flash_first_frame_t_s"], run_events=False)
    smp = pd.read_parquet(d / "out" / "samples.parquet")
    tru = read_truth(res.truth_path).set_index("frame_index").reindex(smp["frame_index"].to_numpy())
    ts = smp["t_s"].to_numpy(float) - tj["flash_first_frame_t_s"]
    ok = smp["valid"].to_numpy(bool)
    sd = {}
    for part, cols in (("gaze", ("yaw_deg", "pitch_deg")), ("head", ("head_yaw_deg", "head_pitch_deg")),
                       ("eye", ("eye_in_head_yaw_deg", "eye_in_head_pitch_deg"))):
        err = np.stack([smp[c].to_numpy(float) - tru[c].to_numpy(float) for c in cols], axis=1)
        med = np.array([np.nanmedian(err[w], axis=0) for r in sched.fixations.itertuples(index=False)
                        if (w := (ts >= r.onset_s + 0.5) & (ts < r.offset_s) & ok).sum() >= 5])
        sd[f"sd_{part}"] = "{:.2f} / {:.2f}".format(*np.std(med, axis=0, ddof=1))
    s = check.summary
    eyes, noise = ideal.summary["accuracy_offset_gain_deg"], s["accuracy_noise_floor_deg"]
    fps = 30.0
    return {"clip": name, "face": face, "size": "x".join(map(str, c["size_px"])), "gain": gain,
            "start_frames": round((s["start_s"] - tj["flash_first_frame_t_s"]) * fps, 2),
            "start_by": check.alignment["method"], "acc_off": s["accuracy_offset_deg"],
            "acc_og": s["accuracy_offset_gain_deg"], "eyes": eyes, "noise": noise, "implied": eyes + noise,
            "margin": s["accuracy_offset_gain_deg"] - (eyes + noise), "gain_yaw": check.mapping.gain_yaw,
            "gain_pitch": check.mapping.gain_pitch, "precision": s.get("precision_rms_s2s_deg"),
            "loss": s["loss_frac"], "pursuit_gain": s.get("pursuit_gain"),
            "fixated": f"{s['n_targets_fixated']}/{s['n_fixation_targets']}",
            "flags": len(check.flags), "flag_text": " | ".join(check.flags),
            "cpu_s": round(cpu, 1), **sd}


def main(argv: list[str]) -> int:
    import argparse

    import pandas as pd
    from _bench_args import gaze_overrides_or_exit_code

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("clips", nargs="*", help=f"clips to run (default all: {', '.join(CLIPS)})")
    ap.add_argument("--gaze", action="append", default=[], metavar="NAME=VALUE",
                    help="a gaze setting, as `aspectus process --gaze`")
    args = ap.parse_args(argv)
    gaze = gaze_overrides_or_exit_code(args.gaze)
    if isinstance(gaze, int):
        return gaze
    names = args.clips or list(CLIPS)
    bad = [n for n in names if n not in CLIPS]
    if bad:
        print(f"unknown clip(s) {', '.join(bad)}; choose from {', '.join(CLIPS)}", file=sys.stderr)
        return 2
    rows = []
    for n in names:
        with tempfile.TemporaryDirectory(prefix=f"target_check_{n}_") as d:
            rows.append(run(n, Path(d), gaze))
        print(pd.DataFrame(rows[-1:]).drop(columns="flag_text").round(3).to_string(index=False), flush=True)
    tab = pd.DataFrame(rows)
    print()
    print(tab.drop(columns="flag_text").round(3).to_string(index=False))
    for r in rows:
        if r["flag_text"]:
            print(f"{r['clip']}: {r['flag_text']}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
