"""Run and results, wired into the main window: actions, docks, worker thread and the 3D field.

:class:`ResultsController` is created by :func:`thermgui.runresults.install`. It reads the model
from ``window.document``, runs it with :class:`~thermgui.runresults.worker.RunWorker` on a thread,
fills a :class:`~thermgui.runresults.store.ResultsStore` and presents it: field on
``window.viewport.plotter``, time slider, chart, peak table, marks on over-rated parts.
"""
from __future__ import annotations

import gc
import shutil
import tempfile
from pathlib import Path


from PySide6.QtCore import QEvent, QObject, Qt, QTimer
from PySide6.QtGui import QAction, QKeySequence
from PySide6.QtWidgets import (QCheckBox, QComboBox, QHBoxLayout, QLabel, QSizePolicy, QSlider, QSplitter,
                               QStyle, QVBoxLayout, QWidget)


from ..fileops import display_path
from .autocut import box_visible, likely_hot_spot, revealing_cut_z
from .lookinside import CUT_CHOICES, LookInside
from .chart import PartChart
from .fieldview import FieldView, build_display
from .messages import item_for_path
from .peaktable import PeakTable
from .resultdisplay import ResultDisplay, live_colour_range
from .resultfiles import ResultFiles, previous_run
from .runpanel import RunStatus
from .store import ResultsStore, results_folder_for
from .sweepview import SweepControl
from .temprun import STALE_TEMP_S, TEMP_PREFIX, clean_stale_temp_runs  # noqa: F401 (re-exported)
from .timeline import TimelineBar
from .whatifcontrol import WhatIfControl
from .worker import RunWorker, start_worker
from .zthview import ZthControl

LIVE_REDRAW_MS = 300  # shortest pause between live redraws while a run streams frames
LIVE_DUTY = 0.05  # live redraws aim at this share of the wall time (the solve shares the CPU) ...
LIVE_LONGEST_MS = 10000  # ... but the view is refreshed at least this often while a run streams


