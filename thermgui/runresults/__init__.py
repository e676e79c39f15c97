"""The run-and-results half of the app: running a study, scrubbing it in 3D, charts and peak table.

``install(window)`` adds the Run/Stop actions, the docks and ``window.open_results(folder)``.
Qt-free parts: :mod:`.store` (results held in numpy), :mod:`.timefmt`, :mod:`.messages`.
"""
from __future__ import annotations

from .store import ResultsStore, results_folder_for

__all__ = ["install", "ResultsStore", "results_folder_for"]


def install(window):
    """Add running and results to ``window`` (see thermgui.mainwindow.MainWindow); returns the controller."""
    from .controller import ResultsController

    controller = ResultsController(window)
    window.results = controller
    window.open_results = controller.open_results
    return controller
