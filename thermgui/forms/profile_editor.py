"""Editor for a time profile (watts for a heat load, °C for surroundings) with a preview plot.

The preview evaluates the profile with :func:`solver.model.profiles.make_profile` over the study's
duration; the curve is drawn with pyqtgraph. ``profileCommitted(dict)`` carries a profile in
the model-file form (see docs/model-format.md); the owner validates and commits it.
"""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Signal
from PySide6.QtWidgets import (QAbstractItemView, QComboBox, QFormLayout, QHBoxLayout, QHeaderView, QLabel,
                               QPushButton, QSizePolicy, QStackedWidget, QTableWidget, QTableWidgetItem,
                               QVBoxLayout, QWidget)

from solver.model.profiles import make_profile

from ..runresults.timefmt import format_time, time_unit
from .fields import NumberField, format_number, parse_number

KIND_LABELS = [("constant", "Constant"), ("step", "Switch on at a time"), ("pulse", "Repeating pulse"),
               ("table", "Table of points")]
DEFAULTS = {"constant": {"value": 1.0}, "step": {"value": 1.0, "start_s": 0.0},
            "pulse": {"high": 2.0, "low": 0.0, "period_s": 60.0, "duty": 0.5, "start_s": 0.0},
            "table": {"points": [[0.0, 0.0], [60.0, 1.0]]}}
# (key, label, unit-or-None for "value unit", optional)
FIELDS = {"constant": [("value", "Level", None)],
          "step": [("value", "Level", None), ("start_s", "From", "s")],
          "pulse": [("high", "High level", None), ("low", "Low level", None), ("period_s", "Period", "s"),
                    ("duty", "On fraction", "0–1"), ("start_s", "First pulse at", "s")]}


def preview_curve(profile_spec, t_end: float, n: int = 300):
    """(times, values) of a validated profile on [0, t_end], with both sides of every jump."""
    f = make_profile(profile_spec)
    t_end = max(float(t_end), 1e-9)
    jumps = [bp.time_s for bp in f.breakpoints(t_end)[:2000]]
    grid = [t for t in np.linspace(0.0, t_end, n) if not any(abs(t - j) < 1e-9 * t_end for j in jumps)]
    pairs = [(t, 0, f.value(t)) for t in grid]
    pairs += [(j, 0, f.value(j, "left")) for j in jumps] + [(j, 1, f.value(j, "right")) for j in jumps]
    pairs.sort()
    return np.array([p[0] for p in pairs]), np.array([p[2] for p in pairs])


