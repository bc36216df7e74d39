# Sourced by test.sh: the system libraries Qt needs even offscreen (present on most desktops, not on bare
# machines), installed with apt-get where they are missing. Looked up by library file, not package name
# (newer Debian and Ubuntu renamed some packages, e.g. libglib2.0-0t64). Quick when all are there.
need=()
if command -v ldconfig >/dev/null 2>&1; then
  have="$(ldconfig -p 2>/dev/null)"
  for pair in libEGL.so.1:libegl1 libGL.so.1:libgl1 libxkbcommon.so.0:libxkbcommon0 \
              libfontconfig.so.1:libfontconfig1 libdbus-1.so.3:libdbus-1-3 libglib-2.0.so.0:libglib2.0-0; do
    lib="${pair%%:*}"; pkg="${pair##*:}"
    grep -q "$lib" <<<"$have" || need+=("$pkg")
  done
fi
if [ "${#need[@]}" -gt 0 ]; then
  if command -v apt-get >/dev/null 2>&1; then
    SUDO=""; [ "$(id -u)" -ne 0 ] && SUDO="sudo"
    echo "installing the system libraries Qt needs: ${need[*]} ..." >&2
    $SUDO apt-get update -qq && $SUDO apt-get install -y -qq "${need[@]}" >/dev/null
  else
    echo "warning: cannot install ${need[*]} (no apt-get); the app's tests may fail" >&2
  fi
fi
