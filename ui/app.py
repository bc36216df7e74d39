"""Start the aspectus desktop app: ``aspectus gui [STUDYFILE]`` or ``aspectus-app``."""
from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
from pathlib import Path

#: shared libraries Qt's X11 platform plugin loads, with the Debian/Ubuntu package that has them
#: (scripts/_qt_libs.sh installs the same list)
XCB_LIBS = {
    "libxcb-cursor.so.0": "libxcb-cursor0", "libxcb-icccm.so.4": "libxcb-icccm4",
    "libxcb-keysyms.so.1": "libxcb-keysyms1", "libxcb-image.so.0": "libxcb-image0",
    "libxcb-render-util.so.0": "libxcb-render-util0", "libxcb-randr.so.0": "libxcb-randr0",
    "libxcb-shape.so.0": "libxcb-shape0", "libxcb-xkb.so.1": "libxcb-xkb1",
    "libxcb-xinerama.so.0": "libxcb-xinerama0", "libxkbcommon-x11.so.0": "libxkbcommon-x11-0",
    "libxkbcommon.so.0": "libxkbcommon0", "libEGL.so.1": "libegl1", "libGL.so.1": "libgl1",
    "libfontconfig.so.1": "libfontconfig1", "libdbus-1.so.3": "libdbus-1-3", "libglib-2.0.so.0": "libglib2.0-0",
    "libX11-xcb.so.1": "libx11-xcb1", "libxcb-xfixes.so.0": "libxcb-xfixes0",
}


def _xcb_plugin() -> Path | None:
    try:
        import PySide6
    except ImportError:
        return None
    for p in (Path(PySide6.__file__).parent / "Qt" / "plugins" / "platforms" / "libqxcb.so",
              Path(PySide6.__file__).parent / "plugins" / "platforms" / "libqxcb.so"):
        if p.is_file():
            return p
    return None


def missing_xcb_libraries(plugin: Path | None = None) -> list[str]:
    """Libraries Qt's X11 plugin (and the Qt libraries it loads) cannot find, by file name (``ldd``)."""
    plugin = plugin or _xcb_plugin()
    if plugin is None or shutil.which("ldd") is None:
        return []
    try:
        out = subprocess.run(["ldd", str(plugin)], capture_output=True, text=True, timeout=20).stdout
    except (OSError, subprocess.SubprocessError):
        return []
    return sorted({ln.split("=>")[0].strip() for ln in out.splitlines() if "not found" in ln})


def window_problem(env=None) -> str | None:
    """Why no window can be opened here, in one line with what to do; None when one can (or Qt decides).

    Checked before Qt starts, because Qt itself aborts the process (exit 134) with several lines
    that name no remedy.
    """
    env = os.environ if env is None else env
    if not sys.platform.startswith("linux"):
        return None
    platform = env.get("QT_QPA_PLATFORM", "").split(":")[0]
    if platform and platform not in ("xcb", "wayland"):
        return None  # offscreen, vnc, ...: the user chose
    if not env.get("DISPLAY") and not env.get("WAYLAND_DISPLAY"):
        return ("cannot open a window: no display (DISPLAY is not set, e.g. over SSH without -X). Start the app "
                "on the computer's desktop, use 'ssh -X', or use the command-line tools (aspectus --help).")
    if platform == "wayland" or (env.get("WAYLAND_DISPLAY") and not env.get("DISPLAY")):
        return None
    missing = missing_xcb_libraries()
    if missing:
        pkgs = sorted({XCB_LIBS.get(m, m) for m in missing})
        return (f"cannot open a window: Qt's X11 support needs {', '.join(missing)}. Install with: "
                f"sudo apt-get install {' '.join(pkgs)}  (or run: bash scripts/setup.sh)")
    return None


def _settings():
    from PySide6.QtCore import QSettings

    return QSettings()


def make_app(argv: list[str] | None = None):
    """The QApplication (created once), with aspectus's names set for settings."""
    from aspectus._env import import_cv2

    import_cv2()  # undo OpenCV's Qt plugin path before Qt starts
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance()
    if app is None:
        app = QApplication(list(argv) if argv is not None else [sys.argv[0]])
    app.setOrganizationName("aspectus")
    app.setApplicationName("aspectus")
    app.setApplicationDisplayName("aspectus")
    return app


def main(argv: list[str] | None = None) -> int:
    """Open the main window; with a study file, open that study (else the last one used)."""
    p = argparse.ArgumentParser(prog="aspectus-app", description="aspectus desktop app")
    p.add_argument("study", nargs="?", help="study file to open")
    p.add_argument("--new", action="store_true", help="start with a new, empty study")
    args = p.parse_args(sys.argv[1:] if argv is None else argv)
    return run(study=args.study, new=args.new)


def run(*, study: str | None = None, new: bool = False) -> int:
    problem = window_problem()
    if problem is not None:
        print(f"aspectus: error: {problem}", file=sys.stderr)
        return 2
    app = make_app()
    from .main_window import MainWindow

    settings = _settings()
    win = MainWindow(settings=settings)
    geom = settings.value("geometry") if settings is not None else None
    if geom is not None:
        win.restoreGeometry(geom)
    if study:
        if not Path(study).exists():
            print(f"aspectus: error: {study}: no such study file", file=sys.stderr)
            return 2
        win.open_study(study)
    elif not new:
        recent = win._recent()
        if recent and Path(recent[0]).is_file():
            win.open_study(recent[0])
    win.show()
    quit_ms = os.environ.get("ASPECTUS_APP_QUIT_AFTER_MS")  # smoke tests: show the window, say so, close
    if quit_ms:
        from PySide6.QtCore import QTimer

        def report_and_quit():
            print(f"window shown: {win.windowTitle()!r} {win.width()}x{win.height()} "
                  f"(platform {app.platformName()}, visible {win.isVisible()})", flush=True)
            win.quiet = True
            win.close()
            app.quit()

        QTimer.singleShot(int(quit_ms), report_and_quit)
    return int(app.exec())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
