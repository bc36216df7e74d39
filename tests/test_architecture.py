"""The library stays Qt-free; OpenCV is imported in one place only."""
import ast
import subprocess
import sys
from pathlib import Path

LIB = Path(__file__).resolve().parents[1] / "aspectus"


def _imports(path: Path):
    tree = ast.parse(path.read_text(), filename=str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                yield a.name, node.lineno
        elif isinstance(node, ast.ImportFrom) and node.module:
            yield node.module, node.lineno


def test_library_never_imports_qt():
    # the one exception: `aspectus gui` starts the app, importing ui/ inside its handler
    bad = [f"{p.relative_to(LIB.parent)}:{ln} imports {m}" for p in LIB.rglob("*.py")
           for m, ln in _imports(p) if m.split(".")[0] in ("PySide6", "PyQt5", "PyQt6", "shiboken6")
           or (m.split(".")[0] == "ui" and p.name != "gui_cmd.py")]
    assert not bad, "aspectus/ must stay Qt-free:\n" + "\n".join(bad)


def test_opencv_only_through_the_central_import():
    bad = [f"{p.relative_to(LIB.parent)}:{ln}" for p in LIB.rglob("*.py") if p.name != "_env.py"
           for m, ln in _imports(p) if m.split(".")[0] == "cv2"]
    assert not bad, "import OpenCV via aspectus._env.import_cv2():\n" + "\n".join(bad)


def test_mediapipe_only_through_the_central_import():
    bad = [f"{p.relative_to(LIB.parent)}:{ln}" for p in LIB.rglob("*.py") if p.name != "_env.py"
           for m, ln in _imports(p) if m.split(".")[0] == "mediapipe"]
    assert not bad, "import mediapipe via aspectus._env.import_mediapipe() (it imports OpenCV):\n" + "\n".join(bad)


def test_building_a_face_tracker_keeps_qt_plugin_path_clean():
    """mediapipe imports OpenCV itself: the tracker must not let that set the Qt plugin path (a fresh
    interpreter, so nothing else has imported OpenCV first)."""
    code = ("import os; from aspectus.webcam.landmarks import FaceTracker; FaceTracker(max_faces=2).close();"
            "print('cv2' in os.environ.get('QT_QPA_PLATFORM_PLUGIN_PATH', ''))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split()[-1] == "False"


def test_importing_the_pipeline_loads_no_qt_and_keeps_qt_plugin_path_clean():
    code = ("import os, sys; import aspectus.webcam.pipeline, aspectus.events.analysis, aspectus.validation.pair, aspectus.studies.batch;"
            "from aspectus._env import import_cv2; import_cv2();"
            "print(any(m.startswith(('PySide6', 'PyQt')) for m in sys.modules),"
            " 'cv2' in os.environ.get('QT_QPA_PLATFORM_PLUGIN_PATH', ''))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    assert r.stdout.split() == ["False", "False"]
