"""Long solver calls other than a run (unit responses, Zth curves, a sweep) on a worker thread.

A :class:`JobWorker` calls ``work(progress, cancelled)`` on its own thread; ``work`` is a solver
call that reports with ``progress(text)`` and checks ``cancelled()`` (True once Stop was asked).
All numerics stay in ``solver``; this only forwards the outcome to the window as Qt signals.
"""
from __future__ import annotations

import gc
import threading

from PySide6.QtCore import QObject, QThread, Signal, Slot

from solver.errors import Cancelled

from .messages import describe_error


class JobWorker(QObject):
    """Signals (queued to the window's thread): ``progress(text)``, ``succeeded(result)``,
    ``failed(headline, details, issues)``, ``stopped(text)``; then ``done()``."""

    progress = Signal(str)
    succeeded = Signal(object)
    failed = Signal(str, str, object)
    stopped = Signal(str)
    done = Signal()

    def __init__(self, work):
        super().__init__()
        self.work = work
        self._stop = threading.Event()

    def request_stop(self) -> None:
        self._stop.set()

    def cancelled(self) -> bool:
        return self._stop.is_set()

    def _progress(self, text: str) -> None:
        if self._stop.is_set():
            raise Cancelled("stopped on request")
        self.progress.emit(str(text))

    @Slot()
    def run(self) -> None:
        try:
            result = self.work(self._progress, self.cancelled)
        except Cancelled as e:
            self.stopped.emit(str(e))
        except Exception as e:  # ModelError (refused), SolveError, MemoryError, OSError, anything else
            self.failed.emit(*describe_error(e), list(getattr(e, "issues", [])))
        else:
            if self._stop.is_set():
                self.stopped.emit("stopped on request")
            else:
                self.succeeded.emit(result)
        finally:
            self.done.emit()


class Job(QObject):
    """One :class:`JobWorker` on its own thread, cleaned up when it ends (``finished`` then)."""

    finished = Signal()

    def __init__(self, work, parent=None, short: bool = False):
        """``short``: a sub-second job (a what-if answer). Instead of a full garbage collection
        before it starts (100-500 ms in a big session), automatic collection is paused until it
        ends, which also keeps cyclic garbage from being freed on the job's thread."""
        super().__init__(parent)
        self.short = short
        self._gc_paused = False
        self.worker = JobWorker(work)
        self.thread = QThread()
        self.worker.moveToThread(self.thread)
        self.thread.started.connect(self.worker.run)
        self.worker.done.connect(self.thread.quit)
        self.thread.finished.connect(self._ended)
        self.running = False

    def start(self) -> None:
        if self.short:
            self._gc_paused = gc.isenabled()
            gc.disable()
        else:
            gc.collect()  # on the window's thread (see RunWorker's start in the controller)
        self.running = True
        self.thread.start()

    def stop(self) -> None:
        self.worker.request_stop()

    def wait(self, timeout_ms: int = 60000) -> bool:
        """Block until the job has ended (then it is cleaned up at once, not at the next event)."""
        if not self.running:
            return True
        if not self.thread.wait(timeout_ms):
            return False
        self._ended()
        return True

    def _ended(self) -> None:
        if not self.running:
            return
        self.running = False
        self.thread.wait()
        if self._gc_paused:
            gc.enable()
            self._gc_paused = False
        self.worker.deleteLater()
        self.thread.deleteLater()
        self.finished.emit()
        self.deleteLater()  # the owner keeps only the newest job
