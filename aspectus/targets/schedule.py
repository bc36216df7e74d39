"""The known-target sequence: a schedule of dots at known places and times.

A team without a lab tracker measures each student's gaze quality with a
short sequence shown on the study's screen at the start (and, if wanted,
the end) of a session: a brief full-screen flash that the webcam sees (so
the clip can be aligned to the schedule automatically), a grid of still
dots, and a dot that moves slowly across the screen in both directions.

Schedule file (``schedule.json``, format ``aspectus.target_schedule``,
version :data:`SCHEDULE_VERSION`) - every time is in seconds from the
flash's onset (schedule time 0 = the first picture of the flash):

* ``format``, ``format_version`` - the name and version of this layout;
  readers refuse a version they do not know.
* ``seed`` - the seed that ordered the dots; the same seed and screen give
  the same schedule.
* ``screen`` - ``width_px``, ``height_px`` (the screen's pixel grid),
  ``width_mm``, ``height_mm`` (its visible area) and
  ``viewing_distance_mm`` (eyes to the screen's centre, perpendicular).
* ``colours`` - ``background``, ``flash``, ``dot``, ``dot_centre`` (CSS hex).
* ``dot_radius_deg``, ``dot_radius_px`` - radius of the dot.
* ``flash`` - ``onset_s`` (0), ``offset_s``.
* ``duration_s`` - end of the sequence (the screen turns to the background).
* ``targets`` - one entry per target, in time order: ``index``, ``kind``
  (``"fixation"``: a still dot; ``"pursuit"``: a dot moving at constant
  angular speed from ``x0``/``y0`` to ``x1``/``y1``), ``onset_s``,
  ``offset_s``, ``x0_deg``, ``y0_deg``, ``x1_deg``, ``y1_deg``, ``x0_px``,
  ``y0_px``, ``x1_px``, ``y1_px`` (a still dot has start = end), and for
  pursuit ``speed_deg_s``.

Coordinates: pixels from the screen's top-left corner, x to the right, y
down, at the dot's centre. Degrees of visual angle from the screen's
centre, seen from the viewing distance: ``x_deg = atan(x_mm / D)``,
``y_deg = atan(y_mm / D)`` with ``x_mm`` to the right and ``y_mm`` *up*
from the centre (so ``y_deg > 0`` is above the centre, like ``pitch_deg``,
and ``x_deg > 0`` is towards larger x, like ``yaw_deg``; see
:mod:`aspectus.schema`). A moving dot moves linearly in degrees; its pixel
position at time t is :func:`deg_to_px` of the interpolated degrees.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from aspectus.errors import AspectusInputError, ParameterError

SCHEDULE_FORMAT = "aspectus.target_schedule"
#: version of the schedule layout; raise it when a field changes meaning or is removed
SCHEDULE_VERSION = 1

#: colours of the page and the video (CSS hex). A dark screen makes the white flash a large change of the
#: light falling on the face.
COLOURS = {"background": "#303030", "flash": "#ffffff", "dot": "#f0f0f0", "dot_centre": "#202020"}

#: still-dot positions as fractions of the screen (x from the left, y from the top): a 3 x 3 grid 10 % in from
#: the edges and the four points between its inner corners (13 points; the centre comes first)
GRID_FRACTIONS = [(0.5, 0.5)] + [(x, y) for y in (0.1, 0.5, 0.9) for x in (0.1, 0.5, 0.9) if (x, y) != (0.5, 0.5)] \
    + [(0.3, 0.3), (0.7, 0.3), (0.3, 0.7), (0.7, 0.7)]


@dataclass(frozen=True)
class Screen:
    """The screen the sequence is shown on and where the viewer sits.

    Attributes
    ----------
    width_px, height_px : int
        Pixel grid of the screen (what the page fills in full-screen mode).
    width_mm, height_mm : float
        Visible area of the screen, mm.
    viewing_distance_mm : float
        Eyes to the screen's centre, mm.
    """

    width_px: int
    height_px: int
    width_mm: float
    height_mm: float
    viewing_distance_mm: float

    def __post_init__(self):
        for name in ("width_px", "height_px"):
            v = getattr(self, name)
            if not (isinstance(v, (int, np.integer)) and 64 <= v <= 16384):
                raise ParameterError(f"screen {name} must be a whole number of pixels between 64 and 16384, got {v!r}")
        for name, lo, hi in (("width_mm", 20.0, 5000.0), ("height_mm", 20.0, 5000.0),
                             ("viewing_distance_mm", 100.0, 10000.0)):
            v = getattr(self, name)
            if not (isinstance(v, (int, float, np.integer, np.floating)) and math.isfinite(v) and lo <= v <= hi):
                raise ParameterError(f"screen {name} must be between {lo:g} and {hi:g} mm, got {v!r}")
        ratio = (self.width_mm / self.height_mm) / (self.width_px / self.height_px)
        if not 0.8 <= ratio <= 1.25:
            raise ParameterError(
                f"the screen's shape in mm ({self.width_mm:g} x {self.height_mm:g}) does not match its pixel grid "
                f"({self.width_px} x {self.height_px}): pixels would be {ratio:.2f} times wider than tall",
                hint="give the visible area's width and height in mm and the screen's resolution")

    @property
    def mm_per_px(self) -> tuple[float, float]:
        return self.width_mm / self.width_px, self.height_mm / self.height_px

    def to_dict(self) -> dict:
        return {"width_px": int(self.width_px), "height_px": int(self.height_px), "width_mm": float(self.width_mm),
                "height_mm": float(self.height_mm), "viewing_distance_mm": float(self.viewing_distance_mm)}


def px_to_deg(screen: Screen, x_px, y_px):
    """Screen pixels (top-left origin, y down) to degrees of visual angle from the centre (y up)."""
    mx, my = screen.mm_per_px
    x_mm = (np.asarray(x_px, float) - screen.width_px / 2.0) * mx
    y_mm = (screen.height_px / 2.0 - np.asarray(y_px, float)) * my
    d = screen.viewing_distance_mm
    return np.degrees(np.arctan2(x_mm, d)), np.degrees(np.arctan2(y_mm, d))


def deg_to_px(screen: Screen, x_deg, y_deg):
    """Degrees of visual angle from the centre (y up) to screen pixels (top-left origin, y down)."""
    mx, my = screen.mm_per_px
    d = screen.viewing_distance_mm
    x_px = screen.width_px / 2.0 + np.tan(np.radians(np.asarray(x_deg, float))) * d / mx
    y_px = screen.height_px / 2.0 - np.tan(np.radians(np.asarray(y_deg, float))) * d / my
    return x_px, y_px


@dataclass
class Schedule:
    """A target sequence (see the module docstring for the file layout)."""

    screen: Screen
    seed: int
    flash_s: float
    duration_s: float
    dot_radius_deg: float
    targets: pd.DataFrame
    colours: dict

    @property
    def fixations(self) -> pd.DataFrame:
        return self.targets[self.targets["kind"] == "fixation"]

    @property
    def pursuits(self) -> pd.DataFrame:
        return self.targets[self.targets["kind"] == "pursuit"]

    def describe(self) -> str:
        """The sequence in words, counting as the README and ``--targets`` do: the still dots of the grid, the
        short still dot before each moving sweep, and all still targets the check measures.

        Examples
        --------
        >>> sched = make_schedule(Screen(1920, 1080, 344.0, 194.0, 600.0))
        >>> sched.describe()
        '13 still dots of 2 s, then the moving dot: 2 sweeps there and back, each after a still dot of 1 s (15 still targets in the check), 38.2 s'
        """
        kinds = self.targets["kind"].tolist()
        lead = [i for i in range(len(kinds) - 1) if kinds[i] == "fixation" and kinds[i + 1] == "pursuit"]
        fx = self.fixations
        grid = fx.drop(index=self.targets.index[lead])
        dur = (grid["offset_s"] - grid["onset_s"]).median() if len(grid) else float("nan")
        text = f"{len(grid)} still dots of {dur:g} s"
        if lead:
            lead_s = float(self.targets.iloc[lead[0]]["offset_s"] - self.targets.iloc[lead[0]]["onset_s"])
            text += (f", then the moving dot: {len(lead)} sweep{'s' if len(lead) != 1 else ''} there and back, "
                     f"each after a still dot of {lead_s:g} s ({len(fx)} still targets in the check)")
        return f"{text}, {self.duration_s:.1f} s"

    @property
    def dot_radius_px(self) -> float:
        mx, my = self.screen.mm_per_px
        r_mm = math.tan(math.radians(self.dot_radius_deg)) * self.screen.viewing_distance_mm
        return r_mm / (0.5 * (mx + my))

    def position_deg(self, t_s) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Where the dot is at schedule times ``t_s``: (x_deg, y_deg, index of the target; -1 and NaN when none)."""
        t = np.atleast_1d(np.asarray(t_s, float))
        x = np.full(t.shape, np.nan)
        y = np.full(t.shape, np.nan)
        idx = np.full(t.shape, -1, dtype=int)
        for r in self.targets.itertuples(index=False):
            sel = (t >= r.onset_s) & (t < r.offset_s)
            if not sel.any():
                continue
            f = (t[sel] - r.onset_s) / (r.offset_s - r.onset_s)
            x[sel] = r.x0_deg + f * (r.x1_deg - r.x0_deg)
            y[sel] = r.y0_deg + f * (r.y1_deg - r.y0_deg)
            idx[sel] = r.index
        return x, y, idx

    def to_dict(self) -> dict:
        cols = ["index", "kind", "onset_s", "offset_s", "x0_deg", "y0_deg", "x1_deg", "y1_deg", "x0_px", "y0_px",
                "x1_px", "y1_px", "speed_deg_s"]
        rows = []
        for r in self.targets[cols].to_dict(orient="records"):
            row = {k: (round(float(v), 6) if isinstance(v, (float, np.floating)) else v) for k, v in r.items()}
            row["index"] = int(row["index"])
            if row["kind"] == "fixation":
                row.pop("speed_deg_s")
            rows.append(row)
        return {
            "format": SCHEDULE_FORMAT, "format_version": SCHEDULE_VERSION, "seed": int(self.seed),
            "screen": self.screen.to_dict(), "colours": dict(self.colours),
            "dot_radius_deg": float(self.dot_radius_deg), "dot_radius_px": round(self.dot_radius_px, 3),
            "flash": {"onset_s": 0.0, "offset_s": float(self.flash_s)},
            "duration_s": float(self.duration_s), "targets": rows,
        }

    def write(self, path) -> Path:
        from aspectus.atomic import write_json

        path = Path(path)
        write_json(path, self.to_dict())
        return path


