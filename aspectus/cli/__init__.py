"""The ``aspectus`` command line.

Each subcommand lives in its own module in this package and exposes
``register(subparsers)``, which adds its parser and sets ``func`` to a
handler ``func(args) -> int``. Module tops stay light (heavy imports inside
the handler) so ``aspectus --help`` is fast.

Bad input raises :class:`aspectus.errors.AspectusInputError`; :func:`main`
prints it as one line prefixed ``aspectus: error:`` and exits 2. ``aspectus process``
reports each clip that fails on one line, finishes the others and exits 1.
"""
from __future__ import annotations

import argparse
import importlib
import sys

from aspectus import __version__
from aspectus.errors import AspectusError, AspectusInputError, Cancelled

#: subcommand modules, in the order ``--help`` lists them
SUBCOMMANDS = ("process", "events", "validate", "batch", "export_bids", "gui", "purge", "render")


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="aspectus",
        description="Eye-movement features from recorded webcam clips, offline on the CPU. "
        "Research estimates only - not a diagnostic, disciplinary or surveillance instrument.",
    )
    p.add_argument("--version", action="version", version=f"aspectus {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    for name in SUBCOMMANDS:
        try:
            mod = importlib.import_module(f"{__name__}.{name}_cmd")
        except ModuleNotFoundError as exc:  # a subcommand not built yet
            if exc.name and exc.name.endswith(f"{name}_cmd"):
                continue
            raise
        mod.register(sub)
    return p


def _one_line_warning(message, category, filename, lineno, line=None) -> str:
    """Warnings as one line that says what is wrong, without the source line they came from."""
    return f"aspectus: warning: {message}\n"


def main(argv: list[str] | None = None) -> int:
    import warnings

    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    previous_format = warnings.formatwarning
    warnings.formatwarning = _one_line_warning
    try:
        return int(args.func(args) or 0)
    except Cancelled:
        print("aspectus: cancelled; finished outputs are kept", file=sys.stderr)
        return 130
    except KeyboardInterrupt:
        print("aspectus: interrupted; finished outputs are kept", file=sys.stderr)
        return 130
    except AspectusInputError as exc:
        print(f"aspectus: error: {exc}", file=sys.stderr)
        return 2
    except AspectusError as exc:
        print(f"aspectus: error: {exc}", file=sys.stderr)
        return 1
    finally:
        warnings.formatwarning = previous_format


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
