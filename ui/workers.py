"""Background work for the app: processing runs and quick re-analyses.

:class:`ProcessingRun` runs :func:`ui.job_runner.run_jobs` in a separate
process (``multiprocessing`` with ``spawn``) by default. The face mesh and the
pipeline's numpy/pandas work hold Python's global interpreter lock for long
stretches, so a thread in the app's own process would make the window stutter;
a child process cannot. Messages come back through a queue that a
:class:`~PySide6.QtCore.QTimer` drains every 40 ms on the GUI thread. Cancel
sets a shared event; the pipeline stops at its next check and clips finished
earlier keep their results. ``mode="thread"`` runs the same code in a thread
(for comparison and for debugging).

:class:`Reanalyser` re-runs event detection and features from a clip's cached
samples (:func:`aspectus.webcam.pipeline.reanalyse`) in a worker thread; it is quick,
so a thread is enough, and the newest request for a clip supersedes older ones.
"""
from __future__ import annotations

import multiprocessing as mp
import queue as queue_mod
import threading
import time
from concurrent.futures import ThreadPoolExecutor

from aspectus.progress import WeightedProgress
from PySide6.QtCore import QObject, QTimer, Signal

from .job_runner import Job, explain_error, run_jobs


#: progress of a processing run, per clip and overall (the library's one convention)
RunState = WeightedProgress


class ProcessingRun(QObject):
    """A run over some clips of a study, off the GUI thread.

    Signals
    -------
    clip_started(key), clip_progress(key, fraction, message),
    clip_done(key, summary), clip_failed(key, message), clip_cancelled(key),
    overall(fraction, remaining_s; -1 = unknown), finished(outcomes dict).
    """

    clip_started = Signal(str)
    clip_progress = Signal(str, float, str)
    clip_done = Signal(str, dict)
    clip_failed = Signal(str, str)
    clip_cancelled = Signal(str)
    overall = Signal(float, float)
    finished = Signal(dict)

    def __init__(self, jobs: list[Job], *, weights: dict[str, float] | None = None, mode: str = "process",
                 poll_ms: int = 40, parent=None):
        super().__init__(parent)
        if mode not in ("process", "thread"):
            raise ValueError(f"mode must be 'process' or 'thread', not {mode!r}")
        self.jobs = list(jobs)
        self.mode = mode
        keys = [j.key for j in self.jobs]
        self.state = RunState(keys=keys, weights={k: float((weights or {}).get(k, 1.0)) for k in keys})
        self._timer = QTimer(self)
        self._timer.setInterval(poll_ms)
        self._timer.timeout.connect(self._poll)
        self._proc = None
        self._thread = None
        self._queue = None
        self._cancel = None
        self._ended = False
        self._starter = None
        self._start_error = None
        self.cancel_requested = False

    # ------------------------------------------------------------ control
    def start(self) -> None:
        if self.mode == "process":
            ctx = mp.get_context("spawn")
            self._queue = ctx.Queue()
            self._cancel = ctx.Event()
            self._proc = ctx.Process(target=run_jobs, args=(self.jobs, self._queue, self._cancel),
                                     name="aspectus-processing", daemon=True)
            # starting a process forks this (large) one: done off the GUI thread
            self._starter = threading.Thread(target=self._start_proc, name="aspectus-start", daemon=True)
            self._starter.start()
        else:
            self._queue = queue_mod.Queue()
            self._cancel = threading.Event()
            self._thread = threading.Thread(target=run_jobs, args=(self.jobs, self._queue, self._cancel),
                                            kwargs={"lower_priority": False}, name="aspectus-processing",
                                            daemon=True)
            self._thread.start()
        self.state.started_at = time.monotonic()
        self._timer.start()

    def _start_proc(self) -> None:
        try:
            self._proc.start()
        except Exception as exc:  # noqa: BLE001 - reported as failed clips
            self._start_error = f"The processing could not be started ({type(exc).__name__}: {exc})."

    def cancel(self) -> None:
        """Ask the run to stop; clips already finished keep their results."""
        self.cancel_requested = True
        if self._cancel is not None:
            self._cancel.set()

    def is_running(self) -> bool:
        return self._timer.isActive()

    def wait(self, timeout_s: float = 30.0) -> None:
        """Block until the worker has ended (for scripts and shutdown, not for the GUI thread)."""
        if self._starter is not None:
            self._starter.join(timeout_s)
        if self._proc is not None and self._proc.pid is not None:
            self._proc.join(timeout_s)
        if self._thread is not None:
            self._thread.join(timeout_s)
        self._poll()

    def shutdown(self, timeout_s: float = 10.0) -> None:
        """Cancel and wait for the worker; terminate a child process that does not stop."""
        self.cancel()
        self.wait(timeout_s)
        if self._proc is not None and self._proc.pid is not None and self._proc.is_alive():
            self._proc.terminate()
            self._proc.join(5)
        self._finish()

    # ------------------------------------------------------------ messages
    def _poll(self) -> None:
        if self._queue is None:
            return
        deadline = time.monotonic() + 0.02  # never spend more than ~20 ms here
        changed = False
        while time.monotonic() < deadline:
            try:
                msg = self._queue.get_nowait()
            except queue_mod.Empty:
                break
            except (EOFError, OSError):
                break
            changed = True
            self._handle(msg)
            if self._ended:
                break
        if changed:
            rem = self.state.remaining_s()
            self.overall.emit(self.state.overall(), -1.0 if rem is None else rem)
        if not self._ended and self._worker_dead():
            # drain what is left, then declare the rest failed
            try:
                while True:
                    self._handle(self._queue.get_nowait())
            except (queue_mod.Empty, EOFError, OSError):
                pass
            if not self._ended:
                code = self._proc.exitcode if self._proc is not None and self._proc.pid is not None else None
                for k in self.state.keys:
                    if k not in self.state.outcome:
                        msg = self._start_error or (
                            "The processing stopped unexpectedly"
                            + (f" (worker exit code {code})" if code is not None else "")
                            + "; this clip was not finished. Try processing it again.")
                        self.state.outcome[k] = "failed"
                        self.clip_failed.emit(k, msg)
                self._finish()

    def _worker_dead(self) -> bool:
        if self._proc is not None:
            if self._starter is not None and self._starter.is_alive():
                return False
            if self._proc.pid is None:
                return True  # it never started
            return not self._proc.is_alive()
        if self._thread is not None:
            return not self._thread.is_alive()
        return False

    def _handle(self, msg) -> None:
        kind = msg[0]
        if kind == "start":
            self.state.fraction[msg[1]] = 0.0
            self.clip_started.emit(msg[1])
        elif kind == "progress":
            self.state.fraction[msg[1]] = msg[2]
            self.clip_progress.emit(msg[1], msg[2], msg[3])
        elif kind == "done":
            self.state.outcome[msg[1]] = "done"
            self.clip_done.emit(msg[1], msg[2])
        elif kind == "failed":
            self.state.outcome[msg[1]] = "failed"
            self.clip_failed.emit(msg[1], msg[2])
        elif kind == "cancelled":
            self.state.outcome[msg[1]] = "cancelled"
            self.clip_cancelled.emit(msg[1])
        elif kind == "end":
            self._finish()

    def _finish(self) -> None:
        if self._ended:
            return
        self._ended = True
        self._timer.stop()
        if self._proc is not None and self._proc.pid is not None:
            self._proc.join(0)  # reap it if it has exited; never wait on the GUI thread
        self.finished.emit(dict(self.state.outcome))


