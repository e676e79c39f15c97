"""The peak table (the columns of peaks.csv), sortable, with CSV export and tab-separated copy."""
from __future__ import annotations

from PySide6.QtCore import QEvent, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QGuiApplication, QKeySequence
from PySide6.QtWidgets import (QAbstractItemView, QHBoxLayout, QHeaderView, QLabel, QPushButton, QTableWidget,
                               QTableWidgetItem, QVBoxLayout, QWidget)

from solver.results import PEAK_COLUMNS

from .store import peaks_tsv

HEADINGS = {"part": "Part", "rated_c": "Rated °C", "peak_c": "Peak °C", "peak_time_s": "Peak at s",
            "margin_k": "Margin K", "first_over_s": "First over s", "hotspot_x_mm": "Hot spot x mm",
            "hotspot_y_mm": "y mm", "hotspot_z_mm": "z mm", "status": "Status",
            "peak_error_k": "± K"}
OVER_TEXT = QColor("#b0102f")
OVER_FILL = QColor("#fde3e7")
STATUS_COL = PEAK_COLUMNS.index("status")


class _Cell(QTableWidgetItem):
    """A cell that sorts numbers as numbers and puts empty cells last."""

    def __init__(self, text: str):
        super().__init__(text)
        try:
            self.key = (0, float(text))
        except ValueError:
            self.key = (1, 0.0) if text == "" else (0, text.lower())
        self.setFlags(Qt.ItemIsSelectable | Qt.ItemIsEnabled)
        if self.key[0] == 0 and isinstance(self.key[1], float):
            self.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)

    def __lt__(self, other):
        a, b = self.key, getattr(other, "key", (1, 0.0))
        if type(a[1]) is not type(b[1]):
            return isinstance(a[1], float)
        return a < b


class PeakTable(QWidget):
    """Signals: ``exportRequested()``, ``partsSelected(list of names)``."""

    exportRequested = Signal()
    partsSelected = Signal(object)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.table = QTableWidget(0, len(PEAK_COLUMNS))
        self.table.setHorizontalHeaderLabels([HEADINGS[c] for c in PEAK_COLUMNS])
        for i, c in enumerate(PEAK_COLUMNS):
            self.table.horizontalHeaderItem(i).setToolTip(f"peaks.csv column: {c}")
        self.table.setSortingEnabled(True)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.verticalHeader().setVisible(False)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.setAlternatingRowColors(False)
        self.table.horizontalHeader().moveSection(STATUS_COL, 1)  # shown next to the part; CSV order kept
        self.summary = QLabel("The peak table appears when a run finishes.")
        self.summary.setWordWrap(True)
        self.export_button = QPushButton("Export CSV…")
        self.copy_button = QPushButton("Copy table")
        self.copy_button.setToolTip("Copy as tab-separated text, for pasting into a spreadsheet")
        self.export_button.setEnabled(False)
        self.copy_button.setEnabled(False)
        row = QHBoxLayout()
        row.addWidget(self.summary, 1)
        row.addWidget(self.copy_button)
        row.addWidget(self.export_button)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addLayout(row)
        lay.addWidget(self.table, 1)
        self.table.installEventFilter(self)  # Ctrl+C in the table copies the whole table
        self.export_button.clicked.connect(self.exportRequested)
        self.copy_button.clicked.connect(self.copy_to_clipboard)
        self.table.itemSelectionChanged.connect(self._on_selection)

    def set_rows(self, rows) -> None:
        """Rows of peaks.csv as strings (None: cleared)."""
        self.table.setSortingEnabled(False)
        self.table.setRowCount(0)
        rows = rows or []
        self.table.setRowCount(len(rows))
        bold = QFont(self.table.font())
        bold.setBold(True)
        for r, row in enumerate(rows):
            over = row[STATUS_COL] == "over"
            for c, text in enumerate(row):
                cell = _Cell(text)
                if over:
                    cell.setForeground(QBrush(OVER_TEXT))
                    cell.setBackground(QBrush(OVER_FILL))
                    cell.setFont(bold)
                    if c == STATUS_COL:
                        cell.setText("OVER")
                self.table.setItem(r, c, cell)
        self.table.setSortingEnabled(True)
        n_over = sum(1 for row in rows if row[STATUS_COL] == "over")
        if not rows:
            self.summary.setText("The peak table appears when a run finishes.")
        elif n_over:
            self.summary.setText(f"<b style='color:#b0102f'>{n_over} part(s) exceeded their rating</b> "
                                 "during the run (rows in red).")
        else:
            self.summary.setText("No rated part exceeded its rating during the run.")
        self.export_button.setEnabled(bool(rows))
        self.copy_button.setEnabled(bool(rows))

    def shown_rows(self) -> list[list[str]]:
        """Rows in the order shown (after sorting), with the CSV status words."""
        out = []
        for r in range(self.table.rowCount()):
            row = [self.table.item(r, c).text() for c in range(self.table.columnCount())]
            row[STATUS_COL] = row[STATUS_COL].lower()
            out.append(row)
        return out

    def copy_to_clipboard(self) -> str:
        text = peaks_tsv(self.shown_rows())
        QGuiApplication.clipboard().setText(text)
        return text

    def marked_parts(self) -> set[str]:
        """Parts whose rows are marked as over their rating."""
        return {row[0] for row in self.shown_rows() if row[STATUS_COL] == "over"}

    def eventFilter(self, obj, event) -> bool:
        if obj is self.table and event.type() == QEvent.KeyPress and event.matches(QKeySequence.Copy):
            self.copy_to_clipboard()
            return True
        return False

    def _on_selection(self) -> None:
        rows = sorted({i.row() for i in self.table.selectedItems()})
        self.partsSelected.emit([self.table.item(r, 0).text() for r in rows])
