# Sourced by demo.sh and test.sh: make .venv with Python 3.11 and install
# aspectus into it. Idempotent: reinstalls only when pyproject.toml changed.
set -euo pipefail
ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
cd "$ROOT"
PY="${ASPECTUS_PYTHON:-}"
if [ -z "$PY" ]; then
  for c in python3.11 python3; do
    if command -v "$c" >/dev/null 2>&1 && "$c" -c 'import sys; sys.exit(sys.version_info[:2] != (3, 11))'; then PY="$c"; break; fi
  done
fi
[ -n "$PY" ] || { echo "aspectus needs Python 3.11 (python3.11 not found)" >&2; exit 1; }
if [ ! -x .venv/bin/python ]; then
  "$PY" -m venv .venv
fi
STAMP=".venv/.aspectus-setup-stamp"
WANT="$(sha256sum pyproject.toml | cut -d' ' -f1)-${ASPECTUS_EXTRAS:-dev}"
if [ ! -f "$STAMP" ] || [ "$(cat "$STAMP")" != "$WANT" ]; then
  echo "setting up .venv (first run takes a few minutes) ..." >&2
  .venv/bin/python -m pip install -q --upgrade pip >&2
  .venv/bin/python -m pip install -q -e ".[${ASPECTUS_EXTRAS:-dev}]" >&2
  echo "$WANT" > "$STAMP"
fi
export PATH="$ROOT/.venv/bin:$PATH"
