"""A what-if with an error band: the same superposition on each mesh the run's bound came from.

A run with ``mesh.tolerance_k`` bounds its peaks from a ladder of meshes
(:mod:`solver.run.accuracy`). A what-if (:mod:`solver.answers.whatif`) changes the loads, so the run's
band does not carry over. Here the unit responses are built on the same meshes (the run's last
three levels, or with ``mesh.tolerance_k: null`` the file's mesh and the two finer ones), every
what-if is evaluated on each, and the what-if's own peaks get the same bound as the run's
(:func:`solver.run.accuracy.reported_bound`: grid convergence index over the levels, plus the
distance to the finest when the file's mesh is reported), plus the unit responses' largest basis
change. Superposition is exact in time, so no time-step error is added. With the loads as in the
run the band is the run's own, up to the basis errors of the two computations.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from solver.answers.whatif import UnitResponses, evaluate, prepare_unit_responses
from solver.errors import Cancelled
from solver.run.accuracy import reported_bound


@dataclass
class WhatIfLevels:
    """Unit responses on each mesh level (coarse to fine) and which level is reported."""

    problems: list
    units: list
    nodes: list
    reported: int

    @property
    def problem(self):
        return self.problems[self.reported]

    @property
    def basis_change_k(self) -> float:
        return float(max(u.change_k for u in self.units))

    @property
    def basis_size(self) -> int:
        return int(self.units[self.reported].v.shape[1])

    @property
    def samples(self) -> int:
        return int(len(self.units[self.reported].times))


def prepare_levels(model, levels, reported_problem, progress=None, cancel=None,
                   linear_solver: str = "auto") -> WhatIfLevels:
    """Unit responses on every level of ``levels`` (:class:`solver.run.session.BandLevels`; None: the
    reported mesh only, and then no band); the reported level reuses ``reported_problem`` (the run's
    own), the others are meshed again from their planes. ``progress(text)`` is told which mesh is
    being prepared."""
    from solver.fem.problem import build_problem
    from solver.mesh.mesher import build_mesh
    from solver.run.session import BandLevels

    if levels is None:
        levels = BandLevels(lines_mm=[None], reported=0, nodes=[reported_problem.n_nodes])
    problems, units = [], []
    n = len(levels.lines_mm)
    regions = levels.regions or [None] * n
    for i, lines in enumerate(levels.lines_mm):
        if cancel is not None and cancel():
            raise Cancelled("cancelled while preparing the what-if")
        problem = (reported_problem if i == levels.reported else
                   build_problem(model, build_mesh(model, lines_mm=lines, regions=regions[i])))
        tell = None
        if progress is not None:
            def tell(text, i=i, problem=problem):
                progress(text if n == 1 else f"mesh {i + 1} of {n} ({problem.n_nodes:,} nodes): {text}")
        units.append(prepare_unit_responses(problem, linear_solver, progress=tell, cancel=cancel))
        problems.append(problem)
    return WhatIfLevels(problems, units, [p.n_nodes for p in problems], levels.reported)


def band_levels_for(model, linear_solver: str = "auto", say=None):
    """Run the model's mesh ladder as ``thermgui solve`` would (``model.mesh.tolerance_k``; no files)
    and build unit responses on the meshes its bound came from: (BandLevels or None, WhatIfLevels,
    a warning or None when the ladder stopped before the tolerance). ``say(text)`` hears progress."""
    from solver.answers.whatif import check_whatif
    from solver.run.session import RunSession

    check_whatif(model)  # before the ladder: superposition must hold
    say = say or (lambda text: None)
    session = RunSession(model, None, keep_fields=False, fields="none", linear_solver=linear_solver)
    level = -1
    for ev in session.events():
        if ev.level != level:
            level = ev.level
            say(f"mesh level {level}: {session.problem.n_free:,} unknowns (the ladder of thermgui solve, "
                "for the meshes of the error band)")
    session.finish()
    band = session.band_levels()
    lad = session.ladder
    note = None
    if session.estimate and model.mesh.tolerance_k is not None and not lad.converged:
        note = f"the mesh ladder stopped before the tolerance: {lad.stop_reason}"
    levels = prepare_levels(model, band, session.problem, progress=lambda m: say("  " + m),
                            linear_solver=linear_solver)
    return band, levels, note


def evaluate_with_band(levels: WhatIfLevels, scales, ambient_offset: float = 0.0):
    """(recorder of the reported level, per-part bound K): the what-if on every level and its bound
    (NaN with a single level: nothing to compare with)."""
    recs = [evaluate(p, u, scales, ambient_offset) for p, u in zip(levels.problems, levels.units)]
    peaks = [np.asarray(r.peak, dtype=float) for r in recs]
    bound = reported_bound(peaks, levels.nodes, levels.reported, levels.basis_change_k)
    return recs[levels.reported], bound


def rows_with_band(rec, bound):
    """Peak rows of the reported level with each part's bound (statuses follow the band)."""
    rows = rec.peak_rows()
    for r, b in zip(rows, bound):
        r.peak_error_k = float(b) if np.isfinite(b) else None
    return rows


