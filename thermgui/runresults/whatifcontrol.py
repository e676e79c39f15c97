"""What-if after a run: the run's unit responses, built once on a worker thread, and each change of
a load factor or the ambient offset answered by superposition (:mod:`solver.answers.whatif`), also off the
window's thread, newest request first. The peak table and chart then show the what-if answer,
marked as such; "Back to the run's answer" shows the run itself again.

Where superposition does not hold the panel says why (:func:`solver.answers.whatif.check_whatif`: radiation,
a settled cycle, and whatever the solver refuses later), and nothing is computed.
"""
from __future__ import annotations

from PySide6.QtCore import QObject, Qt
from PySide6.QtWidgets import QFrame, QScrollArea

from solver.errors import ModelError
from solver.results.recorder import PEAK_COLUMNS
from solver.answers.whatif import check_whatif
from solver.answers.whatifband import evaluate_with_band, prepare_levels, rows_with_band

from .jobs import Job
from .whatifpanel import WhatIfPanel

DOCK_TITLE = "Change loads and ambient"
MARK_COLOUR = "#143f86"


def describe_change(load_names, scales, offset_k: float) -> str:
    """``chip ×1.30, ambient +5.0 K`` (only what differs from the run)."""
    bits = [f"{n} ×{s:.2f}" for n, s in zip(load_names, scales) if abs(s - 1.0) > 1e-12]
    if abs(offset_k) > 1e-12:
        bits.append(f"ambient {offset_k:+.1f} K")
    return ", ".join(bits) or "as in the run"


