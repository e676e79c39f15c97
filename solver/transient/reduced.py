"""Reduced-basis runs (``run.method = "reduced"``): the same finite-element system, projected.

1. A capacity-orthonormal Krylov basis V (:mod:`solver.transient.krylov`) is grown block by block from
   one factorization of K + s·M, with s = 1/√(step_s · duration) (a heuristic of ours that
   balances the fastest resolved and the slowest time scale; the error check below decides).
2. The Galerkin projection q' + VᵀKV q = VᵀB c(t) is integrated exactly on sample intervals of
   at most ``step_s`` that land on every breakpoint and output time (:mod:`solver.transient.modal`).
3. The basis error is estimated by comparing with the basis one block smaller, at every sample
   time on each part's hottest nodes and at coarse times on every node; blocks are added until
   the estimate is below ``run.tolerance_k`` (default 0.1 K). If it never is, the run falls back
   to stepping the full system, with a warning.
4. Events are produced at output times, at each part's peak and around each first crossing of a
   rating, with the full field V q, so the recorder, files and the app work unchanged.

Energy: 1 is in the basis, so the projected system keeps the global balance; in/out/stored are
integrated exactly between events, and the residual stays at round-off.
"""
from __future__ import annotations

import math
import time as _time
from dataclasses import dataclass, field
from typing import Iterator

import numpy as np

from solver.transient.loads import LoadCombiner
from solver.errors import Cancelled, SolveError
from solver.fem.freeview import free_view
from solver.linalg.linsolve import ConstrainedSolver, measured_double_factor_bytes
from solver.transient.krylov import KrylovBasis, mass_times
from solver.transient.modal import ModalSystem
from solver.transient.timegrid import output_times, plan_steps

DEFAULT_TOLERANCE_K = 0.1
MIN_BLOCKS = 4  # Krylov blocks before the first error check
MAX_BLOCKS = 16
MAX_COLUMNS = 256
MAX_BASIS_BYTES = 1.5e9  # V is N × r doubles: stop growing before it gets this large
COARSE_SAMPLES = 60  # full-field evaluations spread evenly over the run (besides outputs and jumps)
CHUNK = 32  # sample times reconstructed at once (N × CHUNK doubles)


@dataclass
class ReducedInfo:
    basis_size: int = 0
    blocks: int = 0
    shift_per_s: float = 0.0
    error_estimate_k: float = float("nan")
    tolerance_k: float = DEFAULT_TOLERANCE_K
    samples: int = 0
    converged: bool = False
    factor_s: float = 0.0  # wall time of the factorization(s)
    basis_s: float = 0.0  # wall time from the start of the run to an accepted basis
    history: list = field(default_factory=list)  # (basis size, error estimate K) at each check
    time_error_k: list | None = None  # per part (K), radiating runs only: the time steps' error (step halving)

    def describe(self) -> str:
        return (f"reduced basis of {self.basis_size} vectors ({self.blocks} blocks, shift {self.shift_per_s:.3g}/s), "
                f"estimated error {self.error_estimate_k:.2g} K (tolerance {self.tolerance_k:g} K)")


class SampleGrid:
    """Sample intervals of at most ``step_s`` landing on breakpoints and outputs, with load
    coefficients just after each start and just before each end (loads are linear between)."""

    def __init__(self, problem):
        run = problem.model.run
        duration = float(run.duration_s)
        outputs = output_times(duration, run.output_interval_s)
        steps = plan_steps(duration, float(run.step_s), 1.0, problem.breakpoints(duration), outputs, False)
        self.t0 = np.array([s.t0 for s in steps])
        self.t1 = np.array([s.t1 for s in steps])
        self.times = np.concatenate([[0.0], self.t1])
        self.is_output = np.concatenate([[True], [s.output for s in steps]])
        self.c0 = np.array([problem.load_coefficients(t, "right") for t in self.t0]).reshape(len(steps), -1)
        self.c1 = np.array([problem.load_coefficients(t, "left") for t in self.t1]).reshape(len(steps), -1)
        jumps = np.array(sorted(b.time_s for b in problem.breakpoints(duration) if b.jump))
        self.jump_index = np.searchsorted(self.times, jumps - 1e-9) if len(jumps) else np.zeros(0, dtype=int)

    def coarse_index(self) -> np.ndarray:
        """Sample indices where every node is looked at: outputs, jumps and an even spread."""
        n = len(self.times)
        spread = np.linspace(0, n - 1, min(n, COARSE_SAMPLES)).round().astype(int)
        idx = np.concatenate([np.flatnonzero(self.is_output), self.jump_index, spread])
        return np.unique(np.clip(idx, 0, n - 1))


