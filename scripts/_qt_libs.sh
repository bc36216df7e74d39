# Sourced by test.sh: the system libraries Qt needs even offscreen (present on most desktops, not on
# bare machines), installed with apt-get where they are missing. Quick when all are there.
need=()
if command -v dpkg >/dev/null 2>&1; then
  for pkg in libegl1 libgl1 libxkbcommon0 libfontconfig1 libdbus-1-3 libglib2.0-0; do
    dpkg -s "$pkg" >/dev/null 2>&1 || need+=("$pkg")
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
