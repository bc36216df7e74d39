"""The worker side of a processing run (Qt-free, runs in a child process or a thread).

:func:`run_jobs` processes clips one after the other with
:func:`aspectus.webcam.pipeline.process_clip` - the same function the command line
calls - and reports through a queue as plain tuples (pickle-safe):

``("start", key)``, ``("progress", key, fraction, message)``,
``("done", key, summary)``, ``("failed", key, message)``,
``("cancelled", key)``, and finally ``("end",)``.

A failed clip does not stop the run; a set cancel flag stops it after the
current clip's pipeline raises :class:`aspectus.errors.Cancelled`. Clips that
finished before keep their outputs (the pipeline writes ``run.json`` last).
"""
from __future__ import annotations

import os
import time
import traceback
from dataclasses import dataclass
from pathlib import Path


@dataclass
class Job:
    """One clip to process.

    Attributes
    ----------
    key : str
        The clip's name in the study (its file stem).
    clip_path : str
    out_dir : str
        The clip's result folder.
    process : dict
        Processing parameters (ProcessParams fields except ``analysis``).
    analysis : dict
        AnalysisParams as a dict (empty = defaults).
    segments : str or None
        Task-segment table for this clip.
    log_path : str or None
        Where to write the technical details of an unexpected failure.
    """

    key: str
    clip_path: str
    out_dir: str
    process: dict
    analysis: dict
    segments: str | None = None
    log_path: str | None = None


def explain_error(exc: BaseException, *, clip_name: str) -> str:
    """A sentence a researcher can act on, for an exception met processing ``clip_name``."""
    from aspectus.errors import NoFaceError, VideoError
    from aspectus.progress import classify_failure

    failure = classify_failure(exc)
    if isinstance(exc, VideoError):
        return f"The video could not be read. {exc}"
    if isinstance(exc, NoFaceError):
        return (f"No face was found in the video, so there is no gaze to measure. {exc}")
    if failure.kind == "input":
        return f"An input file has a problem. {exc}"
    if failure.kind == "memory":
        return f"The computer ran out of memory while processing {clip_name}; close other programs and try again."
    if failure.kind == "file":
        return f"A file could not be read or written ({exc.strerror or exc}). Check free disk space and permissions."
    return (f"Processing {clip_name} stopped because of an unexpected problem ({type(exc).__name__}: {exc}). "
            "The other clips are not affected; the technical details are in the log file.")


def failure_parts(message: str, *, clip_name: str | None = None) -> tuple[str, str, str]:
    """A stored failure message (:func:`explain_error`'s sentence, then the error's ``FILE: problem - hint``)
    as three plain parts for the clip view: ``(headline, why, what to do)``; the file name is dropped from
    ``why`` when it is the clip's own (the view names the clip already)."""
    text = " ".join(str(message or "").split())
    head, sep, rest = text.partition(". ")
    if not sep:
        head, rest = text, ""
    head = head.rstrip(".") + "."
    if clip_name:
        before, colon, after = rest.partition(": ")
        if colon and before.endswith(clip_name):
            rest = after
    why, dash, todo = rest.partition(" - ")
    if not dash:  # no error of aspectus's own form: the sentence is the reason, the rest is advice
        why, todo = head, rest
    why = why.strip() or head
    todo = todo.strip() or "check the clip file, then process it again"
    return head, why[0].upper() + why[1:].rstrip(".") + ".", todo[0].upper() + todo[1:].rstrip(".") + "."


def _make_params(process: dict, analysis: dict):
    from aspectus.events.analysis import AnalysisParams
    from aspectus.webcam.pipeline import ProcessParams

    d = {k: v for k, v in (process or {}).items() if k in ProcessParams.__dataclass_fields__ and k != "analysis"}
    params = ProcessParams.from_dict(d)
    params.analysis = AnalysisParams.from_dict(analysis) if analysis else AnalysisParams()
    return params


def _segments(path):
    if not path:
        return None
    from aspectus.events.analysis import read_segments

    return read_segments(path)


def run_jobs(jobs: list[Job], out_queue, cancel, *, lower_priority: bool = True,
             progress_interval_s: float = 0.1) -> None:
    """Process ``jobs`` in order, reporting to ``out_queue`` (any object with ``put``).

    Parameters
    ----------
    jobs : list of Job
    out_queue : queue-like
        Receives the message tuples described in the module docstring.
    cancel : Event-like
        ``is_set()`` is checked by the pipeline; once set, the current clip
        stops and the rest are reported cancelled.
    lower_priority : bool
        Lower this process's scheduling priority (child processes only) so
        the desktop stays responsive.
    progress_interval_s : float
        Progress messages are sent at most this often (s) per clip.
    """
    from aspectus._env import quiet_native_logs

    quiet_native_logs()
    if lower_priority:
        try:
            os.nice(5)
        except (AttributeError, OSError):  # Windows, or not allowed
            pass
    try:
        from aspectus.errors import Cancelled
        from aspectus.webcam.pipeline import process_clip
    except Exception as exc:  # noqa: BLE001 - reported, not raised
        for job in jobs:
            out_queue.put(("failed", job.key, f"aspectus could not start its processing ({type(exc).__name__}: {exc})."))
        out_queue.put(("end",))
        return
    for i, job in enumerate(jobs):
        if cancel.is_set():
            for rest in jobs[i:]:
                out_queue.put(("cancelled", rest.key))
            break
        out_queue.put(("start", job.key))
        last = [0.0]

        def progress(frac, message="", _key=job.key, _last=last):
            now = time.monotonic()
            if now - _last[0] >= progress_interval_s or frac >= 1.0:
                _last[0] = now
                out_queue.put(("progress", _key, float(frac), str(message)))

        try:
            params = _make_params(job.process, job.analysis)
            segs = _segments(job.segments)
            result = process_clip(job.clip_path, job.out_dir, params=params, segments=segs, progress=progress,
                                  cancel=cancel)
            out_queue.put(("done", job.key, _plain(dict(result.summary))))
        except Cancelled:
            for rest in jobs[i:]:
                out_queue.put(("cancelled", rest.key))
            break
        except BaseException as exc:  # noqa: BLE001 - one clip's failure must not stop the study
            if isinstance(exc, (KeyboardInterrupt, SystemExit)):
                raise
            _log(job, exc)
            out_queue.put(("failed", job.key, explain_error(exc, clip_name=Path(job.clip_path).name)))
    out_queue.put(("end",))


def _plain(d: dict) -> dict:
    """Summary with numpy scalars turned into Python ones (safe to pickle and to write as JSON)."""
    out = {}
    for k, v in d.items():
        if hasattr(v, "item") and callable(v.item):
            try:
                v = v.item()
            except (TypeError, ValueError):
                v = str(v)
        out[k] = v
    return out


def _log(job: Job, exc: BaseException) -> None:
    if not job.log_path:
        return
    try:
        p = Path(job.log_path)
        p.parent.mkdir(parents=True, exist_ok=True)
        with open(p, "a", encoding="utf-8") as fh:
            fh.write(f"--- {time.strftime('%Y-%m-%d %H:%M:%S')} {job.clip_path}\n")
            fh.write("".join(traceback.format_exception(type(exc), exc, exc.__traceback__)))
    except OSError:
        pass
