"""Time integration by the generalized trapezoidal (θ) family, as a stream of step events.

    (M/Δt + θK) dₙ₊₁ = (M/Δt − (1−θ)K) dₙ + θF(tₙ₊₁⁻) + (1−θ)F(tₙ⁺)

θ = 1 backward Euler, ½ Crank–Nicolson, 0 forward Euler (lumped capacity only, Δt below
2/λ_max of the pencil (K, M)). The step matrix is factored once per distinct (Δt, θ).
With a temperature tolerance (``run.tolerance_k``) the steps are chosen by error control
instead (:mod:`solver.transient.adaptive`, TR-BDF2). :class:`Stepper` is iterated by the command line
and the app alike; each iteration yields a :class:`StepEvent`; stop iterating (or set
``cancel``) to stop between steps.
"""
from __future__ import annotations

import dataclasses
import time as _time
from collections import OrderedDict
from dataclasses import dataclass
from typing import Callable, Iterator

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from solver.errors import Cancelled, ModelError, SolveError
from solver.transient.methodchoice import METHODS, RunShape, choose_run_method
from solver.linalg.linsolve import (DiagonalSolver, choose_method, make_solver, measured_double_factor_bytes,
                                    needs_analysis, pardiso_factor_bytes)
from solver.transient.timegrid import TimeStep, output_times, plan_steps

THETA = {"backward-euler": 1.0, "crank-nicolson": 0.5, "forward-euler": 0.0}
MAX_CACHED_SOLVERS = 8  # factorizations kept at once (memory stays bounded with many step sizes) ...
SMALL_PROBLEM_NODES = 100_000  # ... and more below this size, where every ladder rung fits
MAX_CACHED_SOLVERS_SMALL = 24


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
    level: int = 0  # accuracy level (mesh) this event belongs to, set by solver.run.session
    air: np.ndarray = dataclasses.field(default_factory=lambda: np.zeros(0))  # (n_air,) °C per air volume

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


from solver.transient.loads import LoadCombiner  # noqa: E402,F401 (re-exported)


