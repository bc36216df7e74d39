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


def test_process_command_imports_neither_scipy_stats_nor_scipy_signal(repo_root, tmp_path):
    """Each of the two costs some 0.7-0.9 s of CPU per process (bench/bench_cpu.py); the process command
    needs neither (its Savitzky-Golay filter and quantiles are computed without them: tests/events/test_savgol.py)."""
    clip = repo_root / "sample_clips" / "linden_brook_p02_s01.mp4"
    out = _run("import sys\n"
               "from aspectus.cli import main\n"
               f"rc = main(['process', {str(clip)!r}, '-o', {str(tmp_path)!r}, '--quiet', '--stages', 'serial'])\n"
               "print(rc, 'scipy.stats' in sys.modules, 'scipy.signal' in sys.modules)\n")
    assert out[-3:] == ["0", "False", "False"]
    assert (tmp_path / "linden_brook_p02_s01" / "run.json").is_file()


@pytest.mark.parametrize("argv", [
    ["process", "a.mp4", "b.mov", "-o", "out", "--fov-deg", "70", "--set", "min_fixation_ms=80", "--stages", "serial"],
    ["batch", "clips", "-o", "out"],
    ["export-bids", "results", "-o", "bids"],
    ["validate", "w", "r", "-o", "out"],
])
def test_a_named_subcommand_parses_alone_as_in_the_whole_parser(argv):
    from aspectus.cli import _command_module, build_parser

    only = _command_module(argv)
    assert only == argv[0].replace("-", "_")
    alone, whole = build_parser(only).parse_args(argv), build_parser().parse_args(argv)
    assert {k: v for k, v in vars(alone).items() if k != "func"} == {k: v for k, v in vars(whole).items() if k != "func"}
    assert alone.func.__module__ == whole.func.__module__
    assert _command_module(["--help"]) is None and _command_module(["nonsense"]) is None
