"""The task a batch worker runs for one clip."""
from __future__ import annotations

import importlib
import os
import socket
import time
import traceback
from pathlib import Path
from collections.abc import Callable


from aspectus.progress import classify_failure
from aspectus.errors import AspectusInputError
from aspectus.studies.done import _clean_partials

#: the per-clip function workers call, as "module:function"
DEFAULT_CLIP_FN = "aspectus.webcam.pipeline:process_clip"





def _resolve_fn(spec: str | Callable) -> Callable:
    if callable(spec):
        return spec
    mod, _, name = spec.partition(":")
    return getattr(importlib.import_module(mod), name)


def run_clip_task(payload: dict, progress, cancel) -> dict:
    """Process one clip in a worker; never raises for a clip's own problems.

    Parameters
    ----------
    payload : dict
        ``clip``, ``out_dir`` (absolute paths as str), ``params`` (a
        ProcessParams), ``segments`` (path or None), ``clip_fn``
        ("module:function" with :func:`aspectus.webcam.pipeline.process_clip`'s
        signature), ``stages`` ("serial" or "overlapped", default serial).
    progress : callable
        ``progress(fraction, message)``.
    cancel : object with ``is_set()``
        Stop flag passed on to the per-clip function.

    Returns
    -------
    dict
        ``status`` ("done", "failed" or "pending"), ``reason``, ``kind``
        ("input", "internal" or ""), ``summary`` (dict), ``elapsed_s``,
        ``host``, and ``traceback`` for internal errors.
    """
    t0 = time.monotonic()
    import warnings

    # a worker's warnings as one line each, like the command line's (not file, line and source line)
    warnings.formatwarning = lambda message, category, *a, **k: f"aspectus: warning: {message}\n"
    # several workers on one machine would all put their background work on the same CPU
    # (aspectus._env.background_cpus): let the operating system place it
    os.environ["ASPECTUS_PIN_BACKGROUND"] = "0"
    clip = Path(payload["clip"])
    out = Path(payload["out_dir"])
    base = {"host": socket.gethostname(), "summary": {}, "kind": "", "reason": ""}
    try:
        if not clip.is_file():
            raise AspectusInputError(f"clip not found on worker {socket.gethostname()}", path=clip,
                                    hint="workers need the clips on a shared filesystem under the same path")
        _clean_partials(out)
        segments = payload.get("segments") or None  # a path: the pipeline reads it and records it in run.json
        fn = _resolve_fn(payload.get("clip_fn") or DEFAULT_CLIP_FN)
        # one clip per core: the stages run one after the other in this process (aspectus.webcam.pipeline.STAGES)
        # unless the batch asked otherwise; the per-clip function reads it from the environment, which is put
        # back afterwards (a task run in the caller's own process must not change its later clips)
        before = os.environ.get("ASPECTUS_STAGES")
        os.environ["ASPECTUS_STAGES"] = str(payload.get("stages") or "serial")
        try:
            res = fn(clip, out, params=payload["params"], segments=segments, progress=progress, cancel=cancel)
        finally:
            if before is None:
                os.environ.pop("ASPECTUS_STAGES", None)
            else:
                os.environ["ASPECTUS_STAGES"] = before
        summary = dict(getattr(res, "summary", None) or {})
        return {**base, "status": "done", "summary": summary, "elapsed_s": time.monotonic() - t0}
    except Exception as exc:  # noqa: BLE001 - reported per clip, the batch goes on
        failure = classify_failure(exc)
        elapsed = time.monotonic() - t0
        if failure.kind == "cancelled":
            return {**base, "status": "pending", "reason": failure.message, "elapsed_s": elapsed}
        # a file error on a worker is retried like a fault: the shared drive may be back next time
        kind = "input" if failure.kind == "input" else "internal"
        out_ = {**base, "status": "failed", "kind": kind, "reason": failure.message, "elapsed_s": elapsed}
        if failure.kind in ("internal", "file"):
            out_["traceback"] = "".join(traceback.format_exception(exc))
        return out_
