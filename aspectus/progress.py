"""Progress and cancellation: one Qt-free convention for the CLI, batch runs, validation and the app.

* A **progress callback** is ``progress(fraction, message)``: ``fraction`` in
  0-1 of the caller's task, ``message`` a short phrase for people
  (:data:`ProgressFn`). :func:`sub_progress` maps a step's 0-1 onto a share
  of its caller's range.
* A **cancel flag** is any object with ``is_set()`` (a
  :class:`threading.Event`, a Dask-backed flag, the app's flag)
  (:class:`CancelFlag`); long work checks it with :func:`raise_if_cancelled`,
  which raises :class:`~aspectus.errors.Cancelled`.
* :class:`WeightedProgress` combines many tasks (clips weighted by their
  length) into one overall fraction and a time-remaining estimate; the batch
  board, the app's progress panel and study validation use it.
* :func:`classify_failure` sorts an exception met on one clip into what the
  user can act on (``input``, ``file``, ``memory``) and what is a fault of
  aspectus (``internal``), or a cancellation; the CLI, the batch workers and
  the app word their messages from it.
* :class:`ProgressBar` is the terminal's bar (tqdm), quiet in log files:
  on a terminal a bar redraws in place as often as it is told to. When the
stream is not a terminal (output redirected to a log on an overnight or
cluster run) each redraw becomes a line of the log, so redraws are limited to
one every ``LOG_INTERVAL_S`` seconds, the first and the last excepted.
"""
from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field
from typing import Protocol
from collections.abc import Callable

from tqdm import tqdm

from aspectus.errors import AspectusInputError, Cancelled

__all__ = ["ProgressFn", "CancelFlag", "ProgressEvent", "WeightedProgress", "Failure", "classify_failure",
           "raise_if_cancelled", "sub_progress", "ProgressBar"]

#: ``progress(fraction, message)``
ProgressFn = Callable[[float, str], None]


class CancelFlag(Protocol):
    """Anything with ``is_set()`` that turns true when the user asks to stop."""

    def is_set(self) -> bool: ...


def raise_if_cancelled(cancel: CancelFlag | None) -> None:
    """Raise :class:`~aspectus.errors.Cancelled` when ``cancel`` is set (None never cancels)."""
    if cancel is not None and cancel.is_set():
        raise Cancelled("stopped by the user")


def sub_progress(progress: ProgressFn | None, lo: float, hi: float) -> ProgressFn:
    """A callback for a step that fills ``lo``..``hi`` of its caller's progress (a no-op for None)."""
    if progress is None:
        return lambda f, m: None
    span = hi - lo
    return lambda f, m: progress(lo + span * min(1.0, max(0.0, float(f))), m)


@dataclass
class ProgressEvent:
    """One progress report of a running task (a clip on a batch worker).

    Attributes
    ----------
    key : str
        The task's key.
    worker : str
        Which worker runs it.
    fraction : float
        Share of the task done, 0-1.
    message : str
        What it is doing.
    """

    key: str
    worker: str
    fraction: float
    message: str