class WhatIfControl(QObject):
    def __init__(self, results):
        super().__init__(results)
        self.results = results
        w = results.window
        self.panel = WhatIfPanel()
        scroll = QScrollArea()  # never squashed: a scroll bar instead when the column is short
        scroll.setWidget(self.panel)
        scroll.setWidgetResizable(True)
        scroll.setFrameShape(QFrame.NoFrame)
        self.dock = w.add_dock(scroll, Qt.LeftDockWidgetArea, DOCK_TITLE)
        self.action = None
        if self.dock is not None:
            self.dock.hide()
            self.action = self.dock.toggleViewAction()
            self.action.setText("Change Loads and &Ambient (What-if)")
            self.action.setToolTip("After a run: scale heat loads and shift the ambient, answered at once from "
                                   "the run's unit responses")
            menu = w.menus.get("run") if isinstance(getattr(w, "menus", None), dict) else None
            if menu is not None:
                menu.addSeparator()
                menu.addAction(self.action)
            self.dock.visibilityChanged.connect(self._on_visible)
        self.problem = None
        self.levels = None  # the run's band meshes (solver.run.session.BandLevels)
        self.units = None  # solver.answers.whatifband.WhatIfLevels once prepared
        self.answer = None  # (scales, offset_k, rows, times, part_max) shown
        self.active = False  # the table and chart show a what-if answer
        self._prep: Job | None = None
        self._eval: Job | None = None
        self._pending = None
        self._gen = 0
        self.panel.changed.connect(self.request)
        self.panel.resetRequested.connect(self.reset)
        self.panel.prepareRequested.connect(self.prepare)
        self.panel.stopRequested.connect(self.stop)

    # ------------------------------------------------------------ the run's life
    def run_started(self) -> None:
        self._drop("A run is in progress; the what-if is offered when it has finished.")

    def results_opened(self) -> None:
        self._drop("These results were opened from a folder. Run the model (F5) in this window to try "
                   "changed loads and ambient: the what-if needs the run's matrices, which a results folder "
                   "does not keep.")

    def run_ended_unfinished(self) -> None:
        self._drop("The last run did not finish; the what-if is offered after a finished run.")

    def run_finished(self, problem, levels=None) -> None:
        """The run has finished on ``problem`` (the reported mesh level); offer the what-if on it.
        ``levels`` (:meth:`solver.run.session.RunSession.band_levels`): the meshes the run's band came
        from, on which the what-if is bounded too (None: no band)."""
        self._drop("")
        self.problem = problem
        self.levels = levels
        self.panel.set_loads(problem.model.heat_loads)
        self.panel.set_ready(False)
        try:
            check_whatif(problem.model)
        except ModelError as e:
            self.panel.show_message("No what-if for this model: superposition does not hold.\n"
                                    + "\n".join(f"{p}: {m}" if p else m for p, m in e.issues))
            self.panel.show_state("The table and chart show the run.")
            return
        if self.dock is not None and self.dock.isVisible():
            self.prepare()
        else:
            self.panel.show_state(f"Ready to prepare from this run ({problem.n_nodes:,} nodes).", can_prepare=True)

    def _drop(self, text: str) -> None:
        """Forget the what-if of an earlier run (stop its work); the table returns to the run."""
        self.stop()
        self._gen += 1
        self._pending = None
        self.problem = self.units = self.levels = None
        if self.active:
            self.show_run()
        self.panel.set_values([1.0] * len(self.panel.factors), 0.0)
        self.panel.set_ready(False)
        self.panel.show_message(None)
        self.panel.show_state(text or "Run the model (F5); then scale its heat loads or shift the ambient here.")

    def shutdown(self) -> None:
        self._pending = None
        for job in (self._prep, self._eval):
            if job is not None and job.running:
                job.stop()
                job.wait()

    # ------------------------------------------------------------ unit responses
    def _on_visible(self, visible: bool) -> None:
        if visible:
            self.fit_dock()
        if visible and self.problem is not None and self.units is None:
            self.prepare()

    def fit_dock(self) -> None:
        """Give the panel the height it needs below the model list (at most half the window)."""
        w = self.results.window
        if self.dock is None or not hasattr(w, "resizeDocks"):
            return
        need = self.panel.sizeHint().height() + 30
        w.resizeDocks([self.dock], [int(min(need, 0.5 * w.height()))], Qt.Vertical)

    def prepare(self) -> bool:
        """Build the run's unit responses on a worker thread (once per run); False if not now."""
        if self.problem is None or self.units is not None or (self._prep is not None and self._prep.running):
            return False
        try:
            check_whatif(self.problem.model)
        except ModelError:
            return False
        problem, levels = self.problem, self.levels
        meshes = (f"on the run's {len(levels.lines_mm)} meshes, up to {max(levels.nodes):,} nodes, for the error band"
                  if levels is not None else f"{problem.n_nodes:,} nodes")
        self.panel.show_message(None)
        self.panel.show_state(f"Preparing the run's unit responses ({meshes}; once per run)…", preparing=True)
        self._prep = Job(lambda progress, cancelled: prepare_levels(problem.model, levels, problem, progress=progress,
                                                                    cancel=cancelled), self)
        self._prep.worker.progress.connect(self._on_prep_progress)
        self._prep.worker.succeeded.connect(self._on_prepared)
        self._prep.worker.failed.connect(self._on_prep_failed)
        self._prep.worker.stopped.connect(self._on_prep_stopped)
        self._prep.start()
        return True

    def stop(self) -> None:
        if self._prep is not None and self._prep.running:
            self._prep.stop()

    def wait(self, timeout_ms: int = 120000) -> bool:
        """Block until the preparation and any evaluation have ended (tests)."""
        ok = True
        for job in (self._prep, self._eval):
            if job is not None:
                ok = job.wait(timeout_ms) and ok
        return ok

    def _on_prep_progress(self, text: str) -> None:
        self.panel.show_state(f"Preparing the run's unit responses: {text}…", preparing=True)

    def _on_prepared(self, units) -> None:
        if self.problem is None:
            return
        self.units = units
        self.panel.set_ready(True)
        meshes = f" on {len(units.problems)} meshes" if len(units.problems) > 1 else ""
        self.panel.show_state(f"Ready ({units.basis_size} basis vectors, {units.samples:,} samples{meshes}): "
                              "change a factor or the offset.")
        if not self.panel.is_default():
            self.request(*self.panel.values())

    def _on_prep_failed(self, headline: str, details: str, issues) -> None:
        self.panel.show_message(f"{headline}\n{details}")
        self.panel.show_state("The what-if could not be prepared.", can_prepare=self.problem is not None)

    def _on_prep_stopped(self, text: str) -> None:
        self.panel.show_state("Stopped. Prepare starts again.", can_prepare=self.problem is not None)

    # ------------------------------------------------------------ answers
    def request(self, scales, offset_k: float) -> None:
        """Answer these factors and offset (the newest request wins while one is computed)."""
        if self.units is None or self.problem is None:
            return
        if self.panel.is_default():
            self.show_run()
            return
        self._pending = (list(scales), float(offset_k), self._gen)
        if self._eval is None or not self._eval.running:
            self._next()

    def _next(self) -> None:
        if self._pending is None:
            return
        scales, offset_k, gen = self._pending
        self._pending = None
        units = self.units

        def work(progress, cancelled):
            rec, bound = evaluate_with_band(units, scales, offset_k)
            times, pmax, _ = rec.history_arrays()
            return gen, scales, offset_k, [r.as_csv_row() for r in rows_with_band(rec, bound)], times, pmax

        self._eval = Job(work, self, short=True)
        self._eval.worker.succeeded.connect(self._on_answer)
        self._eval.worker.failed.connect(self._on_eval_failed)
        self._eval.finished.connect(self._next)
        self._eval.start()

    def _on_answer(self, result) -> None:
        gen, scales, offset_k, rows, times, pmax = result
        if gen != self._gen or self.problem is None:
            return  # asked before a reset or another run
        if self.panel.is_default():
            return
        self.answer = (scales, offset_k, rows, times, pmax)
        was_active, self.active = self.active, True
        res = self.results
        names = [hl.part for hl in self.problem.model.heat_loads]
        if self.units is not None and len(self.units.problems) > 1:
            note = (f" Error bands from the same {len(self.units.problems)} meshes as the run's; verdicts follow "
                    "them (over, at risk, ok).")
        else:
            band = max((res.store.error_k(n) for n in res.store.part_names), default=0.0) if res.store else 0.0
            note = (f" No error band is estimated for this what-if (the run's peaks carried up to ± {band:.1f} K), "
                    "so its verdicts are over or ok only." if band > 0 else "")
        res.table.set_banner(f"<b>WHAT-IF ANSWER, not the run:</b> {describe_change(names, scales, offset_k)}."
                             + note)
        res.table.set_rows(rows, res.store.duration_s)
        res.fit_table()
        res._update_chart()
        if not was_active:  # the view's caption says so once (a 3D repaint costs on a big mesh)
            res.refresh_caption()

    def _on_eval_failed(self, headline: str, details: str, issues) -> None:
        self.panel.show_message(f"{headline}\n{details}")

    def reset(self) -> None:
        """Factors 1 and offset 0: the run's own answer again."""
        self._gen += 1
        self._pending = None
        self.panel.set_values([1.0] * len(self.panel.factors), 0.0)
        self.show_run()

    def show_run(self) -> None:
        self.active = False
        self.answer = None
        res = self.results
        res.table.set_banner(None)
        if res.store is not None:
            res.table.set_rows(res.store.peak_rows, res.store.duration_s)
            res.fit_table()
            res._update_chart()
            res.refresh_caption()

    # ------------------------------------------------------------ for the results controller
    def chart_data(self):
        """(times, part maxima, verdicts, error bands K) of the shown what-if answer, or None."""
        if not self.active or self.answer is None:
            return None
        _, _, rows, times, pmax = self.answer
        k, e = PEAK_COLUMNS.index("status"), PEAK_COLUMNS.index("peak_error_k")
        return times, pmax, {r[0]: r[k] for r in rows}, {r[0]: float(r[e]) for r in rows if r[e] not in ("", None)}

    def caption_note(self) -> str:
        return "\nview: the run itself; table and chart: what-if" if self.active else ""

    def heading(self) -> str:
        return f"<b style='color:{MARK_COLOUR}'>WHAT-IF</b>"
