"""Process-wide environment fixes, applied once.

Importing ``cv2`` from the opencv-contrib wheel that mediapipe pulls in sets
``QT_QPA_PLATFORM_PLUGIN_PATH`` to OpenCV's own bundled Qt plugins. PySide6
then loads the wrong platform plugins and its windows fail to open. Every
module in camgaze imports OpenCV through :func:`import_cv2`, which imports it
once and undoes that change, and mediapipe (which imports OpenCV itself)
through :func:`import_mediapipe`, so the rest of the program never sees it.
"""
from __future__ import annotations

import os
import re

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
    native logs. Every module in camgaze imports mediapipe through here.
    """
    import_cv2()
    quiet_native_logs()
    import mediapipe  # noqa: PLC0415 - deliberate central import

    _strip_cv2_qt_path()
    return mediapipe


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


#: what the face mesh's C++ side prints routinely (absl log lines "W0000 00:00:... file.cc:12] ...", TF-Lite's
#: "INFO: Created TensorFlow Lite ..." and absl's note on its own start-up): nothing a user can act on
_NOISE_LITERALS = (b"INFO: Created TensorFlow Lite", b"INFO: Initialized TensorFlow Lite",
                   b"WARNING: All log messages before absl::InitializeLog")
_ABSL_HEADER = rb"[IW]\d{4} \d\d:\d\d:\d+\.\d+ +\d+ [\w./-]+:\d+\] "
_NATIVE_NOISE = re.compile(b"(?:" + _ABSL_HEADER + b"|" + b"|".join(re.escape(x) for x in _NOISE_LITERALS) + b")")
_ABSL_HEADER_SO_FAR = re.compile(rb"[IW](?:\d{0,4}|\d{4} [\w:. /-]*)\Z")


def _may_become_noise(tail: bytes) -> bool:
    """Whether unfinished text could still turn into a routine line (so it is held until its line ends)."""
    if _ABSL_HEADER_SO_FAR.match(tail) or _NATIVE_NOISE.match(tail):
        return True
    return any(lit.startswith(tail) for lit in _NOISE_LITERALS)


def _filtered(piece: bytes) -> bytes:
    """A finished piece of text without the routine line in it (which may follow a progress bar's text)."""
    noise = _NATIVE_NOISE.search(piece)
    return piece if noise is None else piece[:noise.start()]


def _forward_without_noise(read_fd: int, out_fd: int) -> None:
    """Copy ``read_fd`` to ``out_fd`` until end of file, dropping the lines :data:`_NATIVE_NOISE` matches.

    Text is cut into pieces ending in a newline or a carriage return (progress bars redraw with ``\\r``
    and no newline); each finished piece is passed on without its routine line. Unfinished text is passed
    on at once, except from where it could still become a routine line.
    """
    buf = b""
    while True:
        try:
            chunk = os.read(read_fd, 65536)
        except OSError:
            chunk = b""
        if not chunk:
            if buf:
                _write_all(out_fd, _filtered(buf))
            return
        buf += chunk
        out = []
        start = 0
        for m in re.finditer(rb"[\r\n]", buf):
            out.append(_filtered(buf[start:m.end()]))
            start = m.end()
        buf = buf[start:]
        if buf:
            hold = next((m.start() for m in re.finditer(rb"[IW]", buf) if _may_become_noise(buf[m.start():])),
                        len(buf))
            out.append(buf[:hold])
            buf = buf[hold:]
        data = b"".join(out)
        if data:
            _write_all(out_fd, data)


def _write_all(fd: int, data: bytes) -> None:
    while data:
        try:
            n = os.write(fd, data)
        except OSError:
            return
        data = data[n:]


@_contextlib.contextmanager
def native_log_filter():
    """For the duration, drop the face mesh's routine C++ log lines from the process's stderr.

    File descriptor 2 - where C++ libraries and child processes write - goes
    through a pipe to a thread that passes everything on to the original
    stderr except lines matching :data:`_NATIVE_NOISE` (the libraries'
    warnings and errors that do not look like their routine lines get
    through). Python's own ``sys.stderr`` (progress bars, warnings, error
    lines) writes straight to the original stderr meanwhile, so it stays in
    step with stdout. Only where ``sys.stderr`` is the process's real stderr
    on a POSIX system; elsewhere (Windows, a test's captured stream) nothing
    changes.
    """
    try:
        real = os.name == "posix" and _sys.stderr.fileno() == 2
    except (AttributeError, OSError, ValueError):
        real = False
    if not real:
        yield
        return
    import threading

    _sys.stderr.flush()
    saved = os.dup(2)
    read_fd, write_fd = os.pipe()
    os.dup2(write_fd, 2)
    os.close(write_fd)
    worker = threading.Thread(target=_forward_without_noise, args=(read_fd, saved), name="camgaze-stderr-filter",
                              daemon=True)
    worker.start()
    import io

    python_stderr = _sys.stderr
    direct = io.TextIOWrapper(io.FileIO(os.dup(saved), "w", closefd=True),
                              encoding=getattr(python_stderr, "encoding", None) or "utf-8",
                              errors="backslashreplace", line_buffering=True, write_through=True)
    _sys.stderr = direct
    try:
        yield
    finally:
        if _sys.stderr is direct:
            _sys.stderr = python_stderr
        try:
            direct.close()
        except (OSError, ValueError):
            pass
        _flush_c_streams()
        os.dup2(saved, 2)  # closes this process's write end of the pipe
        worker.join(timeout=2.0)  # a child still holding the write end would keep it open: do not wait for it
        if not worker.is_alive():
            os.close(read_fd)
            os.close(saved)


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