@dataclass
class WeightedProgress:
    """Overall progress of several tasks, each weighted (e.g. by its clip's length).

    A finished task counts whole whatever its outcome (done, failed,
    cancelled); a running one by its last reported fraction.

    Examples
    --------
    >>> w = WeightedProgress(keys=["a", "b"], weights={"a": 3.0, "b": 1.0})
    >>> w.update("a", 0.5)
    >>> w.overall()
    0.375
    >>> w.finish("b", "failed")
    >>> w.overall()
    0.625
    """

    keys: list[str]
    weights: dict[str, float]
    fraction: dict[str, float] = field(default_factory=dict)
    outcome: dict[str, str] = field(default_factory=dict)  # key -> done / failed / cancelled / skipped
    started_at: float = field(default_factory=time.monotonic)

    def update(self, key: str, fraction: float) -> None:
        """Record a task's progress (0-1); progress never goes back."""
        f = min(1.0, max(0.0, float(fraction)))
        self.fraction[key] = max(self.fraction.get(key, 0.0), f)

    def finish(self, key: str, outcome: str) -> None:
        """Record that a task ended (``"done"``, ``"failed"``, ``"cancelled"``, ``"skipped"``)."""
        self.outcome[key] = outcome

    def overall(self) -> float:
        """Share of all the work done, 0-1."""
        total = sum(self.weights.get(k, 0.0) for k in self.keys) or 1.0
        got = sum(self.weights.get(k, 0.0) * (1.0 if k in self.outcome else self.fraction.get(k, 0.0))
                  for k in self.keys)
        return min(1.0, got / total)

    def remaining_s(self) -> float | None:
        """Estimated seconds left, from the elapsed time and the work done (None until enough is known)."""
        done = self.overall()
        elapsed = time.monotonic() - self.started_at
        if done < 0.02 or elapsed < 1.0:
            return None
        return elapsed * (1.0 - done) / done


@dataclass(frozen=True)
class Failure:
    """What went wrong with one task, sorted for the user.

    ``kind`` is ``"cancelled"``, ``"input"`` (the clip or a file given is
    bad: fix it, running again fails the same way), ``"file"`` (a file could
    not be read or written: space, permissions), ``"memory"`` or
    ``"internal"`` (a fault of aspectus: report it). ``message`` is one line.
    """

    kind: str
    message: str

    @property
    def is_fault(self) -> bool:
        """True when the failure is aspectus's own (to be reported with its traceback)."""
        return self.kind == "internal"


def classify_failure(exc: BaseException) -> Failure:
    """Sort an exception met on one task (see :class:`Failure`)."""
    if isinstance(exc, (Cancelled, KeyboardInterrupt)):
        return Failure("cancelled", "stopped before it finished")
    if isinstance(exc, AspectusInputError):
        return Failure("input", str(exc))
    if isinstance(exc, MemoryError):
        return Failure("memory", "out of memory while processing")
    if isinstance(exc, OSError):
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        return Failure("file", f"file error ({where}{exc.strerror or exc})")
    return Failure("internal", f"internal error: {type(exc).__name__}: {exc}")

LOG_INTERVAL_S = 30.0


def _is_terminal(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


class ProgressBar(tqdm):
    """A tqdm bar; off a terminal (a log file, a pipe) it writes plain lines - one per draw, no carriage
    returns or cursor codes, so several bars (``position``) never garble a log - and its explicit
    ``refresh()`` calls are rate-limited."""

    def __init__(self, *args, **kwargs):
        stream = kwargs.get("file") or sys.stderr
        self._to_terminal = _is_terminal(stream)
        self._last_draw = -float("inf")
        self._last_line = None
        super().__init__(*args, **kwargs)

    def display(self, msg=None, pos=None):
        if self._to_terminal:
            return super().display(msg, pos)
        line = (self.__str__() if msg is None else str(msg)).rstrip()
        if line.strip() and line != self._last_line:  # an empty message is tqdm clearing its line: nothing to clear
            self._last_line = line
            self.fp.write(line + "\n")
            self.fp.flush()
        return None

    def moveto(self, n):
        if self._to_terminal:
            super().moveto(n)

    def clear(self, nolock=False):
        if self._to_terminal:
            super().clear(nolock=nolock)

    def close(self):
        if not self._to_terminal and not self.disable and self.leave:
            self.leave = False  # tqdm would add a blank line after the last one; draw the final state instead
            self.display()
        super().close()

    def refresh(self, *args, **kwargs):
        if not self._to_terminal:
            now = time.monotonic()
            finished = self.total is not None and self.n >= self.total
            if not finished and now - self._last_draw < LOG_INTERVAL_S:
                return None
            self._last_draw = now
        return super().refresh(*args, **kwargs)
