#!/usr/bin/env bash
# Set up (once) and run the main job on the bundled sample clip.
source "$(dirname "$0")/_setup.sh"
source "$ROOT/scripts/_qt_libs.sh"
aspectus process sample_clips/*.mp4 -o out/demo "$@"
echo "outputs in $ROOT/out/demo/"
