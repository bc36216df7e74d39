# Sourced by setup.sh, demo.sh and test.sh: the system libraries Qt needs - even offscreen, and for a
# window on an X11 desktop the xcb ones (present on most desktops, not on bare machines or minimal
# installs) - installed with apt-get where they are missing. Looked up by library file, not package
# name (newer Debian and Ubuntu renamed some packages, e.g. libglib2.0-0t64). Quick when all are
# there. ui/app.py (XCB_LIBS) names the same files when the app cannot open a window.
need=()
if command -v ldconfig >/dev/null 2>&1; then
  have="$(ldconfig -p 2>/dev/null)"
  for pair in libEGL.so.1:libegl1 libGL.so.1:libgl1 libxkbcommon.so.0:libxkbcommon0 \
              libfontconfig.so.1:libfontconfig1 libdbus-1.so.3:libdbus-1-3 libglib-2.0.so.0:libglib2.0-0 \
              libxcb-cursor.so.0:libxcb-cursor0 libxcb-icccm.so.4:libxcb-icccm4 \
              libxcb-keysyms.so.1:libxcb-keysyms1 libxcb-image.so.0:libxcb-image0 \
              libxcb-render-util.so.0:libxcb-render-util0 libxcb-randr.so.0:libxcb-randr0 \
              libxcb-shape.so.0:libxcb-shape0 libxcb-xkb.so.1:libxcb-xkb1 \
              libxcb-xinerama.so.0:libxcb-xinerama0 libxkbcommon-x11.so.0:libxkbcommon-x11-0 \
              libX11-xcb.so.1:libx11-xcb1 libxcb-xfixes.so.0:libxcb-xfixes0; do
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
    echo "warning: cannot install ${need[*]} (no apt-get); the app may not open a window" >&2
  fi
fi
