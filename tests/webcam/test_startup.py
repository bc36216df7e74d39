"""Start-up of a process that runs the face mesh: mediapipe is imported without matplotlib.

``import mediapipe`` pulls in matplotlib.pyplot for a plotting helper aspectus never calls
(some 0.4 s of CPU per process; bench/bench_cpu.py). The import leaves it out and must
still give a working face mesh, and must not stop a later real import of matplotlib.
"""
from __future__ import annotations

import subprocess
import sys

import pytest

pytestmark = pytest.mark.slow


def _run(code: str) -> list[str]:
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    return r.stdout.split()


def test_face_mesh_starts_without_importing_matplotlib_and_matplotlib_still_imports_afterwards():
    out = _run("import sys\n"
               "from aspectus.webcam.landmarks import FaceTracker\n"
               "import numpy as np\n"
               "t = FaceTracker(max_faces=2)\n"
               "print(t.process(np.zeros((120, 160, 3), np.uint8)) is None)\n"
               "t.close()\n"
               "print('matplotlib' in sys.modules)\n"
               "import matplotlib\n"
               "matplotlib.use('Agg')\n"
               "import matplotlib.pyplot as plt\n"
               "fig = plt.figure(); print(type(fig).__name__)\n")
    assert out[-3:] == ["True", "False", "Figure"]


def test_matplotlib_imported_first_is_left_alone():
    out = _run("import matplotlib; matplotlib.use('Agg'); import matplotlib.pyplot as plt\n"
               "from aspectus._env import import_mediapipe\n"
               "mp = import_mediapipe()\n"
               "from mediapipe.python.solutions import drawing_utils\n"
               "print(drawing_utils.plt is plt)\n")
    assert out[-1] == "True"
