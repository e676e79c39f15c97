"""Part maxima (°C) against time, with ratings as dashed limit lines and a time cursor.

Parts that share a rating share one limit line and one label; parts over their rating or at
risk are drawn heavier and named so in the legend; where the peak table gives an error band,
it is shaded around the curve. Before any run the chart says what it will show."""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal

from .timefmt import time_unit

# Distinguishable line colours (our own pick), cycled over the shown parts.
LINE_COLOURS = ["#1f5fa8", "#c4512b", "#2c8a4b", "#8a3fa0", "#b08900", "#2a8f9e", "#7a4b2a", "#5c6770"]
CURSOR_COLOUR = "#444444"
SHARED_LIMIT_COLOUR = "#555555"
VERDICT_WORDS = {"over": "OVER", "at-risk": "AT RISK"}
EMPTY_TEXT = "Part temperatures appear here while the model runs (Run, F5)."


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
        self.limits: dict[str, pg.InfiniteLine] = {}  # part -> its limit line (shared by equal ratings)
        self.limit_lines: dict[float, pg.InfiniteLine] = {}  # rating -> line
        self.bands: dict[str, tuple] = {}  # part -> (lower curve, upper curve, fill) of the error band
        self.reference_curves: dict[str, pg.PlotDataItem] = {}  # part -> the run's curve under a what-if
        self._heading = ""
        self._unit = ("s", 1.0)
        self._verdicts: dict[str, str] = {}
        self._errors: dict[str, float] = {}
        self.empty_text = pg.TextItem(EMPTY_TEXT, color="#5a6472", anchor=(0.5, 0.5))
        self.show_empty(True)

    def show_empty(self, on: bool) -> None:
        """Before any run: a sentence instead of empty 0-1 axes."""
        self.is_empty = on
        for side in ("left", "bottom"):
            self.plotItem.showAxis(side, not on)
        self.plotItem.showGrid(x=not on, y=not on, alpha=0.25)
        if on:
            self.plotItem.clear()
            self.curves, self.limits, self.limit_lines, self.bands = {}, {}, {}, {}
            self.reference_curves = {}
            self._key = None
            self.plotItem.setTitle(None)
            self.plotItem.addItem(self.empty_text, ignoreBounds=True)
            self.plotItem.setXRange(0, 1, padding=0)
            self.plotItem.setYRange(0, 1, padding=0)
            self.empty_text.setPos(0.5, 0.5)
        elif self.empty_text.scene() is not None:
            self.plotItem.removeItem(self.empty_text)

    def show_parts(self, names, times, part_max, part_names, ratings, span_s: float | None = None,
                   verdicts: dict | None = None, errors: dict | None = None, reference=None,
                   heading: str = "") -> None:
        """Curves for ``names``: ``times`` (T,) s, ``part_max`` (T, P) °C; ``ratings`` name → °C or None;
        ``span_s`` the time axis length (the run's duration, so a streaming run fills it left to right);
        ``verdicts`` name → over / at-risk / ok / unrated and ``errors`` name → K (the peak table's
        error band) once the run has finished; ``reference`` (times (T,), part maxima (T, P)) is drawn
        thin and dashed under the curves (the run beneath a what-if), ``heading`` before the legend.

        The plot items are rebuilt only when the choice of parts, their verdicts or the time unit
        change; new output times only replace the curves' data (cheap while a run streams in)."""
        verdicts, errors = dict(verdicts or {}), dict(errors or {})
        if self.is_empty:
            self.show_empty(False)
        span = float(span_s) if span_s else (float(times[-1]) if len(times) else 0.0)
        unit = time_unit(span)
        key = (tuple(names), tuple(ratings.get(n) for n in names), unit,
               tuple(verdicts.get(n) for n in names), tuple(errors.get(n) for n in names),
               reference is not None, heading)
        if key != getattr(self, "_key", None):
            self._verdicts, self._errors, self._heading = verdicts, errors, heading
            self._rebuild(names, ratings, unit, with_reference=reference is not None)
            self._key = key
        t = np.asarray(times, float) / self._unit[1]
        for name, curve in self.reference_curves.items():
            rt, rp = reference
            curve.setData(np.asarray(rt, float) / self._unit[1], np.asarray(rp)[:, part_names.index(name)])
        for name, curve in self.curves.items():
            j = part_names.index(name)
            y = part_max[:, j] if len(times) else np.zeros(0)
            curve.setData(t, y, symbol="o" if len(t) < 40 else None)
            if name in self.bands:
                err = self._errors[name]
                lower, upper, _ = self.bands[name]
                lower.setData(t, y - err)
                upper.setData(t, y + err)
        shown = part_max[:, [part_names.index(n) for n in names]] if len(times) and names else np.zeros(0)
        ys = [float(np.nanmin(shown)), float(np.nanmax(shown))] if np.isfinite(shown).any() else []
        if reference is not None and len(reference[0]) and names:
            ref = np.asarray(reference[1])[:, [part_names.index(n) for n in names]]
            if np.isfinite(ref).any():
                ys += [float(np.nanmin(ref)), float(np.nanmax(ref))]
        ys += [r for r in (ratings.get(n) for n in names) if r is not None]
        ys = [y for y in ys if np.isfinite(y)]
        if len(t) or span > 0:
            self.plotItem.setXRange(0.0, max(span / self._unit[1], 1e-9), padding=0.02)
        if ys:  # keep the limit lines and their labels inside the plot
            lo, hi = min(ys), max(ys)
            pad = max(0.5, 0.1 * (hi - lo))
            self.plotItem.setYRange(lo - pad, hi + 1.5 * pad, padding=0)  # room for the top limit's label

    def _rebuild(self, names, ratings, unit, with_reference: bool = False) -> None:
        self.plotItem.clear()
        self.plotItem.addItem(self.cursor, ignoreBounds=True)
        self.curves, self.limits, self.limit_lines, self.bands = {}, {}, {}, {}
        self.reference_curves = {}
        self._unit = unit
        self.plotItem.setLabel("bottom", "Time", units=unit[0])
        keys = []  # the legend sits above the plot as a title line, so it never covers a curve
        colours = {}
        for k, name in enumerate(names):
            colour = colours[name] = LINE_COLOURS[k % len(LINE_COLOURS)]
            verdict = self._verdicts.get(name)
            heavy = verdict in VERDICT_WORDS
            word = f" <b>{VERDICT_WORDS[verdict]}</b>" if heavy else ""
            keys.append(f"<span style='color:{colour}'>{'▬' if heavy else '━'} {_html(name)}{word}</span>")
            err = self._errors.get(name)
            if err and err > 0:  # the error band, under the curve
                pen = pg.mkPen(None)
                lower, upper = pg.PlotDataItem([], [], pen=pen), pg.PlotDataItem([], [], pen=pen)
                fill = pg.FillBetweenItem(lower, upper, brush=pg.mkBrush(pg.mkColor(colour).red(),
                                                                         pg.mkColor(colour).green(),
                                                                         pg.mkColor(colour).blue(), 45))
                for item in (lower, upper, fill):
                    self.plotItem.addItem(item)
                self.bands[name] = (lower, upper, fill)
            if with_reference:
                self.reference_curves[name] = self.plotItem.plot([], [], pen=pg.mkPen(colour, width=1.2,
                                                                                      style=Qt.DotLine))
            self.curves[name] = self.plotItem.plot([], [], pen=pg.mkPen(colour, width=4 if heavy else 1.8),
                                                   symbolSize=5 if heavy else 4, symbolBrush=colour, symbolPen=None)
            if heavy:
                self.curves[name].setZValue(10)
        by_rating: dict[float, list] = {}
        for name in names:
            r = ratings.get(name)
            if r is not None:
                by_rating.setdefault(float(r), []).append(name)
        for k, (r, parts) in enumerate(sorted(by_rating.items())):
            # one line and one label per rating value: equal ratings no longer print on top of each other
            colour = colours[parts[0]] if len(parts) == 1 else SHARED_LIMIT_COLOUR
            label = (f"{parts[0]} limit {r:g} °C" if len(parts) == 1 else
                     f"limit {r:g} °C: " + ", ".join(parts) if len(parts) <= 3 else
                     f"limit {r:g} °C: {len(parts)} parts")
            line = pg.InfiniteLine(pos=r, angle=0, movable=False, pen=pg.mkPen(colour, width=1.5, style=Qt.DashLine),
                                   label=label,
                                   labelOpts={"position": 0.03 + 0.32 * (k % 3), "color": colour,
                                              "anchors": [(0, 1), (0, 1)]})  # staggered: near ratings stay legible
            self.plotItem.addItem(line)
            self.limit_lines[r] = line
            for n in parts:
                self.limits[n] = line
        title = "&nbsp;&nbsp;".join(keys) + ("&nbsp;&nbsp;<span style='color:#555'>- - rating</span>"
                                            if self.limits else "")
        if with_reference:
            title += "&nbsp;&nbsp;<span style='color:#555'>··· the run</span>"
        if getattr(self, "_heading", ""):
            title = self._heading + "&nbsp;&nbsp;" + title
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
