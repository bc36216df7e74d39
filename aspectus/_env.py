"""Process-wide environment fixes, applied once.

Importing ``cv2`` from the opencv-contrib wheel that mediapipe pulls in sets
``QT_QPA_PLATFORM_PLUGIN_PATH`` to OpenCV's own bundled Qt plugins. PySide6
then loads the wrong platform plugins and its windows fail to open. Every
module in aspectus imports OpenCV through :func:`import_cv2`, which imports it
once and undoes that change, and mediapipe (which imports OpenCV itself)
through :func:`import_mediapipe`, so the rest of the program never sees it.
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


def import_mediapipe():
    """Return the ``mediapipe`` module, imported after :func:`import_cv2`.

    mediapipe imports OpenCV itself; imported first, that import would set
    the Qt plugin path behind :func:`import_cv2`'s back. Also quiets the
    native logs. Every module in aspectus imports mediapipe through here.
    """
    import_cv2()
    quiet_native_logs()
    import sys

    if "mediapipe" not in sys.modules:
        with _plotting_left_out():
            import mediapipe  # noqa: PLC0415 - deliberate central import
    import mediapipe  # noqa: PLC0415 - deliberate central import

    _strip_cv2_qt_path()
    return mediapipe


def import_mediapipe_part(name: str):
    """A submodule of mediapipe (``"mediapipe.python.packet_creator"``), imported after :func:`import_mediapipe`."""
    import importlib

    if name != "mediapipe" and not name.startswith("mediapipe."):
        raise ValueError(f"not a part of mediapipe: {name!r}")
    import_mediapipe()
    return importlib.import_module(name)


class _NoPlotting(__import__("types").ModuleType):
    """Stands in for matplotlib while mediapipe is imported (see :func:`_plotting_left_out`)."""

    __path__: list = []

    def __getattr__(self, name):
        if name.startswith("__"):
            raise AttributeError(name)
        raise ImportError(f"matplotlib was left out of mediapipe's import by aspectus ({self.__name__}.{name}); "
                          "mediapipe's plotting helpers are not available")


@__import__("contextlib").contextmanager
def _plotting_left_out():
    """Import mediapipe without its plotting helpers' matplotlib.

    ``import mediapipe`` imports matplotlib.pyplot (for a landmark-plotting
    helper aspectus never calls): some 0.4 s of CPU in every process that
    starts a face mesh - each clip's command, each batch worker (measured
    with bench/bench_cpu.py: 650-780 ms against 270 ms for the import). While it runs,
    matplotlib and matplotlib.pyplot are placeholders; afterwards they are
    removed again, so a later ``import matplotlib`` (the report, the app)
    gets the real one. Where matplotlib is already imported nothing changes.
    """
    import sys

    names = ("matplotlib", "matplotlib.pyplot")
    if any(n in sys.modules for n in names):
        yield
        return
    placed = {n: _NoPlotting(n) for n in names}
    placed["matplotlib"].pyplot = placed["matplotlib.pyplot"]  # what ``import matplotlib.pyplot as plt`` binds
    sys.modules.update(placed)
    try:
        yield
    finally:
        for n, m in placed.items():
            if sys.modules.get(n) is m:
                del sys.modules[n]


def quiet_native_logs() -> None:
    """Silence the C++ logging of mediapipe/TF-Lite (it writes to stderr)."""
    os.environ.setdefault("GLOG_minloglevel", "2")
    os.environ.setdefault("TF_CPP_MIN_LOG_LEVEL", "3")


import contextlib as _contextlib  # noqa: E402 - after the environment is set
import sys as _sys  # noqa: E402 - after the environment is set


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


def lower_process_priority(pid: int, by: int) -> bool:
    """Lower another process's scheduling priority by ``by`` nice steps, relative to this thread's own.

    Used for helper processes whose work may lag behind and catch up (the
    per-frame geometry): under load the face mesh, which sets the pipeline's
    pace, then gets the core first. Returns False where the platform has no
    nice values (Windows) or the change is refused; nothing else changes.
    """
    if not hasattr(os, "setpriority") or by <= 0:
        return False
    try:
        os.setpriority(os.PRIO_PROCESS, int(pid), min(19, os.getpriority(os.PRIO_PROCESS, 0) + int(by)))
        return True
    except OSError:
        return False


def background_cpus() -> set[int] | None:
    """The CPU for the pipeline's background work (decoder thread, geometry process), or None.

    With two or more CPUs allowed, the last of them: the face mesh's own
    threads stay free to use every CPU, and the background never takes the
    one the mesh runs on from it (measured with bench/bench_pipeline.py's
    clip: pipeline / mesh alone 89.5 % against 86.8 % unpinned, median of 6
    paired rounds, 5 won; DEVELOPERS.md). None - placement left to the
    operating system - on one CPU, where the platform cannot pin, and where
    ``ASPECTUS_PIN_BACKGROUND=0`` (set in batch workers, several of which
    would otherwise share one background CPU).
    """
    if os.environ.get("ASPECTUS_PIN_BACKGROUND", "1") == "0" or not hasattr(os, "sched_getaffinity"):
        return None
    try:
        cpus = sorted(os.sched_getaffinity(0))
    except OSError:
        return None
    return {cpus[-1]} if len(cpus) >= 2 else None


def pin_to_cpus(cpus: set[int] | None, pid: int = 0) -> bool:
    """Restrict a process (``pid``), or with ``pid=0`` the calling thread (Linux), to ``cpus``.

    Returns False where nothing was done (no CPUs given, no platform support, the change refused).
    """
    if not cpus or not hasattr(os, "sched_setaffinity"):
        return False
    try:
        os.sched_setaffinity(int(pid), set(cpus))
        return True
    except OSError:
        return False


def lower_this_thread_priority(by: int) -> bool:
    """Lower the calling thread's scheduling priority by ``by`` nice steps (Linux only).

    Linux keeps a nice value per thread, so a background thread (the frame
    decoder) can yield to the face mesh's threads without slowing them;
    elsewhere the value belongs to the whole process and nothing is done
    (returns False).
    """
    if not _sys.platform.startswith("linux") or by <= 0:
        return False
    import threading

    try:
        tid = threading.get_native_id()
        os.setpriority(os.PRIO_PROCESS, tid, min(19, os.getpriority(os.PRIO_PROCESS, tid) + int(by)))
        return True
    except (OSError, AttributeError):
        return False
