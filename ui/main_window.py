"""The main window: the study's clip list, the clip and gaze-trace view, the
feature tables, the validation view, the parameters, and the processing bar.

Everything scientific is done by the library (:mod:`aspectus.webcam.pipeline`,
:mod:`aspectus.events.analysis`, :mod:`aspectus.validation.pair`) - the same calls the command
line makes; this module only wires widgets to them.
"""
from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pandas as pd
from PySide6.QtCore import QSettings, Qt, QUrl, Signal
from PySide6.QtGui import QAction, QDesktopServices, QKeySequence
from PySide6.QtWidgets import (QAbstractItemView, QDockWidget, QFileDialog, QHBoxLayout, QHeaderView, QLabel,
                               QMainWindow, QMenu, QMessageBox, QProgressBar, QPushButton, QSplitter, QTabWidget,
                               QTreeWidget, QTreeWidgetItem, QVBoxLayout, QWidget)

from aspectus.studies import project as study_mod
from aspectus.errors import AspectusInputError

from . import theme
from .clip_view import ClipView
from .job_runner import Job
from .params_panel import ParamsPanel
from .results_view import ResultsView, read_events
from .time_view import NO_SAMPLES_TEXT, TimeView
from .validation_view import ValidationView
from .workers import ProcessingRun, Reanalyser

APP_TITLE = "aspectus"
#: what the gaze trace says for a clip whose processing failed
FAILED_TRACE_TEXT = "No gaze trace: processing this clip failed (the reason is shown above)."
TAB_CLIP, TAB_RESULTS, TAB_VALIDATION = 0, 1, 2
COL_NAME, COL_STATUS, COL_FACE, COL_USABLE = range(4)
#: what the clip list's Usable column says (aspectus.webcam.pipeline.usable_word)
USABLE_TIP = ("The verdict on the clip's quality - yes: fixation and saccade measures can be used; partly: the gaze "
              "is too unsteady for them, only the coarser features the verdict names (such as blink rate and head "
              "movement) can; no: not usable. Hover over a clip's entry for the reasons.")
#: a clip's status is shown by its progress bar: the status in words, the percentage while it processes (one
#: column fewer at 1366 px)
COL_PROGRESS = COL_STATUS
#: what the gaze trace says while no clip is selected
NO_CLIP_TRACE_TEXT = "The selected clip's gaze over time is shown here."


class _Provider:
    """Hands the results and validation views what they need from the window."""

    def __init__(self, win: MainWindow):
        self.win = win

    def clips(self):
        s = self.win.study
        out = []
        for c in s.clips:
            if c.status in (study_mod.STATUS_DONE, study_mod.STATUS_STALE):
                out.append((c.stem, s.clip_out_dir(c), c.summary))
        return out

    def current(self):
        c = self.win.current_clip()
        return c.stem if c else None

    def export_dir(self):
        return self.win.study.output_root()


def segments_summary(path, *, shown: int = 4) -> str:
    """A segments file in a line: its name and the segments it holds, e.g. "segments_p01_s01.csv: 3 segments
    (passage_1, passage_2, questions)", or its name and why it cannot be read."""
    from aspectus.events.analysis import read_segments

    name = Path(path).name
    try:
        segs = read_segments(path)
    except (OSError, ValueError) as exc:  # AspectusInputError is a ValueError
        return f"{name}: cannot be read - {getattr(exc, 'problem', None) or exc}"
    labels = [str(x) for x in segs["label"]]
    more = f", … {len(labels) - shown} more" if len(labels) > shown else ""
    return (f"{name}: {len(labels)} segment{'' if len(labels) == 1 else 's'}"
            + (f" ({', '.join(labels[:shown])}{more})" if labels else ""))


