"""Screen geometry: converting on-screen gaze positions to visual angle.

A point at offset ``x`` from the screen centre, seen from distance ``d``,
lies at ``atan(x / d)`` from the straight-ahead direction (field notes,
"Visual angle"). aspectus places straight-ahead at the screen centre unless an
origin is given; angles follow the frame of :mod:`aspectus.schema`: yaw grows
towards larger screen x (the viewer's right), pitch grows upwards (smaller
screen y, since screen y runs down).
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from aspectus.errors import ParameterError


@dataclass(frozen=True)
class ScreenGeometry:
    """A screen seen by the viewer.

    Parameters
    ----------
    width_mm, height_mm : float
        Visible screen area in millimetres.
    width_px, height_px : int
        Screen resolution in pixels (needed for pixel coordinates only).
    distance_mm : float
        Eye-to-screen distance in millimetres.
    origin_px : tuple of float, optional
        Pixel position of straight-ahead gaze; default the screen centre.
    """

    width_mm: float
    height_mm: float
    distance_mm: float
    width_px: int | None = None
    height_px: int | None = None
    origin_px: tuple[float, float] | None = None

    def __post_init__(self):
        for name in ("width_mm", "height_mm", "distance_mm"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float, np.floating, np.integer)) and np.isfinite(v) and v > 0):
                raise ParameterError(f"screen {name} must be a positive number of millimetres, got {v!r}")
        for name in ("width_px", "height_px"):
            v = getattr(self, name)
            if v is not None and not (np.isfinite(v) and v > 0):
                raise ParameterError(f"screen {name} must be a positive number of pixels, got {v!r}")
        if self.distance_mm < 100 or self.distance_mm > 5000:
            raise ParameterError(
                f"screen distance {self.distance_mm} mm is outside 100-5000 mm",
                hint="give the eye-to-screen distance in millimetres (e.g. 650), not metres",
            )

    def to_dict(self) -> dict:
        return asdict(self)

    def _need_px(self):
        if self.width_px is None or self.height_px is None:
            raise ParameterError("pixel coordinates need the screen resolution in pixels",
                                 hint="give --screen-res-px W H")

    def mm_per_px(self) -> tuple[float, float]:
        self._need_px()
        return self.width_mm / self.width_px, self.height_mm / self.height_px

    def mm_to_deg(self, x_mm, y_mm):
        """Offsets in mm from straight-ahead (x right, y *down*) to (yaw_deg, pitch_deg)."""
        x_mm = np.asarray(x_mm, dtype=float)
        y_mm = np.asarray(y_mm, dtype=float)
        d = float(self.distance_mm)
        return np.degrees(np.arctan2(x_mm, d)), np.degrees(np.arctan2(-y_mm, d))

    def px_to_deg(self, x_px, y_px):
        """Screen pixels (origin top left, y down) to (yaw_deg, pitch_deg)."""
        sx, sy = self.mm_per_px()
        ox, oy = self.origin_px if self.origin_px is not None else (self.width_px / 2.0, self.height_px / 2.0)
        x_mm = (np.asarray(x_px, dtype=float) - ox) * sx
        y_mm = (np.asarray(y_px, dtype=float) - oy) * sy
        return self.mm_to_deg(x_mm, y_mm)

    def norm_to_deg(self, x_norm, y_norm):
        """Normalised screen coordinates (0-1, origin top left, y down) to (yaw_deg, pitch_deg)."""
        x_mm = (np.asarray(x_norm, dtype=float) - 0.5) * self.width_mm
        y_mm = (np.asarray(y_norm, dtype=float) - 0.5) * self.height_mm
        if self.origin_px is not None and self.width_px and self.height_px:
            sx, sy = self.mm_per_px()
            x_mm -= (self.origin_px[0] - self.width_px / 2.0) * sx
            y_mm -= (self.origin_px[1] - self.height_px / 2.0) * sy
        return self.mm_to_deg(x_mm, y_mm)

    def deg_to_px(self, yaw_deg, pitch_deg):
        """Inverse of :meth:`px_to_deg`."""
        sx, sy = self.mm_per_px()
        ox, oy = self.origin_px if self.origin_px is not None else (self.width_px / 2.0, self.height_px / 2.0)
        d = float(self.distance_mm)
        x_mm = np.tan(np.radians(np.asarray(yaw_deg, dtype=float))) * d
        y_mm = -np.tan(np.radians(np.asarray(pitch_deg, dtype=float))) * d
        return x_mm / sx + ox, y_mm / sy + oy
