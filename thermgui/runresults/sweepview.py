"""A sweep file started from the app: its cases run on a Dask LocalCluster (``thermgui sweep``'s own
:func:`solver.answers.sweep.sweep_to_folder`, on a worker thread), then ``cases.csv`` is shown as a table
(over rows red, at-risk amber, as in the peak table) with the worst case per part above it.

Results go to ``<sweep file stem>-cases/`` beside the sweep file (cases.csv, worst.csv, margin.png).
"""
from __future__ import annotations

import csv
import io
import re
from pathlib import Path

from PySide6.QtCore import QObject, Qt
from PySide6.QtGui import QAction, QBrush, QColor
from PySide6.QtWidgets import (QAbstractItemView, QHBoxLayout, QHeaderView, QLabel, QPushButton, QTableWidget,
                               QTableWidgetItem, QVBoxLayout, QWidget)

from solver.errors import ModelError

from .jobs import Job
from .peakview import STATUS_WORDS, VERDICT_FILL, VERDICT_TEXT
from .runpanel import CAUTION_STYLE, CAUTION_TEXT, ERROR_STYLE

_BAR = re.compile(r"(\d+)/(\d+) cases")


def output_folder(sweep_path) -> Path:
    p = Path(sweep_path)
    return p.with_name(p.stem + "-cases")


class _Lines(io.TextIOBase):
    """A text stream for the command's messages: progress-bar updates go to ``progress`` as
    "3/16 cases", everything else is kept (the error text when the sweep is refused)."""

    def __init__(self, progress):
        self.progress = progress
        self.kept: list[str] = []

    def write(self, text: str) -> int:
        m = _BAR.search(text)
        if m and "\r" in text:
            self.progress(f"{m.group(1)} of {m.group(2)} cases done")
        elif text.strip():
            self.kept.append(text.strip())
        return len(text)


def run(sweep_path, out_dir, workers=None, progress=None):
    """Run the sweep as ``thermgui sweep`` does (worker thread); the folder written, or the error."""
    from solver.answers.sweep import sweep_to_folder

    err = _Lines(progress or (lambda m: None))
    code = sweep_to_folder(sweep_path, out_dir, workers=workers, stream=io.StringIO(), err=err)
    if code != 0:
        text = "\n".join(err.kept) or f"the sweep stopped (exit {code})"
        raise ModelError(("", text)) if code == 2 else RuntimeError(text)
    return Path(out_dir)


def read_table(path) -> tuple[list[str], list[list[str]]]:
    with open(path, newline="") as f:
        rows = list(csv.reader(f))
    return (rows[0], rows[1:]) if rows else ([], [])


def worst_text(row: dict) -> str:
    """``chip: case 3, 60.3 °C, margin -20.3 K, OVER`` from a worst.csv row."""
    def num(key, fmt):
        try:
            return fmt.format(float(row.get(key, "")))
        except ValueError:
            return ""
    bits = [f"case {row.get('worst_case', '')}", num("peak_c", "{:.1f} °C"), num("margin_k", "margin {:+.1f} K"),
            STATUS_WORDS.get(row.get("status", ""), row.get("status", ""))]
    return f"{row.get('part', '')}: " + ", ".join(b for b in bits if b)


