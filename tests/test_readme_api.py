"""The README's "Python API" example runs as written (the public API of aspectus)."""
from __future__ import annotations

import importlib
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]

PUBLIC = ["aspectus", "aspectus.webcam", "aspectus.events", "aspectus.reference", "aspectus.validation",
          "aspectus.studies", "aspectus.privacy", "aspectus.synth", "aspectus.events.detect", "aspectus.targets"]


@pytest.mark.parametrize("package", PUBLIC)
def test_every_public_name_resolves(package):
    mod = importlib.import_module(package)
    assert mod.__all__, package
    for name in mod.__all__:
        assert getattr(mod, name) is not None, f"{package}.{name}"
    with pytest.raises(AttributeError):
        mod.no_such_name  # noqa: B018


def test_importing_the_package_loads_no_face_mesh_and_no_qt():
    code = ("import sys, aspectus, aspectus.events, aspectus.validation; "
            "print(sorted(m for m in ('mediapipe', 'cv2', 'PySide6') if m in sys.modules))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and r.stdout.strip() == "[]", r.stdout + r.stderr


@pytest.mark.slow
def test_readme_python_api_example_runs(tmp_path):
    text = (REPO / "README.md").read_text()
    section = text.split("## Python API", 1)[1].split("\n## ", 1)[0]
    code = re.search(r"```python\n(.*?)```", section, re.S).group(1)
    work = tmp_path / "work"
    shutil.copytree(REPO / "sample_clips", work / "sample_clips")
    r = subprocess.run([sys.executable, "-c", code], cwd=work, capture_output=True, text=True, timeout=600,
                       env={**os.environ, "PYTHONPATH": str(REPO)})
    assert r.returncode == 0, r.stderr[-3000:]
    out = r.stdout
    assert "Usable" in out or "usable" in out, out
    n_fix = int(re.search(r"^(\d+) fixations, median (\d+) ms", out, re.M).group(1))
    assert n_fix > 10, out
    assert (work / "out" / "api" / "linden_brook_p01_s01" / "run.json").exists()
    assert (work / "out" / "api" / "validation" / "agreement.csv").exists()
    assert "fixation_count" in out