class Stepper:
    """Plans the steps and integrates; iterate it to run.

    Parameters: ``problem`` from :func:`solver.fem.problem.build_problem`; ``cancel`` a callable
    returning True to stop (raises :class:`Cancelled`); ``linear_solver`` "auto", "direct",
    "multigrid", "pardiso" or "superlu"; ``damp_after_jumps`` enables the backward-Euler
    start-up for Crank–Nicolson; ``tolerance_k`` (K) overrides ``run.tolerance_k`` and turns on
    error-controlled adaptive steps.
    """

    def __init__(self, problem, cancel: Callable[[], bool] | None = None, linear_solver: str = "auto",
                 damp_after_jumps: bool = True, tolerance_k: float | None = None, method: str | None = None,
                 factor_bytes_hint: float | None = None):
        self.problem = problem
        self.factor_bytes_hint = factor_bytes_hint  # predicted double factor (bytes), replaces PARDISO's analysis
        self.factor_bytes_measured: int | None = None  # of the first PARDISO factorization this run made
        run = problem.model.run
        self.cancel = cancel
        requested = method or getattr(run, "method", None) or "auto"
        if requested not in METHODS:
            raise ValueError(f"unknown method {requested!r}")
        self.reduced_info = None
        self.tolerance_k = tolerance_k if tolerance_k is not None else getattr(run, "tolerance_k", None)
        self.adaptive = self.tolerance_k is not None
        if self.adaptive and getattr(problem, "radiation", None) is not None:
            self.adaptive = False  # error-controlled steps are linear-only; radiation steps are fixed
            msg = ("run.tolerance_k: adaptive steps are not available with radiation (emissivity), so fixed steps "
                   "of run.step_s are taken, each solved by chord-Newton iterations")
            if msg not in problem.warnings:
                problem.warnings.append(msg)
        self.outputs = output_times(float(run.duration_s), run.output_interval_s)
        self.critical_step_s = None
        self._solvers: OrderedDict = OrderedDict()
        self.factorizations = 0
        self.solves = 0
        # a reduced run may hand its shifted factorization (K + M/τ, τ in s) on to the caller, who
        # then owns it and must close it (the accuracy ladder reuses it for influence fields)
        self.keep_shift_solver = False
        self.shift_solver = None  # (solver, tau_s) after a reduced run when keep_shift_solver
        self.rejected_steps = 0
        if self.adaptive:
            from solver.transient.adaptive import AdaptivePlan

            self.scheme = "tr-bdf2 (adaptive)"
            self.theta = None
            self.plan = AdaptivePlan(problem, float(self.tolerance_k))
            self.steps: list[TimeStep] = []
            self._n_steps_estimate = self.plan.estimated_steps()
        else:
            self.scheme = run.scheme
            self.theta = THETA[run.scheme]
            self.damp_after_jumps = damp_after_jumps
            self.steps = plan_steps(float(run.duration_s), float(run.step_s), self.theta,
                                    problem.breakpoints(float(run.duration_s)), self.outputs, damp_after_jumps)
            self._n_steps_estimate = len(self.steps)
        self.method_choice = choose_run_method(self._run_shape(), requested)
        self.newton = None  # radiation: iteration counts (see _run_radiative)
        self.method = self.method_choice.method
        if self.method == "reduced":
            self._full_plan = (self.scheme, self._n_steps_estimate)
            self.scheme = ("reduced basis (exact in time)" if getattr(problem, "radiation", None) is None else
                           f"reduced basis ({run.scheme} steps, radiation by Newton's method)")
            self._n_steps_estimate = len(self.outputs) - 1
        else:
            self._check_explicit_stability()
        self.choice = self._choose_solver(linear_solver)
        self._mass_cache: dict = {}

    def _run_shape(self) -> RunShape:
        """Nodes, planned steps, step matrices, distinct load shapes and fields out (for the choice)."""
        p = self.problem
        groups: list = []
        for _, amb in p.conv_loads:  # convection entries sharing an ambient profile share a basis column
            if not any(amb == g for g in groups):
                groups.append(amb)
        rad = getattr(p, "radiation", None)
        shapes = (p.n_watt_loads + len(groups) + (1 if np.ptp(p.initial) > 0.0 else 0)
                  + (len(rad.names) if rad is not None else 0))
        implicit = [s for s in self.steps if s.theta > 0.0]
        from solver.transient.reduced import MAX_BASIS_BYTES, MAX_COLUMNS

        return RunShape(nodes=p.n_nodes, steps=self._n_steps_estimate,
                        step_matrices=max(1, len({(round(s.dt, 12), s.theta) for s in implicit})),
                        load_shapes=shapes, events=len(self.outputs) + 2 * len(p.model.parts),
                        explicit=not self.adaptive and self.theta == 0.0, adaptive=self.adaptive,
                        nonlinear=rad is not None,
                        max_columns=int(min(MAX_COLUMNS, MAX_BASIS_BYTES // (8 * max(1, p.n_nodes)))))

    def _choose_solver(self, requested: str):
        """The linear-solver choice for this run; near the memory limit PARDISO's analysis of the
        real sparsity pattern replaces the worst-case estimate of the factor's size."""
        p = self.problem
        adaptive = self.adaptive and self.method == "full"
        if self.method == "reduced" or self.adaptive:
            matrices, steps = 1, None  # adaptive runs above a small size use multigrid anyway
        else:
            matrices = max(1, len({(round(s.dt, 12), s.theta) for s in self.steps if s.theta > 0.0}))
            steps = len(self.steps)
            if getattr(p, "radiation", None) is not None:
                steps *= 3  # solves, not steps: radiation takes 2-3 chord iterations per step (docs/physics.md)
        explicit = self.method == "full" and not self.adaptive and self.theta == 0.0  # diagonal solves only
        factor_bytes, source = None, "measured by PARDISO's analysis"
        if not explicit and self.factor_bytes_hint is not None and needs_analysis(p.n_free, requested, adaptive,
                                                                                  matrices):
            factor_bytes = float(self.factor_bytes_hint)  # scaled from the previous mesh level's measured factor
            source = "scaled from the previous mesh's factor"
        elif not explicit and needs_analysis(p.n_free, requested, adaptive, matrices):
            upper = p.pattern.upper() if p.pattern is not None and p._shares_pattern() else None
            a = p.step_matrix(1.0, 1.0)
            if p.constraint is not None:  # the factored matrix is the free unknowns' PᵀAP
                pc = p.constraint[0]
                a, upper = (pc.T @ a @ pc).tocsr(), None
            factor_bytes = pardiso_factor_bytes(a, upper)
        return choose_method(p.n_free, requested, adaptive=adaptive, factor_bytes=factor_bytes, matrices=matrices,
                             steps=steps, factor_source=source)

    def _check_explicit_stability(self) -> None:
        """Refuse forward Euler above its critical step (ModelError naming run.step_s)."""
        problem = self.problem
        if self.adaptive or self.theta >= 0.5:
            return
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

    def fall_back_to_full(self) -> None:
        """Switch a reduced run to stepping the full system (when the basis does not converge)."""
        self.method = "full"
        self.method_choice = dataclasses.replace(
            self.method_choice, method="full",
            reason=self.method_choice.reason + "; the basis did not converge, so the full system was stepped")
        self.scheme, self._n_steps_estimate = self._full_plan
        self._check_explicit_stability()

    @property
    def n_steps(self) -> int:
        """Number of steps: planned (fixed steps), or estimated until an adaptive run ends."""
        return self._n_steps_estimate

    # ------------------------------------------------------------ linear algebra helpers
    def step_matrix(self, dt: float, theta: float) -> sp.csr_matrix:
        return self.problem.step_matrix(dt, theta)

    def _solver_for(self, dt: float, theta: float):
        key = (dt, theta)
        s = self._solvers.get(key)
        if s is not None:
            self._solvers.move_to_end(key)
            return s
        p = self.problem
        if theta == 0.0:
            s = DiagonalSolver(p.lumped / dt)
        else:
            a = self.step_matrix(dt, theta)
            upper = p.pattern.upper() if p.pattern is not None and p._shares_pattern() else None
            s = make_solver(a, self.choice.method, upper=upper, constraint=p.constraint)
        return self._cache_solver(key, s)

    def _cache_solver(self, key, s):
        """Keep a new factorization ``s`` under ``key``, closing the oldest beyond the cache size."""
        self.factorizations += 1
        if self.factor_bytes_measured is None:
            self.factor_bytes_measured = measured_double_factor_bytes(s)
        limit = MAX_CACHED_SOLVERS_SMALL if self.problem.n_nodes < SMALL_PROBLEM_NODES else MAX_CACHED_SOLVERS
        while len(self._solvers) >= limit:
            _, old = self._solvers.popitem(last=False)
            old.close()
        self._solvers[key] = s
        return s

    def mass_times(self, d: np.ndarray) -> np.ndarray:
        """M·d in J/K·K (lumped diagonal or consistent sparse)."""
        p = self.problem
        return p.lumped * d if p.capacity is None else p.capacity @ d

    def close(self) -> None:
        """Release factorizations (also done when a run ends)."""
        for s in self._solvers.values():
            s.close()
        self._solvers.clear()

    # ------------------------------------------------------------ events
    def _event(self, step, n_steps, t, dt, d, is_output, q_in, q_out, stored, resid, t_start) -> StepEvent:
        p = self.problem
        n_m = p.n_mesh
        view = d[:n_m] if len(d) > n_m else d.view()  # the field: mesh nodes only (air values in .air)
        view.flags.writeable = False
        return StepEvent(step, n_steps, t, dt, view, p.part_nodes.maxima(d), p.heat_shares @ d,
                         p.probes @ d, is_output, q_in, q_out, stored, resid, _time.perf_counter() - t_start,
                         air=d[n_m:].copy())

    def __iter__(self) -> Iterator[StepEvent]:
        if self.method == "reduced":
            if getattr(self.problem, "radiation", None) is not None:
                from solver.transient.reduced_radiative import run_reduced_radiative

                return run_reduced_radiative(self)
            from solver.transient.reduced import run_reduced

            return run_reduced(self)
        return self._run_full()

    def _run_full(self) -> Iterator[StepEvent]:
        """Step the full system (also the fallback of a reduced run that does not converge)."""
        if self.adaptive:
            from solver.transient.adaptive import run_adaptive

            return run_adaptive(self)
        return self._run_fixed()

    def _run_fixed(self) -> Iterator[StepEvent]:
        if getattr(self.problem, "radiation", None) is not None:
            return self._run_radiative()
        return self._run_linear()

    def _run_linear(self) -> Iterator[StepEvent]:
        p = self.problem
        t_start = _time.perf_counter()
        k_mat = p.stiffness
        loads = LoadCombiner(p)
        n_steps = self.n_steps
        d = p.initial.astype(float).copy()
        c0 = loads.coefficients(0.0, "right")
        bd = loads.bd(d)
        q_in0 = loads.heat_in(c0)
        q_out0 = loads.convected_out(bd, c0)
        yield self._event(0, n_steps, 0.0, 0.0, d, True, q_in0, q_out0, q_in0 - q_out0, 0.0, t_start)
        lumped = p.lumped
        prev = prev2 = None  # (temperature before the last step / the one before, step size)
        try:
            for i, st in enumerate(self.steps, start=1):
                if self.cancel is not None and self.cancel():
                    raise Cancelled(f"cancelled at t = {st.t0:g} s")
                th, dt = st.theta, canonical_step(st.dt)
                c0 = loads.coefficients(st.t0, "right")
                c1 = loads.coefficients(st.t1, "left")
                f = loads.force(th * c1 + (1.0 - th) * c0)
                rhs = self.mass_times(d) / dt
                if th < 1.0:
                    rhs -= (1.0 - th) * (k_mat @ d)
                rhs += f
                solver = self._solver_for(dt, th)
                x0 = d
                if solver.iterative and prev is not None and prev[1] == dt:
                    if prev2 is not None and prev2[1] == dt:  # iterative solvers start from the
                        x0 = 3.0 * (d - prev[0]) + prev2[0]  # quadratic extrapolation in time
                    else:
                        x0 = 2.0 * d - prev[0]
                d_new = solver.solve(rhs, x0=x0)
                self.solves += 1
                if not np.all(np.isfinite(d_new)):
                    raise SolveError(f"non-finite temperature at t = {st.t1:g} s (step {i}); the model or step "
                                     "is numerically unusable")
                # energy bookkeeping over the step (1ᵀK_cond = 0, 1ᵀM = lumped)
                bd_new = loads.bd(d_new)
                q_in = th * loads.heat_in(c1) + (1 - th) * loads.heat_in(c0)
                q_out = th * loads.convected_out(bd_new, c1) + (1 - th) * loads.convected_out(bd, c0)
                stored = float(np.einsum("i,i->", lumped, d_new - d)) / dt
                resid = q_in - q_out - stored
                prev2, prev = prev, (d, dt)
                d, bd = d_new, bd_new
                yield self._event(i, n_steps, st.t1, dt, d, st.output, q_in, q_out, stored, resid, t_start)
        finally:
            self.close()


    # ------------------------------------------------------------ radiation (nonlinear)
    def _rad_solver(self, dt: float, theta: float):
        """Factor of M/Δt + θ(K + diag(slope)) at the current linearisation (cached per Δt, θ)."""
        key = (dt, theta, "rad", self._lin_version)
        s = self._solvers.get(key)
        if s is not None:
            self._solvers.move_to_end(key)
            return s
        p = self.problem
        a = self.step_matrix(dt, theta)
        shared = p.pattern is not None and p._shares_pattern()
        if shared:
            data = a.data.copy()
            data[p.pattern.diagonal] += theta * self._lin
            a = p.pattern.matrix(data)
        else:
            a = (a + sp.diags(theta * self._lin)).tocsr()
        # the chord iterations compute the residual in double precision, so a single-precision factor
        # needs no refinement of its own here (its error is one more thing the iterations contract)
        s = make_solver(a, self.choice.method, upper=p.pattern.upper() if shared else None, refine=False,
                        constraint=p.constraint)
        return self._cache_solver(key, s)

    def _relinearise(self, d: np.ndarray) -> None:
        """Update the radiative slope at ``d`` and drop the factors built on the old one."""
        self._lin = self.problem.radiation.slope(d)
        self._lin_version += 1
        self.newton["relinearisations"] += 1
        for key in [k for k in self._solvers if len(k) == 4]:
            self._solvers.pop(key).close()

    def _rad_substep(self, d0: np.ndarray, t0: float, t1: float, side0: str, side1: str, theta: float,
                     loads: "LoadCombiner", guess: np.ndarray | None = None):
        """One θ step with radiation, solved by chord-Newton; (d1, heat in W, heat out W) averaged
        over the step, or None when it does not converge."""
        from solver.fem.radiation import MAX_CHORD, MAX_ITER, MIN_CONTRACTION, NEWTON_TOL_K

        p, rad = self.problem, self.problem.radiation
        dt = canonical_step(t1 - t0)
        k_mat = p.stiffness
        c0, c1 = loads.coefficients(t0, side0), loads.coefficients(t1, side1)
        ts0, ts1 = rad.ts4(t0, side0), rad.ts4(t1, side1)
        rhs = self.mass_times(d0) / dt + loads.force(theta * c1 + (1.0 - theta) * c0)
        if theta < 1.0:
            rhs -= (1.0 - theta) * (k_mat @ d0 + rad.node_flow(d0, ts0))
        x = d0.copy() if guess is None else guess.copy()
        prev_change, chord = None, 0
        solver = self._rad_solver(dt, theta)
        for _ in range(MAX_ITER):
            g = self.mass_times(x) / dt + theta * (k_mat @ x + rad.node_flow(x, ts1)) - rhs
            dx = solver.solve(-g)
            self.solves += 1
            self.newton["iterations"] += 1
            x = x + dx
            if not np.all(np.isfinite(x)):
                return None
            change = float(np.abs(dx).max())
            # converged: the last change, or the error left after it (the observed contraction
            # ρ leaves at most ρ/(1 − ρ) of it), is below the tolerance
            rho = change / prev_change if prev_change else 1.0
            if change < NEWTON_TOL_K or (rho < 0.5 and rho / (1.0 - rho) * change < 1e-3 * NEWTON_TOL_K):
                q_in = theta * loads.heat_in(c1) + (1 - theta) * loads.heat_in(c0)
                q_out = (theta * (loads.convected_out(loads.bd(x), c1) + rad.total(x, ts1))
                         + (1 - theta) * (loads.convected_out(loads.bd(d0), c0) + rad.total(d0, ts0)))
                return x, q_in, q_out
            chord += 1
            slow = prev_change is not None and change > MIN_CONTRACTION * prev_change and change > 100 * NEWTON_TOL_K
            if slow or chord >= MAX_CHORD:
                self._relinearise(x)
                solver = self._rad_solver(dt, theta)
                chord, prev_change = 0, None
            else:
                prev_change = change
        return None

    def _rad_step(self, d: np.ndarray, st, loads, guess=None):
        """A planned step, cut into 2, 4, ... sub-steps while the iterations do not converge;
        ``guess``: a start for the iterations of the uncut step (extrapolated in time)."""
        from solver.fem.radiation import MAX_CUTS

        for cut in range(MAX_CUTS + 1):
            n_sub = 2 ** cut
            ts = np.linspace(st.t0, st.t1, n_sub + 1)
            x, q_in, q_out, ok = d, 0.0, 0.0, True
            for j in range(n_sub):
                r = self._rad_substep(x, float(ts[j]), float(ts[j + 1]), "right" if j == 0 else "left",
                                      "left", st.theta, loads, guess if n_sub == 1 else None)
                if r is None:
                    ok = False
                    break
                x, qi, qo = r
                q_in += qi / n_sub
                q_out += qo / n_sub
            if ok:
                if cut:
                    self.newton["cut_steps"] += 1
                return x, q_in, q_out
        names = ", ".join(repr(n) for n in self.problem.radiation.names)
        raise SolveError(f"the radiation iterations did not converge at t = {st.t1:g} s, even with the step cut "
                         f"into {2 ** MAX_CUTS} parts (radiating faces of convection {names}); check the "
                         "temperatures and emissivities there, or use a shorter run.step_s")

    def _run_radiative(self) -> Iterator[StepEvent]:
        """Fixed θ steps of the nonlinear system with radiation (solver/fem/radiation.py)."""
        p, rad = self.problem, self.problem.radiation
        t_start = _time.perf_counter()
        loads = LoadCombiner(p)
        n_steps = self.n_steps
        d = p.initial.astype(float).copy()
        c0 = loads.coefficients(0.0, "right")
        q_in0 = loads.heat_in(c0)
        q_out0 = loads.convected_out(loads.bd(d), c0) + rad.total(d, rad.ts4(0.0, "right"))
        self.newton = {"iterations": 0, "relinearisations": 0, "cut_steps": 0, "tolerance_k": None}
        from solver.fem.radiation import NEWTON_TOL_K

        self.newton["tolerance_k"] = NEWTON_TOL_K
        self._lin = rad.slope(d)
        self._lin_version = 0
        yield self._event(0, n_steps, 0.0, 0.0, d, True, q_in0, q_out0, q_in0 - q_out0, 0.0, t_start)
        lumped = p.lumped
        prev = None  # (field before the last step, its step)
        jumps = np.array(sorted(b.time_s for b in p.breakpoints(float(p.model.run.duration_s)) if b.jump))
        from solver.fem.radiation import SLOPE_DRIFT

        rad_nodes = np.unique(rad.nodes)
        try:
            for i, st in enumerate(self.steps, start=1):
                if self.cancel is not None and self.cancel():
                    raise Cancelled(f"cancelled at t = {st.t0:g} s")
                dt = canonical_step(st.dt)
                # start the iterations from the linear extrapolation in time (same step, no jump between)
                after_jump = len(jumps) and float(np.abs(jumps - st.t0).min()) < 1e-9
                guess = d + (d - prev[0]) * (dt / prev[1]) if prev is not None and not after_jump else None
                d_new, q_in, q_out = self._rad_step(d, st, loads, guess)
                # keep the factored slope within SLOPE_DRIFT of the true one (fast contraction, and a
                # last iteration whose slope error leaves almost nothing in the energy balance)
                on = rad_nodes
                if (np.abs(rad.slope(d_new)[on] - self._lin[on]) > SLOPE_DRIFT * self._lin[on]).any():
                    self._relinearise(d_new)
                stored = float(np.einsum("i,i->", lumped, d_new - d)) / dt
                prev = (d, dt)
                d = d_new
                yield self._event(i, n_steps, st.t1, dt, d, st.output, q_in, q_out, stored, q_in - q_out - stored,
                                  t_start)
        finally:
            self.close()


def canonical_step(dt: float) -> float:
    """The step rounded to 12 significant digits. Equal intervals split into equal steps give
    steps that differ in the last bits; rounding makes them one value, so the cached step matrix
    and the right-hand side always use the same Δt (the time itself still lands exactly)."""
    return float(f"{dt:.12g}")


def run(problem, **kwargs) -> Iterator[StepEvent]:
    """Shorthand: ``for ev in run(problem): ...``."""
    return iter(Stepper(problem, **kwargs))