LEVELS_CACHE = "unit-responses"  # folder in a what-if's --out: one .npz per mesh level
LEVELS_VERSION = 1


def save_levels(folder: Path, digest: str, band, levels: WhatIfLevels) -> None:
    """Store every level's unit responses and planes (``band``: the BandLevels they came from, or
    None for the file's mesh alone) so a later what-if on the same model skips the ladder."""
    folder.mkdir(parents=True, exist_ok=True)
    n = len(levels.units)
    for i, u in enumerate(levels.units):
        u.save(folder / f"level-{i}.npz", digest)
        extra = {"version": LEVELS_VERSION, "digest": digest, "count": n, "reported": levels.reported,
                 "nodes": levels.nodes[i], "has_lines": band is not None and band.lines_mm[i] is not None}
        if extra["has_lines"]:
            for ax, line in enumerate(band.lines_mm[i]):
                extra[f"lines_{ax}"] = np.asarray(line, dtype=float)
            regions = band.regions[i] if band.regions else None
            extra["has_regions"] = regions is not None
            if regions is not None:
                for ax, r in enumerate(regions):
                    extra[f"regions_{ax}"] = np.asarray(r, dtype=float)
        tmp = folder / f"level-{i}.mesh.part.npz"
        np.savez(tmp, **extra)
        tmp.replace(folder / f"level-{i}.mesh.npz")


def load_levels(folder: Path, digest: str, model, problem_for=None) -> WhatIfLevels | None:
    """The levels stored by :func:`save_levels` for this model (``digest``), meshed again from their
    planes; None when missing, unreadable or for another model. ``problem_for(lines, regions)``
    builds a level's problem (default: build_mesh + build_problem)."""
    from solver.fem.problem import build_problem
    from solver.mesh.mesher import build_mesh

    if problem_for is None:
        def problem_for(lines, regions):
            return build_problem(model, build_mesh(model, lines_mm=lines, regions=regions))
    try:
        with np.load(folder / "level-0.mesh.npz") as f:
            if int(f["version"]) != LEVELS_VERSION or str(f["digest"]) != digest:
                return None
            count, reported = int(f["count"]), int(f["reported"])
        problems, units, nodes = [], [], []
        for i in range(count):
            u = UnitResponses.load(folder / f"level-{i}.npz", digest)
            if u is None:
                return None
            with np.load(folder / f"level-{i}.mesh.npz") as f:
                if str(f["digest"]) != digest:
                    return None
                lines = tuple(f[f"lines_{ax}"] for ax in range(3)) if bool(f["has_lines"]) else None
                regions = (tuple(f[f"regions_{ax}"] for ax in range(3))
                           if lines is not None and bool(f["has_regions"]) else None)
                nodes.append(int(f["nodes"]))
            problem = problem_for(lines, regions)
            if problem.n_nodes != nodes[-1] or u.v.shape[0] not in (problem.n_nodes, problem.n_free):
                return None  # meshed differently (another version of the mesher): compute again
            problems.append(problem)
            units.append(u)
        return WhatIfLevels(problems, units, nodes, reported)
    except (OSError, KeyError, ValueError):
        return None
