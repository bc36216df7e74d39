#!/usr/bin/env bash
# Build the aspectus desktop bundle for Linux: dist/aspectus/aspectus (one folder).
#
#   bash packaging/build_linux.sh            # uses .venv/bin/python (scripts/_setup.sh makes it)
#   PYTHON=/path/to/python bash packaging/build_linux.sh
#   DIST=/tmp/b/dist WORK=/tmp/b/work bash packaging/build_linux.sh   # build elsewhere
#
# Installs PyInstaller (the project's "bundle" extra) into that Python if missing,
# builds from packaging/aspectus.spec, and prints the build time and bundle size.
# Then run packaging/smoke_test.sh to check the bundle.
set -euo pipefail
cd "$(dirname "$0")/.."
PY="${PYTHON:-.venv/bin/python}"
DIST="${DIST:-dist}"
WORK="${WORK:-build/pyinstaller}"
if ! "$PY" -c "import PyInstaller" 2>/dev/null; then
  "$PY" -m pip install -q -e ".[gui,bundle]"
fi
start=$(date +%s)
"$PY" -m PyInstaller --noconfirm --clean --log-level WARN \
  --distpath "$DIST" --workpath "$WORK" packaging/aspectus.spec
end=$(date +%s)
if [ -d "$DIST/aspectus/_internal/jax" ] || [ -d "$DIST/aspectus/_internal/jaxlib" ]; then
  echo "build_linux: error: jax ended up in the bundle" >&2
  exit 1
fi
size=$(du -sh "$DIST/aspectus" | cut -f1)
echo "build_linux: built $DIST/aspectus in $((end - start)) s, size $size"