class ResultsController(LookInside, ResultFiles, ResultDisplay, QObject):
    def __init__(self, window):
        super().__init__(window)
        self.window = window
        self.store: ResultsStore | None = None
        self.worker: RunWorker | None = None
        self.thread = None
        self.results_shown = False
        self.stale = False
        self._live = None  # (time_s, field) newest preview between outputs
        self._reveal_pending = False  # a run has started: show the field with its first frame
        self._new_outputs = False
        self._marked = (frozenset(), frozenset())  # (over, at risk) marked in tree and view
        self._chart_parts: list[str] | None = None  # None: default choice
        self._user_cut = False  # the user has chosen a cut (or Whole model) in "Look inside"
        self._auto_cutting = False
        self.view = FieldView(window.viewport.plotter)
        self._build_widgets()
        self._build_actions()
        self._session = None  # the running session (its last mesh level is the one reported)
        self.whatif = WhatIfControl(self)
        self.zth = ZthControl(self)
        self.sweep = SweepControl(self)
        self._redraw = QTimer(self)
        self._redraw.setSingleShot(True)
        self._redraw.setInterval(LIVE_REDRAW_MS)
        self._redraw.timeout.connect(self._live_refresh)
        self._results_model: dict | None = None  # the model dict the shown results were computed for
        self._checked_path = None
        self._temp_roots: list[Path] = []
        clean_stale_temp_runs()
        doc = window.document
        if hasattr(doc, "changed"):
            doc.changed.connect(self._on_model_changed)
        tree = getattr(window, "item_tree", None)
        if tree is not None and hasattr(tree, "itemChosen"):
            tree.itemChosen.connect(self._on_tree_choice)
        if callable(getattr(window, "shutdown", None)):
            window.before_shutdown = self.shutdown  # called once the close is confirmed
        else:
            window.installEventFilter(self)

    # ------------------------------------------------------------ construction
    def _build_widgets(self) -> None:
        w = self.window
        self.status = RunStatus()
        self.timeline = TimelineBar()
        self.rescale_box = QCheckBox("Rescale per frame")
        self.rescale_box.setToolTip("On: the colour scale spans each frame alone. Off: one colour scale over the "
                                    "whole run, so frames compare")
        self.cut_choice = QComboBox()
        for label, _ in CUT_CHOICES:
            self.cut_choice.addItem(label)
        self.cut_choice.setToolTip("Remove the cells beyond a plane to look inside")
        self.cut_slider = QSlider(Qt.Horizontal)
        self.cut_slider.setRange(5, 100)
        self.cut_slider.setValue(50)
        self.cut_slider.setEnabled(False)
        self.cut_slider.setToolTip("Position of the cut plane (share of the extent kept)")
        self.cut_slider.setMaximumWidth(120)
        options = QHBoxLayout()  # one row: time slider, then how the field is drawn
        options.addWidget(self.timeline, 1)
        options.addSpacing(12)
        options.addWidget(self.rescale_box)
        options.addSpacing(12)
        options.addWidget(QLabel("Look inside:"))
        options.addWidget(self.cut_choice)
        options.addWidget(self.cut_slider)
        run_box = QWidget()
        lay = QVBoxLayout(run_box)
        lay.setContentsMargins(6, 2, 6, 2)
        lay.setSpacing(3)
        lay.addWidget(self.status)
        lay.addLayout(options)
        lay.addWidget(self.status.caution)
        self.chart = PartChart()
        self.chart.setMinimumHeight(140)
        run_box.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Maximum)
        self.table = PeakTable()
        split = QSplitter(Qt.Horizontal)
        split.addWidget(self.chart)
        split.addWidget(self.table)
        split.setStretchFactor(0, 2)
        split.setStretchFactor(1, 3)
        self.results_split = split
        self.run_dock = w.add_dock(run_box, Qt.BottomDockWidgetArea, "Run and time")
        self.results_dock = w.add_dock(split, Qt.BottomDockWidgetArea, "Temperatures and peaks")
        if self.run_dock is not None and self.results_dock is not None and hasattr(w, "splitDockWidget"):
            w.splitDockWidget(self.run_dock, self.results_dock, Qt.Vertical)  # run bar above, full width
            w.resizeDocks([self.run_dock, self.results_dock], [175, 250], Qt.Vertical)
            w.fit_result_docks = self.fit_docks
        self.timeline.indexChanged.connect(self.show_index)
        self.rescale_box.toggled.connect(lambda _: self.show_index(self.timeline.index))
        self.cut_choice.currentIndexChanged.connect(self._on_cut)
        self.cut_slider.sliderReleased.connect(self._on_cut)
        self.cut_slider.valueChanged.connect(lambda _: None if self.cut_slider.isSliderDown() else self._on_cut())
        self.chart.timeClicked.connect(self._on_chart_click)
        self.table.exportRequested.connect(self._ask_export)
        self.table.partsSelected.connect(self._on_table_parts)

    def fit_docks(self, width: int, height: int) -> None:
        """Heights of the two result docks for a window ``height`` px tall: the run bar as tall as it
        needs, chart and table about 28 % of the window (190-360 px); the 3D view keeps the rest."""
        run_h = self.run_dock.widget().sizeHint().height() + 24
        res_h = int(min(360, max(190, 0.28 * height)))
        self.window.resizeDocks([self.run_dock, self.results_dock], [run_h, res_h], Qt.Vertical)
        self.fit_table()

    def fit_table(self) -> None:
        """Give the peak table the width its columns need (the chart keeps at least 320 px)."""
        total = sum(self.results_split.sizes())
        if total <= 0:
            return
        table = min(self.table.needed_width(), max(total // 2, total - 320))
        self.results_split.setSizes([total - table, table])

    def _build_actions(self) -> None:
        w = self.window
        st = w.style()
        menu = w.menus["run"]
        self.run_action = QAction(st.standardIcon(QStyle.SP_MediaPlay), "&Run", w)
        self.run_action.setShortcut(QKeySequence("F5"))
        self.run_action.setToolTip("Solve the model and show the temperatures as they are computed (F5)")
        self.stop_action = QAction(st.standardIcon(QStyle.SP_MediaStop), "&Stop", w)
        self.stop_action.setShortcut(QKeySequence("Shift+F5"))
        self.stop_action.setToolTip("Stop the run after the current step (Shift+F5)")
        self.stop_action.setEnabled(False)
        self.show_action = QAction("Show &Results in View", w)
        self.show_action.setCheckable(True)
        self.show_action.setShortcut(QKeySequence("F6"))
        self.show_action.setEnabled(False)
        self.open_action = QAction("&Open Results Folder…", w)
        self.export_action = QAction("&Export Peak Table…", w)
        self.export_action.setEnabled(False)
        self.picture_action = QAction("Save View as &Picture…", w)
        self.report_action = QAction("Export &Report…", w)
        self.report_action.setToolTip("Write one self-contained HTML design-review report of the finished run")
        self.report_action.setEnabled(False)
        for a in (self.run_action, self.stop_action, self.show_action):
            menu.addAction(a)
        menu.addSeparator()
        for a in (self.open_action, self.export_action, self.report_action):
            menu.addAction(a)
        file_menu = w.menus.get("file") if isinstance(getattr(w, "menus", None), dict) else None
        if file_menu is not None:  # File ▸ Export Report…, above Quit
            quit_action = next((a for a in file_menu.actions() if a.text().replace("&", "") == "Quit"), None)
            file_menu.insertAction(quit_action, self.report_action)
            file_menu.insertSeparator(quit_action)
        if not callable(getattr(w, "save_picture", None)):  # the window may already offer one
            menu.addAction(self.picture_action)
        w.toolbar.addSeparator()
        w.toolbar.addAction(self.run_action)
        w.toolbar.addAction(self.stop_action)
        self.run_action.triggered.connect(self.start_run)
        self.stop_action.triggered.connect(self.stop_run)
        self.show_action.toggled.connect(self.set_results_shown)
        self.open_action.triggered.connect(self._ask_open)
        self.export_action.triggered.connect(self._ask_export)
        self.picture_action.triggered.connect(self._ask_picture)
        self.report_action.triggered.connect(self._ask_report)

    # ------------------------------------------------------------ running
    @property
    def running(self) -> bool:
        return self.thread is not None

    def results_folder(self) -> Path:
        """``<model stem>.results`` beside the model file, or a fresh temporary folder if unsaved
        (the previous one of this window is removed: only the newest unsaved run is kept, and it
        goes when the window closes)."""
        path = getattr(self.window.document, "path", None)
        if path:
            return results_folder_for(path)
        self.remove_temp_folders()
        root = Path(tempfile.mkdtemp(prefix=TEMP_PREFIX))
        self._temp_roots.append(root)
        return root / "untitled.results"

    def remove_temp_folders(self) -> None:
        """Delete the temporary results folders of this window's unsaved runs."""
        shown = getattr(self.store, "folder", None)
        for root in list(self._temp_roots):
            if self.running and shown is not None and root in Path(shown).parents:
                continue
            shutil.rmtree(root, ignore_errors=True)
            self._temp_roots.remove(root)

    def start_run(self) -> bool:
        """Start solving the document's model on a worker thread; False if it could not start."""
        if self.running:
            return False
        model = self.window.document.model
        out_dir = self.results_folder()
        question = previous_run(out_dir)
        if question and self.window.prompts.ask("Replace earlier results?", question, ("yes", "no")) != "yes":
            return False
        self.status.clear_error()
        self.status.preparing("Meshing and assembling the model…")
        self._pending_model = model.to_json_dict()
        self.whatif.run_started()
        cut = self.view.cut
        # unless the user chose a cut: cut from the first frame where the hottest part will be
        # hidden inside (the heated part with the highest power density), so the live view shows it
        hot = None if self._user_cut else likely_hot_spot(model)
        min_fraction = self.cut_slider.minimum() / 100

        def prepare(session):  # on the worker thread: the big-mesh work that would stall the window
            store = ResultsStore.for_problem(session.problem, session.out_dir)
            use, auto = cut, None
            bounds = store.part_bounds_mm.get(hot[0]) if hot is not None else None
            if bounds is not None and not box_visible(bounds, store.points_mm):
                found = revealing_cut_z(hot[1], store.points_mm, bounds, min_fraction=min_fraction)
                if found is not None:
                    auto = (hot[0], found)
                    use = ("z", found[0])
            return store, build_display(store.points_mm, store.tets, use), auto

        # force: the run writes beside the user's own files in the folder and never deletes them
        self.worker = RunWorker(model.model_copy(deep=True), out_dir, prepare=prepare, force=True)
        self.worker.prepared.connect(self._on_prepared)
        self.worker.output.connect(self._on_output)
        self.worker.preview.connect(self._on_preview)
        self.worker.progress.connect(self.status.progress)
        self.worker.succeeded.connect(self._on_succeeded)
        self.worker.failed.connect(self._on_failed)
        self.worker.stopped.connect(self._on_stopped)
        # collect cyclic garbage here, on the window's thread: collected later on the worker's
        # thread it could free Qt objects of a closed window there and deadlock with this thread
        # (seen in the test suite: ~QObject on the worker waiting for the GIL, the GIL holder waiting
        # for that QObject's lock)
        gc.collect()
        self.thread = start_worker(self.worker)
        self.thread.finished.connect(self._on_thread_finished)
        self.run_action.setEnabled(False)
        self.stop_action.setEnabled(True)
        return True

    def stop_run(self) -> None:
        if self.worker is not None:
            self.worker.request_stop()
            self.status.detail.setText("Stopping after the current step…")

    def wait(self, timeout_ms: int = 60000) -> bool:
        """Block until the worker thread has ended (for shutdown and tests)."""
        if self.thread is None:
            return True
        return self.thread.wait(timeout_ms)

    def shutdown(self) -> None:
        """Stop a run in progress and wait for its thread (call before the window goes); removes
        the temporary folders of unsaved runs."""
        if self.running:
            self.stop_run()
            self.wait()
            self._on_thread_finished()
        self.whatif.shutdown()
        self.zth.shutdown()
        self.sweep.shutdown()
        self.remove_temp_folders()

    def _on_prepared(self, session, prepared) -> None:
        self.store, display, auto = prepared
        if auto is not None:  # the live view starts cut (the controls show the cut)
            self._set_cut_controls("z", auto[1][0])
            self._auto_note = (f"; view cut at z = {auto[1][1]:.1f} mm to show {auto[0]}; "
                               "choose Whole model to see the outside")
            if self.view.cut != ("z", auto[1][0]):
                self.view.cut = ("z", auto[1][0])
                if self.view._same_mesh(display.grid):  # the drawn surface is kept: cut it here
                    self.view.set_cut("z", auto[1][0])
        else:
            self._auto_note = ""
        self._stepper = session.stepper  # read after the run: how it was solved
        self._session = session
        self._results_model = self._pending_model
        self._live = None
        self.stale = False
        self.view.attach(display)
        self.status.started(session.describe(), self.store.duration_s)
        for warning in session.warnings:
            self._status_bar(f"Warning: {warning}")
        self.table.set_rows(None)
        self.export_action.setEnabled(False)
        self.report_action.setEnabled(False)
        self.timeline.set_times([], self.store.duration_s)
        self.show_action.setEnabled(True)
        # keep the boxes until the first frame arrives: drawing the empty field now would cost the
        # solver several software-GL frames of a big mesh (measured: most of the live view's cost)
        self._reveal_pending = True

    def _on_output(self, time_s, field, part_max) -> None:
        if self.store is None:
            return
        self.store.add_frame(time_s, field, part_max)
        self._live = None
        self._new_outputs = True
        self._schedule_live()

    def _on_preview(self, time_s, field) -> None:
        self._live = (time_s, field)
        self._schedule_live()

    def _schedule_live(self) -> None:
        if not self._redraw.isActive():
            self._redraw.start()

    def _live_refresh(self) -> None:
        """Bring slider, chart and view up to date with the frames streamed so far."""
        s = self.store
        if s is None or not s.n_frames:
            return
        if self._reveal_pending:  # the first frame of a run: switch the view to the field now
            self._reveal_pending = False
            self.set_results_shown(True, paint=False)
        # following the newest output: judged against what the slider offered until now (frames
        # arrive in bunches between paced redraws, so the store's count would say "not following")
        following = not self.timeline.isEnabled() or self.timeline.index >= self.timeline.slider.maximum() - 1
        if self._new_outputs:
            self._new_outputs = False
            self.timeline.blockSignals(True)
            self.timeline.set_times(s.times, s.duration_s)
            self.timeline.blockSignals(False)
            self._update_chart()
        if following and self._live is not None and self._live[0] > s.times[-1]:
            t, f = self._live
            lo, hi = s.colour_range(None, False, pad=False)  # unpadded: the cool end stays at the start
            self.view.show_field(f, live_colour_range(lo, hi, f), paint=False)
            self._show_time(t, computing=True)
        elif following or not self.running:
            self._show(self.timeline.index, paint=False)
        else:
            return  # the user is looking at an earlier time: nothing new to draw
        if self.running:  # pace the next live redraw by what this one cost
            cost = self.view.paint_now()
            self._redraw.setInterval(int(min(LIVE_LONGEST_MS, max(LIVE_REDRAW_MS, 1000 * cost / LIVE_DUTY))))
        else:
            self.view.repaint()

    def _on_succeeded(self, rows) -> None:
        s = self.store
        s.set_peak_rows(rows)
        self.stale = self._model_differs()  # the model may have been edited during the run
        self._live = None
        self._new_outputs = True
        self._live_refresh()
        self.table.set_rows(s.peak_rows, s.duration_s)
        self.fit_table()
        self.export_action.setEnabled(True)
        self.report_action.setEnabled(True)
        over = s.ever_over()
        note = f"; over rating: {', '.join(sorted(over))}" if over else "; no part over its rating"
        st = getattr(self, "_stepper", None)
        if st is not None and st.method == "reduced" and st.reduced_info is not None:
            note += f". Solved by a {st.reduced_info.describe()}"
        where = display_path(s.folder)
        if any(r in s.folder.parents for r in self._temp_roots):
            where += " (temporary: removed when the window closes; save the model to keep results beside it)"
        self.status.finished(f"Finished: {s.n_frames} outputs, kept in {where}{note}" + self._auto_cut())
        self.status.detail.setToolTip(str(s.folder))
        self.show_index(self.timeline.index)
        if self._session is not None:
            self.whatif.run_finished(self._session.problem, self._session.band_levels())
        self._session = None

    def _on_failed(self, headline: str, details: str, issues) -> None:
        self.status.show_error(headline, details)
        self._status_bar(headline)
        if issues:
            target = item_for_path(issues[0][0])
            tree = getattr(self.window, "item_tree", None)
            if target is not None and tree is not None and hasattr(tree, "select"):
                tree.select(*target)

    def _on_stopped(self, text: str) -> None:
        self._live = None
        self._new_outputs = True
        if self.store is not None and self.store.n_frames:
            self._live_refresh()
        self.status.stopped(f"Stopped ({text}). The outputs computed so far can be scrubbed; "
                            "no peak table was written.")

    def _on_thread_finished(self) -> None:
        if self.thread is None:
            return
        self.thread.wait()
        self.worker.deleteLater()
        self.thread.deleteLater()
        self.worker = self.thread = None
        if self._session is not None:  # stopped or failed: no finished run to offer a what-if from
            self._session = None
            self.whatif.run_ended_unfinished()
        self.run_action.setEnabled(True)
        self.stop_action.setEnabled(False)

    def _model_differs(self) -> bool:
        model = getattr(self.window.document, "model", None)
        return model is None or self._results_model is None or model.to_json_dict() != self._results_model

    def _on_model_changed(self) -> None:
        model = getattr(self.window.document, "model", None)
        if self.store is None and model is not None:  # the empty table's headings in the run's time unit
            self.table.set_rows(None, float(model.run.duration_s))
        path = getattr(self.window.document, "path", None)
        if path != self._checked_path:  # a model was opened: reopen the results kept beside it
            self._checked_path = path
            if path and not self.running and self._open_beside(path):
                return
        if self.store is None or self.running:
            return
        was, self.stale = self.stale, self._model_differs()
        if self.stale and not was:
            if self.results_shown:
                self.set_results_shown(False)
            self.status.detail.setText("The model changed after these results; run again to update them "
                                       "(F6 shows the old results).")
        elif was and not self.stale:
            self.status.detail.setText("The model is again the one these results were computed for.")

    def _status_bar(self, text: str) -> None:
        bar = self.window.statusBar() if hasattr(self.window, "statusBar") else None
        if bar is not None:
            bar.showMessage(text, 8000)

    def eventFilter(self, obj, event) -> bool:
        if obj is self.window and event.type() == QEvent.Close:
            self.shutdown()
        return False
