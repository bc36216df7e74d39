"""Tutorial 2: validate a pilot against a lab eye tracker and read the agreement table.

Run it from the repository root (about half a minute)::

    .venv/bin/python docs/tutorials/validate_pilot.py out/tutorial2

In the demo pilot, participant p01's session was recorded by the webcam and,
at the same time, by a (simulated) screen-based lab eye tracker at 250 Hz,
stored as a BIDS eye-tracking recording. The script processes the clip,
validates it against the lab recording in 2-second windows and prints how
well the webcam's fixation counts and durations agree with the lab
tracker's.
"""
import sys
from pathlib import Path

import pandas as pd

from aspectus.validation.pair import ValidateParams, validate_pair
from aspectus.webcam.pipeline import process_clip

REPO = Path(__file__).resolve().parents[2]
out = Path(sys.argv[1]) if len(sys.argv) > 1 else REPO / "out" / "tutorial2"
clips = REPO / "sample_clips"

# 1. Process the webcam clip, with its task segments (passage_1, passage_2, questions).
clip_out = out / "linden_brook_p01_s01"
process_clip(clips / "linden_brook_p01_s01.mp4", clip_out, segments=clips / "segments_p01_s01.csv")

# 2. Validate against the lab recording. The lab tracker started 1.25 s before the webcam on its
#    own clock; the offset is estimated from the gaze signals themselves. Both sides go through
#    the same detector with the same parameters, the reference at its own 250 Hz.
reference = clips / "lab_tracker" / "sub-p01_ses-s01_task-reading_recording-eye1_physio.tsv.gz"
result = validate_pair(clip_out, reference, out / "validation", params=ValidateParams(window_s=2.0, step_s=2.0))
print(f"the lab recording's first sample is at {result.alignment.offset_s:+.3f} s on the clip's clock "
      f"({result.alignment.method})")

# 3. The agreement table: one row per feature (and scope), webcam against reference.
#    It is also written to out/validation/agreement.csv; report.html shows the plots.
agreement = pd.read_csv(out / "validation" / "agreement.csv")
windows = agreement[agreement["scope"] == "window"].set_index("feature")
cols = ["n", "pearson_r", "icc", "ba_bias", "ba_loa_low", "ba_loa_high"]
with pd.option_context("display.width", 120, "display.max_columns", 10, "display.precision", 3):
    print(windows.loc[["fixation_count", "fixation_duration_mean_ms"], cols])
r = windows.loc["fixation_count", "pearson_r"]
bias = windows.loc["fixation_count", "ba_bias"]
print(f"fixations per 2 s window: r = {r:.2f}; the webcam counts {bias:+.2f} fixations per window "
      "compared with the lab tracker (Bland-Altman bias)")
print(result.reading)
