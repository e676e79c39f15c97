"""The "Look inside" cut of the results view: the user's choice, and the automatic cut that shows a
hot part hidden inside a closed housing. A mixin of :class:`~thermgui.runresults.controller.ResultsController`
(it uses the controller's ``store``, ``view``, ``cut_choice``, ``cut_slider``, ``timeline``)."""
from __future__ import annotations

from .autocut import hottest_spot, revealing_cut_z

CUT_CHOICES = [("Whole model", None), ("Cut across x", "x"), ("Cut across y", "y"), ("Cut across z", "z")]


class LookInside:
    def _auto_cut(self) -> str:
        """Cut across z just above the hottest part when its hot spot is hidden inside the model and
        the user has not chosen a cut; returns the sentence for the status text ('' when no cut)."""
        s = self.store
        if s is None or self._user_cut:
            return ""
        hot = hottest_spot(s.peak_rows)
        if hot is None:
            return ""
        name, xyz = hot
        cut = revealing_cut_z(xyz, s.points_mm, s.part_bounds_mm.get(name),
                              min_fraction=self.cut_slider.minimum() / 100)
        if cut is None:
            return getattr(self, "_auto_note", "") if self.cut_choice.currentIndex() != 0 else ""
        fraction, z_mm = cut
        if self.view.cut == ("z", fraction):  # already cut there from the first frame
            return (f"; view cut at z = {z_mm:.1f} mm to show the hottest part ({name}); "
                    "choose Whole model to see the outside")
        self._auto_cutting = True
        self._set_cut_controls("z", fraction)
        try:
            self._on_cut()
        finally:
            self._auto_cutting = False
        return (f"; view cut at z = {z_mm:.1f} mm to show the hottest part ({name}); "
                "choose Whole model to see the outside")

    def _set_cut_controls(self, axis, fraction: float) -> None:
        """Show a cut in the "Look inside" controls without acting on it."""
        try:
            for w in (self.cut_choice, self.cut_slider):
                w.blockSignals(True)
            self.cut_choice.setCurrentIndex([a for _, a in CUT_CHOICES].index(axis))
            self.cut_slider.setValue(int(round(fraction * 100)))
            self.cut_slider.setEnabled(axis is not None)
        finally:
            for w in (self.cut_choice, self.cut_slider):
                w.blockSignals(False)

    def _on_cut(self, *_):
        if not self._auto_cutting:
            self._user_cut = True
        axis = CUT_CHOICES[self.cut_choice.currentIndex()][1]
        self.cut_slider.setEnabled(axis is not None)
        self.view.set_cut(axis, self.cut_slider.value() / 100.0)
        if self.results_shown:
            self.show_index(self.timeline.index)
