"""What every command that writes does with ``-o OUTDIR`` and ``--full-paths``."""
from __future__ import annotations

import os
from pathlib import Path


def add_output_options(p) -> None:
    """``--full-paths``: also record inputs by their absolute paths (off by default)."""
    p.add_argument("--full-paths", action="store_true",
                   help="also record the inputs' absolute paths in the outputs (default: paths relative to the "
                        "output folder and the inputs' SHA-256 only - absolute paths carry user names and often "
                        "students' names)")


def apply_output_options(args) -> None:
    from aspectus.atomic import FULL_PATHS_ENV

    if getattr(args, "full_paths", False):
        os.environ[FULL_PATHS_ENV] = "1"  # read where outputs are written, in this process and its workers


def prepare_out_dir(path, *, create: bool = True) -> Path:
    """Create OUTDIR if missing (``create``); a one-line error when it is a file, cannot be made or is not
    writable. With ``create=False`` only checks (the folder, or the nearest existing folder above it)."""
    from aspectus.errors import AspectusInputError

    out = Path(path)
    if out.exists() and not out.is_dir():
        raise AspectusInputError("OUTDIR is a file, not a folder", path=out,
                                 hint="give a folder to write the outputs into (it is created if missing)")
    if not create:
        probe = out
        while not probe.exists() and probe.parent != probe:
            probe = probe.parent
        if probe.exists() and not probe.is_dir():
            raise AspectusInputError(f"OUTDIR cannot be created: {probe} is a file", path=out,
                                     hint="choose a folder you can write to")
        if not os.access(probe, os.W_OK | os.X_OK):
            raise AspectusInputError("OUTDIR is not writable (read-only folder or no permission)", path=out,
                                     hint="choose a folder you can write to, or fix its permissions")
        return out
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise AspectusInputError(f"cannot create OUTDIR ({exc.strerror or exc})", path=out,
                                 hint="choose a folder you can write to") from None
    if not os.access(out, os.W_OK | os.X_OK):
        raise AspectusInputError("OUTDIR is not writable (read-only folder or no permission)", path=out,
                                 hint="choose a folder you can write to, or fix its permissions")
    return out
