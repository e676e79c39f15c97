"""Thermal impedance of the open model: Zth(t) curves on a log-time chart, the Foster fits, and
export of zth.csv / foster.csv / cauer.csv / zth.json / spice/ through :mod:`solver.answers.zthfiles`.

The curves are computed on a worker thread (:func:`solver.answers.zth.compute_zth` on the file's mesh, then
:func:`solver.answers.commands.fit_networks`); this module only draws and writes what they return.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QObject, Qt
from PySide6.QtGui import QAction, QBrush, QColor
from PySide6.QtWidgets import (QAbstractItemView, QFileDialog, QHBoxLayout, QHeaderView, QLabel, QPushButton,
                               QSplitter, QTableWidget, QTableWidgetItem, QVBoxLayout, QWidget)

from .chart import LINE_COLOURS
from .jobs import Job
from .runpanel import CAUTION_TEXT, CAUTION_STYLE, ERROR_STYLE

HEADINGS = ["Part", "Heated part", "Rth\nK/W", "Stages", "Fit error\n%", "Network"]


def compute(model, progress=None, cancelled=None):
    """(result, fits, cauers, warnings, fitted curves) for ``model`` (worker thread; solver calls only)."""
    from solver.answers.commands import fit_networks
    from solver.fem.problem import build_problem
    from solver.answers.zth import compute_zth

    problem = build_problem(model)
    result = compute_zth(problem, progress=progress)
    notes = list(problem.warnings)
    fits, cauers = fit_networks(result, warn=notes.append)
    curves = {key: fit.step(result.times) for key, fit in fits.items()}
    return result, fits, cauers, notes, curves


def network_text(fit, cauer) -> str:
    return "signed Foster" if fit.signed else ("Foster + Cauer" if cauer is not None else "Foster")


class ZthWindow(QWidget):
    """A window of its own: chart (log time) beside the table of pairs; Export, Stop, Close."""

    def __init__(self, parent=None):
        super().__init__(parent, Qt.Window)
        self.setWindowTitle("Thermal impedance Zth(t)")
        self.state = QLabel("")
        self.state.setWordWrap(True)
        self.message = QLabel()
        self.message.setWordWrap(True)
        self.message.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.message.setStyleSheet(ERROR_STYLE)
        self.message.hide()
        self.plot = pg.PlotWidget(background="w")
        pi = self.plot.plotItem
        pi.setLogMode(x=True, y=False)
        pi.showGrid(x=True, y=True, alpha=0.25)
        pi.setLabel("bottom", "Time after a 1 W step (s, log scale)")
        pi.setLabel("left", "Zth (K/W)")
        for side in ("left", "bottom"):
            pi.getAxis(side).enableAutoSIPrefix(False)
        self.plot.setMouseEnabled(x=False, y=False)
        pi.hideButtons()
        self.curves: dict[tuple[str, str], pg.PlotDataItem] = {}
        self.fit_curves: dict[tuple[str, str], pg.PlotDataItem] = {}
        self.table = QTableWidget(0, len(HEADINGS))
        self.table.setHorizontalHeaderLabels(HEADINGS)
        self.table.verticalHeader().setVisible(False)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(QHeaderView.ResizeToContents)
        header.setStretchLastSection(True)
        self.export_button = QPushButton("Export files…")
        self.export_button.setToolTip("zth.csv, foster.csv, cauer.csv, zth.json and spice/<part>.sub into a folder")
        self.export_button.setEnabled(False)
        self.stop_button = QPushButton("Stop")
        self.close_button = QPushButton("Close")
        self.close_button.clicked.connect(self.close)
        caution = QLabel("⚠ " + CAUTION_TEXT)
        caution.setWordWrap(True)
        caution.setStyleSheet(CAUTION_STYLE)
        split = QSplitter(Qt.Horizontal)
        split.addWidget(self.plot)
        split.addWidget(self.table)
        split.setStretchFactor(0, 3)
        split.setStretchFactor(1, 2)
        self.split = split
        buttons = QHBoxLayout()
        buttons.addWidget(self.state, 1)
        buttons.addWidget(self.stop_button)
        buttons.addWidget(self.export_button)
        buttons.addWidget(self.close_button)
        lay = QVBoxLayout(self)
        lay.addWidget(self.message)
        lay.addWidget(split, 1)
        lay.addLayout(buttons)
        lay.addWidget(caution)
        self.resize(1000, 520)

    def show_busy(self, text: str) -> None:
        self.state.setText(text)
        self.stop_button.show()
        self.export_button.setEnabled(False)

    def show_error(self, text: str | None) -> None:
        self.message.setText(text or "")
        self.message.setVisible(bool(text))
        if text:
            self.stop_button.hide()

    def show_result(self, result, fits, cauers, curves) -> None:
        pi = self.plot.plotItem
        pi.clear()
        self.curves, self.fit_curves = {}, {}
        t = np.asarray(result.times, float)
        pairs = list(result.pairs())
        self.table.setRowCount(len(pairs))
        for k, (a, j, part, heated) in enumerate(pairs):
            colour = LINE_COLOURS[k % len(LINE_COLOURS)]
            style = Qt.SolidLine if part == heated else Qt.DashLine
            self.curves[(part, heated)] = pi.plot(t, result.zth[a, j], pen=pg.mkPen(colour, width=2, style=style))
            self.fit_curves[(part, heated)] = pi.plot(t[::4], curves[(a, j)][::4], pen=None, symbol="o",
                                                      symbolSize=4, symbolBrush=colour, symbolPen=None)
            fit = fits[(a, j)]
            cells = [f"{'━' if part == heated else '╌'} {part}", heated, f"{result.rth[a, j]:.3g}",
                     str(fit.stages), f"{100 * fit.error:.2f}", network_text(fit, cauers.get((a, j)))]
            for c, text in enumerate(cells):
                item = QTableWidgetItem(text)
                if c in (2, 3, 4):
                    item.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
                if c == 0:  # the table is the legend: the part in its curve's colour
                    item.setForeground(QBrush(QColor(colour)))
                    item.setData(Qt.UserRole, part)
                self.table.setItem(k, c, item)
        pi.setTitle("<span style='color:#555'>━ self term (part heated)&nbsp;&nbsp;╌ cross term&nbsp;&nbsp;"
                    "● Foster fit&nbsp;&nbsp;(colours as in the table)</span>", size="9pt")
        header = self.table.horizontalHeader()
        table_w = sum(max(self.table.sizeHintForColumn(c), header.sectionSizeHint(c))
                      for c in range(self.table.columnCount())) + 2 * self.table.frameWidth() + 8
        total = max(sum(self.split.sizes()), self.width() - 30)
        self.split.setSizes([max(300, total - table_w), table_w])
        self.stop_button.hide()
        self.export_button.setEnabled(True)
        self.state.setText(f"{len(pairs)} curve(s), {t[0]:.3g} s to {t[-1]:.3g} s; reduced basis of "
                           f"{result.basis_size} vectors, on the model file's mesh.")

    def shown_rows(self) -> list[list[str]]:
        """Rows as shown, the part's name without its line mark."""
        return [[self.table.item(r, 0).data(Qt.UserRole)]
                + [self.table.item(r, c).text() for c in range(1, self.table.columnCount())]
                for r in range(self.table.rowCount())]


