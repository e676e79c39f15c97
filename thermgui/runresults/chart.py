"""Part maxima (°C) against time, with ratings as dashed limit lines and a time cursor."""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal

from .timefmt import time_unit

# Distinguishable line colours (our own pick), cycled over the shown parts.
LINE_COLOURS = ["#1f5fa8", "#c4512b", "#2c8a4b", "#8a3fa0", "#b08900", "#2a8f9e", "#7a4b2a", "#5c6770"]
CURSOR_COLOUR = "#444444"


class PartChart(pg.PlotWidget):
    """Signal ``timeClicked(float seconds)`` when the user clicks in the plot."""

    timeClicked = Signal(float)

    def __init__(self, parent=None):
        super().__init__(parent, background="w")
        self.plotItem.showGrid(x=True, y=True, alpha=0.25)
        self.plotItem.setLabel("left", "Part maximum", units="°C")
        self.plotItem.getAxis("left").enableAutoSIPrefix(False)
        self.plotItem.getAxis("bottom").enableAutoSIPrefix(False)
        self.cursor = pg.InfiniteLine(angle=90, movable=False, pen=pg.mkPen(CURSOR_COLOUR, width=1.5))
        self.plotItem.addItem(self.cursor, ignoreBounds=True)
        self.setMouseEnabled(x=False, y=False)
        self.plotItem.hideButtons()
        self.scene().sigMouseClicked.connect(self._on_click)
        self.curves: dict[str, pg.PlotDataItem] = {}
        self.limits: dict[str, pg.InfiniteLine] = {}
        self._unit = ("s", 1.0)

    def show_parts(self, names, times, part_max, part_names, ratings, span_s: float | None = None) -> None:
        """Curves for ``names``: ``times`` (T,) s, ``part_max`` (T, P) °C; ``ratings`` name → °C or None;
        ``span_s`` the time axis length (the run's duration, so a streaming run fills it left to right).

        The plot items are rebuilt only when the choice of parts or the time unit changes; new
        output times only replace the curves' data (cheap while a run streams in)."""
        span = float(span_s) if span_s else (float(times[-1]) if len(times) else 0.0)
        unit = time_unit(span)
        key = (tuple(names), tuple(ratings.get(n) for n in names), unit)
        if key != getattr(self, "_key", None):
            self._rebuild(names, ratings, unit)
            self._key = key
        t = np.asarray(times, float) / self._unit[1]
        for name, curve in self.curves.items():
            j = part_names.index(name)
            y = part_max[:, j] if len(times) else np.zeros(0)
            curve.setData(t, y, symbol="o" if len(t) < 40 else None)
        shown = part_max[:, [part_names.index(n) for n in names]] if len(times) and names else np.zeros(0)
        ys = [float(np.nanmin(shown)), float(np.nanmax(shown))] if np.isfinite(shown).any() else []
        ys += [r for r in (ratings.get(n) for n in names) if r is not None]
        ys = [y for y in ys if np.isfinite(y)]
        if len(t) or span > 0:
            self.plotItem.setXRange(0.0, max(span / self._unit[1], 1e-9), padding=0.02)
        if ys:  # keep the limit lines and their labels inside the plot
            lo, hi = min(ys), max(ys)
            pad = max(0.5, 0.1 * (hi - lo))
            self.plotItem.setYRange(lo - pad, hi + 1.5 * pad, padding=0)  # room for the top limit's label

    def _rebuild(self, names, ratings, unit) -> None:
        self.plotItem.clear()
        self.plotItem.addItem(self.cursor, ignoreBounds=True)
        self.curves, self.limits = {}, {}
        self._unit = unit
        self.plotItem.setLabel("bottom", "Time", units=unit[0])
        keys = []  # the legend sits above the plot as a title line, so it never covers a curve
        for k, name in enumerate(names):
            colour = LINE_COLOURS[k % len(LINE_COLOURS)]
            keys.append(f"<span style='color:{colour}'>━ {_html(name)}</span>")
            self.curves[name] = self.plotItem.plot([], [], pen=pg.mkPen(colour, width=2),
                                                   symbolSize=4, symbolBrush=colour, symbolPen=None)
            r = ratings.get(name)
            if r is not None:
                line = pg.InfiniteLine(pos=r, angle=0, movable=False,
                                       pen=pg.mkPen(colour, width=1.5, style=Qt.DashLine),
                                       label=f"{name} limit {r:g} °C",
                                       labelOpts={"position": 0.05, "color": colour, "anchors": [(0, 1), (0, 1)]})
                self.plotItem.addItem(line)
                self.limits[name] = line
        title = "&nbsp;&nbsp;".join(keys) + ("&nbsp;&nbsp;<span style='color:#555'>- - rating</span>"
                                            if self.limits else "")
        self.plotItem.setTitle(title, size="9pt")

    def set_cursor(self, time_s: float) -> None:
        self.cursor.setPos(time_s / self._unit[1])

    def cursor_time(self) -> float:
        return float(self.cursor.value()) * self._unit[1]

    def time_at_scene(self, scene_pos) -> float:
        return float(self.plotItem.vb.mapSceneToView(scene_pos).x()) * self._unit[1]

    def _on_click(self, event) -> None:
        if event.button() != Qt.LeftButton:
            return
        if not self.plotItem.vb.sceneBoundingRect().contains(event.scenePos()):
            return
        self.timeClicked.emit(self.time_at_scene(event.scenePos()))


def _html(s: str) -> str:
    return s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
