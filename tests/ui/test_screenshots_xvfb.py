"""Screenshots of every main view at 1366x768 in a real X11 window (Xvfb, Qt's xcb platform), kept as test
artefacts in ``test-artifacts/screenshots/`` for a person to look at. Runs scripts/screenshots.py, which
processes the demo study with the app's own worker (face mesh: marked slow).

Skips with the reason where Xvfb is absent (Debian: apt-get install xvfb xauth; .ci/run installs them).
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

pytest.importorskip("PySide6")
pytestmark = pytest.mark.gui

ROOT = Path(__file__).resolve().parents[2]
ARTEFACTS = ROOT / "test-artifacts" / "screenshots"
VIEWS = ("clip_and_trace", "features", "validation", "parameters", "gaze_settings", "user_guide", "target_check_running", "target_check")


def test_readme_commands_bring_up_the_window(tmp_path):
    """The README's commands on this machine: `bash scripts/setup.sh` (venv and Qt's X11 libraries, quick when
    done), then `.venv/bin/aspectus gui --new` under Xvfb opens the main window (xcb, a real X11 window)."""
    if shutil.which("xvfb-run") is None:
        pytest.skip("xvfb-run not found (Debian: apt-get install xvfb xauth)")
    r = subprocess.run(["bash", "scripts/setup.sh"], cwd=ROOT, capture_output=True, text=True, timeout=1800)
    assert r.returncode == 0, r.stderr[-3000:]
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM")}
    env["ASPECTUS_APP_QUIT_AFTER_MS"] = "1500"
    env["HOME"] = str(tmp_path)  # a first launch: no remembered study
    env["XDG_CONFIG_HOME"] = str(tmp_path / ".config")
    r = subprocess.run(["xvfb-run", "-a", "-s", "-screen 0 1366x768x24", str(ROOT / ".venv" / "bin" / "aspectus"),
                        "gui", "--new"], cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stdout[-2000:] + r.stderr[-3000:]
    assert "window shown: 'aspectus" in r.stdout and "platform xcb, visible True" in r.stdout, r.stdout
    assert "XNNPACK" not in r.stderr and "W0000" not in r.stderr, r.stderr


@pytest.mark.slow
def test_every_main_view_in_a_real_window():
    if shutil.which("xvfb-run") is None:
        pytest.skip("xvfb-run not found (Debian: apt-get install xvfb xauth)")
    if not (ROOT / "sample_clips" / "demo_study.json").is_file():
        pytest.skip("sample_clips/demo_study.json absent")
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY")}
    env["QT_QPA_PLATFORM"] = "xcb"
    if ARTEFACTS.exists():
        shutil.rmtree(ARTEFACTS)
    r = subprocess.run(["xvfb-run", "-a", "-s", "-screen 0 1366x768x24", sys.executable,
                        str(ROOT / "scripts" / "screenshots.py"), "--out", str(ARTEFACTS)],
                       cwd=ROOT, env=env, capture_output=True, text=True, timeout=1500)
    assert r.returncode == 0, r.stdout[-2000:] + r.stderr[-4000:]
    assert "platform: xcb" in r.stdout, r.stdout  # a real X11 window, not the offscreen platform
    # the face mesh's start-up lines stay off the terminal (a run of the app prints none of them)
    assert "XNNPACK" not in r.stderr and "W0000" not in r.stderr, r.stderr[-2000:]
    from PySide6.QtGui import QImage

    for name in VIEWS:
        path = ARTEFACTS / f"{name}.png"
        assert path.is_file(), name
        img = QImage(str(path))
        assert not img.isNull(), name
        if name != "parameters" and name != "user_guide":
            assert (img.width(), img.height()) == (1366, 768), (name, img.width(), img.height())
        # not a blank picture: many distinct colours
        colours = {img.pixel(x, y) for x in range(0, img.width(), 23) for y in range(0, img.height(), 19)}
        assert len(colours) > 20, (name, len(colours))