class SweepWindow(QWidget):
    def __init__(self, parent=None):
        super().__init__(parent, Qt.Window)
        self.setWindowTitle("Sweep cases")
        self.state = QLabel("")
        self.state.setWordWrap(True)
        self.message = QLabel()
        self.message.setWordWrap(True)
        self.message.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.message.setStyleSheet(ERROR_STYLE)
        self.message.hide()
        self.worst = QLabel("")
        self.worst.setWordWrap(True)
        self.table = QTableWidget(0, 0)
        self.table.verticalHeader().setVisible(False)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.stop_button = QPushButton("Stop")
        self.close_button = QPushButton("Close")
        self.close_button.clicked.connect(self.close)
        caution = QLabel("⚠ " + CAUTION_TEXT)
        caution.setWordWrap(True)
        caution.setStyleSheet(CAUTION_STYLE)
        buttons = QHBoxLayout()
        buttons.addWidget(self.state, 1)
        buttons.addWidget(self.stop_button)
        buttons.addWidget(self.close_button)
        lay = QVBoxLayout(self)
        lay.addWidget(self.message)
        lay.addWidget(self.worst)
        lay.addWidget(self.table, 1)
        lay.addLayout(buttons)
        lay.addWidget(caution)
        self.resize(900, 520)

    def show_cases(self, folder: Path) -> None:
        header, rows = read_table(folder / "cases.csv")
        status = header.index("status") if "status" in header else None
        self.table.setColumnCount(len(header))
        self.table.setHorizontalHeaderLabels(header)
        self.table.setRowCount(len(rows))
        for r, row in enumerate(rows):
            verdict = row[status] if status is not None else ""
            for c, text in enumerate(row):
                item = QTableWidgetItem(STATUS_WORDS.get(text, text) if c == status else text)
                if verdict in VERDICT_TEXT:
                    item.setForeground(QBrush(QColor(VERDICT_TEXT[verdict])))
                    item.setBackground(QBrush(QColor(VERDICT_FILL[verdict])))
                self.table.setItem(r, c, item)
        w_header, w_rows = read_table(folder / "worst.csv")
        if w_rows:
            self.worst.setText("<b>Worst case per part</b> (worst.csv): "
                               + "; ".join(worst_text(dict(zip(w_header, row))) for row in w_rows))
        self.stop_button.hide()
        self.state.setText(f"{len(rows)} rows in {folder.name}/cases.csv (also worst.csv, margin.png)")
        self.state.setToolTip(str(folder))

    def shown_rows(self) -> list[list[str]]:
        return [[self.table.item(r, c).text() for c in range(self.table.columnCount())]
                for r in range(self.table.rowCount())]


class SweepControl(QObject):
    """The "Run Sweep File…" action."""

    def __init__(self, results, workers: int | None = None):
        super().__init__(results)
        self.results = results
        self.workers = workers
        w = results.window
        self.action = QAction("Run S&weep File…", w)
        self.action.setToolTip("Run the cases of a sweep file (JSON) on a Dask cluster on this machine and "
                               "show its cases table")
        menu = w.menus.get("run") if isinstance(getattr(w, "menus", None), dict) else None
        if menu is not None:
            menu.addAction(self.action)
        self.action.triggered.connect(self._ask)
        self.window: SweepWindow | None = None
        self.job: Job | None = None
        self.folder: Path | None = None

    def _ask(self) -> None:
        prompts = getattr(self.results.window, "prompts", None)
        path = prompts.open_path("Run a sweep file", str(self.results.export_dir())) if prompts is not None else ""
        if path:
            self.start(path)

    def start(self, sweep_path) -> bool:
        if self.job is not None and self.job.running:
            return False
        out = output_folder(sweep_path)
        if self.window is None:
            self.window = SweepWindow(self.results.window)
            self.window.stop_button.clicked.connect(self.stop)
        win = self.window
        win.message.hide()
        win.table.setRowCount(0)
        win.worst.setText("")
        win.stop_button.show()
        win.state.setText(f"Starting a Dask cluster for {Path(sweep_path).name}…")
        win.show()
        win.raise_()
        self.folder = None
        workers = self.workers
        self.job = Job(lambda progress, cancelled: run(sweep_path, out, workers, progress), self)
        self.job.worker.progress.connect(self._on_progress)
        self.job.worker.succeeded.connect(self._on_done)
        self.job.worker.failed.connect(self._on_failed)
        self.job.worker.stopped.connect(self._on_stopped)
        self.job.start()
        return True

    def stop(self) -> None:
        if self.job is not None and self.job.running:
            self.job.stop()
            self.window.state.setText("Stopping when the next case comes in…")

    def wait(self, timeout_ms: int = 300000) -> bool:
        return self.job.wait(timeout_ms) if self.job is not None else True

    def shutdown(self) -> None:
        self.stop()
        self.wait()
        if self.window is not None:
            self.window.close()

    def _on_progress(self, text: str) -> None:
        self.window.state.setText(f"Sweep running on a LocalCluster: {text}…")

    def _on_done(self, folder) -> None:
        self.folder = folder
        self.window.show_cases(folder)

    def _on_failed(self, headline: str, details: str, issues) -> None:
        self.window.message.setText(f"The sweep did not run.\n{details}")
        self.window.message.show()
        self.window.stop_button.hide()
        self.window.state.setText("Nothing was written.")

    def _on_stopped(self, text: str) -> None:
        self.window.stop_button.hide()
        self.window.state.setText("Stopped; no cases table was written.")