class ZthControl(QObject):
    """The "Thermal Impedance (Zth)…" action: computes for the open model and shows a ZthWindow."""

    def __init__(self, results):
        super().__init__(results)
        self.results = results
        w = results.window
        self.action = QAction("Thermal &Impedance (Zth)…", w)
        self.action.setToolTip("Zth(t) of the rated parts under 1 W steps of each heated part, Foster/Cauer "
                               "fits, and CSV / SPICE export (computed on a worker thread)")
        menu = w.menus.get("run") if isinstance(getattr(w, "menus", None), dict) else None
        if menu is not None:
            menu.addAction(self.action)
        self.action.triggered.connect(self.start)
        self.window: ZthWindow | None = None
        self.job: Job | None = None
        self.answer = None  # (result, fits, cauers, notes, curves, title)

    def start(self) -> bool:
        """Compute the Zth curves of the document's model now (False if already computing)."""
        if self.job is not None and self.job.running:
            return False
        model = self.results.window.document.model.model_copy(deep=True)
        if self.window is None:
            self.window = ZthWindow(self.results.window)
            self.window.stop_button.clicked.connect(self.stop)
            self.window.export_button.clicked.connect(self._ask_export)
        win = self.window
        win.show_error(None)
        win.show_busy("Computing Zth curves of the model on its file's mesh…")
        win.show()
        win.raise_()
        self.answer = None
        self.job = Job(lambda progress, cancelled: compute(model, progress, cancelled), self)
        self.job.worker.progress.connect(self._on_progress)
        self.job.worker.succeeded.connect(self._on_done)
        self.job.worker.failed.connect(self._on_failed)
        self.job.worker.stopped.connect(self._on_stopped)
        self._title = model.title
        self.job.start()
        return True

    def stop(self) -> None:
        if self.job is not None and self.job.running:
            self.job.stop()

    def wait(self, timeout_ms: int = 120000) -> bool:
        return self.job.wait(timeout_ms) if self.job is not None else True

    def shutdown(self) -> None:
        self.stop()
        self.wait()
        if self.window is not None:
            self.window.close()

    def _on_progress(self, text: str) -> None:
        if self.window is not None:
            self.window.show_busy(f"Computing Zth: {text}…")

    def _on_done(self, answer) -> None:
        result, fits, cauers, notes, curves = answer
        self.answer = (result, fits, cauers, notes, curves, self._title)
        self.window.show_result(result, fits, cauers, curves)
        if notes:
            self.window.state.setText(self.window.state.text() + " Note: " + "; ".join(notes))

    def _on_failed(self, headline: str, details: str, issues) -> None:
        self.window.show_error(f"No Zth curves: {headline}\n{details}")
        self.window.state.setText("")

    def _on_stopped(self, text: str) -> None:
        self.window.stop_button.hide()
        self.window.state.setText("Stopped. Choose Run ▸ Thermal Impedance (Zth)… to start again.")

    def export(self, folder) -> list:
        """Write the files of the shown curves into ``folder`` (the writers of ``thermgui zth``)."""
        from solver.answers.zthfiles import write_zth_outputs

        result, fits, cauers, _, _, title = self.answer
        return write_zth_outputs(folder, result, fits, cauers, title)

    def _ask_export(self) -> None:
        if self.answer is None:
            return
        prompts = getattr(self.results.window, "prompts", None)
        start = str(self.results.export_dir())
        if prompts is not None and hasattr(prompts, "folder_path"):
            folder = prompts.folder_path("Export Zth files into a folder", start)
        else:
            folder = QFileDialog.getExistingDirectory(self.window, "Export Zth files into a folder", start)
        if not folder:
            return
        try:
            written = self.export(Path(folder))
        except OSError as e:
            self.window.show_error(f"The Zth files could not be written.\n{folder}: {e.strerror or e}")
            return
        self.window.show_error(None)
        self.window.state.setText(f"Wrote {len(written)} files into {folder} (zth.csv, foster.csv, cauer.csv, "
                                  "zth.json, spice/).")
