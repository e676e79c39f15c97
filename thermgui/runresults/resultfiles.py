"""Results on disk, for the results controller: open a finished run, export the peak table,
save a picture of the view, and keep an earlier run's folder safe to replace.

:class:`ResultFiles` is mixed into :class:`~thermgui.runresults.controller.ResultsController`; it
uses the controller's ``store``, ``view``, ``status``, ``table``, ``timeline`` and ``window``.
"""
from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import QFileDialog

from solver.errors import ModelError
from solver.runfolder import is_run_folder, load_run
from solver.runstore import foreign_files

from .store import ResultsStore, results_folder_for


class ResultFiles:
    def open_results(self, folder, loaded=None):
        """Show a finished run from its folder without solving; returns the FinishedRun (None on error).
        ``loaded``: (FinishedRun, ResultsStore) already read by the caller."""
        if self.running:
            self._status_bar("A run is in progress; stop it before opening other results.")
            return None
        try:
            run, store = loaded if loaded is not None else (None, None)
            if run is None:
                run = load_run(folder)
                store = ResultsStore.from_finished(run)
        except ModelError as e:
            self.status.show_error("These results cannot be opened.", e.describe())
            return None
        except (Exception, RecursionError) as e:  # damaged in a way no check foresaw: shown, never a traceback
            self.status.show_error("These results cannot be opened.",
                                   f"{folder}: damaged or incomplete ({type(e).__name__}: {e})")
            return None
        self.store = store
        self._results_model = run.model_dict
        self.stale = self._model_differs()
        self.status.clear_error()
        self.view.set_geometry(store.points_mm, store.tets)
        self.table.set_rows(store.peak_rows)
        self.export_action.setEnabled(True)
        self.status.started(f"Results of {Path(folder).name}", store.duration_s)
        self.status.finished(f"Opened {store.n_frames} outputs from {Path(folder).name} (not solved again)"
                             + self._auto_cut())
        if getattr(run, "notice", None):
            self._status_bar(f"Note: {run.notice}")
        self.status.detail.setToolTip(str(folder))
        self.timeline.blockSignals(True)
        self.timeline.set_times(store.times, store.duration_s)
        self.timeline.blockSignals(False)
        self._update_chart()
        self.show_action.setEnabled(True)
        self.set_results_shown(True)
        self.timeline.set_index(store.n_frames - 1)
        return run

    # ------------------------------------------------------------ presenting

    def _open_beside(self, model_path) -> bool:
        """Open ``<stem>.results`` if it holds results of exactly this model (True if opened)."""
        folder = results_folder_for(model_path)
        if not is_run_folder(folder):
            return False
        try:
            same = load_run(folder).model_dict == self.window.document.model.to_json_dict()
        except (Exception, RecursionError):  # incomplete, mixed or damaged: not opened beside the model
            return False
        if not same:
            self.status.detail.setText(f"{folder.name} holds results of an earlier version of this model; "
                                       "Run (F5) to update them.")
            return False
        return self.open_results(folder) is not None

    # ------------------------------------------------------------ files
    def export_peaks(self, path) -> None:
        """Write the peak table as CSV (the same content as peaks.csv from ``thermgui solve``)."""
        self.store.write_peaks_csv(path)

    def save_picture(self, path) -> None:
        self.view.save_picture(path)

    def _ask_export(self) -> None:
        if self.store is None or self.store.peak_rows is None:
            return
        path, _ = QFileDialog.getSaveFileName(self.window, "Export peak table", "peaks.csv", "CSV files (*.csv)")
        if path:
            try:
                self.export_peaks(path)
                self._status_bar(f"Peak table written to {path}")
            except OSError as e:
                self.status.show_error("The peak table could not be written.", f"{path}: {e.strerror or e}")

    def _ask_picture(self) -> None:
        path, _ = QFileDialog.getSaveFileName(self.window, "Save view as picture", "view.png", "PNG images (*.png)")
        if path:
            try:
                self.save_picture(path)
                self._status_bar(f"Picture saved to {path}")
            except (OSError, RuntimeError, ValueError) as e:
                self.status.show_error("The picture could not be saved.", f"{path}: {e}")

    def _ask_open(self) -> None:
        folder = QFileDialog.getExistingDirectory(self.window, "Open results folder")
        if folder:
            self.open_results(folder)


def previous_run(folder: Path) -> str | None:
    """The question to ask before a Run replaces an earlier run in ``folder``; None if there is none.

    The run never empties the folder: it replaces only the files the earlier run listed (its
    manifest, or run.json and field.pvd for folders written before manifests) and keeps every other
    file (solver/runstore.py)."""
    folder = Path(folder)
    if not folder.is_dir() or not ((folder / "manifest.json").is_file() or (folder / "run.json").is_file()):
        return None
    kept = foreign_files(folder)
    note = (f"\n\nYour own files there are kept: {', '.join(kept[:3])}{' …' if len(kept) > 3 else ''}."
            if kept else "")
    return f"{folder} holds the results of an earlier run. Replace them with the new run?{note}"
