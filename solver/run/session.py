"""One run of a model, from validated input to files on disk, as a stream of step events.

Both the command line and the app drive a :class:`RunSession`::

    session = RunSession(model, out_dir)      # meshes, assembles, checks stability (ModelError)
    for event in session.events():            # StepEvent after every step, of every mesh level
        ...                                   # progress, live view; stop iterating to cancel
    rows = session.finish()                   # writes peaks.csv, history.csv, run.json (field.vtkhdf
                                              # is written beside the stepping, on a background thread)

With ``mesh.tolerance_k`` (default 1 K) the run is a ladder of meshes (:mod:`solver.run.accuracy`):
each level is solved in full and streamed, ``event.level`` tells which, and ``session.problem``
is the level being solved; the last level streamed is the one reported, with an error bound on
every peak. With ``mesh.tolerance_k: null`` the file's mesh is reported, and two finer meshes
are solved only to bound its error (then the file's mesh is solved again, as the last level).

With an output folder every file is written into a staging folder beside it and moved into place,
with a manifest, by :meth:`finish` (:mod:`solver.io.runstore`); a run that stops early leaves the
folder as it was.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
import time
import weakref
from pathlib import Path
from typing import Callable, Iterator

import numpy as np

from solver.run.accuracy import (GROWTH_PER_LEVEL, MIN_LEVELS_TO_ACCEPT, AccuracySettings, Ladder, reported_bound,
                                 time_error_bound)
from solver.mesh.budget import check_budget, memory_limit
from solver.mesh.mesher import MM, BYTES_PER_NODE_ESTIMATE, available_memory_bytes, build_mesh, estimate_nodes
from solver.mesh.localplanes import free_count
from solver.mesh.meshreport import resolution_report
from solver.fem.problem import build_problem
from solver.linalg.linsolve import choose_method, scaled_factor_bytes
from solver.transient.reduced import DEFAULT_TOLERANCE_K as REDUCED_DEFAULT_TOLERANCE_K
from solver.mesh.refinement import influence_fields, refined_lines, refined_planes
from solver.results.recorder import PeakRow, RunRecorder
from solver.io.runstore import RunFolder, model_hash
from solver.transient.stepping import StepEvent, Stepper
from solver.io.fieldseries import FieldWriter
from solver.io.writers import write_history_csv, write_peaks_csv, write_run_info

KEEP_IN_MEMORY_BYTES = 5e8  # frames of an unstreamed level kept in memory up to this size
DUAL_WEIGHTED = True  # refine by goal-oriented (influence-weighted) indicators
BASIS_SHARE = 0.1  # reduced-basis tolerance as a share of mesh.tolerance_k ...
MIN_BASIS_TOLERANCE_K = 0.005  # ... but not below this
LOCAL_PLANES = True  # refined planes are active only where their indicator comes from (hanging nodes)


@dataclass
class BandLevels:
    """Mesh levels of a run's error bound: planes per level (mm, coarse to fine), node counts, and
    which of them the reported peaks come from."""

    lines_mm: list
    reported: int
    nodes: list  # grid nodes per level (as the ladder's bound counts them)
    regions: list | None = None  # per level: where each plane is active (None: everywhere)


def _dual_method(method: str) -> str:
    """Linear solver for the influence fields: the run's own choice, in double precision."""
    return {"pardiso-single": "pardiso"}.get(method, method)


