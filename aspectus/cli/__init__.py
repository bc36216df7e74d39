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
SUBCOMMANDS = ("process", "events", "validate", "batch", "export_bids", "gui", "purge", "render", "targets")


def _command_module(argv: list[str] | None) -> str | None:
    """The subcommand module the command line names (``export-bids`` -> ``export_bids``), or None."""
    args = sys.argv[1:] if argv is None else list(argv)
    if not args or args[0].startswith("-"):
        return None
    name = args[0].replace("-", "_")
    return name if name in SUBCOMMANDS else None


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The command line's parser; with ``only`` (a name from :data:`SUBCOMMANDS`) that subcommand alone.

    Each subcommand's ``register`` may import what its options need (the validation's ICC forms pull in
    scipy.stats, the analysis options the detectors): some 0.4 s of CPU per command together, which a
    command that names its subcommand does not pay for the others.
    """
    p = argparse.ArgumentParser(
        prog="aspectus",
        description="Eye-movement features from recorded webcam clips, offline on the CPU. "
        "Research estimates only - not a diagnostic, disciplinary or surveillance instrument.",
    )
    p.add_argument("--version", action="version", version=f"aspectus {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    for name in SUBCOMMANDS if only is None else (only,):
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


def _os_error_line(exc: OSError) -> str:
    """An error of the file system in words: which file, what the system said, what to do."""
    what = exc.strerror or type(exc).__name__
    name = f"{exc.filename}: " if exc.filename is not None else ""
    return (f"{name}{what} - check that the folder exists and you can write to it, and that the disk is not full "
            "(finished outputs are kept)")


def _silence_stdout() -> None:
    """Point stdout at the null device so the interpreter's final flush does not fail again."""
    import os

    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError, AttributeError):
        pass


def main(argv: list[str] | None = None) -> int:
    import warnings

    parser = build_parser(_command_module(argv))
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    previous_format = warnings.formatwarning
    import os

    from aspectus.atomic import FULL_PATHS_ENV

    previous_full_paths = os.environ.get(FULL_PATHS_ENV)  # --full-paths holds for this command only
    warnings.formatwarning = _one_line_warning
    try:
        code = int(args.func(args) or 0)
        sys.stdout.flush()  # a closed pipe shows here, inside the handler below, not at interpreter exit
        return code
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
    except BrokenPipeError:  # `aspectus ... | head -1`: the reader went away; the work itself is done
        _silence_stdout()
        return 141
    except OSError as exc:  # the file system refused (read-only, full, no permission): one line, no traceback
        print(f"aspectus: error: {_os_error_line(exc)}", file=sys.stderr)
        return 1
    finally:
        warnings.formatwarning = previous_format
        if previous_full_paths is None:
            os.environ.pop(FULL_PATHS_ENV, None)
        else:
            os.environ[FULL_PATHS_ENV] = previous_full_paths


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
