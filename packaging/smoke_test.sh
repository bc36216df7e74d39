#!/usr/bin/env bash
# Smoke test of the built bundle (dist/aspectus, from packaging/build_linux.sh):
# runs it offscreen on a fresh temporary HOME, processes the demo clip, checks the
# outputs, opens and closes the main window, and exits 0 when all of that worked.
#
#   bash packaging/smoke_test.sh [CLIP]
#
# CLIP defaults to sample_clips/linden_brook_p01_s01.mp4; when that file is not
# there, the bundle renders a short demo clip of its own first.
set -euo pipefail
cd "$(dirname "$0")/.."
BIN="${ASPECTUS_BUNDLE:-dist/aspectus/aspectus}"
[ -x "$BIN" ] || { echo "smoke_test: no bundle at $BIN - run packaging/build_linux.sh first" >&2; exit 1; }
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
export HOME="$work/home" QT_QPA_PLATFORM=offscreen XDG_RUNTIME_DIR="$work/run" LANG=C.UTF-8
mkdir -p "$HOME" "$XDG_RUNTIME_DIR" && chmod 700 "$XDG_RUNTIME_DIR"
# run from an empty folder with a bare PATH, so nothing of the source tree or its venv can be picked up
BIN_ABS=$(cd "$(dirname "$BIN")" && pwd)/$(basename "$BIN")
CLIP="${1:-sample_clips/linden_brook_p01_s01.mp4}"
if [ -f "$CLIP" ]; then
  CLIP_ABS=$(cd "$(dirname "$CLIP")" && pwd)/$(basename "$CLIP")
else
  CLIP_ABS="$work/linden_brook_p01_s01.mp4"
  echo "smoke_test: $CLIP not found; rendering a demo clip with the bundle"
  (cd "$work" && env -i HOME="$HOME" LANG=C.UTF-8 PATH=/usr/bin:/bin QT_QPA_PLATFORM=offscreen \
    "$BIN_ABS" render "$CLIP_ABS" --duration-s 4 --size 640x360 --seed 101 --quiet)
fi
cd "$work"
env -i HOME="$HOME" LANG=C.UTF-8 PATH=/usr/bin:/bin QT_QPA_PLATFORM=offscreen "$BIN_ABS" --version
env -i HOME="$HOME" LANG=C.UTF-8 PATH=/usr/bin:/bin QT_QPA_PLATFORM=offscreen \
  "$BIN_ABS" process "$CLIP_ABS" -o "$work/out" --quiet
stem=$(basename "${CLIP_ABS%.*}")
for f in run.json samples.parquet samples.csv events.csv features.csv; do
  [ -s "$work/out/$stem/$f" ] || { echo "smoke_test: missing output $f" >&2; exit 1; }
done
grep -q '"usable": true' "$work/out/$stem/run.json" || { echo "smoke_test: demo clip not usable" >&2; exit 1; }
env -i HOME="$HOME" LANG=C.UTF-8 PATH=/usr/bin:/bin QT_QPA_PLATFORM=offscreen XDG_RUNTIME_DIR="$XDG_RUNTIME_DIR" \
  "$BIN_ABS" app-check
echo "smoke_test: OK"
