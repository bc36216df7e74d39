"""Command-line progress bars: redrawn freely on a terminal, sparingly in a log file."""
from __future__ import annotations

import io

from aspectus import progress as progress_bar
from aspectus.progress import ProgressBar


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def _drive(stream, steps=500):
    bar = ProgressBar(total=steps, file=stream, mininterval=0, bar_format="{percentage:3.0f}%")
    for i in range(steps):
        bar.n = i + 1
        bar.refresh()
    bar.close()
    return stream.getvalue()


def test_log_file_gets_few_redraws(monkeypatch):
    monkeypatch.setattr(progress_bar, "LOG_INTERVAL_S", 3600.0)
    out = _drive(io.StringIO())
    draws = [x for x in out.split("\r") if x.strip()]
    # the first draw and the finished one, not one per step
    assert 1 <= len(draws) <= 4, draws
    assert draws[-1].strip().startswith("100%")


def test_terminal_gets_every_redraw():
    out = _drive(_Terminal())
    draws = [x for x in out.split("\r") if x.strip()]
    assert len(draws) >= 500
