#!/usr/bin/env bash
# Set up (once) .venv with aspectus and the desktop app, and the system libraries Qt needs for a window.
# Afterwards: .venv/bin/aspectus gui   (the app)   or   .venv/bin/aspectus --help   (the command line)
source "$(dirname "$0")/_setup.sh"
source "$ROOT/scripts/_qt_libs.sh"
echo "set up: start the app with  $ROOT/.venv/bin/aspectus gui" >&2
