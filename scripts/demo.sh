#!/usr/bin/env bash
# Set up (once) and run the main job on the bundled sample clips.
source "$(dirname "$0")/_setup.sh"
source "$ROOT/scripts/_qt_libs.sh"
aspectus process sample_clips/*.mp4 -o out/demo "$@"
cat <<MSG

Outputs in $ROOT/out/demo/, one folder per clip: features.csv (per clip, per window, per task
segment), events.csv (fixations, saccades, blinks), samples.csv (one row per frame), run.json (settings).
Next steps:
  .venv/bin/aspectus gui        the desktop app (Help -> User guide walks through a pilot study)
  README.md, "Validation against a lab eye tracker": compare clip p01 with its simulated lab recording
MSG
