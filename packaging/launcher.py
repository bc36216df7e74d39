"""Entry point of the desktop bundle: the app, the ``aspectus`` commands, and a start-up check.

The bundle has one executable, ``aspectus``:

* ``aspectus`` with no arguments, or ``aspectus gui [STUDYFILE]`` - the desktop app;
* ``aspectus process ...``, ``aspectus batch ...``, ... - the same commands as
  the ``aspectus`` command line of a pip install;
* ``aspectus app-check`` - opens the main window offscreen-capable, lets the
  event loop run once, closes it and exits 0 (proves the Qt plugins and the
  app's modules are in the bundle; used by ``packaging/smoke_test.sh``).

This file is also importable from the source tree (tests call
:func:`main` with an argument list).
"""
from __future__ import annotations

import multiprocessing
import os
import sys


def _bundle_env() -> None:
    """Settings that must be in place before Qt, OpenCV or MediaPipe load."""
    os.environ.setdefault("GLOG_minloglevel", "2")
    os.environ.setdefault("TF_CPP_MIN_LOG_LEVEL", "3")
    base = getattr(sys, "_MEIPASS", None)
    if base:
        plugins = os.path.join(base, "PySide6", "Qt", "plugins")
        if os.path.isdir(plugins):
            os.environ.setdefault("QT_PLUGIN_PATH", plugins)


def app_check() -> int:
    """Create the app and its main window, spin the event loop once, close; 0 when all of that worked."""
    from ui.app import make_app

    app = make_app()
    from PySide6.QtCore import QTimer

    from ui.main_window import MainWindow

    win = MainWindow(settings=None)
    win.show()
    QTimer.singleShot(200, app.quit)
    app.exec()
    title = win.windowTitle()
    win.close()
    print(f"app-check: main window opened and closed ({title!r}, platform {app.platformName()})")
    return 0


def main(argv: list[str] | None = None) -> int:
    """Dispatch to the app, to ``app-check`` or to the ``aspectus`` command line."""
    argv = list(sys.argv[1:] if argv is None else argv)
    _bundle_env()
    if not argv:
        from ui.app import main as app_main

        return int(app_main([]) or 0)
    if argv[0] == "app-check":
        return app_check()
    from aspectus.cli import main as cli_main

    return int(cli_main(argv) or 0)


if __name__ == "__main__":
    multiprocessing.freeze_support()  # the app's worker processes re-enter here in a frozen build
    sys.exit(main())
