"""Tutorial 1: process webcam clips and plot the fixations per time window.

Run it from the repository root (it takes about half a minute on a laptop CPU)::

    .venv/bin/python docs/tutorials/process_and_plot.py out/tutorial1

It processes the two demo clips of the (fictional) Linden Brook reading
pilot in ``sample_clips/``, prints each clip's verdict, reads the features
per 2-second window, and draws the number of fixations per window for both
clips into ``fixations_per_window.png``.
"""
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")  # draw into files, no window needed
import matplotlib.pyplot as plt
import pandas as pd

from aspectus.events.analysis import AnalysisParams
from aspectus.webcam.pipeline import ProcessParams, process_clip

REPO = Path(__file__).resolve().parents[2]
out = Path(sys.argv[1]) if len(sys.argv) > 1 else REPO / "out" / "tutorial1"

# 1. Parameters: every choice is explicit and ends up in each clip's run.json.
#    Here: features per fixed window of 2 s, windows following each other without overlap.
params = ProcessParams(analysis=AnalysisParams(window_s=2.0, step_s=2.0))

# 2. Process each clip into its own folder: out/<clip file stem>/
results = {}
for clip in sorted((REPO / "sample_clips").glob("linden_brook_*.mp4")):
    res = process_clip(clip, out / clip.stem, params=params)
    print(f"{clip.name}: {res.summary['verdict']}")
    results[clip.stem] = res

# 3. The features table has one row per scope: the whole clip, each window, each task segment.
#    Column names carry their units (fixation_duration_mean_ms, blink_rate_per_min ...).
fig, ax = plt.subplots(figsize=(7, 3.5))
for stem in results:
    features = pd.read_csv(out / stem / "features.csv")
    windows = features[features["scope"] == "window"]
    whole = features[features["scope"] == "clip"].iloc[0]
    print(f"{stem}: {int(whole['fixation_count'])} fixations, median duration "
          f"{whole['fixation_duration_median_ms']:.0f} ms, {len(windows)} windows")
    ax.step(windows["start_s"], windows["fixation_count"], where="post", label=stem)
ax.set_xlabel("window start (s)")
ax.set_ylabel("fixations per 2 s window")
ax.legend()
fig.tight_layout()
fig.savefig(out / "fixations_per_window.png", dpi=100)
print(f"figure: {out / 'fixations_per_window.png'}")
