"""Reduced-basis runs of models that radiate: the nonlinear system, projected, stepped in time.

Radiation makes M d' + K d + R(d, t) = F(t) nonlinear (R: the grey-body loss of
:mod:`solver.fem.radiation`, W per node), so the exact modal integration of
:mod:`solver.transient.reduced` does not apply. Instead:

1. The Krylov basis V (VᵀMV = I) is built from one factorization of K + S₀ + s·M, where S₀ is the
   radiation slope 4εσaᵢT³ at the initial temperatures (the linearised loss, W/K), and the
   sequence starts from the load patterns and each radiating entry's face weights εσaᵢ.
2. The projected system q' + VᵀKV q + Vᵀ R(Vq, t) = VᵀB c(t) is stepped with the run's own θ
   steps (the same plan as the full system: step_s, landing on breakpoints and outputs, with the
   backward-Euler start-up after jumps), each solved by Newton's method on the r unknowns; only
   the rows of V on radiating nodes enter R, so a step costs O(n_rad·r).
3. The basis error is estimated as in the linear case (against the basis one block smaller, on
   each part's hottest nodes and on every node at coarse times). The time-step error is
   estimated by stepping the same projected system again with half of run.step_s (the plan a
   run with that step would take; Richardson, see :func:`solver.transient.timegrid.time_error_bound`),
   per part, and reported with the run.

Energy: 1 is in the basis, so the projected θ scheme keeps the global balance to the Newton
tolerance (in = stored + convected + radiated), as the full system's does.
"""
from __future__ import annotations

import math
import time as _time
from typing import Iterator

import numpy as np
import scipy.linalg as sla

from solver.errors import Cancelled, SolveError
from solver.fem.freeview import free_view
from solver.fem.radiation import KELVIN, MAX_ITER
from solver.linalg.linsolve import ConstrainedSolver, measured_double_factor_bytes
from solver.transient.krylov import KrylovBasis
from solver.transient.loads import LoadCombiner
from solver.transient.timegrid import time_error_bound
from solver.transient.reduced import (DEFAULT_TOLERANCE_K, MAX_BASIS_BYTES, MAX_BLOCKS, MAX_COLUMNS, MIN_BLOCKS,
                                      ProjectedRun, ReducedInfo, mesh_basis, SampleGrid, candidate_part_maxima, estimate_error,
                                      event_indices, hottest_nodes)

NEWTON_TOL_K = 1e-6  # K: largest change of a radiating node's temperature in the last iteration
SLOW_CONTRACTION = 0.2  # an iteration that shrinks the change less than this re-forms the Jacobian


class StepGrid(SampleGrid):
    """The run's own θ steps as sample intervals (times, outputs, jumps, load coefficients)."""

    def __init__(self, problem, steps):
        duration = float(problem.model.run.duration_s)
        self.t0 = np.array([s.t0 for s in steps])
        self.t1 = np.array([s.t1 for s in steps])
        self.theta = np.array([s.theta for s in steps])
        self.times = np.concatenate([[0.0], self.t1])
        self.is_output = np.concatenate([[True], [s.output for s in steps]])
        self.c0 = np.array([problem.load_coefficients(t, "right") for t in self.t0]).reshape(len(steps), -1)
        self.c1 = np.array([problem.load_coefficients(t, "left") for t in self.t1]).reshape(len(steps), -1)
        jumps = np.array(sorted(b.time_s for b in problem.breakpoints(duration) if b.jump))
        self.jump_index = np.searchsorted(self.times, jumps - 1e-9) if len(jumps) else np.zeros(0, dtype=int)
        rad = problem.radiation
        self.ts0 = np.array([rad.ts4(t, "right") for t in self.t0]).reshape(len(steps), -1)  # K⁴
        self.ts1 = np.array([rad.ts4(t, "left") for t in self.t1]).reshape(len(steps), -1)

    @classmethod
    def halved(cls, stepper) -> "StepGrid":
        """The run's plan re-made with half of run.step_s (same landing times and start-up
        damping), as a run with the smaller step would take it: the time-error twin."""
        from solver.transient.timegrid import plan_steps

        p, run = stepper.problem, stepper.problem.model.run
        duration = float(run.duration_s)
        steps = plan_steps(duration, 0.5 * float(run.step_s), stepper.theta, p.breakpoints(duration),
                           stepper.outputs, getattr(stepper, "damp_after_jumps", True))
        return cls(p, steps)


