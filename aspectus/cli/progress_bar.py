"""Text progress bars for the command line (tqdm), quiet in log files.

On a terminal a bar redraws in place as often as it is told to. When the
stream is not a terminal (output redirected to a log on an overnight or
cluster run) each redraw becomes a line of the log, so redraws are limited to
one every ``LOG_INTERVAL_S`` seconds, the first and the last excepted.
"""
from __future__ import annotations

import sys
import time

from tqdm import tqdm

LOG_INTERVAL_S = 30.0


def _is_terminal(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


class ProgressBar(tqdm):
    """A tqdm bar whose explicit ``refresh()`` calls are rate-limited off a terminal."""

    def __init__(self, *args, **kwargs):
        stream = kwargs.get("file") or sys.stderr
        self._to_terminal = _is_terminal(stream)
        self._last_draw = -float("inf")
        super().__init__(*args, **kwargs)

    def refresh(self, *args, **kwargs):
        if not self._to_terminal:
            now = time.monotonic()
            finished = self.total is not None and self.n >= self.total
            if not finished and now - self._last_draw < LOG_INTERVAL_S:
                return None
            self._last_draw = now
        return super().refresh(*args, **kwargs)
