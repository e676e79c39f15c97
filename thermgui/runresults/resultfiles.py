"""Results on disk, for the results controller: open a finished run, export the peak table,
save a picture of the view, and keep an earlier run's folder safe to replace.

:class:`ResultFiles` is mixed into :class:`~thermgui.runresults.controller.ResultsController`; it
uses the controller's ``store``, ``view``, ``status``, ``table``, ``timeline`` and ``window``.
"""
from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import QFileDialog

from solver.errors import ModelError
from solver.io.fieldseries import FIELD_FILE
from solver.io.runfolder import is_run_folder, load_run
from solver.io.runstore import foreign_files

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
            if not run.has_fields:
                self.status.show_error("These results have no temperature field to show.",
                                       f"{folder}: the run was solved without fields (--fields none); "
                                       "peaks.csv and history.csv in the folder hold its table and curves.")
                return None
            if store is None:
                store = ResultsStore.from_finished(run)
        except ModelError as e:
            self.status.show_error("These results cannot be opened.", e.describe())
            return None
        except (Exception, RecursionError) as e:  # damaged in a way no check foresaw: shown, never a traceback
            self.status.show_error("These results cannot be opened.",
                                   f"{folder}: damaged or incomplete ({type(e).__name__}: {e})")
            return None
        if hasattr(self, "whatif"):
            self.whatif.results_opened()
        self.store = store
        self._results_model = run.model_dict
        self.stale = self._model_differs()
        self.status.clear_error()
        # decide the revealing cut before the geometry, so a big mesh's surface is extracted once
        shown, self.results_shown = self.results_shown, False  # (nothing is redrawn meanwhile)
        try:
            cut_note = self._auto_cut()
        finally:
            self.results_shown = shown
        self.view.set_geometry(store.points_mm, store.tets)
        self.table.set_rows(store.peak_rows, store.duration_s)
        self.fit_table()
        self.export_action.setEnabled(True)
        self.report_action.setEnabled(True)
        self.status.started(f"Results of {Path(folder).name}", store.duration_s)
        self.status.finished(f"Opened {store.n_frames} outputs from {Path(folder).name} (not solved again)"
                             + cut_note)
        if getattr(run, "notice", None):  # e.g. written before manifests: stays in the run panel
            self.status.show_note(run.notice)
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

    def export_dir(self) -> Path:
        """Where export dialogs start: the model's folder; for an unsaved model the folder that holds
        the opened results (unless it is a temporary one), else the home folder."""
        path = getattr(self.window.document, "path", None)
        if path:
            return Path(path).resolve().parent
        folder = getattr(self.store, "folder", None)
        if folder is not None and not _in_temp(folder):
            return Path(folder).resolve().parent
        return Path.home()

    def _ask_path(self, title: str, name: str, filter_text: str, suffix: str) -> str:
        start = str(self.export_dir() / name)
        prompts = getattr(self.window, "prompts", None)
        if prompts is not None and hasattr(prompts, "file_path"):
            return prompts.file_path(title, start, filter_text, suffix)
        path, _ = QFileDialog.getSaveFileName(self.window, title, start, filter_text)
        return path

    def _stem(self) -> str:
        path = getattr(self.window.document, "path", None)
        return Path(path).stem if path else "untitled"

    def _ask_export(self) -> None:
        if self.store is None or self.store.peak_rows is None:
            return
        path = self._ask_path("Export peak table", f"{self._stem()}-peaks.csv", "CSV files (*.csv)", ".csv")
        if path:
            try:
                self.export_peaks(path)
                self._status_bar(f"Peak table written to {path}")
            except OSError as e:
                self.status.show_error("The peak table could not be written.", f"{path}: {e.strerror or e}")

    def export_report(self, path) -> Path:
        """Write the design-review report of the shown results (see thermgui.report)."""
        from ..report import write_report

        return write_report(self.store.folder, path)

    def _ask_report(self) -> None:
        if self.store is None or not self.store.complete or self.store.folder is None:
            self._status_bar("Finish a run (or open a finished results folder) to make a report.")
            return
        path = self._ask_path("Export design-review report", f"{self._stem()}-report.html",
                              "HTML files (*.html)", ".html")
        if not path:
            return
        from ..report import ReportError

        try:
            out = self.export_report(path)
        except ReportError as e:
            self.status.show_error("No report was written.", str(e))
            return
        except OSError as e:
            self.status.show_error("The report could not be written.", f"{path}: {e.strerror or e}")
            return
        self._status_bar(f"Report written to {out}")

    def _ask_picture(self) -> None:
        path = self._ask_path("Save view as picture", f"{self._stem()}-view.png", "PNG images (*.png)", ".png")
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


def _in_temp(folder) -> bool:
    import tempfile

    try:
        return Path(tempfile.gettempdir()).resolve() in Path(folder).resolve().parents
    except OSError:
        return False


def previous_run(folder: Path) -> str | None:
    """The question to ask before a Run replaces an earlier run in ``folder``; None if there is none.

    The run never empties the folder: it replaces only the files the earlier run listed (its
    manifest, or run.json and field.pvd for folders written before manifests) and keeps every other
    file (solver/io/runstore.py)."""
    folder = Path(folder)
    if not folder.is_dir() or not ((folder / "manifest.json").is_file() or (folder / "run.json").is_file()):
        return None
    kept = foreign_files(folder)
    note = (f"\n\nYour own files there are kept: {', '.join(kept[:3])}{' …' if len(kept) > 3 else ''}."
            if kept else "")
    return f"{folder} holds the results of an earlier run. Replace them with the new run?{note}"