def _check_number(name, v, lo, hi):
    if not (isinstance(v, (int, float, np.integer, np.floating)) and math.isfinite(v) and lo <= v <= hi):
        raise ParameterError(f"{name} must be between {lo:g} and {hi:g}, got {v!r}")


def make_schedule(screen: Screen, *, seed: int = 0, fixation_s: float = 2.0, n_fixations: int = 13,
                  pursuit_speed_deg_s: float = 8.0, pursuit_sweeps: int = 2, flash_s: float = 0.25,
                  blank_s: float = 1.0, dot_radius_deg: float = 0.4) -> Schedule:
    """Make a target sequence for ``screen``.

    Parameters
    ----------
    screen : Screen
    seed : int, default 0
        Orders the still dots (the centre always comes first).
    fixation_s : float, default 2
        How long each still dot is shown, s.
    n_fixations : int, default 13
        Still dots, 5-13, taken from :data:`GRID_FRACTIONS` in order (5: centre and corners).
    pursuit_speed_deg_s : float, default 8
        Angular speed of the moving dot, deg/s.
    pursuit_sweeps : int, default 2
        0, 1 or 2: 1 = a horizontal sweep there and back; 2 = also a vertical one.
    flash_s : float, default 0.25
        Length of the full-screen flash, s (long enough for a 30 fps webcam to see it in several frames).
    blank_s : float, default 1
        Background after the flash before the first dot, s.
    dot_radius_deg : float, default 0.4
        Radius of the dot, degrees.

    Returns
    -------
    Schedule

    Notes
    -----
    With the defaults the sequence lasts about 50 s on a laptop screen at
    60 cm. Each moving sweep is preceded by a still dot at its start (1 s,
    counted as a still target) so the eyes are on it when it starts moving.
    """
    if not isinstance(screen, Screen):
        raise ParameterError("screen must be a Screen (width_px, height_px, width_mm, height_mm, viewing_distance_mm)")
    _check_number("fixation_s", fixation_s, 0.5, 30.0)
    _check_number("pursuit_speed_deg_s", pursuit_speed_deg_s, 1.0, 40.0)
    _check_number("flash_s", flash_s, 0.1, 2.0)
    _check_number("blank_s", blank_s, 0.0, 10.0)
    _check_number("dot_radius_deg", dot_radius_deg, 0.1, 3.0)
    if not (isinstance(n_fixations, (int, np.integer)) and 5 <= n_fixations <= len(GRID_FRACTIONS)):
        raise ParameterError(f"n_fixations must be a whole number from 5 to {len(GRID_FRACTIONS)}, got {n_fixations!r}")
    if pursuit_sweeps not in (0, 1, 2):
        raise ParameterError(f"pursuit_sweeps must be 0, 1 or 2, got {pursuit_sweeps!r}")
    # the first five of the grid in a fixed order: centre and the four corners
    order5 = [(0.5, 0.5), (0.1, 0.1), (0.9, 0.1), (0.1, 0.9), (0.9, 0.9)]
    pts = order5 + [p for p in GRID_FRACTIONS if p not in order5]
    pts = pts[:n_fixations]
    rng = np.random.default_rng(int(seed))
    rest = [pts[i] for i in rng.permutation(np.arange(1, len(pts)))]
    seq = [pts[0]] + rest
    rows = []
    t = float(flash_s) + float(blank_s)

    def add(kind, t0, t1, fx0, fy0, fx1, fy1, speed=float("nan")):
        x0d, y0d = px_to_deg(screen, fx0 * screen.width_px, fy0 * screen.height_px)
        x1d, y1d = px_to_deg(screen, fx1 * screen.width_px, fy1 * screen.height_px)
        rows.append({"kind": kind, "onset_s": t0, "offset_s": t1, "x0_deg": float(x0d), "y0_deg": float(y0d),
                     "x1_deg": float(x1d), "y1_deg": float(y1d), "speed_deg_s": speed})

    for fx, fy in seq:
        add("fixation", t, t + fixation_s, fx, fy, fx, fy)
        t += fixation_s
    sweeps = [((0.15, 0.5), (0.85, 0.5)), ((0.5, 0.15), (0.5, 0.85))][:pursuit_sweeps]
    for a, b in sweeps:
        add("fixation", t, t + 1.0, *a, *a)
        t += 1.0
        for p, q in ((a, b), (b, a)):
            x0d, y0d = px_to_deg(screen, p[0] * screen.width_px, p[1] * screen.height_px)
            x1d, y1d = px_to_deg(screen, q[0] * screen.width_px, q[1] * screen.height_px)
            dur = float(np.hypot(x1d - x0d, y1d - y0d)) / pursuit_speed_deg_s
            add("pursuit", t, t + dur, *p, *q, speed=float(pursuit_speed_deg_s))
            t += dur
    targets = pd.DataFrame(rows)
    targets.insert(0, "index", np.arange(len(targets)))
    x0p, y0p = deg_to_px(screen, targets["x0_deg"], targets["y0_deg"])
    x1p, y1p = deg_to_px(screen, targets["x1_deg"], targets["y1_deg"])
    targets["x0_px"], targets["y0_px"], targets["x1_px"], targets["y1_px"] = x0p, y0p, x1p, y1p
    return Schedule(screen=screen, seed=int(seed), flash_s=float(flash_s), duration_s=t,
                    dot_radius_deg=float(dot_radius_deg), targets=targets, colours=dict(COLOURS))


