"""Process-wide environment fixes, applied once.

Importing ``cv2`` from the opencv-contrib wheel that mediapipe pulls in sets
``QT_QPA_PLATFORM_PLUGIN_PATH`` to OpenCV's own bundled Qt plugins. PySide6
then loads the wrong platform plugins and its windows fail to open. Every
module in camgaze imports OpenCV through :func:`import_cv2`, which imports it
once and undoes that change, so the rest of the program never sees it.
"""
from __future__ import annotations

import os

_cv2 = None


def _strip_cv2_qt_path() -> None:
    path = os.environ.get("QT_QPA_PLATFORM_PLUGIN_PATH")
    if path and "cv2" in path.replace("\\", "/").split("/"):
        del os.environ["QT_QPA_PLATFORM_PLUGIN_PATH"]


def import_cv2():
    """Return the ``cv2`` module with OpenCV's Qt plugin path undone."""
    global _cv2
    if _cv2 is None:
        import cv2  # noqa: PLC0415 - deliberate central import

        _strip_cv2_qt_path()
        _cv2 = cv2
    return _cv2


def quiet_native_logs() -> None:
    """Silence the C++ logging of mediapipe/TF-Lite (it writes to stderr)."""
    os.environ.setdefault("GLOG_minloglevel", "2")
    os.environ.setdefault("TF_CPP_MIN_LOG_LEVEL", "3")


import contextlib as _contextlib
import sys as _sys


def _flush_c_streams() -> None:
    try:
        import ctypes

        ctypes.CDLL(None).fflush(None)
    except (OSError, AttributeError, TypeError):
        pass


@_contextlib.contextmanager
def native_stderr_silenced():
    """Send file descriptor 2 to /dev/null for the duration (C++ libraries' start-up chatter).

    MediaPipe and TF-Lite print INFO/WARNING lines straight to the process's
    stderr when a graph starts; they mean nothing to a user. Python-level
    ``sys.stderr`` writes in the block are flushed first and are not lost
    after it.
    """
    try:
        _sys.stderr.flush()
        saved = os.dup(2)
    except (OSError, ValueError, AttributeError):
        yield
        return
    devnull = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(devnull, 2)
        yield
    finally:
        _flush_c_streams()  # C++ libraries buffer some lines in stdio; let them go to /dev/null
        os.dup2(saved, 2)
        os.close(saved)
        os.close(devnull)
