"""Regenerate the demo files in sample_clips/ (invented data, demo only).

Scenario: the Linden Brook Primary School reading pilot (fictional). Two
rendered webcam sessions - p01 reads passages and answers questions, p02
looks at a picture - plus, for p01, a simulated lab eye-tracker recording of
the same session (BIDS and plain CSV) for the validation mode, and p01's task
segments.

Run from the repository root::

    .venv/bin/python scripts/make_sample_clips.py [--out sample_clips]

The output is deterministic for a given software version (fixed seeds).
"""
from __future__ import annotations

import argparse
import shutil
import sys
from pathlib import Path

import pandas as pd

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from aspectus.atomic import write_csv  # noqa: E402
from aspectus.synth.render import render_clip, synth_trajectory  # noqa: E402

#: p01's task segments (s on the clip's clock)
P01_SEGMENTS = pd.DataFrame({"label": ["passage_1", "passage_2", "questions"],
                             "onset_s": [0.0, 8.0, 15.0], "offset_s": [8.0, 15.0, 20.0]})


def make(out: Path, *, quiet: bool = False) -> dict[str, Path]:
    out.mkdir(parents=True, exist_ok=True)
    say = (lambda *a: None) if quiet else (lambda *a: print(*a, flush=True))
    written: dict[str, Path] = {}

    # p01, session s01: reading, mild head motion, a few blinks
    p01 = synth_trajectory(duration_s=20.0, seed=101, task="reading", amplitude_deg=8.0, blink_rate_per_min=12.0,
                           head_motion={"yaw_deg": 6.0, "pitch_deg": 3.0, "roll_deg": 1.5, "x_mm": 10.0,
                                        "y_mm": 6.0, "z_mm": 20.0, "period_s": 14.0}, head_distance_mm=600.0)
    r1 = render_clip(out / "linden_brook_p01_s01.mp4", p01, face="hopper", size_px=(1280, 720), fps=30.0,
                     noise_sd=2.5, crf=23, seed=101)
    say(f"{r1.path.name}: {r1.frames} frames, {r1.path.stat().st_size / 1e6:.2f} MB, "
        f"{r1.render_ms_per_frame:.0f} ms/frame")
    written["p01_clip"] = r1.path
    written["p01_segments"] = write_csv(out / "segments_p01_s01.csv", P01_SEGMENTS)

    # p02, session s01: looking at a picture, head still
    p02 = synth_trajectory(duration_s=12.0, seed=202, task="scene", amplitude_deg=10.0, blink_rate_per_min=15.0,
                           head_motion=False, head_distance_mm=620.0)
    r2 = render_clip(out / "linden_brook_p02_s01.mp4", p02, face="astronaut", size_px=(1280, 720), fps=30.0,
                     noise_sd=2.5, crf=23, seed=202)
    say(f"{r2.path.name}: {r2.frames} frames, {r2.path.stat().st_size / 1e6:.2f} MB, "
        f"{r2.render_ms_per_frame:.0f} ms/frame")
    written["p02_clip"] = r2.path

    # p01's simulated lab tracker, recorded beside the webcam on its own clock
    try:
        from aspectus.synth.lab_recording import write_demo_reference
    except ImportError:  # pragma: no cover - the reference package is part of aspectus
        say("aspectus.synth.lab_recording is missing: no lab-tracker files written")
    else:
        ref_dir = out / "lab_tracker"
        if ref_dir.exists():
            shutil.rmtree(ref_dir)
        paths = write_demo_reference(p01.samples, ref_dir, stem="p01_s01", offset_s=-1.25, rate_hz=250.0,
                                     seed=101, task="reading")
        for k, v in paths.items():
            written[f"p01_reference_{k}"] = Path(v)
        say(f"lab tracker: {len(paths)} files in {ref_dir.name}/")
    return written


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(REPO / "sample_clips"), help="folder to write (default sample_clips/)")
    ap.add_argument("--quiet", action="store_true")
    args = ap.parse_args(argv)
    make(Path(args.out), quiet=args.quiet)
    return 0


if __name__ == "__main__":
    sys.exit(main())
