"""Starting the app where it cannot open a window, the system libraries setup installs, the command line's
help, the bundled user guide, and the face mesh's start-up lines kept off the terminal."""
from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def _env(**over):
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM")}
    env.update(over)
    return env


def test_no_display_gives_one_line_not_qt_abort(tmp_path):
    """Over SSH without a display Qt aborts (exit 134) with lines that name no remedy; the app says it in one."""
    r = subprocess.run([sys.executable, "-m", "aspectus", "gui", "--new"], cwd=tmp_path, env=_env(),
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2, (r.returncode, r.stderr)
    lines = [ln for ln in r.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, r.stderr
    assert "no display" in lines[0] and "ssh -X" in lines[0] and "aspectus --help" in lines[0]


def test_missing_qt_library_is_named_with_its_package(monkeypatch):
    import ui.app as app

    monkeypatch.setattr(app, "missing_xcb_libraries", lambda plugin=None: ["libxcb-cursor.so.0"])
    msg = app.window_problem({"DISPLAY": ":0"})
    assert msg is not None and "\n" not in msg
    assert "libxcb-cursor.so.0" in msg and "apt-get install libxcb-cursor0" in msg
    monkeypatch.setattr(app, "missing_xcb_libraries", lambda plugin=None: [])
    assert app.window_problem({"DISPLAY": ":0"}) is None
    assert app.window_problem({"QT_QPA_PLATFORM": "offscreen"}) is None


def test_missing_libraries_found_by_ldd(tmp_path):
    """The check reads ``ldd``'s "not found" lines of the plugin (here: a library that needs a missing one)."""
    import shutil

    import ui.app as app

    if shutil.which("ldd") is None or shutil.which("cc") is None:
        pytest.skip("needs ldd and a C compiler")
    src = tmp_path / "x.c"
    src.write_text("int f(void){return 0;}\n")
    dep = tmp_path / "libaspectusmissing.so"
    subprocess.run(["cc", "-shared", "-fPIC", "-o", str(dep), str(src)], check=True)
    lib = tmp_path / "libplugin.so"
    subprocess.run(["cc", "-shared", "-fPIC", "-o", str(lib), str(src), f"-L{tmp_path}", "-Wl,--no-as-needed",
                    "-laspectusmissing"],
                   check=True)
    dep.unlink()
    assert app.missing_xcb_libraries(lib) == ["libaspectusmissing.so"]


def test_setup_installs_the_libraries_the_app_names():
    """scripts/_qt_libs.sh (run by setup.sh, demo.sh and test.sh) installs what ui.app names, by file."""
    import ui.app as app

    text = (ROOT / "scripts" / "_qt_libs.sh").read_text()
    pairs = dict(re.findall(r"(lib[\w.+-]+\.so\.\d+):([\w.+-]+)", text))
    assert pairs == app.XCB_LIBS
    for name in ("libxcb-cursor.so.0", "libxcb-icccm.so.4", "libxcb-keysyms.so.1"):
        assert name in pairs  # the three Qt asked for on a bare Debian desktop
    for script in ("setup.sh", "demo.sh", "test.sh"):
        assert "_qt_libs.sh" in (ROOT / "scripts" / script).read_text(), script


def test_cli_help_lists_choices_readably(capsys):
    from aspectus.cli import main

    with pytest.raises(SystemExit):
        main(["process", "--help"])
    out = " ".join(capsys.readouterr().out.split())
    assert "one of: i2mc (" in out and "idt (dispersion threshold" in out and "Default: idt" in out
    with pytest.raises(SystemExit):
        main(["validate", "--help"])
    out = " ".join(capsys.readouterr().out.split())
    assert "{1,1,2,1" not in out
    assert "2,1 = two-way random effects, absolute agreement, single measurement" in out and "Default: 2,1" in out


def test_face_mesh_start_up_lines_stay_off_the_terminal():
    """The app's clip view finds the face on single frames (overlay.FrameLandmarker) and blurs every face
    (face_boxes.FaceBoxFinder); TF-Lite's and absl's
    start-up lines ("INFO: Created TensorFlow Lite XNNPACK delegate", "W0000 ...") are not printed."""
    clip = ROOT / "sample_clips" / "linden_brook_p01_s01.mp4"
    if not clip.is_file():
        pytest.skip("sample clip absent")
    # a blank picture first (no face: the landmark model does not start), then frames with a face
    code = ("import sys, numpy as np\nfrom aspectus._env import import_cv2\n"
            "from aspectus.webcam.overlay import FrameLandmarker\ncv2 = import_cv2()\n"
            f"cap = cv2.VideoCapture({str(clip)!r})\nframes = [cap.read()[1][..., ::-1] for _ in range(3)]\n"
            "f = FrameLandmarker()\nf(np.full((120, 160, 3), 128, np.uint8))\n"
            "found = [f(fr) is not None for fr in frames]\nf.close()\n"
            "from aspectus.webcam.face_boxes import FaceBoxFinder\nb = FaceBoxFinder()\n"
            "found += [len(b(fr)) >= 1 for fr in frames]\nb.close()\n"
            "print('found', all(found), file=sys.stderr)\n")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert r.returncode == 0, r.stderr
    assert r.stderr.strip() == "found True", r.stderr


@pytest.mark.gui
def test_help_menu_opens_bundled_user_guide(qtbot):
    pytest.importorskip("PySide6")
    from ui.main_window import MainWindow

    w = MainWindow(worker_mode="thread")
    qtbot.addWidget(w)
    try:
        menus = {a.text().replace("&", ""): a.menu() for a in w.menuBar().actions()}
        items = [a.text().replace("&", "") for a in menus["Help"].actions()]
        assert items[0] == "User guide" and "About aspectus" in items
        w.act_guide.trigger()
        g = w.guide
        assert g.isVisible()
        text = g.browser.toPlainText()
        for words in ("New study", "Process clips", "Parameters", "Validate against a lab eye tracker",
                      "Restore defaults", "consent"):
            assert words in text, words
        assert "http" not in g.browser.toHtml().replace("http://www.w3.org", "")  # offline: no links out
        w.show_guide()
        assert w.guide is g  # one window, raised again
    finally:
        w.shutdown()
