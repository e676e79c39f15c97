"""Showing a finished (or streaming) run: the field at an output, its time, the marks on parts over
or near their rating, and the chart. A mixin of :class:`~thermgui.runresults.controller.ResultsController`,
which owns the widgets (``view``, ``timeline``, ``chart``, ``store``) these methods draw on."""
from __future__ import annotations

import numpy as np

from solver.results.recorder import PEAK_COLUMNS

from .timefmt import format_time


class ResultDisplay:
    """Draws the shown output of ``self.store`` (see the module doc)."""

    def set_results_shown(self, on: bool, paint: bool = True) -> None:
        """Switch the 3D view between the model's boxes and the temperature field."""
        self._reveal_pending = False
        on = bool(on) and self.store is not None
        self.results_shown = on
        self.show_action.blockSignals(True)
        self.show_action.setChecked(on)
        self.show_action.blockSignals(False)
        vp = self.window.viewport
        vp.set_mode("results" if on else "edit")
        self.view.set_visible(on)
        if on and self.store is not None and self.store.n_frames:
            self._show(self.timeline.index, paint=paint)
        elif not on:
            self._mark(set(), set())

    def show_index(self, i: int) -> None:
        """Draw output ``i``: field, colour range, time, parts over their rating, chart cursor."""
        self._show(i, paint=True)

    def _show(self, i: int, paint: bool) -> None:
        s = self.store
        if s is None or not s.n_frames or not self.results_shown:
            return
        i = max(0, min(i, s.n_frames - 1))
        if self.running and not self.rescale_box.isChecked():
            clim = live_colour_range(*s.colour_range(None, False, pad=False), s.frame(i))
        else:
            clim = s.colour_range(i, self.rescale_box.isChecked())
        self.view.show_field(s.frame(i), clim, paint=paint)
        t = s.times[i]
        self._show_time(t)
        over, at_risk = s.verdicts_at(i)
        self._mark(over, at_risk)
        self.chart.set_cursor(t)

    def _show_time(self, t: float, computing: bool = False) -> None:
        """The time of the drawn field, the same text in the view's caption and beside the slider,
        and the chart's cursor there."""
        s = self.store
        text = f"t = {format_time(t, s.duration_s)}" + (" (computing)" if computing else "")
        self.view.set_caption(text + ("   (model changed since)" if self.stale and not computing else "")
                              + self.whatif.caption_note())
        self.timeline.show_time_text(text if computing else None)
        self.chart.set_cursor(t)

    def refresh_caption(self) -> None:
        """Redraw the view's caption (time, stale model, what-if note) for the shown output."""
        s = self.store
        if s is not None and s.n_frames and self.results_shown:
            self._show_time(s.times[max(0, min(self.timeline.index, s.n_frames - 1))])
            self.view.repaint()

    def _mark(self, over: set, at_risk: set = frozenset()) -> None:
        """Mark parts over their rating (red) and at risk (amber) in the view (frames, caption) and
        in the item list."""
        s = self.store
        w = self.window
        i = self.timeline.index
        lines = []
        if s is not None and s.n_frames:
            i = max(0, min(i, s.n_frames - 1))
            temp = lambda n: s.part_max[i][s.part_names.index(n)]  # noqa: E731
            if over:
                lines.append("OVER RATING: " + "; ".join(f"{n} {temp(n):.1f} °C > {s.rating(n):g} °C"
                                                         for n in sorted(over)))
            if at_risk:
                lines.append("AT RISK: " + "; ".join(f"{n} {temp(n):.1f} ± {s.error_k(n):.1f} °C near {s.rating(n):g} °C"
                                                     for n in sorted(at_risk)))
        self.view.set_over_caption("\n".join(lines))
        key = (frozenset(over), frozenset(at_risk))
        if key == self._marked:
            return
        self._marked = key
        if hasattr(w.viewport, "highlight_parts"):
            w.viewport.highlight_parts(set(over), set(at_risk))
        tree = getattr(w, "item_tree", None)
        if tree is not None and hasattr(tree, "mark_parts"):
            tree.mark_parts(set(over), set(at_risk))

    def shown_over(self) -> set:
        """Parts marked over their rating at the shown time."""
        s = self.store
        return s.over_at(self.timeline.index) if s is not None and s.n_frames and self.results_shown else set()

    def _update_chart(self) -> None:
        s = self.store
        if s is None:
            return
        all_names, times, pmax = s.series()  # parts, then air volumes
        names = [n for n in (self._chart_parts or []) if n in all_names]
        if not names:
            names = (s.rated_parts() or list(s.part_names)) + list(s.air_names)
        verdicts, errors = {}, {}
        if s.peak_rows:
            k = PEAK_COLUMNS.index("status")
            verdicts = {r[0]: r[k] for r in s.peak_rows}
            errors = {n: s.error_k(n) for n in names}
        extra = {}
        answer = self.whatif.chart_data()
        if answer is not None:  # the what-if's curves, the run's beneath them
            extra = dict(reference=(times, pmax), heading=self.whatif.heading())
            times, pmax, verdicts, errors = answer
        self.chart.show_parts(names, times, pmax, all_names, {n: s.rating(n) for n in names},
                              span_s=s.duration_s, verdicts=verdicts, errors=errors, **extra)
        if s.n_frames:
            self.chart.set_cursor(s.times[min(self.timeline.index, s.n_frames - 1)])

    def set_chart_parts(self, names) -> None:
        """Parts drawn in the chart (empty: every rated part)."""
        self._chart_parts = list(names) or None
        self._update_chart()

    def _on_tree_choice(self, kind: str, index: int) -> None:
        if kind != "parts" or self.store is None:
            return
        parts = self.window.document.model.parts
        if 0 <= index < len(parts) and parts[index].name in self.store.part_names:
            self.set_chart_parts([parts[index].name])

    def _on_table_parts(self, names) -> None:
        if names:
            self.set_chart_parts(names)

    def _on_chart_click(self, time_s: float) -> None:
        if self.store is not None and self.store.n_frames:
            self.timeline.set_index(self.store.index_at(time_s))


LIVE_MIN_SPAN_K = 5.0  # while a run streams, the colour scale spans at least this much above its cool end


def live_colour_range(lo: float, hi: float, field) -> tuple[float, float]:
    """Colour range (°C) for a frame drawn while the run goes on: the cool end stays where the run
    started (ambient / initial temperature), the hot end follows the largest temperature so far,
    and the span is at least LIVE_MIN_SPAN_K, so the first nearly uniform frames do not paint noise."""
    f = np.asarray(field)
    lo, hi = min(lo, float(f.min())), max(hi, float(f.max()))
    return lo, max(hi, lo + LIVE_MIN_SPAN_K)