class Reanalyser(QObject):
    """Re-runs detection and features from cached samples in a worker thread.

    Signals
    -------
    done(key, result, generation) : the :class:`aspectus.events.analysis.AnalysisResult`
    failed(key, message, generation)
    """

    done = Signal(str, object, int)
    failed = Signal(str, str, int)

    def __init__(self, parent=None):
        super().__init__(parent)
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="aspectus-reanalyse")
        self._latest: dict[str, int] = {}
        self._gen = 0
        self._lock = threading.Lock()

    def request(self, key: str, out_dir: str, analysis: dict, segments: str | None = None) -> int:
        """Queue a re-analysis of one clip; returns its generation number."""
        with self._lock:
            self._gen += 1
            gen = self._gen
            self._latest[key] = gen
        self._pool.submit(self._work, key, out_dir, dict(analysis), segments, gen)
        return gen

    def latest(self, key: str) -> int | None:
        return self._latest.get(key)

    def _work(self, key, out_dir, analysis, segments, gen):
        with self._lock:
            if self._latest.get(key) != gen:
                return  # superseded before it started
        try:
            from aspectus.events.analysis import AnalysisParams, read_segments
            from aspectus.webcam.pipeline import reanalyse

            params = AnalysisParams.from_dict(analysis) if analysis else AnalysisParams()
            segs = read_segments(segments) if segments else None
            result = reanalyse(out_dir, params, segments=segs)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            self.failed.emit(key, explain_error(exc, clip_name=key), gen)
            return
        self.done.emit(key, result, gen)

    def shutdown(self) -> None:
        self._pool.shutdown(wait=True, cancel_futures=True)
