#!/usr/bin/env bash
# Set up (once) and run the whole test suite.
source "$(dirname "$0")/_setup.sh"
source "$ROOT/scripts/_qt_libs.sh"
export QT_QPA_PLATFORM=offscreen
python -m pytest "$@"
