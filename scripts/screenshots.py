"""Render PNG screenshots of the desktop app's main views from the demo study, without a display.

    .venv/bin/python scripts/screenshots.py [--out screenshots/]

Opens ``sample_clips/demo_study.json`` (a copy of it is saved in the output
folder, so the shipped file stays as it is), processes the clips that have no
results yet with the app's own worker (results go to ``out/demo_study/`` and
are reused next time), runs the validation of p01 against its simulated lab
recording, and grabs each view at 1366x768. Faces are always blurred here.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
VIEWS = ("clip_and_trace", "features", "validation", "column_mapping", "target_sequence", "parameters",
         "gaze_settings", "user_guide", "target_check_running", "target_check")


def _wait(app, cond, timeout_s: float, what: str) -> None:
    from PySide6.QtCore import QEventLoop

    t0 = time.monotonic()
    while not cond():
        if time.monotonic() - t0 > timeout_s:
            raise SystemExit(f"screenshots: timed out waiting for {what}")
        app.processEvents(QEventLoop.AllEvents, 50)
        time.sleep(0.01)


def _settle(app, seconds: float = 0.4) -> None:
    t0 = time.monotonic()
    while time.monotonic() - t0 < seconds:
        app.processEvents()
        time.sleep(0.01)


def _target_clip(folder: Path) -> tuple[Path, Path]:
    """A short clip with the known-target sequence in it (rendered once, kept for next time) and its schedule."""
    clip, sched_path = folder / "student_targets.mp4", folder / "schedule.json"
    if not clip.is_file() or not sched_path.is_file():
        from aspectus.synth.target_gaze import render_target_clip
        from aspectus.targets.schedule import Screen, make_schedule

        folder.mkdir(parents=True, exist_ok=True)
        sched = make_schedule(Screen(1280, 720, 344.0, 193.5, 600.0), seed=5, fixation_s=1.2, n_fixations=9,
                              pursuit_sweeps=1)
        sched.write(sched_path)
        render_target_clip(clip, sched, lead_in_s=1.0, tail_s=0.5, gain=(1.0, 1.0), offset_deg=(2.0, -2.0),
                           size_px=(640, 480), fov_deg=45.0, seed=3)
    return clip, sched_path


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--out", default=str(ROOT / "screenshots"), help="folder for the PNG files")
    p.add_argument("--study", default=str(ROOT / "sample_clips" / "demo_study.json"), help="study to show")
    args = p.parse_args(argv)
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    sys.path.insert(0, str(ROOT))
    from ui.app import make_app

    app = make_app()
    print(f"platform: {app.platformName()}", flush=True)
    from aspectus.studies.project import load_study
    from ui.main_window import MainWindow

    out = Path(args.out).absolute()
    out.mkdir(parents=True, exist_ok=True)
    study = load_study(args.study)
    copy = out / "demo_study.json"
    study.save(copy)  # paths are re-based; results stay in the study's output folder

    win = MainWindow(worker_mode="process")
    win.quiet = True
    win.resize(1366, 768)
    win.show()
    if not win.open_study(copy):
        raise SystemExit(f"screenshots: cannot open {copy}: {getattr(win, 'last_warning', '')}")
    win.clip_view.unblur.setChecked(False)  # always blurred here
    todo = win.study.clips_to_process()
    if todo:
        print(f"processing {len(todo)} clip(s) (results are kept for next time) ...", flush=True)
        finished = []
        win.run_finished.connect(finished.append)
        win.process()
        _wait(app, lambda: bool(finished), 900, "processing")
        print("processing:", finished[0], flush=True)
    written = []

    def grab(widget, name):
        path = out / f"{name}.png"
        widget.grab().save(str(path))
        written.append(path)

    first = win.study.clips[0].stem
    win.select_clip(first)
    win.tabs.setCurrentIndex(0)
    _wait(app, lambda: win.time_view.n_fixation_bands > 0, 60, "the gaze trace")
    target = min(6.0, 0.4 * max(win.clip_view.duration_s, 1.0))
    win.clip_view.seek(target)
    _wait(app, lambda: win.clip_view.shown_image() is not None, 60, "a video frame")
    _settle(app, 0.6)
    _wait(app, win.time_view.is_current, 60, "the trace drawing")
    _settle(app)
    grab(win, "clip_and_trace")

    win.tabs.setCurrentIndex(1)
    rv = win.results_view
    rv.clips_box.setCurrentIndex(rv.clips_box.findData("all"))
    rv.rows_box.setCurrentIndex(rv.rows_box.findData("segment"))
    _settle(app)
    _wait(app, rv.canvas.is_current, 60, "the histogram")
    _settle(app)
    grab(win, "features")

    win.tabs.setCurrentIndex(2)
    vv = win.validation_view
    clip = win.current_clip()
    if clip is not None and clip.reference is not None:
        done = []
        vv.compared.connect(done.append)
        vv.failed.connect(done.append)
        vv.compare()
        _wait(app, lambda: bool(done), 300, "the validation")
        _settle(app)
        _wait(app, vv.canvas.is_current, 60, "the agreement plots")
        _settle(app)
    grab(win, "validation")

    from ui.mapping_dialog import MappingDialog

    table = ROOT / "sample_clips" / "lab_tracker" / "p01_s01_labtracker.csv"
    if table.is_file():
        m = win.study.mappings.get(win.study.relative(table))
        dlg = MappingDialog(table, initial=m, parent=win)
        dlg.show()
        _settle(app)
        grab(dlg, "column_mapping")
        dlg.close()

    seq = win.make_target_sequence_dialog(exec_dialog=False)
    seq.show()
    _settle(app)
    grab(seq, "target_sequence")
    seq.close()

    grab(win.params_dock, "parameters")
    # the gaze-measurement choices just after one changed: the processed clips are outdated, and the section
    # offers to process them again; then the study's own choice is put back (nothing is processed here)
    combo = win.params._gaze_combos["iris_combine"]
    before = combo.currentIndex()
    combo.setCurrentIndex(combo.findData("limbus") if combo.currentData() != "limbus" else 0)
    _settle(app)
    win.params.scroll_to("gaze")
    win.tabs.setCurrentIndex(0)  # the clip view says which iris estimate the clip's results used
    _settle(app)
    grab(win, "gaze_settings")
    combo.setCurrentIndex(before)
    win.params.scroll_to("detection")
    _settle(app)
    guide = win.show_guide()
    _settle(app)
    grab(guide, "user_guide")
    guide.close()

    # the known-target check run from the clip view, on a rendered clip whose eyes follow the dots
    clip, sched = _target_clip(out / "target_check")
    loaded = []
    win.clip_loaded.connect(loaded.append)
    win.add_paths([str(clip)])
    win.select_clip(clip.stem)
    win.tabs.setCurrentIndex(0)
    _wait(app, lambda: clip.stem in loaded, 60, "the clip's data")
    _wait(app, lambda: win.clip_view.shown_image() is not None, 60, "a video frame")
    shots, finished = [], []
    win.target_check_finished.connect(finished.append)

    def on_progress(key, frac, message):
        if frac >= 0.3 and not shots:
            shots.append(frac)
            _settle(app, 0.2)
            grab(win, "target_check_running")

    win._check_progress.connect(on_progress)
    win.check_targets(schedule=sched)
    _wait(app, lambda: bool(finished), 600, "the target check")
    _wait(app, lambda: win.time_view.n_fixation_bands > 0, 60, "the checked clip's gaze trace")
    _wait(app, win.time_view.is_current, 60, "the trace drawing")
    _settle(app)
    grab(win, "target_check")
    win.flush_saves()
    win.shutdown()
    for pth in written:
        print(pth)
    return 0


if __name__ == "__main__":
    sys.exit(main())
