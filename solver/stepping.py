"""Time integration by the generalized trapezoidal (θ) family, as a stream of step events.

    (M/Δt + θK) dₙ₊₁ = (M/Δt − (1−θ)K) dₙ + θF(tₙ₊₁⁻) + (1−θ)F(tₙ⁺)

θ = 1 backward Euler, ½ Crank–Nicolson, 0 forward Euler (lumped capacity only, Δt below
2/λ_max of the pencil (K, M)). The step matrix is factored once per distinct (Δt, θ).
:class:`Stepper` is iterated by the command line and the app alike; each iteration yields a
:class:`StepEvent`; stop iterating (or set ``cancel``) to stop between steps.
"""
from __future__ import annotations

import time as _time
from dataclasses import dataclass
from typing import Callable, Iterator

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from .errors import Cancelled, ModelError, SolveError
from .linsolve import DiagonalSolver, choose_method, make_solver
from .timegrid import TimeStep, output_times, plan_steps

THETA = {"backward-euler": 1.0, "crank-nicolson": 0.5, "forward-euler": 0.0}


@dataclass
class StepEvent:
    """State after one step (or the initial state, step 0)."""

    step: int
    n_steps: int
    time_s: float
    dt: float
    field: np.ndarray  # (N,) °C, read-only; copy it to keep it
    part_max: np.ndarray  # (n_parts,) °C
    part_mean: np.ndarray  # (n_parts,) °C, volume-weighted
    probes: np.ndarray  # (n_probes,) °C
    is_output: bool
    heat_in_w: float  # step-averaged heat generation
    convected_out_w: float  # step-averaged convection loss
    stored_w: float  # rate of change of stored heat over the step
    energy_residual_w: float  # in − stored − out over the step, W (round-off for a direct solve)
    elapsed_s: float

    @property
    def fraction(self) -> float:
        return self.step / max(1, self.n_steps)


def largest_eigenvalue(k: sp.spmatrix, m_lumped: np.ndarray) -> float:
    """Largest λ of K v = λ M v with diagonal M (1/s), by ARPACK on M^-½ K M^-½."""
    s = sp.diags(1.0 / np.sqrt(m_lumped))
    a = (s @ k @ s).tocsr()
    if a.shape[0] <= 3:
        return float(np.linalg.eigvalsh(a.toarray()).max())
    val = spla.eigsh(a, k=1, which="LA", return_eigenvectors=False, tol=1e-10, maxiter=100000)
    return float(val[0])


def critical_step(problem) -> float:
    """Forward-Euler stability limit 2/λ_max in seconds (lumped capacity)."""
    return 2.0 / largest_eigenvalue(problem.stiffness, problem.lumped)


class Stepper:
    """Plans the steps and integrates; iterate it to run.

    Parameters: ``problem`` from :func:`solver.problem.build_problem`; ``cancel`` a callable
    returning True to stop (raises :class:`Cancelled`); ``linear_solver`` "auto", "direct" or
    "multigrid"; ``damp_after_jumps`` enables the backward-Euler start-up for Crank–Nicolson.
    """

    def __init__(self, problem, cancel: Callable[[], bool] | None = None, linear_solver: str = "auto",
                 damp_after_jumps: bool = True):
        self.problem = problem
        run = problem.model.run
        self.scheme = run.scheme
        self.theta = THETA[run.scheme]
        self.cancel = cancel
        self.outputs = output_times(float(run.duration_s), run.output_interval_s)
        self.steps: list[TimeStep] = plan_steps(float(run.duration_s), float(run.step_s), self.theta,
                                                problem.breakpoints(float(run.duration_s)), self.outputs,
                                                damp_after_jumps)
        self.critical_step_s = None
        if self.theta < 0.5:
            if problem.capacity is not None:
                raise ModelError(("run.mass", "forward Euler needs lumped capacity"))
            self.critical_step_s = critical_step(problem)
            dt_max = max(s.dt for s in self.steps)
            if dt_max > self.critical_step_s:
                raise ModelError(("run.step_s",
                                  f"forward Euler is unstable with steps of {dt_max:.4g} s on this mesh: the "
                                  f"critical step is {self.critical_step_s:.4g} s (2/λ_max, λ_max = "
                                  f"{2.0 / self.critical_step_s:.4g} 1/s). Use a step of at most "
                                  f"{self.critical_step_s:.4g} s, or backward Euler / Crank–Nicolson"))
        self.choice = choose_method(problem.n_nodes, linear_solver)
        self._solvers: dict = {}
        self.factorizations = 0

    @property
    def n_steps(self) -> int:
        return len(self.steps)

    def _solver_for(self, dt: float, theta: float):
        key = (round(dt, 12), theta)
        s = self._solvers.get(key)
        if s is None:
            p = self.problem
            if theta == 0.0:
                s = DiagonalSolver(p.lumped / dt)
            else:
                s = make_solver(p.mass_matrix / dt + theta * p.stiffness, self.choice.method)
            self.factorizations += 1
            if len(self._solvers) >= 8:  # keep memory bounded when many step sizes occur
                self._solvers.pop(next(iter(self._solvers)))
            self._solvers[key] = s
        return s

    def _event(self, step, t, dt, d, is_output, q_in, q_out, stored, resid, t_start) -> StepEvent:
        p = self.problem
        view = d.view()
        view.flags.writeable = False
        return StepEvent(step, self.n_steps, t, dt, view, p.part_nodes.maxima(d), p.heat_shares @ d,
                         p.probes @ d, is_output, q_in, q_out, stored, resid, _time.perf_counter() - t_start)

    def __iter__(self) -> Iterator[StepEvent]:
        p = self.problem
        t_start = _time.perf_counter()
        k_mat = p.stiffness
        m_mat = p.mass_matrix
        d = p.initial.astype(float).copy()
        q_in0 = p.heat_input(0.0)
        q_out0 = p.convected_out(d, 0.0)
        yield self._event(0, 0.0, 0.0, d, True, q_in0, q_out0, q_in0 - q_out0, 0.0, t_start)
        kd = k_mat @ d
        for i, st in enumerate(self.steps, start=1):
            if self.cancel is not None and self.cancel():
                raise Cancelled(f"cancelled at t = {st.t0:g} s")
            th, dt = st.theta, st.dt
            f0 = p.load(st.t0, "right")
            f1 = p.load(st.t1, "left")
            rhs = m_mat @ d / dt - (1.0 - th) * kd + th * f1 + (1.0 - th) * f0
            d_new = self._solver_for(dt, th).solve(rhs, x0=d)
            if not np.all(np.isfinite(d_new)):
                raise SolveError(f"non-finite temperature at t = {st.t1:g} s (step {i}); the model or step "
                                 "is numerically unusable")
            kd_new = k_mat @ d_new
            # energy bookkeeping over the step (1ᵀK_cond = 0, 1ᵀM = lumped)
            q_in = th * p.heat_input(st.t1, "left") + (1 - th) * p.heat_input(st.t0, "right")
            q_out = th * p.convected_out(d_new, st.t1, "left") + (1 - th) * p.convected_out(d, st.t0, "right")
            stored = float(p.lumped @ (d_new - d)) / dt
            resid = q_in - q_out - stored
            d, kd = d_new, kd_new
            yield self._event(i, st.t1, dt, d, st.output, q_in, q_out, stored, resid, t_start)


def run(problem, **kwargs) -> Iterator[StepEvent]:
    """Shorthand: ``for ev in run(problem): ...``."""
    return iter(Stepper(problem, **kwargs))
