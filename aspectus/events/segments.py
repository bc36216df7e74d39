"""Task segments and fixed windows: the time scopes features are computed over."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.errors import AspectusInputError, ParameterError

SEGMENT_COLUMNS = ("label", "onset_s", "offset_s")
#: most fixed windows one clip may get (a 10 h clip in 1 s steps has 36,000); more is a mistyped step
MAX_WINDOWS = 200_000


def _header_line(head: bytes, limit: int = 80) -> str:
    """The file's first line that is not empty or a comment, as written (shortened to ``limit`` characters): the
    error shows what the file holds, not how the delimiter sniffer split it."""
    for raw in head.decode("utf-8-sig", errors="replace").splitlines():
        line = raw.strip()
        if line and not line.startswith("#"):
            return line if len(line) <= limit else line[:limit - 3] + "..."
    return ""


def read_segments(path) -> pd.DataFrame:
    """Read a segment file: a CSV (or other delimited table) with columns label, onset_s, offset_s.

    Times are in seconds on the samples' time axis. Rows must have a label,
    finite times and ``offset_s > onset_s``; segments may overlap.

    Raises
    ------
    aspectus.errors.AspectusInputError
        Naming the file, the row and what is wrong.
    """
    path = Path(path)
    if not path.is_file():
        raise AspectusInputError("segment file not found", path=path, hint="give a CSV with label,onset_s,offset_s")
    head = path.read_bytes()[:65536]
    if not head.strip():
        raise AspectusInputError("segment file is empty", path=path, hint="give a CSV with label,onset_s,offset_s")
    if b"\x00" in head:
        raise AspectusInputError("is not a text table (it holds binary data: a spreadsheet or another file renamed?)",
                                path=path, hint="save it as CSV with a header row label,onset_s,offset_s")
    try:
        df = pd.read_csv(path, sep=None, engine="python", comment="#", dtype=str, keep_default_na=False,
                         encoding="utf-8-sig")
    except Exception as exc:  # pandas raises many kinds of parse errors
        raise AspectusInputError(f"cannot read as a table ({exc})", path=path,
                                hint="save it as CSV with a header row label,onset_s,offset_s") from exc
    df.columns = [str(c).strip() for c in df.columns]
    missing = [c for c in SEGMENT_COLUMNS if c not in df.columns]
    if missing:
        raise AspectusInputError(f"missing column(s) {', '.join(missing)} (the header row reads {_header_line(head)!r})",
                                path=path, where="header", hint="columns must be label,onset_s,offset_s (seconds)")
    out = pd.DataFrame({"label": df["label"].astype(str).str.strip()})
    for c in ("onset_s", "offset_s"):
        v = pd.to_numeric(df[c].str.strip(), errors="coerce").to_numpy(dtype=float)
        bad = ~np.isfinite(v)
        if bad.any():
            i = int(np.argmax(bad))
            raise AspectusInputError(f"{c} {df[c].iloc[i]!r} is not a number of seconds", path=path,
                                    where=f"row {i + 2}", hint="times are seconds on the samples' clock")
        out[c] = v
    empty = out["label"] == ""
    if empty.any():
        i = int(np.argmax(empty.to_numpy()))
        raise AspectusInputError("segment has no label", path=path, where=f"row {i + 2}")
    neg = out["offset_s"] <= out["onset_s"]
    if neg.any():
        i = int(np.argmax(neg.to_numpy()))
        raise AspectusInputError(f"offset_s {out['offset_s'].iloc[i]} is not after onset_s {out['onset_s'].iloc[i]}",
                                path=path, where=f"row {i + 2}", hint="each segment must end after it starts")
    return out.reset_index(drop=True)


def check_segments(segments: pd.DataFrame, source: str = "segments") -> pd.DataFrame:
    """Validate an in-memory segments frame (same rules as :func:`read_segments`)."""
    missing = [c for c in SEGMENT_COLUMNS if c not in segments.columns]
    if missing:
        raise AspectusInputError(f"segments need columns {', '.join(SEGMENT_COLUMNS)}; missing {', '.join(missing)}",
                                path=source)
    out = segments[list(SEGMENT_COLUMNS)].copy()
    out["label"] = out["label"].astype(str)
    for c in ("onset_s", "offset_s"):
        out[c] = pd.to_numeric(out[c], errors="coerce").astype(float)
    bad = ~np.isfinite(out["onset_s"]) | ~np.isfinite(out["offset_s"]) | (out["offset_s"] <= out["onset_s"])
    if bad.any():
        i = int(np.argmax(bad.to_numpy()))
        raise AspectusInputError("segment times must be finite with offset_s > onset_s", path=source,
                                where=f"row {i + 1}")
    return out.reset_index(drop=True)


def fixed_windows(start_s: float, end_s: float, *, window_s: float = 10.0, step_s: float = 10.0) -> pd.DataFrame:
    """Windows ``[start_s + k * step_s, + window_s)`` that fit wholly within ``[start_s, end_s]``.

    Parameters
    ----------
    start_s, end_s : float
        Time span of the data, s.
    window_s : float, default 10
        Window length, s (> 0).
    step_s : float, default 10
        Step between window starts, s (> 0; smaller than ``window_s`` for overlap).

    Returns
    -------
    pandas.DataFrame
        Columns label (``"w0000"``...), start_s, end_s.
    """
    if not (np.isfinite(window_s) and window_s > 0):
        raise ParameterError(f"window_s must be > 0 s, got {window_s!r}")
    if not (np.isfinite(step_s) and step_s > 0):
        raise ParameterError(f"step_s must be > 0 s, got {step_s!r}")
    if not (np.isfinite(start_s) and np.isfinite(end_s)) or end_s - start_s < window_s - 1e-9:
        return pd.DataFrame({"label": pd.Series(dtype=str), "start_s": pd.Series(dtype=float),
                             "end_s": pd.Series(dtype=float)})
    k = int(np.floor((end_s - start_s - window_s) / step_s + 1e-9)) + 1
    if k > MAX_WINDOWS:
        raise ParameterError(f"windows of {window_s:g} s every {step_s:g} s over {end_s - start_s:.6g} s would be "
                             f"{k} windows, more than the {MAX_WINDOWS} aspectus computes features for",
                             hint="choose a larger step_s (--step-s) or a longer window_s")
    starts = start_s + step_s * np.arange(k)
    return pd.DataFrame({"label": [f"w{i:04d}" for i in range(k)], "start_s": starts, "end_s": starts + window_s})
