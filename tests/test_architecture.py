"""The library's rooms: Qt-free, layered along the data flow, no cycles, one OpenCV import; ruff's rules hold."""
import ast
import os
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
LIB = REPO / "aspectus"


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


# --- the rooms and the style rules, as the checkers see them --------------------------------------------

def _tool(name: str) -> str:
    import shutil

    exe = Path(sys.executable).with_name(name)
    found = str(exe) if exe.exists() else shutil.which(name)
    if not found:
        pytest.fail(f"{name} is not installed: it comes with the dev extra (pip install -e '.[dev]')")
    return found


def test_import_contracts_hold():
    """The layers and forbidden imports of pyproject.toml's [tool.importlinter] (import-linter)."""
    r = subprocess.run([_tool("lint-imports"), "--no-cache"], cwd=REPO, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-2000:]
    assert "0 broken" in r.stdout


def test_import_contracts_catch_a_violation(tmp_path):
    """A deliberate violation (the renderer importing the gaze chain) breaks the contracts."""
    import shutil

    copy = tmp_path / "repo"
    shutil.copytree(REPO / "aspectus", copy / "aspectus", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(REPO / "pyproject.toml", copy / "pyproject.toml")
    bad = copy / "aspectus" / "synth" / "face.py"
    bad.write_text(bad.read_text() + "\nfrom aspectus.webcam import gaze  # deliberate violation\n")
    env = {**os.environ, "PYTHONPATH": str(copy)}
    r = subprocess.run([_tool("lint-imports"), "--no-cache"], cwd=copy, capture_output=True, text=True, env=env,
                       timeout=300)
    assert r.returncode != 0 and "aspectus.synth.face -> aspectus.webcam.gaze" in r.stdout, r.stdout[-3000:]


def test_no_import_cycles_between_modules():
    """No module reaches itself through imports, at module level or inside functions (grimp's graph)."""
    import grimp

    g = grimp.build_graph("aspectus")
    edges = {m: {x for x in g.find_modules_directly_imported_by(m) if x.startswith("aspectus")} for m in g.modules}
    cycles = []
    for m in sorted(edges):
        for x in edges[m]:
            if m != x and g.chain_exists(importer=x, imported=m):
                cycles.append((m, x))
    assert not cycles, f"import cycles: {cycles[:5]}"


def test_code_passes_ruff():
    """The rules of pyproject.toml's [tool.ruff] hold for the whole tree."""
    r = subprocess.run([_tool("ruff"), "check", "--no-cache", "."], cwd=REPO, capture_output=True, text=True,
                       timeout=300)
    assert r.returncode == 0, r.stdout[-3000:]


def test_ruff_catches_a_violation(tmp_path):
    bad = tmp_path / "bad.py"
    bad.write_text("import os\n")  # unused import (F401)
    r = subprocess.run([_tool("ruff"), "check", "--no-cache", "--config", str(REPO / "pyproject.toml"), str(bad)],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode != 0 and "F401" in r.stdout


def _module_file(name: str) -> Path | None:
    base = REPO.joinpath(*name.split("."))
    for cand in (base.with_suffix(".py"), base / "__init__.py"):
        if cand.is_file():
            return cand
    return None


def _top_level_names(path: Path) -> set[str]:
    names: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
            names.add(node.name)
        elif isinstance(node, (ast.Import, ast.ImportFrom)):
            names.update((a.asname or a.name).split(".")[0] for a in node.names)
        elif isinstance(node, ast.Name) and isinstance(node.ctx, ast.Store):
            names.add(node.id)
    return names


def test_every_import_of_the_project_names_an_existing_module_and_name():
    """Imports inside functions (the command line defers most of them) run only when that command runs:
    one that names a moved module crashes that command with a traceback, so each is checked here."""
    bad = []
    for p in [*LIB.rglob("*.py"), *(REPO / "ui").rglob("*.py")]:
        for node in ast.walk(ast.parse(p.read_text(), filename=str(p))):
            if not (isinstance(node, ast.ImportFrom) and node.module and node.level == 0
                    and node.module.split(".")[0] in ("aspectus", "ui")):
                continue
            where = f"{p.relative_to(REPO)}:{node.lineno}"
            target = _module_file(node.module)
            if target is None:
                bad.append(f"{where}: no module {node.module}")
                continue
            names = _top_level_names(target)
            for a in node.names:
                if a.name != "*" and a.name not in names and _module_file(f"{node.module}.{a.name}") is None:
                    bad.append(f"{where}: {node.module} has no {a.name}")
    assert not bad, "\n".join(bad)
