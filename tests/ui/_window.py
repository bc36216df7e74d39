"""The app's main window as the GUI tests open it: quiet (messages go to the status bar instead of modal boxes),
at a laptop's 1366 x 768, shown."""
from __future__ import annotations


def shown_window(qtbot, mode: str = "thread"):
    """A shown :class:`ui.main_window.MainWindow` whose work runs in a thread (``mode="thread"``) or in worker
    processes (``"process"``); qtbot closes it at the test's end."""
    from ui.main_window import MainWindow

    w = MainWindow(worker_mode=mode)
    w.quiet = True
    qtbot.addWidget(w)
    w.resize(1366, 768)
    w.show()
    return w