class ProjectedRun:
    """The basis, its projected matrices and the modal solution for the first ``r`` columns."""

    def __init__(self, problem, basis: KrylovBasis, grid: SampleGrid):
        self.p = problem
        self.basis = basis
        self.grid = grid
        self._kr = np.zeros((0, 0))
        self._br = np.zeros((0, problem._load_basis().shape[1]))
        self._q0 = np.zeros(0)

    def update(self) -> None:
        """Extend VᵀKV, VᵀB and Vᵀ M d₀ to the basis' current size (new columns only)."""
        p, v = self.p, self.basis.V
        old = self._kr.shape[0]
        new = v[:, old:]
        kv_new = p.stiffness @ new
        top = v[:, :old].T @ kv_new
        kr = np.zeros((v.shape[1], v.shape[1]))
        kr[:old, :old] = self._kr
        kr[:old, old:] = top
        kr[old:, :old] = top.T
        kr[old:, old:] = new.T @ kv_new
        self._kr = kr
        self._br = np.vstack([self._br, (p._load_basis().T @ new).T])
        self._q0 = np.concatenate([self._q0, new.T @ mass_times(p, p.initial.astype(float))])

    def solve(self, r: int):
        """(Q (r, samples), Qint (r, intervals)): coordinates at the samples and their integrals over
        each interval, for the first ``r`` basis columns."""
        g = self.grid
        modal = ModalSystem(self._kr[:r, :r], self._br[:r], self._q0[:r])
        z, zint = modal.propagate(g.t0, g.t1, g.c0, g.c1)
        return modal.coordinates(z), modal.coordinates(zint)


def hottest_nodes(problem, v: np.ndarray, q: np.ndarray, index: np.ndarray) -> np.ndarray:
    """Node ids that are some part's maximum at one of the sample columns ``index`` of ``q``.

    The search runs in single precision (half the time of the largest products of a reduced run):
    it only picks the candidate nodes, whose values are then computed in double precision; a node
    it could miss is within about 1e-6 of the true maximum's value, relative."""
    pn = problem.part_nodes
    qs = np.asarray(q[:, index], dtype=np.float32)
    found = []
    for o, c in zip(pn.offsets, pn.counts):
        if c == 0:
            continue
        ids = pn.index[o:o + c]
        vpt = np.ascontiguousarray(v[ids].T, dtype=np.float32)  # this part's rows of the basis, gathered once
        for s in range(0, qs.shape[1], 4 * CHUNK):  # (samples, nodes): argmax along contiguous rows
            found.append(ids[np.argmax(qs[:, s:s + 4 * CHUNK].T @ vpt, axis=1)])
    return np.unique(np.concatenate(found)) if found else np.zeros(0, dtype=np.int64)


def candidate_part_maxima(problem, values: np.ndarray, nodes: np.ndarray) -> np.ndarray:
    """(samples, parts) maxima over each part's candidate nodes; −inf where a part has none."""
    pn = problem.part_nodes
    n_parts = len(pn.counts)
    out = np.full((values.shape[1], n_parts), -np.inf)
    for i in range(n_parts):
        ids = pn.index[pn.offsets[i]:pn.offsets[i] + pn.counts[i]]
        rows = np.flatnonzero(np.isin(nodes, ids, assume_unique=False))
        if len(rows):
            out[:, i] = values[rows].max(axis=0)
    return out