class ProfileEditor(QWidget):
    """Profile type, its numbers (or a table), and a preview curve."""

    profileCommitted = Signal(object)
    rejected = Signal(str)

    def __init__(self, unit: str = "W", parent=None):
        super().__init__(parent)
        self.unit = unit
        self._profile: dict = {"type": "constant", "value": 0.0}
        self._loading = False
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        self.kind = QComboBox()
        for key, label in KIND_LABELS:
            self.kind.addItem(label, key)
        self.kind.currentIndexChanged.connect(self._kind_changed)
        lay.addWidget(self.kind)
        self.pages = QStackedWidget()
        self.fields: dict[str, dict[str, NumberField]] = {}
        for key, _label in KIND_LABELS:
            page = QWidget()
            if key == "table":
                self._build_table(page)
            else:
                form = QFormLayout(page)
                form.setContentsMargins(0, 0, 0, 0)
                self.fields[key] = {}
                for fkey, flabel, funit in FIELDS[key]:
                    f = NumberField(funit or unit)
                    f.committed.connect(lambda v, k=fkey: self._field_committed(k, v))
                    f.rejected.connect(lambda t, lab=flabel: self.rejected.emit(f"{lab}: {t!r} is not a number"))
                    form.addRow(flabel, f)
                    self.fields[key][fkey] = f
            self.pages.addWidget(page)
        lay.addWidget(self.pages)
        self.plot = pg.PlotWidget(background="w")
        self.plot.setMinimumHeight(110)
        self.plot.setMaximumHeight(150)
        self.plot.setMouseEnabled(x=False, y=False)
        self.plot.hideButtons()
        self.plot.setMenuEnabled(False)
        self.plot.showGrid(x=True, y=True, alpha=0.25)
        self.plot.getAxis("bottom").enableAutoSIPrefix(False)  # no "ks": minutes or hours instead
        self.plot.getAxis("left").enableAutoSIPrefix(False)
        self.plot.setLabel("bottom", "time (s)")
        self.plot.setLabel("left", unit)
        self._time_size = 1.0
        self.curve = self.plot.plot([], [], pen=pg.mkPen("#c4551a", width=2))
        lay.addWidget(self.plot)
        self.preview_note = QLabel("")
        self.preview_note.setStyleSheet("color: #5a6472;")
        lay.addWidget(self.preview_note)

    def _build_table(self, page):
        v = QVBoxLayout(page)
        v.setContentsMargins(0, 0, 0, 0)
        self.table = QTableWidget(0, 2)
        self.table.setHorizontalHeaderLabels(["time (s)", f"value ({self.unit})"])
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.Stretch)
        self.table.verticalHeader().setVisible(False)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setMinimumHeight(110)
        self.table.itemChanged.connect(self._table_edited)
        v.addWidget(self.table)
        row = QHBoxLayout()
        add = QPushButton("Add point")
        rem = QPushButton("Remove point")
        add.clicked.connect(self._add_point)
        rem.clicked.connect(self._remove_point)
        row.addWidget(add)
        row.addWidget(rem)
        row.addStretch(1)
        v.addLayout(row)

    # ------------------------------------------------------------ loading
    def set_profile(self, profile: dict, spec=None, t_end: float = 600.0) -> None:
        """Show ``profile`` (model-file dict); ``spec`` is the validated profile for the preview."""
        self._loading = True
        try:
            self._profile = dict(profile)
            kind = profile.get("type", "constant")
            self.kind.setCurrentIndex([k for k, _ in KIND_LABELS].index(kind))
            self._show_page(self.kind.currentIndex())
            if kind == "table":
                self.table.setRowCount(0)
                for t, val in profile.get("points", []):
                    r = self.table.rowCount()
                    self.table.insertRow(r)
                    self.table.setItem(r, 0, QTableWidgetItem(format_number(t)))
                    self.table.setItem(r, 1, QTableWidgetItem(format_number(val)))
            else:
                for fkey, f in self.fields[kind].items():
                    f.set_value(profile.get(fkey, DEFAULTS[kind].get(fkey)))
        finally:
            self._loading = False
        if spec is not None:
            t, v = preview_curve(spec, t_end)
            unit, size = time_unit(t_end)  # the unit the run's slider and chart use
            self._time_size = size
            self.plot.setLabel("bottom", f"time ({unit})")
            self.curve.setData(np.asarray(t, float) / size, v)
            self.plot.setXRange(0, t_end / size, padding=0.02)
            lo, hi = float(np.min(v)), float(np.max(v))
            pad = 0.1 * (hi - lo) if hi > lo else max(abs(hi) * 0.1, 1.0)
            self.plot.setYRange(min(lo, 0.0) - pad * 0.2, hi + pad, padding=0)
            self.preview_note.setText(f"preview over the study's {format_time(t_end, t_end)}")

    def _show_page(self, i: int) -> None:
        """Show page ``i`` and let the stack take that page's height (not the tallest page's)."""
        for k in range(self.pages.count()):
            pol = QSizePolicy.Preferred if k == i else QSizePolicy.Ignored
            self.pages.widget(k).setSizePolicy(pol, pol)
        self.pages.setCurrentIndex(i)
        self.pages.adjustSize()

    # ------------------------------------------------------------ edits
    def _kind_changed(self, i):
        if self._loading:
            return
        kind = self.kind.itemData(i)
        if kind == self._profile.get("type"):
            return
        new = {"type": kind, **DEFAULTS[kind]}
        level = self._profile.get("value", self._profile.get("high"))
        if level is not None and kind in ("constant", "step"):
            new["value"] = level
        elif level is not None and kind == "pulse":
            new["high"] = level
        self.profileCommitted.emit(new)

    def _field_committed(self, key, value):
        if self._loading:
            return
        new = dict(self._profile)
        new[key] = value
        self.profileCommitted.emit(new)

    def _table_points(self):
        pts = []
        for r in range(self.table.rowCount()):
            cells = [self.table.item(r, c) for c in range(2)]
            texts = [c.text() if c else "" for c in cells]
            try:
                vals = [parse_number(t) for t in texts]
            except ValueError:
                raise ValueError(f"table row {r + 1}: {texts!r} is not a pair of numbers") from None
            if None in vals:
                raise ValueError(f"table row {r + 1}: both time and value are needed")
            pts.append(vals)
        return pts

    def _table_edited(self, _item):
        if self._loading:
            return
        try:
            pts = self._table_points()
        except ValueError as e:
            self.rejected.emit(str(e))
            return
        self.profileCommitted.emit({"type": "table", "points": pts})

    def _add_point(self):
        pts = [list(p) for p in self._profile.get("points", [])]
        last_t, last_v = pts[-1] if pts else (0.0, 0.0)
        step = pts[-1][0] - pts[-2][0] if len(pts) > 1 else 60.0
        pts.append([last_t + (step if step > 0 else 60.0), last_v])
        self.profileCommitted.emit({"type": "table", "points": pts})

    def _remove_point(self):
        pts = [list(p) for p in self._profile.get("points", [])]
        r = self.table.currentRow()
        if not pts:
            return
        pts.pop(r if 0 <= r < len(pts) else len(pts) - 1)
        self.profileCommitted.emit({"type": "table", "points": pts})
