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


def install_error_hook(window) -> None:
    """Errors nothing else caught are shown in the window (path and cause), not only on stderr.
    THERMGUI_DEBUG=1 keeps Python's own traceback on stderr as well."""
    import os

    from PySide6.QtWidgets import QMessageBox

    previous = sys.excepthook

    def hook(kind, value, tb):
        if os.environ.get("THERMGUI_DEBUG"):
            previous(kind, value, tb)
        try:
            QMessageBox.warning(window, "Something went wrong",
                                f"{kind.__name__}: {value}\n\nYour model is still open; save it under a new name "
                                "if in doubt. (Set THERMGUI_DEBUG=1 for details.)")
        except Exception:  # noqa: BLE001 - never fail inside the hook
            previous(kind, value, tb)

    sys.excepthook = hook


def run_app(path) -> int:
    """Open the app on ``path`` and run the event loop; returns the exit code."""
    app = make_application()
    window = open_window(path)
    install_error_hook(window)
    code = app.exec()
    window.shutdown()
    return code
