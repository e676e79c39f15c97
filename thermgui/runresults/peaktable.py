"""The peak table: one row per part in review order (over, at risk, ok by margin, unrated), columns
that fit (the hot spot in one column, times in the slider's unit, the error band beside the
peak), over rows in red and at-risk rows in amber; CSV export and tab-separated copy keep the
exact rows of peaks.csv."""
from __future__ import annotations

from PySide6.QtCore import QEvent, Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QGuiApplication, QKeySequence
from PySide6.QtWidgets import (QAbstractItemView, QHBoxLayout, QHeaderView, QLabel, QPushButton, QTableWidget,
                               QTableWidgetItem, QVBoxLayout, QWidget)

from solver.results.recorder import PEAK_COLUMNS

from .peakview import VERDICT_FILL, VERDICT_TEXT, columns, display_row, review_order
from .store import peaks_tsv

CSV_ROLE = Qt.UserRole + 1
# the what-if marking (our own pick): a blue band, unlike the verdict colours
BANNER_STYLE = ("QLabel { background: #e3ecfb; color: #143f86; border: 1px solid #4a78c2; border-radius: 3px;"
                " padding: 3px; }")
STATUS_COL = PEAK_COLUMNS.index("status")  # in the CSV rows
TOOLTIPS = {"part": "part", "status": "status (over: above the rating even at the low end of the error band; "
            "at risk: the rating lies inside peak ± error)", "rated": "rated_c", "peak": "peak_c ± peak_error_k",
            "margin": "margin_k = rated - peak", "peak_time": "peak_time_s", "first_over": "first_over_s",
            "hotspot": "hotspot_x_mm, hotspot_y_mm, hotspot_z_mm"}


class _Cell(QTableWidgetItem):
    """A cell that sorts by its key (numbers as numbers) and puts empty cells last."""

    def __init__(self, text: str, key):
        super().__init__(text)
        self.key = (1,) if key is None else (0, key)
        self.setFlags(Qt.ItemIsSelectable | Qt.ItemIsEnabled)
        if isinstance(key, float) or (isinstance(key, tuple) and key and isinstance(key[0], float)):
            self.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)

    def __lt__(self, other):
        return self.key < getattr(other, "key", (1,))