def nonlinear_snapshots(problem, v: np.ndarray, q: np.ndarray, nodes: np.ndarray, grid: StepGrid) -> np.ndarray:
    """(n, 2) radiated heat per node (W) of the reduced field V q at its hottest sample (on the
    candidate ``nodes``) and at the end.

    The Krylov basis is built from the slope at the initial temperatures, and the radiated heat
    grows like T⁴: the responses to the radiated heat where the run is hot are directions that
    basis reaches only slowly. Measured on a radiating plate (docs/physics.md): without them a
    part's peak was 0.13 K off at 17 vectors while one block's change was 0.03 K (so the estimate
    missed it); with them 0.002 K off at 23 vectors, the change then 0.04 K."""
    rad = problem.radiation
    hot = v[nodes] @ q if len(nodes) else v @ q
    cols = np.unique([max(1, int(np.argmax(hot.max(axis=0)))), q.shape[1] - 1])
    return np.column_stack([rad.node_flow(v @ q[:, j], grid.ts1[j - 1]) for j in cols])


class ProjectedRadiation:
    """R(Vq) and its Jacobian in reduced coordinates, for the first ``r`` basis columns."""

    def __init__(self, problem, v: np.ndarray):
        rad = problem.radiation
        self.v = np.ascontiguousarray(v[rad.nodes])  # (n_rad, r): the basis on radiating nodes only
        self.w = rad.weight
        self.entry = rad.entry
        m = len(rad.names)
        # the surroundings' share, per entry: Σ_entry wᵢ (W/K⁴) and Vᵀ w on each entry's nodes
        self.w_entry = np.bincount(self.entry, weights=self.w, minlength=m)
        onehot = np.zeros((len(self.w), m))
        onehot[np.arange(len(self.w)), self.entry] = self.w
        self.vw_entry = self.v.T @ onehot  # (r, m)

    def temps_k(self, q: np.ndarray) -> np.ndarray:
        return self.v @ q + KELVIN

    def projected_flow(self, tk: np.ndarray, ts4: np.ndarray) -> np.ndarray:
        """Vᵀ R (r,): the radiated heat in reduced coordinates, W (one product with Vᵀ)."""
        t2 = tk * tk
        return self.v.T @ (self.w * (t2 * t2)) - self.vw_entry @ ts4

    def total(self, tk: np.ndarray, ts4: np.ndarray) -> float:
        """W radiated out in all."""
        t2 = tk * tk
        return float(self.w @ (t2 * t2) - self.w_entry @ ts4)

    def jacobian(self, tk: np.ndarray) -> np.ndarray:
        """Vᵀ diag(4εσaᵢT³) V (r, r), W/K in reduced coordinates."""
        s = 4.0 * self.w * tk ** 3
        return self.v.T @ (s[:, None] * self.v)


