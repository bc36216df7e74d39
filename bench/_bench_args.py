"""The benchmarks' shared options: ``--gaze NAME=VALUE`` items as :class:`aspectus.webcam.gaze.GazeParams`
overrides, typed and checked by the command line's own parser
(:func:`aspectus.cli.process_cmd.gaze_params_from_args`), so a bench run takes exactly what ``aspectus process
--gaze`` would; and ``--only NAME ...`` picking named cells or clips."""
from __future__ import annotations

import sys
from dataclasses import asdict
from types import SimpleNamespace


def gaze_overrides(items: list[str]) -> dict:
    """``{name: typed value}`` for the names given; raises :class:`aspectus.errors.ParameterError` on an item that
    is not NAME=VALUE, an unknown name or a value of the wrong kind."""
    from aspectus.cli.process_cmd import gaze_params_from_args

    chosen = asdict(gaze_params_from_args(SimpleNamespace(gaze_settings=list(items))))
    names = {item.split("=", 1)[0].strip() for item in items}
    return {k: v for k, v in chosen.items() if k in names}


def gaze_overrides_or_exit_code(items: list[str]) -> dict | int:
    """:func:`gaze_overrides`, or 2 after one line on stderr saying what was wrong (for a bench's ``main``)."""
    from aspectus.errors import ParameterError

    try:
        return gaze_overrides(items)
    except ParameterError as e:
        print(e, file=sys.stderr)
        return 2


def only_named(items: list, only: list[str] | None, what: str) -> list | int:
    """The ``items`` (with a ``.name``) named in ``only`` (all of them without ``--only``), or 2 after one line on
    stderr naming the unknown names and the known ones (``what``: "cell", "clip")."""
    if not only:
        return list(items)
    unknown = sorted(set(only) - {c.name for c in items})
    if unknown:
        print(f"--only: no {what} named {', '.join(unknown)} ({what}s: {', '.join(c.name for c in items)})",
              file=sys.stderr)
        return 2
    return [c for c in items if c.name in only]