def estimate_error(v: np.ndarray, q_big: np.ndarray, q_small: np.ndarray, nodes: np.ndarray,
                   coarse: np.ndarray | None = None) -> float:
    """max |V(q_big − [q_small; 0])| on ``nodes`` at every sample, and (given ``coarse`` sample
    indices) on every node at those samples.

    The sweep over every node runs in single precision only to find, per sample, the node where
    the difference is largest; those nodes' differences are then computed in double precision
    (as the hot nodes' are), so the returned value is a double-precision one."""
    dq = q_big.copy()
    dq[:q_small.shape[0]] -= q_small
    r = q_big.shape[0]
    err = float(np.abs(v[nodes, :r] @ dq).max()) if len(nodes) else 0.0
    if coarse is None or not len(coarse):
        return err
    v32 = np.asarray(v[:, :r], dtype=np.float32)
    dq32 = dq[:, coarse].astype(np.float32)
    rows = [np.argmax(np.abs(v32 @ dq32[:, s:s + CHUNK]), axis=0) for s in range(0, dq32.shape[1], CHUNK)]
    rows = np.unique(np.concatenate(rows))
    return max(err, float(np.abs(v[rows, :r] @ dq[:, coarse]).max()))


def event_indices(problem, grid: SampleGrid, cand_max: np.ndarray) -> np.ndarray:
    """Samples that become events: outputs, each part's peak, and both sides of each first
    crossing of a rating."""
    idx = [np.flatnonzero(grid.is_output)]
    finite = np.isfinite(cand_max).all(axis=0)
    idx.append(np.argmax(np.where(np.isfinite(cand_max), cand_max, -np.inf), axis=0)[finite])
    for i, part in enumerate(problem.model.parts):
        if part.rated_c is None or not finite[i]:
            continue
        over = np.flatnonzero(cand_max[:, i] > part.rated_c)
        if len(over):
            idx.append(np.array([max(over[0] - 1, 0), over[0]]))
    return np.unique(np.concatenate(idx))


