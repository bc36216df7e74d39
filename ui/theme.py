"""Colours, labels and small formatting helpers shared by the app's views.

Colours are picked for contrast on white and to stay distinguishable with
red-green colour vision deficiency (blue / orange / grey families).
"""
from __future__ import annotations

import math

#: trace and band colours (hex, for matplotlib and Qt alike)
YAW_COLOUR = "#1f4e79"
PITCH_COLOUR = "#b35900"
FIXATION_BAND = "#cfe0f3"
BLINK_BAND = "#f4d58d"
LOSS_BAND = "#d0d0d0"
SEGMENT_EDGE = "#6a3d9a"
CURSOR_COLOUR = "#c2185b"
HIST_COLOUR = "#4f81bd"
POINT_COLOUR = "#1f4e79"

#: clip status -> (text colour, short explanation)
STATUS_COLOURS = {
    "done": "#2e7d32",
    "failed": "#c62828",
    "cancelled": "#757575",
    "not processed": "#424242",
    "outdated": "#b26a00",
    "queued": "#1565c0",
    "processing": "#1565c0",
}

STATUS_TIPS = {
    "done": "Processed; results are in the clip's result folder.",
    "failed": "Processing failed; select the clip to read why.",
    "cancelled": "Processing was cancelled before this clip finished.",
    "not processed": "Not processed yet.",
    "outdated": "Processed with other processing settings; process it again to update.",
    "queued": "Waiting to be processed.",
    "processing": "Being processed now.",
}


def fmt(value, unit: str = "", *, digits: int = 1, pct: bool = False) -> str:
    """Format a number for display; missing or NaN values become an en dash."""
    if value is None:
        return "–"
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(v):
        return "–"
    if pct:
        return f"{100 * v:.0f}%"
    s = f"{v:.{digits}f}"
    return f"{s} {unit}".strip() if unit and unit != "°" else (s + unit)


def fmt_duration(seconds: float | None) -> str:
    """Remaining time as 'about 3 min 20 s'."""
    if seconds is None or not math.isfinite(seconds) or seconds < 0:
        return "estimating time remaining…"
    s = int(round(seconds))
    if s < 60:
        return f"about {s} s remaining"
    m, s = divmod(s, 60)
    if m < 60:
        return f"about {m} min {s:02d} s remaining"
    h, m = divmod(m, 60)
    return f"about {h} h {m:02d} min remaining"
