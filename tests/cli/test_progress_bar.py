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
    draws = [x for x in out.splitlines() if x.strip()]  # plain lines off a terminal
    # the first draw and the finished one, not one per step
    assert 1 <= len(draws) <= 4, draws
    assert draws[-1].strip().startswith("100%")


def test_terminal_gets_every_redraw():
    out = _drive(_Terminal())
    draws = [x for x in out.split("\r") if x.strip()]
    assert len(draws) >= 500


def test_log_file_gets_plain_lines_from_several_bars():
    """Two bars on two lines (as the batch board draws them) into a log file: one plain line per draw, no
    carriage return or cursor code (ECMA-48 control sequences start with ESC)."""
    stream = io.StringIO()
    study = ProgressBar(total=10, file=stream, position=0, leave=True, mininterval=0, bar_format="study {n}/{total}")
    clip = ProgressBar(total=10, file=stream, position=1, leave=False, mininterval=0, bar_format="  clip {n}/{total}")
    for i in range(10):
        clip.n = i + 1
        clip.refresh()
        study.update(1)
    clip.close()
    study.close()
    out = stream.getvalue()
    assert "\r" not in out and "\x1b" not in out, repr(out)
    lines = out.splitlines()
    assert lines and all(ln.strip() for ln in lines), lines  # no blank lines either
    assert lines[-1] == "study 10/10" and "  clip 10/10" in lines


def test_batch_board_writes_no_cursor_codes_into_a_log(capsys):
    from types import SimpleNamespace

    from aspectus.studies.board import _Board

    board = _Board(weights={"p01": 1.0, "p02": 1.0}, n_workers=2, enabled=True, callback=None)
    for key, worker in (("p01", 0), ("p02", 1)):
        for f in (0.0, 0.5, 1.0):
            board.on_progress(SimpleNamespace(key=key, worker=worker, fraction=f, message=f"{key}: landmarking"))
        board.finished(key, "done")
    board.close()
    err = capsys.readouterr().err
    assert "\r" not in err and "\x1b" not in err, repr(err)
    assert "study: 2/2 clips, 0 failed" in err.splitlines()[-1]