def step_projected(kr: np.ndarray, br: np.ndarray, q0: np.ndarray, rad: ProjectedRadiation, grid: StepGrid,
                   names, cancel=None, scale: float = 0.0, counts: dict | None = None):
    """θ-step the projected nonlinear system over ``grid``.

    Returns (Q (r, samples): coordinates at 0 and every step end; radiated (samples-1,): θ-weighted
    W radiated over each step). Newton's method per step, the Jacobian re-formed only when an
    iteration contracts slowly (chord iterations otherwise), until the last change is below
    NEWTON_TOL_K both at the radiating nodes and as a capacity-weighted RMS temperature
    (``scale`` = 1/√(Σ capacity), K per unit of q); a step that does not converge raises
    SolveError naming the radiating entries. ``counts`` (if given) collects the iterations and
    Jacobians formed.
    """
    r = len(q0)
    n = len(grid.t1)
    out = np.empty((r, n + 1))
    out[:, 0] = q0
    radiated = np.empty(n)
    q = q0.copy()
    eye = np.eye(r)
    factors: dict = {}  # (Δt, θ) -> LU of I/Δt + θ(VᵀKV + Vᵀ S V) at the slope last formed
    tk = rad.temps_k(q)
    prev = None
    jumps = set(int(j) for j in grid.jump_index)
    for k in range(n):
        if cancel is not None and k % 64 == 0 and cancel():
            raise Cancelled(f"cancelled at t = {grid.t0[k]:g} s")
        dt, th = float(grid.t1[k] - grid.t0[k]), float(grid.theta[k])
        ts0, ts1 = grid.ts0[k], grid.ts1[k]
        rhs = q / dt + br @ (th * grid.c1[k] + (1.0 - th) * grid.c0[k])
        if th < 1.0:
            rhs -= (1.0 - th) * (kr @ q + rad.projected_flow(tk, ts0))
        # start from the linear extrapolation in time (not across a jump of the loads)
        x = q.copy() if prev is None or k in jumps else q + (q - prev[0]) * (dt / prev[1])
        tx = rad.temps_k(x)  # kept up to date with each correction (one product per iteration)
        key = (round(dt, 12), th)
        last = None
        converged = False
        for _ in range(MAX_ITER):
            g = x / dt + th * (kr @ x + rad.projected_flow(tx, ts1)) - rhs
            if key not in factors:
                factors[key] = sla.lu_factor(eye / dt + th * (kr + rad.jacobian(tx)))
                if counts is not None:
                    counts["jacobians"] += 1
            dx = -sla.lu_solve(factors[key], g)
            if counts is not None:
                counts["iterations"] += 1
            x = x + dx
            vdx = rad.v @ dx
            tx = tx + vdx
            if not np.all(np.isfinite(x)):
                break
            change = max(float(np.abs(vdx).max(initial=0.0)), float(np.linalg.norm(dx)) * scale)
            if change < NEWTON_TOL_K:
                converged = True
                break
            if last is not None and change > SLOW_CONTRACTION * last:
                factors.pop(key)  # slow: re-form the Jacobian at the current iterate (a Newton step)
            last = change
        if not converged and np.all(np.isfinite(x)):
            listed = ", ".join(repr(nm) for nm in names)
            raise SolveError(f"the reduced run's radiation iterations did not converge at t = {grid.t1[k]:g} s "
                             f"(radiating faces of convection {listed}); use a shorter run.step_s, or "
                             "run.method = \"full\"")
        if not np.all(np.isfinite(x)):
            raise SolveError(f"non-finite temperature at t = {grid.t1[k]:g} s in the reduced run")
        radiated[k] = th * rad.total(tx, ts1) + (1.0 - th) * rad.total(tk, ts0)
        prev = (q, dt)
        q, tk = x, tx
        out[:, k + 1] = q
    return out, radiated


def _peaks_on(problem, v, q, nodes) -> np.ndarray:
    """Per-part maxima over all samples, on the candidate nodes."""
    return candidate_part_maxima(problem, v[nodes] @ q, nodes).max(axis=0)