class RunSession:
    """Prepare, step and record one run. ``out_dir=None`` keeps fields in memory only;
    ``fields="none"`` writes no field file (peaks, history and run.json still).

    ``tolerance_k`` overrides ``mesh.tolerance_k`` ("model" = use the file's; None = keep the mesh
    as given and only estimate its error; ``False`` = no estimate at all, a single solve).
    """

    def __init__(self, model, out_dir=None, cancel: Callable[[], bool] | None = None,
                 linear_solver: str = "auto", keep_fields: bool | None = None, method: str | None = None,
                 tolerance_k="model", fields: str = "all", force: bool = False,
                 memory_limit_bytes: int | None = None, frames_in_memory: bool = False):
        self.t_start = time.perf_counter()
        self.cycle = None  # periodic.CycleInfo of the level being solved, when run.periodic
        self._period = None
        if getattr(model.run, "periodic", False):
            from solver.transient.periodic import cycle_model
            model, self._period = cycle_model(model)
        self.model = model
        self.cancel, self.linear_solver, self.method = cancel, linear_solver, method
        self.out_dir = Path(out_dir) if out_dir is not None else None
        # cheap checks first, before anything is written: the memory budget (counted from the model),
        # then the folder (lock, foreign files, staging folder); then the big work
        with memory_limit(memory_limit_bytes):
            self.memory_estimate = check_budget(model, keep_fields=(keep_fields if keep_fields is not None
                                                                    else out_dir is None) or frames_in_memory,
                                                out_dir=self.out_dir)
        self.folder = RunFolder(self.out_dir, force=force).begin() if self.out_dir is not None else None
        if self.folder is not None:  # a session dropped before it finished leaves no lock or staging behind
            weakref.finalize(self, self.folder.abort)
        try:
            self.estimate = tolerance_k is not False
            self.settings = AccuracySettings.from_model(model, None if tolerance_k is False else tolerance_k)
            self.ladder = Ladder(model, self.settings)
            with memory_limit(memory_limit_bytes):
                self.problem = build_problem(model)
            self.stepper = self._stepper(self.problem)
        except BaseException:
            self.abort()
            raise
        self.level = 0
        self._series = None
        self.fields = fields
        self.recorder = None
        self.keep_fields = keep_fields if keep_fields is not None else self.out_dir is None
        self.last_event: StepEvent | None = None
        self.accuracy_notes: list[str] = []
        self._reported_level = None
        self._finished_all = False
        self._streamed_final = False
        self._level_lines: list = []  # (planes mm, regions) of each level solved, coarse to fine

    def _stepper(self, problem, **kw) -> Stepper:
        if self._period is not None and getattr(problem, "_cycle", None) is None:
            from solver.transient.periodic import start_cycle  # every mesh level gets its own settled start state
            problem._cycle = start_cycle(problem, self._period, self.linear_solver)
        self.cycle = getattr(problem, "_cycle", None)
        st = Stepper(problem, cancel=self.cancel, linear_solver=self.linear_solver, method=self.method, **kw)
        tol = self.settings.tolerance_k
        if st.method == "reduced" and tol is not None and self.estimate:
            # the basis error is a small share of the peak tolerance, so the mesh error dominates
            own = st.tolerance_k if st.tolerance_k is not None else REDUCED_DEFAULT_TOLERANCE_K
            st.tolerance_k = max(MIN_BASIS_TOLERANCE_K, min(own, BASIS_SHARE * tol))
        st.keep_shift_solver = self.estimate  # the basis's factorization serves the influence fields
        return st

    def _release_shift_solver(self) -> None:
        held = getattr(self.stepper, "shift_solver", None)
        if held is not None:
            self.stepper.shift_solver = None
            held[0].close()

    @property
    def warnings(self) -> list[str]:
        return self.problem.warnings

    def resolution(self) -> list[str]:
        """One line per heated or rated part: how many cells span it and how wide they are."""
        return [r.describe() for r in resolution_report(self.model, self.problem.mesh)]

    def describe(self) -> str:
        p, s = self.problem, self.stepper
        steps = (f"{len(s.outputs):,} output times" if s.method == "reduced" else f"{s.n_steps:,} steps")
        level = f"mesh level {self.level}: " if self.estimate else ""
        free = f" ({p.n_free:,} unknowns, the rest on local planes)" if p.constraint is not None else ""
        return (f"{level}{p.n_nodes:,} nodes{free}, {p.mesh.n_tets:,} tetrahedra, {steps} ({s.scheme}); "
                f"method: {s.method} ({s.method_choice.reason}); "
                f"linear solver: {s.choice.method} ({s.choice.reason})")

    # ------------------------------------------------------------------ the ladder
    def _solver_error(self, stepper) -> float:
        info = getattr(stepper, "reduced_info", None)
        if stepper.method == "reduced" and info is not None and np.isfinite(info.error_estimate_k):
            return float(info.error_estimate_k)
        if stepper.adaptive and stepper.method == "full":
            return float(stepper.tolerance_k)
        return 0.0

    def _solve_level(self, stream_fields: bool) -> Iterator[StepEvent]:
        sink = None
        self._close_writer()  # an earlier level's file is replaced (or left, if this level is not streamed)
        if stream_fields and self.folder is not None:
            self._series = FieldWriter(self.folder.write_dir, self.problem, fields=self.fields)
            sink = self._series
        keep = self.keep_fields or (self.out_dir is not None and not stream_fields and self._fits_in_memory())
        self.recorder = RunRecorder(self.problem, field_sink=sink, keep_fields=keep,
                                    peak_field_parts=tuple(self.ladder.goal) if self.estimate else ())
        self._streamed_final = sink is not None
        t0 = time.perf_counter()
        try:
            for ev in self.stepper:
                ev.level = self.level
                self.recorder.add(ev)
                self.last_event = ev
                yield ev
        except BaseException:  # the run failed or was stopped: let the writer thread end
            if self._series is not None:
                self._series.abort()
            raise
        self._level_wall = time.perf_counter() - t0
        if self.cycle is not None and self.last_event is not None:
            f = self.last_event.field
            self.cycle.closure_k = float(np.abs(f - self.problem.initial[:len(f)]).max())

    def _close_writer(self) -> None:
        """Finish an earlier level's writer (its errors are reported when the final one closes)."""
        if self._series is not None:
            self._series.abort()

    def written_files(self) -> list[str]:
        """Relative paths of the field files written (see :meth:`FieldWriter.written_files`)."""
        return self._series.written_files() if self._series is not None else []

    def _fits_in_memory(self) -> bool:
        frames = len(self.stepper.outputs)
        return frames * self.problem.n_nodes * 4 <= KEEP_IN_MEMORY_BYTES

    def _time_check(self) -> None:
        """Step-halving twin of a fixed-step full run on the first mesh (time error per part)."""
        st = self.stepper
        if st.method != "full" or st.adaptive:
            return
        run = self.model.run
        half = self.model.model_copy(deep=True)
        half.run.step_s = float(run.step_s) / 2.0
        twin_problem = dataclasses.replace(self.problem, model=half)
        twin = Stepper(twin_problem, cancel=self.cancel, linear_solver=self.linear_solver, method="full")
        peak = np.full(len(self.model.parts), -np.inf)
        for ev in twin:
            np.maximum(peak, ev.part_max, out=peak)
        self.ladder.time_error = time_error_bound(self.recorder.peak, peak, run.scheme)

    def _next_lines(self):
        rec = self.recorder
        goal = [i for i in self.ladder.goal if i in rec.peak_fields]
        fields = [rec.peak_fields[i] for i in goal]
        if not fields:
            fields = [np.asarray(self.last_event.field)]
            hot = [int(np.argmax(fields[0]))]
            goal = []
        else:
            hot = [self.problem.part_nodes.argmax(f, i) for f, i in zip(fields, goal)]
        duals = None
        if DUAL_WEIGHTED:
            held = getattr(self.stepper, "shift_solver", None)
            if held is not None:  # the reduced basis's K + M/τ factorization, reused
                z = influence_fields(self.problem, hot, held[1], solver=held[0])
            else:
                z = influence_fields(self.problem, hot, float(self.model.run.duration_s),
                                     _dual_method(self.stepper.choice.method))
            duals = [z[:, j] for j in range(z.shape[1])]
        self._release_shift_solver()
        if self._local_planes():
            return refined_planes(self.model, self.problem.mesh, fields, duals, hot, goal or None)
        lines, _ = refined_lines(self.model, self.problem.mesh, fields, duals, hot, goal or None)
        return lines, None

    def _would_lose_factorization(self, factor_bytes: float | None, unknowns: int) -> bool:
        """Would a reduced run that factors now fall back to multigrid on a next level of ``unknowns``
        whose double factor is predicted at ``factor_bytes``? (Its basis then costs one CG solve per
        vector, many times the factorization's time, which the time limit, judged from the last
        level, does not foresee; benchmarks/README.md, session 11.)"""
        st = self.stepper
        if (factor_bytes is None or st.method != "reduced" or self.linear_solver != "auto"
                or st.choice.method not in ("pardiso", "pardiso-single")):
            return False
        return choose_method(unknowns, "auto", factor_bytes=factor_bytes).method == "multigrid"

    def _local_planes(self) -> bool:
        """Refine with planes active only where needed (hanging nodes, :mod:`solver.mesh.localplanes`)?
        Only for runs whose every solve goes through the constrained solvers: implicit steps (or the
        reduced basis), a uniform start and no periodic start-up cycle."""
        run = self.model.run
        return (LOCAL_PLANES and self._period is None and np.ptp(self.problem.initial) == 0.0
                and (self.stepper.method == "reduced" or run.scheme != "forward-euler"))

    def events(self) -> Iterator[StepEvent]:
        """Run every level's steps, recording each; yields every event (the caller may stop early)."""
        try:
            yield from self._events()
        except BaseException:  # failed, cancelled, or the caller stopped iterating: nothing is installed
            self.abort()
            raise
        finally:
            self._release_shift_solver()

    def _predicted_next_nodes(self) -> int:
        """Unknowns of the next level, from the growth of the last one (before planning it)."""
        n = self.ladder.unknowns
        growth = n[-1] / n[-2] if len(n) >= 2 and n[-2] > 0 else GROWTH_PER_LEVEL
        return int(n[-1] * min(4.0, max(1.2, growth)))

    def _events(self) -> Iterator[StepEvent]:
        if not self.estimate:
            yield from self._solve_level(True)
            self._reported_level = 0
            self._finished_all = True
            return
        s = self.settings
        first_problem = self.problem
        while True:
            k = self.level
            final_guess = s.refine and (k + 1 >= MIN_LEVELS_TO_ACCEPT or k + 1 >= s.max_levels)
            yield from self._solve_level(final_guess)
            solver_err = self._solver_error(self.stepper)
            if k == 0:
                self._time_check()
            own_time_error = getattr(getattr(self.stepper, "reduced_info", None), "time_error_k", None)
            if own_time_error is not None:  # a radiating reduced run checks its own steps, on every mesh
                self.ladder.time_error = np.asarray(own_time_error, dtype=float)
            self.ladder.add(self.problem, self.recorder.peak.copy(), self._level_wall, self.stepper.method, solver_err)
            mesh = self.problem.mesh
            self._level_lines.append((tuple(np.asarray(l) / MM for l in mesh.lines), mesh.regions))
            if not s.refine and k >= 2:
                break
            if s.refine:  # stop before planning a level that a budget already forbids
                guess = self._predicted_next_nodes()  # unknowns; the grid holds n_nodes/n_free times more nodes
                grid_guess = guess * self.problem.n_nodes / max(1, self.problem.n_free)
                fits = grid_guess * BYTES_PER_NODE_ESTIMATE <= 0.7 * available_memory_bytes()
                if self.ladder.done(solver_err, time.perf_counter() - self.t_start, guess, fits,
                                    next_grid_nodes=int(grid_guess)):
                    break
            lines, regions = self._next_lines()
            est = estimate_nodes(self.model, lines)
            memory_ok = est * BYTES_PER_NODE_ESTIMATE <= 0.7 * available_memory_bytes()
            mesh = None
            unknowns = est
            if regions is not None and memory_ok:  # the budget counts unknowns: hanging nodes are not solved for
                mesh = build_mesh(self.model, lines_mm=lines, regions=regions)
                unknowns = free_count(mesh)
            wall = time.perf_counter() - self.t_start
            if s.refine and self.ladder.done(solver_err, wall, unknowns, memory_ok,
                                             next_grid_nodes=None if mesh is not None else est):
                break
            if not s.refine and (est > s.max_nodes or not memory_ok):
                self.ladder.stop_reason = f"the estimate's next mesh (about {est:,} nodes) is over the budget"
                break
            measured, measured_nodes = self.stepper.factor_bytes_measured, self.problem.n_free
            predicted = None if measured is None else scaled_factor_bytes(measured, measured_nodes, unknowns)
            if s.refine and self._would_lose_factorization(predicted, unknowns):
                self.ladder.stop(solver_err, f"the next mesh ({unknowns:,} unknowns) would need a factorization "
                                 f"of about {predicted / 1e9:.1f} GB, over the direct solver's memory budget; its "
                                 "reduced basis would be built with multigrid, one slow solve per vector")
                break
            self.problem = build_problem(self.model, mesh or build_mesh(self.model, lines_mm=lines, regions=regions))
            hint = (None if measured is None else
                    scaled_factor_bytes(measured, measured_nodes, self.problem.n_free))
            self.stepper = self._stepper(self.problem, factor_bytes_hint=hint)
            self.level += 1
        if not s.refine:  # report the file's mesh: solve it again as the last level streamed
            self._null_bounds = self._coarse_bounds()
            self.problem = first_problem
            self.stepper = self._stepper(first_problem)
            self.level = 0
            yield from self._solve_level(True)
            self._reported_level = 0
        else:
            self._reported_level = self.level
        self._finished_all = True

    def _coarse_bounds(self) -> np.ndarray:
        """Bound for the first (coarsest) level: its distance to the finest plus the finest's bound."""
        lad = self.ladder
        t = lad.time_error if lad.time_error is not None else 0.0
        return reported_bound(lad.peaks, lad.nodes, 0, t + float(lad.levels[-1].time_error_k))

    def band_levels(self) -> "BandLevels | None":
        """The meshes the reported peaks' bound came from (the last three levels, or fewer), so an
        answer derived from the same run (a what-if) can be bounded the same way; None when no
        bound was estimated."""
        if not self.estimate or len(self._level_lines) < 2 or self._reported_level is None:
            return None
        keep = self._level_lines[-3:]
        first = len(self._level_lines) - len(keep)
        if self._reported_level < first:  # mesh.tolerance_k null: the file's mesh, then two finer
            keep, first = self._level_lines[:3], 0
        return BandLevels(lines_mm=[k[0] for k in keep], reported=self._reported_level - first,
                          nodes=list(self.ladder.nodes[first:first + len(keep)]), regions=[k[1] for k in keep])

    @property
    def complete(self) -> bool:
        return (self._finished_all and self.last_event is not None
                and self.last_event.step == self.last_event.n_steps)

    def peak_errors(self) -> np.ndarray | None:
        """Per-part error bound (K) of the reported peaks, or None when not estimated."""
        if not self.estimate or not self.ladder.levels:
            return None
        if not self.settings.refine:
            return getattr(self, "_null_bounds", None)
        lad = self.ladder
        return lad.total_bound(lad.levels[-1].time_error_k)

    def accuracy_record(self) -> dict | None:
        if not self.estimate:
            return None
        rec = self.ladder.record()
        rec["reported_level"] = self._reported_level
        err = self.peak_errors()
        if err is not None:
            rec["reported_error_k"] = {p.name: (float(err[i]) if np.isfinite(err[i]) else None)
                                       for i, p in enumerate(self.model.parts)}
        return rec

    def accuracy_warnings(self) -> list[str]:
        """Sentences for the user when the tolerance was not reached."""
        lad = self.ladder
        if not self.estimate or not self.settings.refine or lad.converged or not lad.levels:
            return []
        left = ", ".join(f"{p} (± {v:.2f} K)" if np.isfinite(v) else f"{p} (error unknown)"
                         for p, v in lad.unconverged)
        return [f"the mesh did not reach mesh.tolerance_k = {self.settings.tolerance_k:g} K: {lad.stop_reason}"
                + (f"; parts still above it: {left}" if left else "")]

    def finish(self) -> list[PeakRow]:
        """Peak rows; with an output folder also writes every result file."""
        rows = self.recorder.peak_rows()
        err = self.peak_errors()
        if err is not None:
            for r, e in zip(rows, err):  # parts first; air volume rows after them stay unestimated
                r.peak_error_k = float(e) if np.isfinite(e) else None
        if self.folder is not None:
            d = self.folder.write_dir
            try:
                if self._streamed_final:
                    self._series.close()  # waits for the queued frames; OSError naming the folder on failure
                else:
                    self._series = self._write_kept_fields()
                write_peaks_csv(d / "peaks.csv", rows)
                write_history_csv(d / "history.csv", self.recorder)
                write_run_info(d / "run.json", self.problem, self.recorder, self.stepper,
                               time.perf_counter() - self.t_start, accuracy=self.accuracy_record(),
                               field_files=self.written_files(),
                               field_write_s=getattr(self._series, "write_s", None))
                info = {"model_sha256": model_hash(self.model), "nodes": int(self.problem.mesh.n_nodes),
                        "tetrahedra": int(self.problem.mesh.n_tets),
                        "frames": [{"time_s": float(t)} for t in self.recorder.times]}
                written = self.written_files()
                self.folder.commit(["peaks.csv", "history.csv", "run.json", *written], info)
            except BaseException:
                self.abort()
                raise
        return rows

    def abort(self) -> None:
        """Drop the staged files and the folder lock (the results folder stays as it was)."""
        if getattr(self, "_series", None) is not None:
            self._series.abort()
        if getattr(self, "folder", None) is not None:
            self.folder.abort()

    def _write_kept_fields(self):
        """Fields of a level that was not streamed (kept in memory), written now (into the staging folder)."""
        self._close_writer()
        writer = FieldWriter(self.folder.write_dir, self.problem, fields=self.fields)
        for t, f in zip(self.recorder.times, self.recorder.fields):
            writer(t, f)
        writer.close()
        return writer
