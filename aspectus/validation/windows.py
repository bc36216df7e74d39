"""How long the paired windows of a validation are, and how many pairs agreement statistics need.

Agreement statistics on a handful of windows mislead: with 3 windows an ICC can come out at -1.2 and a
Pearson interval spans almost -1 to 1. Reports and the app therefore show no r, ICC or limits of
agreement below :data:`MIN_PAIRS` pairs and say how to get more. When the user does not set a window
length, :func:`choose_window_s` shortens the preferred one until the overlap of the two recordings
gives at least :data:`MIN_PAIRS` windows, down to :data:`SHORTEST_WINDOW_S`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

#: fewest paired windows (or segments) for which r, ICC and Bland-Altman limits are shown. Common practice
#: (rule of thumb): with fewer than about 10 pairs a 95 % interval of r spans most of -1..1 (Fisher z: at
#: n = 10 and r = 0.8 it is 0.34 to 0.95) and the limits of agreement rest on a single SD from a few values.
MIN_PAIRS = 10
#: window lengths tried from long to short, s (each holds several fixations of a reading task)
CANDIDATE_WINDOWS_S = (60.0, 30.0, 20.0, 10.0, 5.0, 4.0, 3.0, 2.0)
#: shorter windows hold only a few fixations each (common practice: fixations last 0.2-0.4 s in reading),
#: so counts per window become too coarse to compare
SHORTEST_WINDOW_S = 2.0


@dataclass(frozen=True)
class WindowChoice:
    """The chosen window length and why, in words for the report."""

    window_s: float
    windows: int
    chosen: bool  # True: chosen from the overlap; False: given by the user
    reason: str


def _count(n: int) -> str:
    return f"{n} window" if n == 1 else f"{n} windows"


def overlap_text(overlap_s: float) -> str:
    """How long two recordings overlap, in words: truncated to 0.01 s, never rounded up, so that "20.0 s" does
    not stand beside the 9 windows of 2 s that 19.97 s holds.

    >>> overlap_text(19.9667)
    '19.96 s'
    """
    return f"{math.floor(float(overlap_s) * 100.0 + 1e-6) / 100.0:.2f} s"


def n_windows(overlap_s: float, window_s: float, step_s: float | None = None) -> int:
    """Complete windows of ``window_s`` (start-to-start ``step_s``) in ``overlap_s`` seconds."""
    step_s = window_s if step_s is None else step_s
    if not (overlap_s >= window_s > 0 and step_s > 0):
        return 0
    return int(math.floor((overlap_s - window_s) / step_s + 1e-9)) + 1


def choose_window_s(overlap_s: float, preferred_s: float, *, given: bool = False,
                    min_pairs: int = MIN_PAIRS) -> WindowChoice:
    """The window length for a validation of recordings that overlap for ``overlap_s`` seconds.

    ``given``: the user set ``preferred_s``; it is kept (and the reason says whether it gives enough
    windows). Otherwise the longest candidate no longer than ``preferred_s`` that gives at least
    ``min_pairs`` windows, else :data:`SHORTEST_WINDOW_S`.
    """
    n_pref = n_windows(overlap_s, preferred_s)
    if given:
        enough = "" if n_pref >= min_pairs else (
            f"; fewer than the {min_pairs} windows agreement statistics need - shorter windows or longer recordings "
            "give more")
        return WindowChoice(float(preferred_s), n_pref, False,
                            f"Windows of {preferred_s:g} s as set; the recordings overlap for {overlap_text(overlap_s)}, "
                            f"which gives {_count(n_pref)}{enough}.")
    if n_pref >= min_pairs:
        return WindowChoice(float(preferred_s), n_pref, False,
                            f"Windows of {preferred_s:g} s (the feature window length); the recordings overlap for "
                            f"{overlap_text(overlap_s)}, which gives {n_pref} windows.")
    for w in CANDIDATE_WINDOWS_S:
        if w < preferred_s and w >= SHORTEST_WINDOW_S and n_windows(overlap_s, w) >= min_pairs:
            return WindowChoice(w, n_windows(overlap_s, w), True,
                                f"Windows of {w:g} s, chosen from the overlap: the recordings overlap for "
                                f"{overlap_text(overlap_s)}, and the feature window length of {preferred_s:g} s would give "
                                f"only {_count(n_pref)}, fewer than the {min_pairs} agreement statistics need; "
                                f"{w:g} s is the longest of {', '.join(f'{c:g}' for c in CANDIDATE_WINDOWS_S)} s "
                                f"that gives at least {min_pairs} windows (it gives {n_windows(overlap_s, w)}). Set another length "
                                "with --window-s (in the app: Feature window length).")
    w = min(float(preferred_s), SHORTEST_WINDOW_S)
    n = n_windows(overlap_s, w)
    return WindowChoice(w, n, w != preferred_s,
                        f"Windows of {w:g} s, the shortest used: the recordings overlap for {overlap_text(overlap_s)}, which "
                        f"gives only {_count(n)} - too few for agreement statistics (at least {min_pairs}). Longer "
                        "recordings, or several clips compared together (Compare all clips / a study), give more.")