def run_reduced_radiative(stepper) -> Iterator:
    """Generator of StepEvents for a reduced-basis run of a radiating model (see module doc)."""
    full = stepper.problem
    # with local planes the basis is built, stepped and checked on the free unknowns (the small
    # system; its radiating nodes are free ones); the events carry mesh fields P·(V q)
    p = free_view(full) if full.constraint is not None else full
    run = p.model.run
    t_start = _time.perf_counter()
    tol = float(stepper.tolerance_k) if stepper.tolerance_k is not None else DEFAULT_TOLERANCE_K
    info = stepper.reduced_info = ReducedInfo(tolerance_k=tol)
    grid = StepGrid(p, stepper.steps)
    info.samples = len(grid.t1)
    info.shift_per_s = 1.0 / math.sqrt(float(run.step_s) * float(run.duration_s))
    max_columns = int(min(MAX_COLUMNS, MAX_BASIS_BYTES // (8 * full.n_nodes)))
    names = p.radiation.names
    scale = 1.0 / math.sqrt(float(p.lumped.sum()))  # ‖q‖ (V is capacity-orthonormal) to an RMS kelvin
    counts = stepper.newton = {"iterations": 0, "jacobians": 0, "tolerance_k": NEWTON_TOL_K,
                               "system": "projected (reduced basis)"}
    t_factor = _time.perf_counter()
    basis = KrylovBasis(p, info.shift_per_s, method=stepper.choice.method, cancel=stepper.cancel,
                        max_columns=max_columns, extra_diagonal=p.radiation.slope(p.initial.astype(float)),
                        extra_patterns=p.radiation.patterns())
    stepper.factorizations += 1
    stepper.factor_bytes_measured = measured_double_factor_bytes(basis.solver)
    info.factor_s = _time.perf_counter() - t_factor
    try:
        proj = ProjectedRun(p, basis, grid)
        coarse = grid.coarse_index()
        nodes, prev_q, result = None, None, None

        def solve(r):
            return step_projected(proj._kr[:r, :r], proj._br[:r], proj._q0[:r],
                                  ProjectedRadiation(p, basis.V[:, :r]), grid, names, stepper.cancel, scale,
                                  counts)

        failure = None
        try:
            for block in range(1, MAX_BLOCKS + 1):
                added = basis.grow()
                if added and prev_q is not None:  # the loss the last check radiated, as load patterns
                    added += basis.enrich(nonlinear_snapshots(p, basis.V[:, :prev_q.shape[0]], prev_q, nodes, grid))
                if added:
                    proj.update()
                exhausted = added == 0 and not basis.full
                if not exhausted and block < MIN_BLOCKS:
                    continue
                r, r_small = basis.size, basis.size - basis.block_sizes[-1]
                q, radiated = solve(r)
                if nodes is None or exhausted:
                    nodes = hottest_nodes(p, basis.V, q, coarse)
                if exhausted:
                    info.error_estimate_k, info.converged = 0.0, True
                else:
                    q_small = prev_q if prev_q is not None and prev_q.shape[0] == r_small else solve(r_small)[0]
                    info.error_estimate_k = estimate_error(basis.V, q, q_small, nodes)
                    info.history.append((r, info.error_estimate_k))
                    if info.error_estimate_k <= tol:
                        nodes = hottest_nodes(p, basis.V, q, coarse)
                        info.error_estimate_k = estimate_error(basis.V, q, q_small, nodes, coarse)
                        info.converged = info.error_estimate_k <= tol
                result = (r, q, radiated, nodes)
                prev_q = q
                if info.converged or basis.full:
                    break
            stepper.solves = basis.solves
            if info.converged:  # the time-step error: the same projected system with half of run.step_s
                r, q, _, nodes = result
                half = StepGrid.halved(stepper)
                q_half, _ = step_projected(proj._kr[:r, :r], proj._br[:r], proj._q0[:r],
                                           ProjectedRadiation(p, basis.V[:, :r]), half, names, stepper.cancel, scale)
                v = basis.V[:, :r]
                info.time_error_k = [float(e) for e in time_error_bound(_peaks_on(p, v, q, nodes),
                                                                        _peaks_on(p, v, q_half, nodes), run.scheme)]
        except SolveError as e:  # Newton on the projected system failed: the full system cuts its steps
            failure, info.converged = str(e), False
        info.basis_s = _time.perf_counter() - t_start
    except BaseException:
        basis.close()
        raise
    if stepper.keep_shift_solver:  # handed on (solving for mesh vectors): the caller closes it
        held = basis.solver if p is full else ConstrainedSolver.around(basis.solver, full.constraint)
        stepper.shift_solver, basis.solver = (held, 1.0 / basis.shift), None
    basis.close()
    info.basis_size, info.blocks = basis.size, len(basis.block_sizes) - 1
    if not info.converged:
        why = failure or f"the reduced basis did not reach {tol:g} K ({info.describe()})"
        p.warnings.append(f"{why}; the full system was stepped instead")
        stepper.fall_back_to_full()
        yield from stepper._run_full()
        return
    r, q, radiated, nodes = result
    v, nodes = mesh_basis(full, p, basis, r, nodes)
    yield from _events(stepper, grid, v, q, radiated, nodes, t_start)


def _events(stepper, grid: StepGrid, v: np.ndarray, q: np.ndarray, radiated: np.ndarray, nodes: np.ndarray,
            t_start: float) -> Iterator:
    """Events at outputs, peaks and rating crossings, with full fields V q and the θ-weighted
    heat in / out summed over the steps between events."""
    p = stepper.problem
    cand_max = candidate_part_maxima(p, v[nodes] @ q, nodes)
    chosen = event_indices(p, grid, cand_max)
    loads = LoadCombiner(p)
    h = grid.t1 - grid.t0
    th = grid.theta
    heat = (th * grid.c1[:, :loads.n_heat].sum(axis=1) + (1 - th) * grid.c0[:, :loads.n_heat].sum(axis=1))
    if len(loads.conv_sum):
        bsum_v = loads.conv_val @ v[loads.conv_idx]  # (r,): (Σb)·V
        bd = bsum_v @ q  # (samples,)
        amb0 = grid.c0[:, loads.n_heat:] @ loads.conv_sum
        amb1 = grid.c1[:, loads.n_heat:] @ loads.conv_sum
        conv = th * (bd[1:] - amb1) + (1 - th) * (bd[:-1] - amb0)
    else:
        conv = np.zeros(len(h))
    cum_in = np.concatenate([[0.0], np.cumsum(heat * h)])
    cum_out = np.concatenate([[0.0], np.cumsum((conv + radiated) * h)])

    n_events = len(chosen) - 1 if chosen[0] == 0 else len(chosen)
    stepper._n_steps_estimate = n_events
    d_prev = p.initial.astype(float)
    c0 = loads.coefficients(0.0, "right")
    q_in0 = loads.heat_in(c0)
    rad0 = float(p.radiation.total(d_prev, p.radiation.ts4(0.0, "right")))
    out0 = loads.convected_out(loads.bd(d_prev), c0) + rad0
    yield stepper._event(0, n_events, 0.0, 0.0, d_prev, True, q_in0, out0, q_in0 - out0, 0.0, t_start)
    prev_i, step = 0, 0
    later = [int(i) for i in chosen if i != 0]
    fields = None
    chunk = 32
    for k, i in enumerate(later):
        if stepper.cancel is not None and stepper.cancel():
            raise Cancelled(f"cancelled at t = {grid.times[prev_i]:g} s")
        if k % chunk == 0:
            fields = q[:, later[k:k + chunk]].T @ v.T
        d = fields[k % chunk]
        dt = grid.times[i] - grid.times[prev_i]
        q_in = (cum_in[i] - cum_in[prev_i]) / dt
        q_out = (cum_out[i] - cum_out[prev_i]) / dt
        stored = float(np.einsum("i,i->", p.lumped, d - d_prev)) / dt
        step += 1
        yield stepper._event(step, n_events, float(grid.times[i]), dt, d, bool(grid.is_output[i]), q_in, q_out,
                             stored, q_in - q_out - stored, t_start)
        d_prev, prev_i = d, i
