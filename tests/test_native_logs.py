"""The filter that keeps the face mesh's routine C++ log lines off the user's terminal, and nothing else."""
from __future__ import annotations

import os
import subprocess
import sys
import threading

from camgaze._env import _forward_without_noise

ROUTINE = (b"W0000 00:00:1796227271.660194    9167 inference_feedback_manager.cc:114] Feedback manager "
           b"requires a model with a single signature inference. Disabling support for feedback tensors.\n")


def _through_filter(chunks) -> bytes:
    r, w = os.pipe()
    r2, w2 = os.pipe()
    t = threading.Thread(target=_forward_without_noise, args=(r, w2))
    t.start()
    for c in chunks:
        os.write(w, c)
    os.close(w)
    t.join(timeout=10)
    os.close(w2)
    out = b""
    while True:
        b = os.read(r2, 65536)
        if not b:
            break
        out += b
    os.close(r)
    os.close(r2)
    return out


def test_routine_lines_dropped_everything_else_kept_in_order():
    out = _through_filter([
        b"\rp01_s01.mp4:   0%| [00:00<?]", ROUTINE[:23], ROUTINE[23:],  # split across writes, after a bar's text
        b"\rp01_s01.mp4:  50%|#####     |",
        b"INFO: Created TensorFlow Lite XNNPACK delegate for CPU.\n",
        b"WARNING: All log messages before absl::InitializeLog() is called are written to STDERR\n",
        b"camgaze: error: p02_s01.mp4: not a readable video file\n",
        b"E0000 00:00:1796227271.7 1 calculator_graph.cc:12] a real failure stays visible\n",
        b"IMG_0042.mp4:   3%|",  # starts like a log line's letter, but is not one
    ])
    assert out == (b"\rp01_s01.mp4:   0%| [00:00<?]\rp01_s01.mp4:  50%|#####     |"
                   b"camgaze: error: p02_s01.mp4: not a readable video file\n"
                   b"E0000 00:00:1796227271.7 1 calculator_graph.cc:12] a real failure stays visible\n"
                   b"IMG_0042.mp4:   3%|")


def test_filter_on_the_real_stderr_of_a_process():
    """In a child process: the C side's lines on file descriptor 2, Python's own stderr and a child of the
    child all pass through the filter; only the routine line is gone, and fd 2 is restored afterwards."""
    code = (
        "import os, subprocess, sys\n"
        "from camgaze._env import native_log_filter\n"
        "with native_log_filter():\n"
        f"    os.write(2, {ROUTINE!r})\n"
        "    print('python says hello', file=sys.stderr, flush=True)\n"
        "    subprocess.run([sys.executable, '-c', 'import sys; sys.stderr.write(\"from the child\\\\n\")'])\n"
        "os.write(2, b'after the filter\\n')\n"
    )
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, timeout=60)
    assert r.returncode == 0, r.stderr
    assert r.stderr.splitlines() == [b"python says hello", b"from the child", b"after the filter"]