class MainWindow(QMainWindow):
    """The aspectus desktop window.

    Parameters
    ----------
    settings : QSettings, optional
        Where the recent-study list and window layout are remembered; None
        (tests, screenshots) remembers nothing outside the study file.
    worker_mode : {"process", "thread"}
        How processing runs are executed (see :mod:`ui.workers`).

    Signals
    -------
    run_finished(dict) : outcome per clip of a processing run.
    clip_loaded(str) : the views show a clip's data.
    reanalysed(str) : a clip's detection was re-run and the views updated.
    """

    run_finished = Signal(dict)
    clip_loaded = Signal(str)
    reanalysed = Signal(str)
    _clip_data = Signal(object)
    _save_failed = Signal(str)
    _status_message = Signal(str)
    _check_progress = Signal(str, float, str)  # clip stem, fraction, message
    _check_done = Signal(str, object)  # clip stem, {"doc"|"error"|"cancelled": ...}
    target_check_finished = Signal(str)  # clip stem (for tests and scripts)

    def __init__(self, *, settings: QSettings | None = None, worker_mode: str = "process", parent=None):
        super().__init__(parent)
        # import the library's heavy modules now, not in the middle of the user's work
        import aspectus.events.analysis  # noqa: F401
        import aspectus.webcam.pipeline  # noqa: F401

        self.settings = settings
        self.worker_mode = worker_mode
        self.study = study_mod.new_study()
        self.run: ProcessingRun | None = None
        self._queued: set[str] = set()
        self._current_samples: pd.DataFrame | None = None
        self._current_events: pd.DataFrame | None = None
        self._loading_study = False
        self._load_pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="aspectus-load")
        self._save_pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="aspectus-save")
        self._save_failed.connect(lambda m: self.statusBar().showMessage(m, 10000))
        self._load_gen = 0
        self._clip_data.connect(self._apply_clip_data)
        self.reanalyser = Reanalyser(self)
        self.reanalyser.done.connect(self._on_reanalysed)
        self.reanalyser.failed.connect(self._on_reanalyse_failed)
        self.provider = _Provider(self)
        self.setObjectName("aspectus_main")
        self.setAcceptDrops(True)
        self.resize(1366, 768)
        self.setMinimumSize(1000, 640)
        self._build()
        self._update_title()
        self._refresh_list()
        self._update_actions()
        if self.current_clip() is None:
            self._show_clip(None)  # the empty study's views say how to begin, not "process the clip"

    # ============================================================== layout
    def _build(self):
        # clip list
        self.clip_list = QTreeWidget()
        self.clip_list.setHeaderLabels(["Clip", "Status", "Face", "Usable"])
        self.clip_list.headerItem().setToolTip(COL_STATUS, "Processing status; a progress bar while processing")
        self.clip_list.headerItem().setToolTip(COL_FACE, "Share of frames in which the face was tracked")
        self.clip_list.headerItem().setToolTip(COL_USABLE, USABLE_TIP)
        self.clip_list.setRootIsDecorated(False)
        # clips of one study share a prefix: cut names in the middle so the participant and session show
        self.clip_list.setTextElideMode(Qt.ElideMiddle)
        self.clip_list.setSelectionMode(QAbstractItemView.ExtendedSelection)
        self.clip_list.setContextMenuPolicy(Qt.CustomContextMenu)
        self.clip_list.customContextMenuRequested.connect(self._clip_menu)
        self.clip_list.currentItemChanged.connect(self._on_current_changed)
        hdr = self.clip_list.header()
        hdr.setStretchLastSection(False)
        hdr.setSectionResizeMode(COL_NAME, QHeaderView.Stretch)
        fm = self.clip_list.fontMetrics()
        hfm = hdr.fontMetrics()

        def room(texts, header):  # the widest text of a column, and its header, with the cell's margins
            return max(max(fm.horizontalAdvance(t) for t in texts) + 14, hfm.horizontalAdvance(header) + 16)

        statuses = (*study_mod.STATUSES, "processing", "queued")
        for col, w in ((COL_STATUS, room(statuses, "Status")), (COL_FACE, room(("100 %",), "Face")),
                       (COL_USABLE, room(("yes", "partly", "no"), "Usable"))):
            hdr.setSectionResizeMode(col, QHeaderView.Fixed)
            self.clip_list.setColumnWidth(col, w)
        add_btn = QPushButton("Add clips…")
        add_btn.clicked.connect(self.add_clips_dialog)
        folder_btn = QPushButton("Add folder…")
        folder_btn.clicked.connect(self.add_folder_dialog)
        self.list_hint = QLabel("Drop video files or a folder here.")
        self.list_hint.setStyleSheet("color: #555;")
        self.list_hint.setWordWrap(True)
        left = QWidget()
        left.setMinimumWidth(300)
        self._left = left
        lv = QVBoxLayout(left)
        lv.setContentsMargins(4, 4, 0, 4)
        row = QHBoxLayout()
        row.addWidget(add_btn)
        row.addWidget(folder_btn)
        lv.addLayout(row)
        lv.addWidget(self.clip_list, 1)
        lv.addWidget(self.list_hint)

        # centre: tabs
        self.clip_view = ClipView()
        self.time_view = TimeView()
        self.clip_view.position_changed.connect(self.time_view.set_cursor)
        self.clip_view.check_requested.connect(lambda: self.check_targets())
        self.clip_view.check_cancel_requested.connect(self.cancel_target_check)
        self._check_cancel = None  # threading.Event of the running known-target check
        self._check_key: str | None = None
        self._check_progress.connect(self._on_check_progress)
        self._check_done.connect(self._on_check_done)
        self.time_view.seek_requested.connect(self._seek_from_trace)
        clip_split = QSplitter(Qt.Vertical)
        clip_split.addWidget(self.clip_view)
        clip_split.addWidget(self.time_view)
        clip_split.setStretchFactor(0, 3)
        clip_split.setStretchFactor(1, 2)
        clip_split.setSizes([400, 260])
        self.clip_message = QLabel()
        self.clip_message.setWordWrap(True)
        self.clip_message.setStyleSheet("color: #c62828; padding: 2px;")
        self.clip_message.hide()
        clip_tab = QWidget()
        ct = QVBoxLayout(clip_tab)
        ct.setContentsMargins(0, 0, 0, 0)
        ct.addWidget(self.clip_message)
        ct.addWidget(clip_split, 1)
        self.results_view = ResultsView()
        self.results_view.provider = self.provider
        self.results_view.export_done.connect(lambda p: self.statusBar().showMessage(f"Saved {p}", 8000))
        self.validation_view = ValidationView(window=self)
        self.tabs = QTabWidget()
        self.tabs.addTab(clip_tab, "Clip and gaze trace")
        self.tabs.addTab(self.results_view, "Features")
        self.tabs.addTab(self.validation_view, "Validation")
        self.tabs.currentChanged.connect(self._on_tab)

        main_split = QSplitter(Qt.Horizontal)
        main_split.addWidget(left)
        main_split.addWidget(self.tabs)
        main_split.setStretchFactor(0, 0)
        main_split.setStretchFactor(1, 1)
        main_split.setSizes([360, 680])
        self.main_split = main_split

        # processing bar
        self.run_all_btn = QPushButton("Process clips")
        self.run_all_btn.setToolTip("Process every clip that has no current result")
        self.run_all_btn.clicked.connect(lambda: self.process())
        self.run_sel_btn = QPushButton("Process selected")
        self.run_sel_btn.setToolTip("Process (again) the clips selected in the list")
        self.run_sel_btn.clicked.connect(self.process_selected)
        self.cancel_btn = QPushButton("Cancel")
        self.cancel_btn.setToolTip("Stop processing; clips already finished keep their results")
        self.cancel_btn.clicked.connect(self.cancel_run)
        self.targets_btn = QPushButton("Target sequence…")
        self.targets_btn.setToolTip("Make the known-target sequence for the study's screen: schedule, offline page "
                                    "and video, to show while the webcam records (gaze quality without a lab tracker)")
        self.targets_btn.clicked.connect(lambda: self.make_target_sequence_dialog())
        self.overall_bar = QProgressBar()
        self.overall_bar.setRange(0, 1000)
        self.overall_bar.setFormat("Study: %p %")
        self.overall_bar.setTextVisible(True)
        self.remaining_label = QLabel("")
        self.remaining_label.setMinimumWidth(190)
        self.remaining_label.hide()  # shown while a run goes on
        self.run_label = QLabel("")
        bar = QWidget()
        bl = QHBoxLayout(bar)
        bl.setContentsMargins(4, 2, 4, 2)
        bl.addWidget(self.run_all_btn)
        bl.addWidget(self.run_sel_btn)
        bl.addWidget(self.cancel_btn)
        bl.addWidget(self.targets_btn)
        bl.addWidget(self.overall_bar, 1)
        bl.addWidget(self.remaining_label)
        bl.addWidget(self.run_label, 2)  # its sentences are read whole at 1366 px; the bar can be narrower

        central = QWidget()
        cv = QVBoxLayout(central)
        cv.setContentsMargins(0, 0, 0, 0)
        cv.setSpacing(0)
        cv.addWidget(main_split, 1)
        cv.addWidget(bar)
        self.setCentralWidget(central)

        # parameters dock
        self.params = ParamsPanel()
        self.params.analysis_changed.connect(self.set_analysis_params)
        self.params.process_changed.connect(self.set_process_params)
        self.params.reprocess_requested.connect(self.reprocess)
        self.params.segments_requested.connect(self.choose_segments_dialog)
        self.params.segments_cleared.connect(lambda: self.set_segments(None))
        self.params_dock = QDockWidget("Parameters", self)
        self.params_dock.setObjectName("parameters")
        self.params_dock.setWidget(self.params)
        self.params_dock.setFeatures(QDockWidget.DockWidgetMovable | QDockWidget.DockWidgetFloatable)
        self.params_dock.setMinimumWidth(320)
        self.params_dock.setMaximumWidth(460)
        self.addDockWidget(Qt.RightDockWidgetArea, self.params_dock)
        self.resizeDocks([self.params_dock], [330], Qt.Horizontal)

        self._build_menus()

    def _build_menus(self):
        mb = self.menuBar()
        m = mb.addMenu("&Study")

        def act(menu, text, slot, shortcut=None, tip=None):
            a = QAction(text, self)
            a.triggered.connect(slot)
            if shortcut:
                a.setShortcut(QKeySequence(shortcut))
            if tip:
                a.setStatusTip(tip)
            menu.addAction(a)
            return a

        act(m, "&New study…", self.new_study_dialog, QKeySequence.New)
        act(m, "&Open study…", self.open_study_dialog, QKeySequence.Open)
        self.recent_menu = m.addMenu("Open &recent")
        self._fill_recent()
        act(m, "&Save", self.save_study, QKeySequence.Save)
        act(m, "Save &as…", self.save_study_as_dialog, QKeySequence.SaveAs)
        m.addSeparator()
        act(m, "Add &clips…", self.add_clips_dialog, "Ctrl+I")
        act(m, "Add &folder…", self.add_folder_dialog)
        m.addSeparator()
        act(m, "Open &results folder", self.open_results_folder)
        m.addSeparator()
        act(m, "&Quit", self.close, QKeySequence.Quit)
        r = mb.addMenu("&Processing")
        self.act_run = act(r, "Process clips", lambda: self.process(), "Ctrl+R")
        self.act_run_sel = act(r, "Process selected clips", self.process_selected)
        self.act_cancel = act(r, "Cancel", self.cancel_run, "Esc")
        r.addSeparator()
        self.act_targets = act(r, "Make target sequence for the study's screen…", self.make_target_sequence_dialog,
                               tip="Schedule, offline page and video of the known-target check")
        self._status_message.connect(lambda m: self.statusBar().showMessage(m, 15000))
        v = mb.addMenu("&View")
        self.act_unblur = QAction("Show faces unblurred", self, checkable=True)
        self.act_unblur.toggled.connect(self.clip_view.unblur.setChecked)
        self.clip_view.unblur.toggled.connect(self.act_unblur.setChecked)
        v.addAction(self.act_unblur)
        v.addAction(self.params_dock.toggleViewAction())
        h = mb.addMenu("&Help")
        self.act_guide = act(h, "&User guide", self.show_guide, QKeySequence.HelpContents,
                             tip="A short guide to running a pilot study with aspectus (offline)")
        act(h, "About aspectus", self.about)

    def make_target_sequence_dialog(self, *, exec_dialog: bool = True):
        """Ask for the screen and a folder; write the target sequence there (the video in a thread)."""
        import threading

        from .targets_dialog import TargetSequenceDialog

        screen = ((self.study.mappings or {}).get("last") or {}).get("screen") if self.study else None
        folder = self.study.output_root() / "target_sequence" if self.study and self.study.path else None
        dlg = TargetSequenceDialog(self, folder=folder, screen=screen)
        if not exec_dialog:
            return dlg
        if not dlg.exec() or dlg.schedule is None:
            return None
        sched, out = dlg.schedule, dlg.out_dir
        if not dlg.want_video:
            self._status_message.emit(f"Target sequence written to {out} (schedule and page)")
            return dlg

        def work():
            from aspectus.targets.page import write_video

            try:
                write_video(sched, out / "targets.mp4")
                self._status_message.emit(f"Target sequence written to {out} (schedule, page and video)")
            except Exception as exc:  # noqa: BLE001 - the schedule and the page are written already
                self._status_message.emit(f"The target video could not be written: {exc}")

        self._status_message.emit(f"Writing the target video into {out} …")
        threading.Thread(target=work, name="target-video", daemon=True).start()
        return dlg

    # ================================================= known-target check
    def check_targets(self, schedule=None) -> bool:
        """Run the known-target check on the current clip in a worker thread (the library's
        :func:`aspectus.targets.check.run_check`, as ``aspectus targets check`` does), into the clip's result
        folder. ``schedule`` (the schedule.json that was shown) is asked for when not given. Progress and
        Cancel are in the clip view; a cancelled check writes nothing."""
        import threading

        clip = self.current_clip()
        if self.study is None or clip is None:
            self.clip_view.set_check_state(message="Select a clip first.", error=True)
            return False
        if self._check_cancel is not None:
            return False
        if self.run is not None and self.run.is_running():
            self.clip_view.set_check_state(
                message="Processing is running: check the clip when it has finished (or cancel the run).",
                error=True)
            return False
        clip_path = self.study.clip_path(clip)
        if not clip_path.is_file():
            self.clip_view.set_check_state(message=f"The clip file is missing: {clip_path}. Put it back or "
                                           "remove the clip from the study.", error=True)
            return False
        if schedule is None:
            start = self.study.output_root() / "target_sequence" if self.study.path else Path.home()
            schedule, _ = QFileDialog.getOpenFileName(
                self, f"Schedule of the target sequence shown in {clip.name}", str(start),
                "Target schedule (*.json);;All files (*)")
            if not schedule:
                return False
        schedule = Path(schedule)
        out_dir = self.study.clip_out_dir(clip)
        from .job_runner import _make_params

        params = _make_params(self.study.process, self.study.analysis)
        cancel = threading.Event()
        self._check_cancel, self._check_key = cancel, clip.stem
        self.clip_view.set_check_state(running=True, message=f"Checking {clip.name} against {schedule.name}…")
        key = clip.stem

        def progress(frac, message):
            self._check_progress.emit(key, float(frac), str(message))

        def work():
            from aspectus.errors import Cancelled
            from aspectus.targets.check import read_check, run_check

            try:
                run_check(clip_path, schedule, out_dir, process_params=params, progress=progress, cancel=cancel)
            except Cancelled:
                self._check_done.emit(key, {"cancelled": True})
                return
            except Exception as exc:  # noqa: BLE001 - shown in the clip view as a plain message
                self._check_done.emit(key, {"error": _check_error_text(exc, clip.name, schedule)})
                return
            self._check_done.emit(key, {"doc": read_check(out_dir), "out": out_dir})

        threading.Thread(target=work, name="aspectus-target-check", daemon=True).start()
        return True

    def cancel_target_check(self) -> None:
        if self._check_cancel is not None:
            self._check_cancel.set()
            self.clip_view.check_cancel_btn.setEnabled(False)
            self.clip_view.set_check_state(message="Stopping the check…")

    def _on_check_progress(self, key, frac, message):
        cur = self.current_clip()
        if cur is not None and cur.stem == key and self._check_cancel is not None:
            self.clip_view.set_check_state(fraction=frac, message=message)

    def _on_check_done(self, key, res):
        self._check_cancel, self._check_key = None, None
        clip = self.study.find(key) if self.study else None
        if clip is not None:
            self.study.refresh_status(clip)  # the check processes a clip that had no results yet
            it = self._item(key)
            if it is not None:
                self._update_item(it, clip)
        cur = self.current_clip()
        shown = cur is not None and cur.stem == key
        self.clip_view.set_check_state(running=False)
        if res.get("cancelled"):
            msg, err = f"The check of {key} was cancelled; nothing of it was written.", False
        elif res.get("error"):
            msg, err = res["error"], True
        else:
            msg, err = f"Check of {key} written to {res['out'] / 'target_check.json'}.", False
            if shown:
                self._show_clip(cur)
        if shown:
            self.clip_view.set_check_state(message=msg, error=err)
        self._status_message.emit(msg)
        self.target_check_finished.emit(key)

    # ============================================================== study
    def current_clip(self) -> study_mod.StudyClip | None:
        it = self.clip_list.currentItem()
        return self.study.find(it.data(COL_NAME, Qt.UserRole)) if it else None

    def open_study(self, path) -> bool:
        """Open a study file; shows a message and returns False if it cannot be read."""
        if self.run is not None and self.run.is_running():
            self._warn("Processing is running", "Cancel or wait for the run to finish before opening another study.")
            return False
        try:
            s = study_mod.load_study(path)
        except AspectusInputError as exc:
            self._warn("Cannot open the study", str(exc))
            return False
        self._set_study(s)
        missing = study_mod.missing_files(s)
        if missing:
            self.statusBar().showMessage(f"{len(missing)} file(s) of this study are missing: " + missing[0], 15000)
        self._remember_recent(s.path)
        return True

    def _set_study(self, s: study_mod.Study):
        self._loading_study = True
        try:
            self.study = s
            self.results_view.forget()
            self.params.set_values(s.analysis, s.process)
            self._refresh_list()
            view = s.view or {}
            sel = view.get("selected")
            target = None
            for i in range(self.clip_list.topLevelItemCount()):
                it = self.clip_list.topLevelItem(i)
                if it.data(COL_NAME, Qt.UserRole) == sel or target is None:
                    target = it
                    if it.data(COL_NAME, Qt.UserRole) == sel:
                        break
            if target is not None:
                self.clip_list.setCurrentItem(target)
            else:
                self._show_clip(None)
            tab = view.get("tab")
            if isinstance(tab, int) and 0 <= tab < self.tabs.count():
                self.tabs.setCurrentIndex(tab)
            pos = view.get("position_s")
            if isinstance(pos, (int, float)) and math.isfinite(pos):
                self.clip_view.seek(float(pos))
        finally:
            self._loading_study = False
        if s.notes:  # saved settings it could not take over: named, and their defaults used
            self.params.message.setText(" ".join(s.notes))
            self.statusBar().showMessage(s.notes[0], 15000)
        self._update_title()
        self._update_actions()

    def new_study(self, path) -> None:
        s = study_mod.new_study(path=path, name=Path(path).name.split(".")[0])
        self._set_study(s)
        self._remember_recent(s.path)

    def save_study(self) -> bool:
        if self.study.path is None:
            return self.save_study_as_dialog()
        self._store_view()
        try:
            self.study.save()
        except (OSError, AspectusInputError) as exc:
            self._warn("Cannot save the study", str(exc))
            return False
        self._update_title()
        return True

    def save_study_as(self, path) -> bool:
        self._store_view()
        try:
            self.study.save(path)
        except (OSError, AspectusInputError) as exc:
            self._warn("Cannot save the study", str(exc))
            return False
        self.study.refresh_all()
        self._refresh_list()
        self._remember_recent(self.study.path)
        self._update_title()
        return True

    def _autosave(self):
        """Keep the study file up to date as the user works (when it has a file).

        The write (atomic, with fsync) happens in a worker thread: a busy disk
        can take hundreds of milliseconds to fsync, which the window must not wait for.
        """
        if self.study.path is None or self._loading_study or getattr(self, "_shut", False):
            return
        self._store_view()
        path, data = self.study.path, self.study.to_dict()
        self._save_pool.submit(self._write_study, path, data)

    def _write_study(self, path, data):
        from aspectus.atomic import write_json

        try:
            write_json(path, data)
        except OSError as exc:
            self._save_failed.emit(f"Could not save the study: {exc}")

    def flush_saves(self) -> None:
        """Wait until pending study writes are on disk (for closing, tests and scripts)."""
        self._save_pool.submit(lambda: None).result(timeout=30)

    def _store_view(self):
        c = self.current_clip()
        self.study.view = {"selected": c.stem if c else None, "tab": self.tabs.currentIndex(),
                           "position_s": round(self.clip_view.position_s, 3)}

    def add_paths(self, paths) -> list[str]:
        """Add clip files and folders; returns the problems (also shown to the user)."""
        added, problems = self.study.add_paths(paths)
        self._refresh_list()
        if added and self.clip_list.currentItem() is None:
            self.clip_list.setCurrentItem(self.clip_list.topLevelItem(0))
        if problems:
            self._warn("Some files were not added", "\n".join(problems))
        self.statusBar().showMessage(f"Added {len(added)} clip(s).", 5000)
        self._autosave()
        self._update_actions()
        return problems

    def remove_selected(self):
        for it in self.clip_list.selectedItems():
            key = it.data(COL_NAME, Qt.UserRole)
            if key in self._queued:
                continue
            self.study.remove_clip(key)
        self._refresh_list()
        self._autosave()

    def set_segments(self, path, clip=None):
        clip = clip or self.current_clip()
        if clip is None:
            return
        try:
            if path is not None:
                from aspectus.events.analysis import read_segments

                read_segments(path)  # check it before it is used
            self.study.set_segments(clip, path)
        except AspectusInputError as exc:
            self._warn("Segments file not used", str(exc))
            return
        self._autosave()
        self._show_segments_text(clip)
        if clip.status in (study_mod.STATUS_DONE, study_mod.STATUS_STALE):
            self._request_reanalysis(clip)

    # ============================================================ list
    def _refresh_list(self):
        cur = self.current_clip()
        cur_key = cur.stem if cur else None
        self.clip_list.blockSignals(True)
        existing = {self.clip_list.topLevelItem(i).data(COL_NAME, Qt.UserRole): self.clip_list.topLevelItem(i)
                    for i in range(self.clip_list.topLevelItemCount())}
        keys = [c.stem for c in self.study.clips]
        if list(existing) != keys:
            self.clip_list.clear()
            existing = {}
            for c in self.study.clips:
                it = QTreeWidgetItem([c.stem, "", "", "", ""])
                it.setData(COL_NAME, Qt.UserRole, c.stem)
                self.clip_list.addTopLevelItem(it)
                bar = QProgressBar()
                bar.setRange(0, 100)
                bar.setTextVisible(True)
                bar.setMaximumHeight(16)
                self.clip_list.setItemWidget(it, COL_PROGRESS, bar)
                existing[c.stem] = it
        for c in self.study.clips:
            self._update_item(existing[c.stem], c)
        if cur_key in existing:
            self.clip_list.setCurrentItem(existing[cur_key])
        self.clip_list.blockSignals(False)
        self.list_hint.setVisible(not self.study.clips or len(self.study.clips) < 3)
        self._fit_clip_names()

    def _fit_clip_names(self) -> None:
        """Widen the clip list (up to 40 % of the window) so that the clips' names are not cut."""
        fm = self.clip_list.fontMetrics()
        names = [c.stem for c in self.study.clips]
        if not names:
            return
        fixed = sum(self.clip_list.columnWidth(c) for c in range(1, self.clip_list.columnCount()))
        need = max(fm.horizontalAdvance(n) for n in names) + 16 + fixed + 28  # cell margins, frame, scroll bar
        # a minimum width holds before the window is laid out too; the user can still widen the list
        self._left.setMinimumWidth(max(300, min(need, int(0.4 * max(self.width() - 330, 1000)))))

    def _item(self, key) -> QTreeWidgetItem | None:
        for i in range(self.clip_list.topLevelItemCount()):
            it = self.clip_list.topLevelItem(i)
            if it.data(COL_NAME, Qt.UserRole) == key:
                return it
        return None

    def progress_bar(self, key) -> QProgressBar | None:
        it = self._item(key)
        return self.clip_list.itemWidget(it, COL_PROGRESS) if it else None

    def _update_item(self, it: QTreeWidgetItem, c: study_mod.StudyClip, status_text: str | None = None):
        status = status_text or c.status
        if c.stem in self._queued and status_text is None:
            status = "queued"
        it.setText(COL_STATUS, status)
        colour = theme.STATUS_COLOURS.get(status, "#424242")
        from PySide6.QtGui import QBrush, QColor

        it.setForeground(COL_STATUS, QBrush(QColor(colour)))
        tip = theme.STATUS_TIPS.get(status, "")
        if c.error:
            tip = c.error
        it.setToolTip(COL_STATUS, tip)
        it.setToolTip(COL_NAME, c.path)
        s = c.summary or {}
        it.setText(COL_FACE, theme.fmt(s.get("face_found_frac"), pct=True) if s else "")
        from aspectus.webcam.pipeline import usable_word

        it.setText(COL_USABLE, usable_word(s))
        it.setToolTip(COL_USABLE, s.get("verdict") or "")
        bar = self.clip_list.itemWidget(it, COL_PROGRESS)
        if bar is not None:
            if c.stem not in self._queued:
                bar.setValue(100 if c.status in (study_mod.STATUS_DONE, study_mod.STATUS_STALE) else 0)
            bar.setFormat("%p %" if status == "processing" else status)
            bar.setToolTip(tip)

    def _on_current_changed(self, cur, _prev):
        if cur is None:
            self._show_clip(None)
            return
        self._show_clip(self.study.find(cur.data(COL_NAME, Qt.UserRole)))
        if not self._loading_study:
            self._autosave()

    def select_clip(self, key: str) -> None:
        it = self._item(key)
        if it is not None:
            self.clip_list.setCurrentItem(it)

    def _clip_menu(self, pos):
        it = self.clip_list.itemAt(pos)
        menu = QMenu(self)
        if it is not None:
            menu.addAction("Process this clip", self.process_selected)
            menu.addAction("Choose reference recording…", self.validation_view.choose_reference_dialog)
            menu.addAction("Choose task segments file…", self.choose_segments_dialog)
            menu.addAction("Open result folder", self.open_clip_folder)
            act = menu.addAction("Check against target sequence…", lambda: self.check_targets())
            act.setEnabled(self._check_cancel is None)
            menu.addSeparator()
            menu.addAction("Remove from study", self.remove_selected)
        else:
            menu.addAction("Add clips…", self.add_clips_dialog)
            menu.addAction("Add folder…", self.add_folder_dialog)
        menu.exec(self.clip_list.viewport().mapToGlobal(pos))

    # ========================================================== clip data
    def _show_clip(self, clip: study_mod.StudyClip | None):
        """Show a clip: its video at once, its samples and events once read (in a worker thread)."""
        self._current_samples = None
        self._current_events = None
        self._load_gen += 1
        if clip is None:
            from .clip_view import NO_CLIPS_TEXT, SELECT_CLIP_TEXT

            self.clip_view.set_clip(None, empty_text=SELECT_CLIP_TEXT if self.study.clips else NO_CLIPS_TEXT)
            self.clip_view.set_iris_estimate(None)
            self.clip_view.set_check_state(available=False, message="")
            self.clip_view.verdict.setText("")  # no clip: nothing to process yet, so no "process the clip" either
            self.time_view.set_data(None, empty_text=NO_CLIP_TRACE_TEXT)
            self.clip_message.hide()
            self.params.set_segments_text(None, enabled=False)
            self.results_view.refresh()
            self.validation_view.show_clip(None)
            return
        fov = float(self.study.process.get("fov_deg", 60.0)) if self.study.process else 60.0
        clip_path = self.study.clip_path(clip)
        failed = clip.status == study_mod.STATUS_FAILED and bool(clip.error)
        self.clip_view.set_clip(clip_path if clip_path.exists() else None, summary=clip.summary, fov_deg=fov,
                                failure=clip.error if failed else None)
        from aspectus.targets.check import read_check

        self.clip_view.set_target_check(read_check(self.study.clip_out_dir(clip)))
        self.clip_view.set_iris_estimate(self._iris_estimate_text(clip))
        running = self._check_cancel is not None
        self.clip_view.set_check_state(available=clip_path.exists(), running=running,
                                       message=("" if not running else None if self._check_key == clip.stem
                                                else f"Checking {self._check_key}…"))
        note = None
        if not clip_path.exists():
            note = f"The clip file is missing: {clip_path}"
        elif clip.status == study_mod.STATUS_FAILED and clip.error:
            note = f"{clip.stem} could not be processed. {clip.error}"
        elif clip.status == study_mod.STATUS_STALE:
            note = (f"{clip.stem} was processed with other processing settings; "
                    "process it again to update its results.")
        self.clip_message.setText(note or "")
        self.clip_message.setVisible(bool(note))
        self._show_segments_text(clip)
        self.results_view.refresh()
        self.validation_view.show_clip(clip)
        has_results = clip.status in (study_mod.STATUS_DONE, study_mod.STATUS_STALE)
        out = self.study.clip_out_dir(clip)
        seg = self.study.resolve(clip.segments) if clip.segments else None
        if not has_results:
            self.time_view.set_data(None, empty_text=(
                FAILED_TRACE_TEXT if failed else NO_SAMPLES_TEXT))
        self._load_pool.submit(self._load_clip_data, self._load_gen, clip.stem, out, has_results, seg)

    def _iris_estimate_text(self, clip) -> str | None:
        """run.json's record of the iris estimate the clip's results used, in plain words."""
        if clip.status not in (study_mod.STATUS_DONE, study_mod.STATUS_STALE):
            return None
        from aspectus.run_record import read_run_json
        from aspectus.webcam.gaze import describe_iris_estimate

        run = read_run_json(self.study.clip_out_dir(clip)) or {}
        extraction = run.get("extraction") if isinstance(run.get("extraction"), dict) else {}
        model = extraction.get("gaze_model") if isinstance(extraction.get("gaze_model"), dict) else {}
        return describe_iris_estimate(model.get("iris_estimate"))

    def _load_clip_data(self, gen, stem, out, has_results, seg):
        samples = events = segments = None
        note = None
        if has_results:
            try:
                from aspectus.webcam.pipeline import load_samples

                samples = load_samples(out)
                events = read_events(out)
            except Exception as exc:  # noqa: BLE001 - a damaged cache is reported, never a crash
                note = f"The saved results of {stem} cannot be read: {exc}"
        if seg is not None:
            try:
                from aspectus.events.analysis import read_segments

                segments = read_segments(seg)
            except Exception as exc:  # noqa: BLE001 - reported in the view
                note = f"The task segments file cannot be used: {exc}"
        self._clip_data.emit((gen, stem, samples, events, segments, note))

    def _apply_clip_data(self, payload):
        gen, stem, samples, events, segments, note = payload
        cur = self.current_clip()
        if gen != self._load_gen or cur is None or cur.stem != stem:
            return
        self._current_samples, self._current_events = samples, events
        self.clip_view.set_samples(samples)
        self.clip_view.seek(self.clip_view.position_s)
        self.time_view.set_data(samples, events=events, segments=segments,
                                empty_text=FAILED_TRACE_TEXT if cur.status == study_mod.STATUS_FAILED
                                else NO_SAMPLES_TEXT)
        self.time_view.set_cursor(self.clip_view.position_s)
        if note:
            self.clip_message.setText(note)
            self.clip_message.show()
        self.clip_loaded.emit(stem)

    def _read_segments_quiet(self, clip):
        try:
            from aspectus.events.analysis import read_segments

            return read_segments(self.study.resolve(clip.segments))
        except Exception:  # noqa: BLE001 - shown in the parameters panel instead
            return None

    def _show_segments_text(self, clip):
        """The clip's task segments in the parameters panel: the file's name and the segments it holds (the path
        from the study file in the tooltip), or why it cannot be read."""
        if clip is None or not clip.segments:
            self.params.set_segments_text(None, enabled=clip is not None)
            return
        self.params.set_segments_text(segments_summary(self.study.resolve(clip.segments)),
                                      tooltip=f"{clip.segments} (from the study file's folder)")

    def _seek_from_trace(self, t_s: float):
        self.clip_view.seek(t_s)

    # ========================================================= parameters
    def set_analysis_params(self, d: dict) -> None:
        """New detection parameters: save them and re-run detection on every processed clip."""
        self.study.analysis = dict(d)
        self._autosave()
        done = [c for c in self.study.clips if c.status in (study_mod.STATUS_DONE, study_mod.STATUS_STALE)
                and c.stem not in self._queued]
        cur = self.current_clip()
        done.sort(key=lambda c: 0 if cur is not None and c.stem == cur.stem else 1)
        for c in done:
            self._request_reanalysis(c)
        if done:
            self.run_label.setText(f"Re-running detection on {len(done)} clip(s)…")

    def _request_reanalysis(self, clip):
        seg = str(self.study.resolve(clip.segments)) if clip.segments else None
        self.reanalyser.request(clip.stem, str(self.study.clip_out_dir(clip)), self.study.analysis, seg)

    def _on_reanalysed(self, key, result, gen):
        if self.reanalyser.latest(key) != gen:
            return
        self.results_view.forget(key)
        cur = self.current_clip()
        if cur is not None and cur.stem == key:
            self._current_events = result.events
            segs = self._read_segments_quiet(cur) if cur.segments else None
            self.time_view.set_data(self._current_samples, events=result.events, segments=segs, keep_view=True)
            self.time_view.set_cursor(self.clip_view.position_s)
        self.results_view.refresh()
        self.run_label.setText("")
        self.reanalysed.emit(key)

    def _on_reanalyse_failed(self, key, message, gen):
        if self.reanalyser.latest(key) != gen:
            return
        self.run_label.setText("")
        self.statusBar().showMessage(f"{key}: detection could not be re-run. {message}", 15000)

    def set_process_params(self, d: dict) -> None:
        self.study.process = dict(d)
        self.study.refresh_all()
        self._refresh_list()
        self._autosave()
        self._offer_reprocess()

    def _outdated_keys(self) -> list[str]:
        return [c.stem for c in self.study.clips if c.status == study_mod.STATUS_STALE]

    def _offer_reprocess(self) -> None:
        """Say in the gaze section how many clips hold results measured with other settings, and offer to process
        the selected (or every outdated) clip again."""
        selected = self.clip_list.selectedItems() or ([self.clip_list.currentItem()]
                                                      if self.clip_list.currentItem() is not None else [])
        outdated = len(self._outdated_keys())
        self.params.show_reprocess_offer(outdated, len(selected))
        if outdated:  # said where it is seen whatever part of the panel is scrolled into view
            self.statusBar().showMessage(
                f"{outdated} clip{'s' if outdated != 1 else ''} now outdated: the change takes effect when "
                f"{'they are' if outdated != 1 else 'it is'} processed again (Process clips, or the offer under "
                "Parameters, Gaze measurement).", 20000)

    def reprocess(self, which: str) -> bool:
        """Process clips again after a processing setting changed: ``"selected"`` or ``"outdated"`` ones."""
        if which == "selected":
            started = self.process_selected()
        else:
            keys = self._outdated_keys()
            started = bool(keys) and self.process(keys, force=True)
        if started:
            self.params.show_reprocess_offer(0, 0)
        return bool(started)

    # ========================================================== processing
    def process_selected(self) -> bool:
        keys = [it.data(COL_NAME, Qt.UserRole) for it in self.clip_list.selectedItems()]
        if not keys and self.current_clip() is not None:
            keys = [self.current_clip().stem]
        return self.process(keys, force=True)

    def process(self, keys: list[str] | None = None, *, force: bool = False) -> bool:
        """Start processing ``keys`` (default: every clip without a current result)."""
        if self.run is not None and self.run.is_running():
            self.statusBar().showMessage("Processing is already running.", 5000)
            return False
        if self._check_cancel is not None:  # the check may be processing its clip into the same folder
            self.statusBar().showMessage(f"The target check of {self._check_key} is running: process when it has "
                                         "finished, or cancel it in the clip view.", 8000)
            return False
        if self.study.path is None:
            if not self.save_study_as_dialog():
                return False
        clips = [self.study.find(k) for k in keys] if keys is not None else self.study.clips_to_process()
        clips = [c for c in clips if c is not None and (force or c.status != study_mod.STATUS_DONE)]
        if not clips:
            self.statusBar().showMessage("Every clip already has current results.", 5000)
            return False
        self.params.flush()
        jobs, weights = [], {}
        log = self.study.output_root() / "problems.log"
        for c in clips:
            path = self.study.clip_path(c)
            jobs.append(Job(key=c.stem, clip_path=str(path), out_dir=str(self.study.clip_out_dir(c)),
                            process=dict(self.study.process), analysis=dict(self.study.analysis),
                            segments=str(self.study.resolve(c.segments)) if c.segments else None,
                            log_path=str(log)))
            try:
                weights[c.stem] = max(1.0, path.stat().st_size / 1e6)
            except OSError:
                weights[c.stem] = 1.0
        self._queued = {c.stem for c in clips}
        self._outcomes = {}
        run = ProcessingRun(jobs, weights=weights, mode=self.worker_mode, parent=self)
        run.clip_started.connect(self._on_clip_started)
        run.clip_progress.connect(self._on_clip_progress)
        run.clip_done.connect(self._on_clip_done)
        run.clip_failed.connect(self._on_clip_failed)
        run.clip_cancelled.connect(self._on_clip_cancelled)
        run.overall.connect(self._on_overall)
        run.finished.connect(self._on_run_finished)
        self.run = run
        for c in clips:
            bar = self.progress_bar(c.stem)
            if bar is not None:
                bar.setValue(0)
        self._refresh_list()
        self.overall_bar.setValue(0)
        self.remaining_label.setText(theme.fmt_duration(None))
        self.remaining_label.show()
        self.run_label.setText(f"Processing {len(jobs)} clip(s)…")
        run.start()
        self._update_actions()
        return True

    def cancel_run(self):
        if self.run is not None and self.run.is_running():
            self.run.cancel()
            self.run_label.setText("Cancelling: the clip being processed stops; finished clips are kept.")
            self.cancel_btn.setEnabled(False)

    def _on_clip_started(self, key):
        it = self._item(key)
        c = self.study.find(key)
        if it is not None and c is not None:
            self._update_item(it, c, "processing")

    def _on_clip_progress(self, key, frac, message):
        bar = self.progress_bar(key)
        if bar is not None:
            bar.setFormat("%p %")
            bar.setValue(int(round(100 * frac)))
        if message:
            self.run_label.setText(message)

    def _on_overall(self, frac, remaining_s):
        if self.run is None or not self.run.is_running():
            return
        self.overall_bar.setValue(int(round(1000 * frac)))
        self.remaining_label.setText(theme.fmt_duration(None if remaining_s < 0 else remaining_s))

    def _finish_clip(self, key):
        self._queued.discard(key)
        c = self.study.find(key)
        it = self._item(key)
        if c is not None and it is not None:
            self._update_item(it, c)
        self._autosave()
        cur = self.current_clip()
        if cur is not None and cur.stem == key:
            self._show_clip(cur)
        else:
            self.results_view.refresh()

    def _on_clip_done(self, key, summary):
        c = self.study.find(key)
        if c is None:
            return
        self.study.refresh_status(c)
        if not c.summary:
            c.summary = {k: summary.get(k) for k in study_mod.SUMMARY_KEYS if k in summary}
        c.error = None
        self.results_view.forget(key)
        self._finish_clip(key)
        # detection parameters changed while this clip was processing: bring it up to date
        if self.run is not None:
            job = next((j for j in self.run.jobs if j.key == key), None)
            if job is not None and job.analysis != self.study.analysis:
                self._request_reanalysis(c)

    def _on_clip_failed(self, key, message):
        c = self.study.find(key)
        if c is None:
            return
        self.study.refresh_status(c)
        c.status = study_mod.STATUS_FAILED if c.status != study_mod.STATUS_DONE else c.status
        c.error = message
        if c.status == study_mod.STATUS_DONE:  # earlier results are still there; say what happened
            c.error = "The last attempt failed; the results shown are from before. " + message
        self._finish_clip(key)
        self.statusBar().showMessage(f"{key}: {message}", 15000)

    def _on_clip_cancelled(self, key):
        c = self.study.find(key)
        if c is None:
            return
        self.study.refresh_status(c)
        if c.status not in (study_mod.STATUS_DONE, study_mod.STATUS_STALE):
            c.status = study_mod.STATUS_CANCELLED
        self._finish_clip(key)

    def _on_run_finished(self, outcomes):
        self._queued.clear()
        n_done = sum(v == "done" for v in outcomes.values())
        n_fail = sum(v == "failed" for v in outcomes.values())
        n_canc = sum(v == "cancelled" for v in outcomes.values())
        parts = [f"{n_done} clip(s) processed"]
        if n_fail:
            parts.append(f"{n_fail} failed (select one to see why)")
        if n_canc:
            parts.append(f"{n_canc} cancelled")
        self.run_label.setText("; ".join(parts) + ".")
        self.run_label.setToolTip(self.run_label.text())
        self.overall_bar.setValue(1000 if not n_canc else self.overall_bar.value())
        self.remaining_label.setText("")
        self.remaining_label.hide()  # its room goes to the run's summary, read whole at 1366 px
        self._refresh_list()
        self._autosave()
        self._update_actions()
        self.run_finished.emit(outcomes)

    def _update_actions(self):
        running = self.run is not None and self.run.is_running()
        has = bool(self.study.clips)
        for w in (self.run_all_btn, self.act_run):
            w.setEnabled(has and not running)
        for w in (self.run_sel_btn, self.act_run_sel):
            w.setEnabled(has and not running)
        self.cancel_btn.setEnabled(running)
        self.act_cancel.setEnabled(running)

    def _on_tab(self, i):
        if i == TAB_RESULTS:
            self.results_view.refresh()
        if not self._loading_study:
            self._autosave()

    # ============================================================= dialogs
    def _start_dir(self) -> str:
        return str(self.study.base_dir)

    def new_study_dialog(self):
        path, _ = QFileDialog.getSaveFileName(self, "New study", str(Path(self._start_dir()) / ("study" + study_mod.STUDY_SUFFIX)),
                                              "aspectus study (*.json)")
        if path:
            self.new_study(path)

    def open_study_dialog(self):
        path, _ = QFileDialog.getOpenFileName(self, "Open study", self._start_dir(), "aspectus study (*.json)")
        if path:
            self.open_study(path)

    def save_study_as_dialog(self) -> bool:
        path, _ = QFileDialog.getSaveFileName(self, "Save study as", str(Path(self._start_dir()) / ("study" + study_mod.STUDY_SUFFIX)),
                                              "aspectus study (*.json)")
        return self.save_study_as(path) if path else False

    def add_clips_dialog(self):
        exts = " ".join(f"*{e}" for e in study_mod.VIDEO_EXTENSIONS)
        paths, _ = QFileDialog.getOpenFileNames(self, "Add clips", self._start_dir(), f"Videos ({exts})")
        if paths:
            self.add_paths(paths)

    def add_folder_dialog(self):
        d = QFileDialog.getExistingDirectory(self, "Add every clip in a folder", self._start_dir())
        if d:
            self.add_paths([d])

    def choose_segments_dialog(self):
        if self.current_clip() is None:
            return
        path, _ = QFileDialog.getOpenFileName(self, "Task segments (label, onset_s, offset_s)", self._start_dir(),
                                              "Tables (*.csv *.tsv *.txt);;All files (*)")
        if path:
            self.set_segments(path)

    def open_results_folder(self):
        root = self.study.output_root()
        root.mkdir(parents=True, exist_ok=True)
        QDesktopServices.openUrl(QUrl.fromLocalFile(str(root)))

    def open_clip_folder(self):
        c = self.current_clip()
        if c is not None and self.study.clip_out_dir(c).is_dir():
            QDesktopServices.openUrl(QUrl.fromLocalFile(str(self.study.clip_out_dir(c))))

    def show_guide(self):
        """Open the bundled user guide (non-modal; one window however often it is asked for)."""
        from .guide import GuideDialog

        if getattr(self, "guide", None) is None:
            self.guide = GuideDialog(self)
        self.guide.show()
        self.guide.raise_()
        return self.guide

    def about(self):
        from aspectus import __version__

        QMessageBox.about(self, "About aspectus",
                          f"<b>aspectus</b> {__version__} – eye-movement features from recorded webcam clips, computed offline "
                          "on this computer.<br><br>Webcam gaze estimates are research measurements with known "
                          "error, not a diagnostic, disciplinary or surveillance instrument. Classroom video "
                          "shows minors: keep to your consent, assent and ethics approval, and share features "
                          "rather than video.")

    def _warn(self, title, text):
        if getattr(self, "quiet", False):
            self.statusBar().showMessage(f"{title}: {text}", 15000)
            self.last_warning = (title, text)
            return
        QMessageBox.warning(self, title, text)

    # ============================================================== misc
    def _update_title(self):
        name = self.study.path.name if self.study.path else "unsaved study"
        self.setWindowTitle(f"{APP_TITLE} – {self.study.name} ({name})")

    def _fill_recent(self):
        self.recent_menu.clear()
        for p in self._recent():
            self.recent_menu.addAction(p, lambda p=p: self.open_study(p))
        self.recent_menu.setEnabled(bool(self._recent()))

    def _recent(self) -> list[str]:
        if self.settings is None:
            return []
        v = self.settings.value("recent_studies", [])
        return [str(x) for x in (v if isinstance(v, list) else [v]) if x]

    def _remember_recent(self, path):
        if self.settings is None or path is None:
            return
        items = [str(path)] + [p for p in self._recent() if p != str(path)]
        self.settings.setValue("recent_studies", items[:8])
        self._fill_recent()

    def dragEnterEvent(self, ev):  # noqa: N802 - Qt override
        if ev.mimeData().hasUrls():
            ev.acceptProposedAction()

    def dropEvent(self, ev):  # noqa: N802 - Qt override
        paths = [u.toLocalFile() for u in ev.mimeData().urls() if u.isLocalFile()]
        studies = [p for p in paths if p.lower().endswith(".json")]
        if len(studies) == 1 and len(paths) == 1:
            self.open_study(studies[0])
        elif paths:
            self.add_paths(paths)
        ev.acceptProposedAction()

    def shutdown(self):
        """Stop background work (run, re-analyses, frame decoding); pending study writes finish first."""
        if getattr(self, "_shut", False):
            return
        self._autosave()
        self._shut = True
        if self.run is not None and self.run.is_running():
            self.run.shutdown()
        self.reanalyser.shutdown()
        self._load_pool.shutdown(wait=True, cancel_futures=True)
        self._save_pool.shutdown(wait=True)
        self.clip_view.shutdown()
        self.time_view.shutdown()
        self.results_view.canvas.shutdown()
        self.validation_view.canvas.shutdown()

    def closeEvent(self, ev):  # noqa: N802 - Qt override
        if self.run is not None and self.run.is_running() and not getattr(self, "quiet", False):
            ans = QMessageBox.question(self, "Processing is running",
                                       "Stop processing and quit? Clips already finished keep their results.")
            if ans != QMessageBox.Yes:
                ev.ignore()
                return
        if self.study.path is None and self.study.clips and not getattr(self, "quiet", False):
            ans = QMessageBox.question(self, "Save the study?", "This study has not been saved. Save it now?",
                                       QMessageBox.Save | QMessageBox.Discard | QMessageBox.Cancel)
            if ans == QMessageBox.Cancel:
                ev.ignore()
                return
            if ans == QMessageBox.Save and not self.save_study_as_dialog():
                ev.ignore()
                return
        if self.settings is not None:
            self.settings.setValue("geometry", self.saveGeometry())
            self.settings.setValue("state", self.saveState())
        self.shutdown()
        super().closeEvent(ev)


def _check_error_text(exc: BaseException, clip_name: str, schedule: Path) -> str:
    """A failed known-target check as a plain message: which file, what was wrong, what to do."""
    from aspectus.errors import AspectusError

    if isinstance(exc, AspectusError):
        return f"The check of {clip_name} against {schedule.name} could not be made: {exc}"
    if isinstance(exc, OSError):
        where = exc.filename or schedule
        return (f"The check of {clip_name} could not read or write {where} ({exc.strerror or exc}); "
                "check that the file exists and the result folder is writable, then try again.")
    return (f"The check of {clip_name} against {schedule.name} stopped because of an unexpected problem "
            f"({type(exc).__name__}: {exc}); please report it with this message.")
