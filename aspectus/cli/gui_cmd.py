"""``aspectus gui [STUDYFILE]``: start the desktop app (needs the ``gui`` extra, PySide6)."""
from __future__ import annotations


def register(subparsers) -> None:
    p = subparsers.add_parser("gui", help="open the desktop app",
                              description="Open the aspectus desktop app. With STUDYFILE, open that study; "
                              "without, reopen the study used last.")
    p.add_argument("study", nargs="?", metavar="STUDYFILE", help="a study file (.json) to open")
    p.add_argument("--new", action="store_true", help="start with a new, empty study")
    p.set_defaults(func=handler)


def handler(args) -> int:
    from pathlib import Path

    from aspectus.errors import AspectusInputError

    if args.study is not None and not Path(args.study).is_file():
        raise AspectusInputError("no such study file", path=args.study,
                                hint="give an existing study file, or start without one and create it in the app")
    try:
        from ui.app import run  # noqa: PLC0415 - Qt only when the app is wanted
    except ImportError as exc:
        raise AspectusInputError(f"the desktop app cannot start ({exc})",
                                hint="install the app's extra: pip install 'aspectus[gui]'") from None
    return run(study=args.study, new=args.new)