#: what to give instead of a file that is not a schedule
_SCHEDULE_HINT = ("give the schedule.json that `aspectus targets make` (or the app's Target sequence…) wrote beside "
                  "the targets.html that was shown")


def read_schedule(path) -> Schedule:
    """Read a ``schedule.json`` written by :meth:`Schedule.write`, checking its format and version."""
    path = Path(path)
    try:
        d = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise AspectusInputError("schedule file not found", path=path,
                                 hint="make one with `aspectus targets make`") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise AspectusInputError(f"cannot read the schedule as JSON ({exc})", path=path,
                                 hint=_SCHEDULE_HINT) from None
    if not isinstance(d, dict) or d.get("format") != SCHEDULE_FORMAT:
        raise AspectusInputError(f"not a target schedule (expected \"format\": \"{SCHEDULE_FORMAT}\")", path=path,
                                 hint=_SCHEDULE_HINT)
    if d.get("format_version") != SCHEDULE_VERSION:
        raise AspectusInputError(f"schedule format version {d.get('format_version')!r} is not one this aspectus "
                                 f"reads (version {SCHEDULE_VERSION})", path=path,
                                 hint="make the schedule again with this aspectus version")
    try:
        s = d["screen"]
        screen = Screen(int(s["width_px"]), int(s["height_px"]), float(s["width_mm"]), float(s["height_mm"]),
                        float(s["viewing_distance_mm"]))
        targets = pd.DataFrame(d["targets"])
        need = ["index", "kind", "onset_s", "offset_s", "x0_deg", "y0_deg", "x1_deg", "y1_deg", "x0_px", "y0_px",
                "x1_px", "y1_px"]
        missing = [c for c in need if c not in targets.columns]
        if missing or not len(targets):
            raise AspectusInputError(f"the targets list lacks {', '.join(missing) or 'entries'}", path=path)
        if "speed_deg_s" not in targets:
            targets["speed_deg_s"] = np.nan
        bad = ~targets["kind"].isin(["fixation", "pursuit"])
        if bad.any():
            raise AspectusInputError(f"target kind {targets['kind'][bad].iloc[0]!r} is neither fixation nor pursuit",
                                     path=path, where=f"target {int(np.argmax(bad.to_numpy()))}")
        pos = targets[["x0_deg", "y0_deg", "x1_deg", "y1_deg", "x0_px", "y0_px", "x1_px", "y1_px"]].to_numpy(float)
        if not np.isfinite(pos).all() or (np.abs(pos[:, :4]) >= 89).any():
            i = int(np.argmax(~np.isfinite(pos).all(axis=1) | (np.abs(pos[:, :4]) >= 89).any(axis=1)))
            raise AspectusInputError("a target position is not a finite angle below 89 deg / pixel position",
                                     path=path, where=f"target {i}")
        on, off = targets["onset_s"].to_numpy(float), targets["offset_s"].to_numpy(float)
        if not (np.all(np.isfinite(on)) and np.all(off > on) and np.all(on[1:] >= off[:-1] - 1e-9)):
            raise AspectusInputError("target times must be finite, each offset after its onset, in time order",
                                     path=path)
        return Schedule(screen=screen, seed=int(d.get("seed", 0)), flash_s=float(d["flash"]["offset_s"]),
                        duration_s=float(d["duration_s"]), dot_radius_deg=float(d["dot_radius_deg"]),
                        targets=targets, colours=dict(COLOURS, **d.get("colours", {})))
    except AspectusInputError as exc:
        if exc.path is None:
            raise AspectusInputError(exc.problem, path=path, where=exc.where, hint=exc.hint) from None
        raise
    except (KeyError, TypeError, ValueError) as exc:
        raise AspectusInputError(f"the schedule lacks or garbles a field ({exc})", path=path,
                                 hint="make the schedule again with `aspectus targets make`") from None
