"""The solver run on a worker thread: a :class:`RunWorker` drives :class:`solver.run.session.RunSession`.

All numerics stay in ``solver``; this object only forwards the step stream to the window as Qt
signals. Fields are sent as float32 copies at output times, and in between at most every
``preview_every_s`` seconds of wall time for the live view, so the solve is not held up.
Progress goes out at most every ``progress_every_s`` (2 s): the 3D view is an OpenGL widget, so
every repaint of the window is composed through OpenGL, which without a graphics card costs about
0.08 CPU-seconds on the solver's cores per progress update (benchmarks/gui_responsiveness.py and
per-thread CPU times; 10 updates a second had cost several CPU-seconds per run).
"""
from __future__ import annotations

import threading
import time

import numpy as np
from PySide6.QtCore import QObject, QThread, Signal, Slot

from solver.errors import Cancelled
from solver.run.session import RunSession

from .messages import describe_error


class RunWorker(QObject):
    """Signals (all queued to the window's thread):

    - ``prepared(session, extra)`` after meshing and assembly (before the first step); ``extra`` is
      what ``prepare(session)`` returned, run here on the worker thread (e.g. display geometry);
    - ``output(time_s, field_c float32, part_max_c)`` at every output time;
    - ``preview(time_s, field_c float32)`` between outputs, for the live view only;
    - ``progress(step, n_steps, time_s, elapsed_s)``;
    - ``succeeded(peak_rows)``, ``failed(headline, details, issues)``, ``stopped(text)``; then ``done()``.
    """

    prepared = Signal(object, object)
    output = Signal(float, object, object)
    preview = Signal(float, object)
    progress = Signal(int, int, float, float)
    succeeded = Signal(object)
    failed = Signal(str, str, object)
    stopped = Signal(str)
    done = Signal()

    def __init__(self, model, out_dir, prepare=None, preview_every_s: float = 0.3, progress_every_s: float = 2.0,
                 force: bool = False):
        super().__init__()
        self.force = force  # write beside files in out_dir that no run wrote (they are kept)
        self.prepare = prepare
        self.model = model
        self.out_dir = out_dir
        self.preview_every_s = preview_every_s
        self.progress_every_s = progress_every_s
        self._stop = threading.Event()

    def request_stop(self) -> None:
        """Ask the run to stop before its next step (safe to call from any thread)."""
        self._stop.set()

    @Slot()
    def run(self) -> None:
        try:
            self._run()
        finally:
            self.done.emit()

    def _run(self) -> None:
        try:
            session = None
            session = RunSession(self.model, self.out_dir, cancel=self._stop.is_set, force=self.force,
                                 frames_in_memory=True)  # the window keeps every frame
            extra = self.prepare(session) if self.prepare is not None else None
        except Exception as e:  # ModelError (invalid, unstable step, mesh too large, folder in use), MemoryError, ...
            if session is not None:
                session.abort()  # release the results folder's lock and staging folder
            self.failed.emit(*describe_error(e), list(getattr(e, "issues", [])))
            return
        self.prepared.emit(session, extra)
        last_preview = last_progress = time.perf_counter()
        level = 0
        try:
            for ev in session.events():
                if ev.level != level:  # a finer mesh of the accuracy ladder: the view starts again on it
                    level = ev.level
                    extra = self.prepare(session) if self.prepare is not None else None
                    self.prepared.emit(session, extra)
                now = time.perf_counter()
                if ev.is_output:
                    # part maxima, then the air volumes' temperatures (the store splits them)
                    self.output.emit(ev.time_s, np.array(ev.field, dtype=np.float32),
                                     np.concatenate([ev.part_max, getattr(ev, "air", np.zeros(0))]))
                    last_preview = now
                elif now - last_preview >= self.preview_every_s:
                    self.preview.emit(ev.time_s, np.array(ev.field, dtype=np.float32))
                    last_preview = now
                if ev.step == ev.n_steps or ev.step == 0 or now - last_progress >= self.progress_every_s:
                    self.progress.emit(ev.step, ev.n_steps, ev.time_s, ev.elapsed_s)
                    last_progress = now
            rows = session.finish()
        except Cancelled as e:
            self.stopped.emit(str(e))
            return
        except Exception as e:  # SolveError, OSError while writing, anything unexpected
            self.failed.emit(*describe_error(e), list(getattr(e, "issues", [])))
            return
        self.succeeded.emit(rows)


def start_worker(worker: RunWorker, parent=None) -> QThread:
    """Move ``worker`` to a new thread and start it; the thread quits when the run is done."""
    thread = QThread(parent)
    worker.moveToThread(thread)
    thread.started.connect(worker.run)
    worker.done.connect(thread.quit)
    thread.start()
    return thread
