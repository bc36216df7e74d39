"""When is a clip done: the files in its output folder decide (see :mod:`aspectus.studies.batch`)."""
from __future__ import annotations

import contextlib
from pathlib import Path


from aspectus.atomic import sha256_file
from aspectus.run_record import read_run_json

#: outputs a finished clip folder must hold (besides run.json)
REQUIRED_OUTPUTS = ("samples.parquet", "events.csv", "features.csv", "features.parquet")





def _listed_outputs(run: dict) -> dict[str, tuple[int | None, str | None]]:
    """Output file name -> (expected size in bytes, expected SHA-256), None where unknown.

    From run.json's ``outputs``, or the required outputs with nothing known.
    """
    outs = run.get("outputs")
    got: dict[str, tuple[int | None, str | None]] = {}
    if isinstance(outs, dict):
        for name, info in outs.items():
            info = info if isinstance(info, dict) else {}
            size, sha = info.get("bytes"), info.get("sha256")
            got[Path(name).name] = (int(size) if isinstance(size, (int, float)) else None,
                                    sha if isinstance(sha, str) else None)
    return got or {n: (None, None) for n in REQUIRED_OUTPUTS}


def run_summary(run: dict) -> dict:
    """The clip summary a run.json carries (``summary`` or ``quality``)."""
    s = run.get("summary") or run.get("quality") or {}
    return dict(s) if isinstance(s, dict) else {}


def clip_is_done(out_dir, *, input_sha256: str, params_sha256: str, segments=None) -> tuple[bool, str]:
    """Decide from the files whether a clip folder holds finished results for this input and parameters.

    Parameters
    ----------
    out_dir : path-like
        The clip's output folder.
    input_sha256 : str
        SHA-256 of the clip file now.
    params_sha256 : str
        :meth:`~aspectus.webcam.pipeline.ProcessParams.fingerprint` of the processing parameters now.
    segments : path-like, optional
        The clip's task-segments file now. The results must have been made
        with the same file, and after its last change.

    Every output run.json lists must be present with the size and SHA-256
    recorded when it was written (a file damaged in place, even at the same
    size, makes the clip be redone).

    Returns
    -------
    (bool, str)
        Whether it is done, and why not (empty when done).
    """
    out_dir = Path(out_dir)
    run = read_run_json(out_dir)
    if run is None:
        return False, "not processed yet" if not out_dir.exists() else "not finished"
    if run.get("input_sha256") != input_sha256:
        return False, "clip file changed since it was processed"
    if run.get("params_sha256") != params_sha256:
        return False, "parameters changed since it was processed"
    want_seg = str(Path(segments).resolve()) if segments is not None else None
    had_seg = run.get("segments")  # recorded relative to the clip's output folder (aspectus.atomic.recorded_path)
    had_seg = str((out_dir / had_seg).resolve()) if had_seg else None
    if want_seg != had_seg:
        return False, "task segments file changed since it was processed"
    if want_seg is not None:
        try:
            if Path(want_seg).stat().st_mtime_ns > (out_dir / "run.json").stat().st_mtime_ns:
                return False, "task segments file edited since it was processed"
        except OSError:
            return False, "task segments file not readable"
    bad = []
    for name, (size, sha) in _listed_outputs(run).items():
        p = out_dir / name
        if not p.is_file():
            bad.append(f"{name} missing")
        elif size is not None and p.stat().st_size != size:
            bad.append(f"{name} has {p.stat().st_size} bytes, not {size}")
        elif sha is not None and sha256_file(p) != sha:
            bad.append(f"{name} differs from what was written (SHA-256 changed)")
    if bad:
        return False, "output(s) damaged: " + ", ".join(bad)
    return True, ""


def _clean_partials(out_dir: Path) -> int:
    """Remove temporary files (``.*.part``) left in a clip folder by a killed attempt."""
    n = 0
    if out_dir.is_dir():
        for p in out_dir.glob(".*.part"):
            with contextlib.suppress(OSError):
                p.unlink()
                n += 1
    return n
