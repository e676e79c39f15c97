"""Start the desktop app: ``run_app(path)`` opens a model file or a results folder in a window."""
from __future__ import annotations

import sys
from pathlib import Path


def make_application():
    """The QApplication (created once), with the names QSettings uses."""
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("thermgui")
    app.setOrganizationName("thermgui")
    app.setApplicationDisplayName("thermgui")
    return app


def open_window(path=None, **window_kwargs):
    """A shown main window with ``path`` opened (a bad file is reported; the window then keeps a
    new untitled model). Unsaved changes kept from a crashed session are offered back."""
    import pyvista as pv

    from .mainwindow import MainWindow

    pv.global_theme.multi_samples = 0
    window = MainWindow(**window_kwargs)
    window.show_first_time()
    if path is not None:
        window.fileops.open_path(Path(path), ask_first=False)
    if window.document.path is None and not window.document.dirty:
        window.fileops.offer_recovery(untitled=True)
    return window


def run_app(path) -> int:
    """Open the app on ``path`` and run the event loop; returns the exit code."""
    app = make_application()
    window = open_window(path)
    code = app.exec()
    window.shutdown()
    return code
