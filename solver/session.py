"""One run of a model, from validated input to files on disk, as a stream of step events.

Both the command line and the app drive a :class:`RunSession`::

    session = RunSession(model, out_dir)      # meshes, assembles, checks stability (ModelError)
    for event in session.events():            # StepEvent after every step
        ...                                   # progress, live view; stop iterating to cancel
    rows = session.finish()                   # writes peaks.csv, history.csv, run.json, field.pvd
"""
from __future__ import annotations

import time
from pathlib import Path
from typing import Callable, Iterator

from .meshreport import resolution_report
from .problem import build_problem
from .results import PeakRow, RunRecorder
from .stepping import StepEvent, Stepper
from .writers import FieldSeriesWriter, write_history_csv, write_peaks_csv, write_run_info


class RunSession:
    """Prepare, step and record one run. ``out_dir=None`` keeps fields in memory only."""

    def __init__(self, model, out_dir=None, cancel: Callable[[], bool] | None = None,
                 linear_solver: str = "auto", keep_fields: bool | None = None, method: str | None = None):
        self.t_start = time.perf_counter()
        self.model = model
        self.problem = build_problem(model)
        self.stepper = Stepper(self.problem, cancel=cancel, linear_solver=linear_solver, method=method)
        self.out_dir = Path(out_dir) if out_dir is not None else None
        self._series = None
        self.recorder = None
        self.keep_fields = keep_fields if keep_fields is not None else self.out_dir is None
        self.last_event: StepEvent | None = None

    @property
    def warnings(self) -> list[str]:
        return self.problem.warnings

    def resolution(self) -> list[str]:
        """One line per heated or rated part: how many cells span it and how wide they are."""
        return [r.describe() for r in resolution_report(self.model, self.problem.mesh)]

    def describe(self) -> str:
        p, s = self.problem, self.stepper
        steps = (f"{len(s.outputs):,} output times" if s.method == "reduced" else f"{s.n_steps:,} steps")
        return (f"{p.n_nodes:,} nodes, {p.mesh.n_tets:,} tetrahedra, {steps} ({s.scheme}); "
                f"linear solver: {s.choice.method} ({s.choice.reason})")

    def events(self) -> Iterator[StepEvent]:
        """Run the steps, recording each; yields every event (the caller may stop early)."""
        sink = None
        if self.out_dir is not None:
            self.out_dir.mkdir(parents=True, exist_ok=True)
            self._series = FieldSeriesWriter(self.out_dir, self.problem)
            sink = self._series
        self.recorder = RunRecorder(self.problem, field_sink=sink, keep_fields=self.keep_fields)
        for ev in self.stepper:
            self.recorder.add(ev)
            self.last_event = ev
            yield ev

    @property
    def complete(self) -> bool:
        return self.last_event is not None and self.last_event.step == self.last_event.n_steps

    def finish(self) -> list[PeakRow]:
        """Peak rows; with an output folder also writes every result file."""
        rows = self.recorder.peak_rows()
        if self.out_dir is not None:
            self._series.close()
            write_peaks_csv(self.out_dir / "peaks.csv", rows)
            write_history_csv(self.out_dir / "history.csv", self.recorder)
            write_run_info(self.out_dir / "run.json", self.problem, self.recorder, self.stepper,
                           time.perf_counter() - self.t_start)
        return rows
