"""Start the aspectus desktop app: ``aspectus gui [STUDYFILE]`` or ``aspectus-app``."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path


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
    app = make_app()
    from PySide6.QtCore import QSettings

    from .main_window import MainWindow

    settings = QSettings()
    win = MainWindow(settings=settings)
    geom = settings.value("geometry")
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
    return int(app.exec())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