def run_reduced(stepper) -> Iterator:
    """Generator of :class:`~solver.transient.stepping.StepEvent` for a reduced-basis run (see module doc)."""
    full = stepper.problem
    # with local planes the basis is built and checked on the free unknowns (the small system);
    # the events carry mesh fields P·(V q)
    p = free_view(full) if full.constraint is not None else full
    run = p.model.run
    t_start = _time.perf_counter()
    tol = float(stepper.tolerance_k) if stepper.tolerance_k is not None else DEFAULT_TOLERANCE_K
    info = stepper.reduced_info = ReducedInfo(tolerance_k=tol)
    grid = SampleGrid(p)
    info.samples = len(grid.t1)
    info.shift_per_s = 1.0 / math.sqrt(float(run.step_s) * float(run.duration_s))
    method = stepper.choice.method
    max_columns = int(min(MAX_COLUMNS, MAX_BASIS_BYTES // (8 * full.n_nodes)))
    t_factor = _time.perf_counter()
    basis = KrylovBasis(p, info.shift_per_s, method=method, cancel=stepper.cancel, max_columns=max_columns)
    stepper.factorizations += 1
    stepper.factor_bytes_measured = measured_double_factor_bytes(basis.solver)
    info.factor_s = _time.perf_counter() - t_factor
    try:
        proj = ProjectedRun(p, basis, grid)
        coarse = grid.coarse_index()
        nodes = None  # each part's hottest nodes; found once, refreshed before accepting
        prev_q = None  # the previous check's solution (the next check's smaller basis)
        result = None
        for block in range(1, MAX_BLOCKS + 1):
            added = basis.grow()
            if added:
                proj.update()
            # nothing new from A⁻¹M: the basis is invariant and the projection exact
            exhausted = added == 0 and not basis.full
            if not exhausted and block < MIN_BLOCKS:
                continue
            r, r_small = basis.size, basis.size - basis.block_sizes[-1]
            q, qint = proj.solve(r)
            if nodes is None or exhausted:
                nodes = hottest_nodes(p, basis.V, q, coarse)
            if exhausted:
                info.error_estimate_k, info.converged = 0.0, True
            else:
                q_small = prev_q if prev_q is not None and prev_q.shape[0] == r_small else proj.solve(r_small)[0]
                info.error_estimate_k = estimate_error(basis.V, q, q_small, nodes)
                info.history.append((r, info.error_estimate_k))
                if info.error_estimate_k <= tol:  # confirm on this basis' hottest nodes and everywhere
                    nodes = hottest_nodes(p, basis.V, q, coarse)
                    info.error_estimate_k = estimate_error(basis.V, q, q_small, nodes, coarse)
                    info.converged = info.error_estimate_k <= tol
            result = (r, q, qint, nodes)
            prev_q = q
            if info.converged or basis.full:
                break
        stepper.solves = basis.solves
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
        p.warnings.append(f"the reduced basis did not reach {tol:g} K ({info.describe()}); the full system was "
                          "stepped instead")
        stepper.fall_back_to_full()
        yield from stepper._run_full()
        return
    r, q, qint, nodes = result
    v, nodes = mesh_basis(full, p, basis, r, nodes)
    yield from _events(stepper, grid, v, q, qint, nodes, t_start)


def mesh_basis(full, p, basis: KrylovBasis, r: int, nodes: np.ndarray):
    """(the first r basis columns on every mesh node, the candidate nodes in mesh numbering); with
    local planes (``p`` the free view of ``full``) hanging nodes are interpolated, P·V. The basis'
    preallocated storage is released: the events need only these columns."""
    v = basis.V[:, :r]
    if p is not full:
        pc, free = full.constraint
        v, nodes = np.asarray(pc @ v), free[nodes]
    else:
        v = v.copy()
    basis.release()
    return v, nodes


def _events(stepper, grid: SampleGrid, v: np.ndarray, q: np.ndarray, qint: np.ndarray, nodes: np.ndarray,
            t_start: float) -> Iterator:

    p = stepper.problem
    cand_max = candidate_part_maxima(p, v[nodes] @ q, nodes)
    chosen = event_indices(p, grid, cand_max)
    loads = LoadCombiner(p)
    # exact integrals over each sample interval: heat in (W·s), ∫(Σb)·d dt (W·s), ∫ ambient (°C·s)
    h = grid.t1 - grid.t0
    c_int = 0.5 * (grid.c0 + grid.c1) * h[:, None]
    heat_int = c_int[:, :loads.n_heat].sum(axis=1)
    bsum_v = loads.conv_val @ v[loads.conv_idx] if len(loads.conv_sum) else np.zeros(v.shape[1])
    bd_int = bsum_v @ qint
    amb_int = c_int[:, loads.n_heat:] @ loads.conv_sum if len(loads.conv_sum) else np.zeros(len(h))
    cum = [np.concatenate([[0.0], np.cumsum(a)]) for a in (heat_int, bd_int, amb_int)]

    n_events = len(chosen) - 1 if chosen[0] == 0 else len(chosen)
    stepper._n_steps_estimate = n_events
    d_prev = p.initial.astype(float)
    bd0 = loads.bd(d_prev)
    c0 = loads.coefficients(0.0, "right")
    q_in0 = loads.heat_in(c0)
    yield stepper._event(0, n_events, 0.0, 0.0, d_prev, True, q_in0, loads.convected_out(bd0, c0),
                         q_in0 - loads.convected_out(bd0, c0), 0.0, t_start)
    prev_i = 0
    step = 0
    later = [int(i) for i in chosen if i != 0]
    fields = None
    for k, i in enumerate(later):
        if stepper.cancel is not None and stepper.cancel():
            raise Cancelled(f"cancelled at t = {grid.times[prev_i]:g} s")
        if k % CHUNK == 0:  # reconstruct a batch of fields in one product, one field per row
            fields = q[:, later[k:k + CHUNK]].T @ v.T
        d = fields[k % CHUNK]
        if not np.all(np.isfinite(d)):
            raise SolveError(f"non-finite temperature at t = {grid.times[i]:g} s in the reduced run")
        dt = grid.times[i] - grid.times[prev_i]
        q_in = (cum[0][i] - cum[0][prev_i]) / dt
        q_out = ((cum[1][i] - cum[1][prev_i]) - (cum[2][i] - cum[2][prev_i])) / dt
        stored = float(np.einsum("i,i->", p.lumped, d - d_prev)) / dt
        step += 1
        yield stepper._event(step, n_events, float(grid.times[i]), dt, d, bool(grid.is_output[i]), q_in, q_out,
                             stored, q_in - q_out - stored, t_start)
        d_prev, prev_i = d, i