class PeakTable(QWidget):
    """Signals: ``exportRequested()``, ``partsSelected(list of names)``."""

    exportRequested = Signal()
    partsSelected = Signal(object)

    def __init__(self, parent=None):
        super().__init__(parent)
        self._span = 0.0
        self._cols = columns(0.0)
        self.table = QTableWidget(0, len(self._cols))
        self._set_headings()
        self.table.setSortingEnabled(True)
        self.table.horizontalHeader().setSortIndicator(1, Qt.AscendingOrder)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(self.table.fontMetrics().height() + 6)
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(QHeaderView.ResizeToContents)
        header.setSectionResizeMode(0, QHeaderView.Stretch)  # the part name takes what is left
        header.setMinimumSectionSize(36)
        # the style's sort arrow reserves about 34 px in every column; the sorted column's heading
        # carries a small arrow of its own instead, so the columns fit
        header.setSortIndicatorShown(False)
        header.sortIndicatorChanged.connect(lambda *_: self._set_headings())
        self._set_headings()
        self.table.setAlternatingRowColors(False)
        self.table.setHorizontalScrollMode(QAbstractItemView.ScrollPerPixel)
        self.summary = QLabel("The peak table appears when a run finishes.")
        self.summary.setWordWrap(True)
        self.export_button = QPushButton("Export CSV…")
        self.copy_button = QPushButton("Copy table")
        self.copy_button.setToolTip("Copy as tab-separated text (the columns of peaks.csv), for a spreadsheet")
        self.export_button.setEnabled(False)
        self.copy_button.setEnabled(False)
        self.banner = QLabel()  # shown while the rows are a what-if answer, not the run's own
        self.banner.setWordWrap(True)
        self.banner.setStyleSheet(BANNER_STYLE)
        self.banner.hide()
        self.answer = "run"
        row = QHBoxLayout()
        row.addWidget(self.summary, 1)
        row.addWidget(self.copy_button)
        row.addWidget(self.export_button)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addWidget(self.banner)
        lay.addLayout(row)
        lay.addWidget(self.table, 1)
        self.table.installEventFilter(self)  # Ctrl+C in the table copies the whole table
        self.export_button.clicked.connect(self.exportRequested)
        self.copy_button.clicked.connect(self.copy_to_clipboard)
        self.table.itemSelectionChanged.connect(self._on_selection)

    def _set_headings(self) -> None:
        header = self.table.horizontalHeader()
        sec, order = header.sortIndicatorSection(), header.sortIndicatorOrder()
        arrow = " ▲" if order == Qt.AscendingOrder else " ▼"
        self.table.setHorizontalHeaderLabels([(h.replace("\n", arrow + "\n", 1) if "\n" in h else h + arrow)
                                              if i == sec else h for i, (_, h) in enumerate(self._cols)])
        for i, (k, _) in enumerate(self._cols):
            self.table.horizontalHeaderItem(i).setToolTip(f"peaks.csv: {TOOLTIPS[k]}")

    def needed_width(self) -> int:
        """Width in px at which every column shows whole (the part names too)."""
        t = self.table
        names = [t.item(r, 0).text() for r in range(t.rowCount())] or ["radio module"]
        part = max(t.fontMetrics().horizontalAdvance(n) for n in names) + 16
        rest = sum(t.columnWidth(c) for c in range(1, t.columnCount()))
        return part + rest + t.verticalScrollBar().sizeHint().width() + 2 * t.frameWidth() + 4

    def column(self, key: str) -> int:
        return [k for k, _ in self._cols].index(key)

    def set_banner(self, html: str | None) -> None:
        """A marked line above the table (a what-if answer is shown); None hides it. While it is
        shown, Export is off (it writes the run's peaks.csv); Copy copies the rows shown."""
        self.answer = "run" if not html else "what-if"
        self.banner.setText(html or "")
        self.banner.setVisible(bool(html))
        self.export_button.setEnabled(self.answer == "run" and self.table.rowCount() > 0)
        self.export_button.setToolTip("" if self.answer == "run" else
                                      "Export writes the run's peaks.csv: go back to the run's answer first")

    def set_rows(self, rows, span_s: float | None = None) -> None:
        """Rows of peaks.csv as strings (None: cleared); ``span_s`` the run's duration (time unit)."""
        if span_s is not None:
            self._span = float(span_s)
            self._cols = columns(self._span)
            self._set_headings()
        self.table.setSortingEnabled(False)
        self.table.setRowCount(0)
        rows = rows or []
        order = review_order(rows)
        rank = {i: r for r, i in enumerate(order)}
        self.table.setRowCount(len(rows))
        bold = QFont(self.table.font())
        bold.setBold(True)
        for r, i in enumerate(order):
            shown = display_row(rows[i], self._span)
            verdict = shown["_verdict"]
            for c, (key, _) in enumerate(self._cols):
                text, skey = shown[key]
                cell = _Cell(text, rank[i] if key == "status" else skey)
                if verdict in VERDICT_TEXT:
                    cell.setForeground(QBrush(QColor(VERDICT_TEXT[verdict])))
                    cell.setBackground(QBrush(QColor(VERDICT_FILL[verdict])))
                    if verdict == "over":
                        cell.setFont(bold)
                if c == 0:
                    cell.setData(CSV_ROLE, list(rows[i]))
                    cell.setToolTip(rows[i][0])
                self.table.setItem(r, c, cell)
        self.table.setSortingEnabled(True)
        self.table.horizontalHeader().setSortIndicatorShown(False)  # our own arrow (see __init__)
        self.table.horizontalHeader().setSortIndicator(self.column("status"), Qt.AscendingOrder)
        n_over = sum(1 for row in rows if row[STATUS_COL] == "over")
        n_risk = sum(1 for row in rows if row[STATUS_COL] == "at-risk")
        if not rows:
            self.summary.setText("The peak table appears when a run finishes.")
        elif n_over or n_risk:
            bits = []
            if n_over:
                bits.append(f"<b style='color:{VERDICT_TEXT['over']}'>{n_over} part(s) over their rating</b> (red)")
            if n_risk:
                bits.append(f"<b style='color:{VERDICT_TEXT['at-risk']}'>{n_risk} at risk</b> "
                            "(rating within the error band, amber)")
            self.summary.setText("; ".join(bits) + ".")
        else:
            self.summary.setText("No rated part reached its rating "
                                 + ("in this what-if." if self.answer == "what-if" else "during the run."))
        self.export_button.setEnabled(bool(rows) and self.answer == "run")
        self.copy_button.setEnabled(bool(rows))

    def shown_rows(self) -> list[list[str]]:
        """The peaks.csv rows in the order shown (after sorting)."""
        return [list(self.table.item(r, 0).data(CSV_ROLE)) for r in range(self.table.rowCount())]

    def shown_text(self) -> list[list[str]]:
        """The cell texts as shown, row by row."""
        return [[self.table.item(r, c).text() for c in range(self.table.columnCount())]
                for r in range(self.table.rowCount())]

    def copy_to_clipboard(self) -> str:
        text = peaks_tsv(self.shown_rows())
        QGuiApplication.clipboard().setText(text)
        return text

    def marked_parts(self, verdict: str = "over") -> set[str]:
        """Parts whose rows carry ``verdict`` (over, at-risk, ok, unrated)."""
        return {row[0] for row in self.shown_rows() if row[STATUS_COL] == verdict}

    def eventFilter(self, obj, event) -> bool:
        if obj is self.table and event.type() == QEvent.KeyPress and event.matches(QKeySequence.Copy):
            self.copy_to_clipboard()
            return True
        return False

    def _on_selection(self) -> None:
        rows = sorted({i.row() for i in self.table.selectedItems()})
        self.partsSelected.emit([self.table.item(r, 0).text() for r in rows])
