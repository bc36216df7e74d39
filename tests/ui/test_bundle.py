"""The desktop bundle builds and its smoke test passes (marked ``bundle``; a few minutes).

Builds ``packaging/aspectus.spec`` with PyInstaller into a temporary folder
(``packaging/build_linux.sh``), then runs ``packaging/smoke_test.sh`` on it:
the bundle, started offscreen with an empty environment, processes the demo
clip and opens and closes its main window. Skipped when PyInstaller is not
installed (``pip install -e '.[bundle]'``). Measured on a 2-core machine:
about 4 minutes to build, 15 s to smoke-test, 830 MB bundle.
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]


@pytest.mark.bundle
@pytest.mark.timeout(2400)
def test_bundle_builds_and_processes_the_demo_clip(tmp_path):
    pytest.importorskip("PyInstaller", reason="PyInstaller not installed: pip install -e '.[bundle]'")
    if shutil.which("bash") is None:
        pytest.skip("bash is needed for the build and smoke scripts")
    env = dict(os.environ, PYTHON=sys.executable, DIST=str(tmp_path / "dist"), WORK=str(tmp_path / "work"))
    build = subprocess.run(["bash", str(REPO / "packaging" / "build_linux.sh")], cwd=REPO, env=env,
                           capture_output=True, text=True, timeout=2000)
    assert build.returncode == 0, build.stdout[-3000:] + build.stderr[-3000:]
    exe = tmp_path / "dist" / "aspectus" / "aspectus"
    assert exe.is_file()
    internal = tmp_path / "dist" / "aspectus" / "_internal"
    assert not (internal / "jax").exists() and not (internal / "jaxlib").exists(), "jax is in the bundle"
    models = {p.name for p in internal.rglob("*.tflite")}
    assert {"face_landmark_with_attention.tflite", "face_detection_short_range.tflite"} <= models, models
    assert list(internal.rglob("libqoffscreen.so")), "Qt's offscreen platform plugin is missing"
    smoke = subprocess.run(["bash", str(REPO / "packaging" / "smoke_test.sh")], cwd=REPO,
                           env=dict(os.environ, ASPECTUS_BUNDLE=str(exe)), capture_output=True, text=True,
                           timeout=600)
    assert smoke.returncode == 0, smoke.stdout[-3000:] + smoke.stderr[-3000:]
    assert "smoke_test: OK" in smoke.stdout
    assert "app-check: main window opened and closed" in smoke.stdout
