"""Error-controlled adaptive time steps: TR-BDF2 with its embedded error estimate.

TR-BDF2 (γ = 2 − √2) takes a trapezoidal stage to tₙ + γh and a BDF2 stage to tₙ + h. With this
γ both stages solve with the same matrix A = M/(c·h) + K, c = 1 − 1/√2, so one factorization
(or multigrid hierarchy) serves both. The scheme is second order and L-stable (no ringing after
load jumps, unlike Crank–Nicolson). Its local error is C·h³·T''' with C = √2/2 − 2/3 ≈ 0.0404;
T''' is estimated from the three stage slopes (a quadratic through f at tₙ, tₙ+γh, tₙ+h), then
filtered through A⁻¹·M/(c·h) so that quickly decaying (stiff) components do not inflate it.
(Bank et al., "Transient simulation of silicon devices and circuits", IEEE Trans. CAD 4 (1985),
and Hosea & Shampine, "Analysis and implementation of TR-BDF2", Appl. Numer. Math. 20 (1996);
the constant C is re-derived by Taylor expansion in tests/test_adaptive_steps.py.)

Step sizes come from a ladder h = step_s·2ᵏ so factorizations are reused; every profile
breakpoint and every output time is landed on exactly (landing steps may leave the ladder;
multigrid then reuses the nearest rung's hierarchy as preconditioner). After a load jump the
step restarts small: at ``step_s`` the first time, then at the first step the previous jump
accepted. The user's ``tolerance_k`` bounds the estimated local error of each
step (max over nodes, K) at half the tolerance, leaving room for accumulation.
"""
from __future__ import annotations

import math
import time as _time
from typing import Iterator

import numpy as np

from solver.transient.loads import LoadCombiner
from solver.errors import Cancelled, SolveError
from solver.linalg.linsolve import MultigridCGSolver
from solver.transient.timegrid import TIME_TOL, merge_times

GAMMA = 2.0 - math.sqrt(2.0)
C_STAGE = 1.0 - 1.0 / math.sqrt(2.0)  # = γ/2 = (1−γ)/(2−γ)
A1 = 1.0 / (GAMMA * (2.0 - GAMMA))
A0 = (1.0 - GAMMA) ** 2 / (GAMMA * (2.0 - GAMMA))
W_TR = math.sqrt(2.0) / 4.0  # quadrature weights (W_TR, W_TR, C_STAGE) of the equivalent Runge–Kutta form
ERROR_CONSTANT = math.sqrt(2.0) / 2.0 - 2.0 / 3.0
LOCAL_SHARE = 0.5  # share of the tolerance allowed as local error per step (tests: peak errors stay well inside)
MAX_GROWTH = 2.0  # at most one rung up per step
MIN_SHRINK = 0.125
SAFETY = 0.9
MIN_STEP_FACTOR = 2.0 ** -20  # smallest step relative to step_s before giving up
CG_ACCURACY = 1e-3  # linear-solve error allowed, as a share of the local tolerance


class AdaptivePlan:
    """Landing times (breakpoints and outputs), jump times and the step ladder of a run."""

    def __init__(self, problem, tolerance_k: float):
        run = problem.model.run
        self.duration = float(run.duration_s)
        self.base = float(run.step_s)
        self.tolerance_k = float(tolerance_k)
        self.local_tol = LOCAL_SHARE * self.tolerance_k
        from solver.transient.timegrid import output_times

        self.outputs = output_times(self.duration, run.output_interval_s)
        bps = [b for b in problem.breakpoints(self.duration) if 0.0 < b.time_s < self.duration]
        self.jumps = merge_times([b.time_s for b in bps if b.jump])
        self.marks = merge_times([0.0, self.duration, *self.outputs, *(b.time_s for b in bps)])

    def estimated_steps(self) -> int:
        """A first guess for progress bars: about four steps per landing interval, more after jumps."""
        return int(4 * (len(self.marks) - 1) + 6 * len(self.jumps))

    def snap(self, h: float) -> float:
        """The largest ladder rung step_s·2ᵏ not above ``h``."""
        k = math.floor(math.log2(h / self.base) + 1e-9)
        return self.base * 2.0 ** k

    def is_jump(self, t: float) -> bool:
        return bool(len(self.jumps)) and bool(np.any(np.abs(self.jumps - t) <= TIME_TOL))

    def is_output(self, t: float) -> bool:
        return bool(np.any(np.abs(self.outputs - t) <= TIME_TOL))


def choose_step(plan: AdaptivePlan, h: float, gap: float, ladder_only: bool):
    """(step, lands on the mark) for a wanted rung ``h`` and ``gap`` seconds to the next mark.

    A direct solver factors once per step size, so it walks down the ladder to the mark (one step
    per binary digit of the gap) and leaves the ladder only for a remainder below a quarter rung;
    multigrid reuses a nearby rung's hierarchy and lands directly (two equal steps rather than a
    sliver).
    """
    if gap <= h * (1.0 + 1e-9):
        if not ladder_only:
            return gap, True
        rung = plan.snap(gap)
        if rung >= gap * (1.0 - 1e-9) or rung < 0.25 * gap:
            return gap, True
        return rung, False
    if not ladder_only and gap < 2.0 * h:
        return 0.5 * gap, False
    return h, False


class _StageSolver:
    """Solves with A(h) = M/(c·h) + K: factorization per distinct h, or a multigrid rung reused."""

    def __init__(self, stepper):
        self.st = stepper
        self.p = stepper.problem
        self.multigrid = stepper.choice.method == "multigrid"
        self._matrices: dict = {}
        self.min_capacity = float(self.p.lumped.min())

    def _matrix(self, ch: float):
        key = round(ch, 12)
        a = self._matrices.get(key)
        if a is None:
            if len(self._matrices) >= 4:
                self._matrices.pop(next(iter(self._matrices)))
            a = self.p.step_matrix(ch, 1.0)
            self._matrices[key] = a
        return a

    def solve(self, h: float, b: np.ndarray, x0: np.ndarray, accuracy_k: float) -> np.ndarray:
        ch = C_STAGE * h
        self.st.solves += 1
        if not self.multigrid:
            return self.st._solver_for(ch, 1.0).solve(b, x0=x0)
        plan = self.st.plan
        rung = plan.base * 2.0 ** round(math.log2(h / plan.base))
        pre = self.st._solver_for(C_STAGE * rung, 1.0)
        assert isinstance(pre, MultigridCGSolver)
        # ‖x − x*‖₂ ≤ ‖r‖₂ / λ_min(A) and λ_min(A) ≥ min(M)/(c·h) for lumped M (K ≥ 0);
        # a consistent M has a smaller λ_min, hence the extra factor
        lam_min = self.min_capacity / ch * (1.0 if self.p.capacity is None else 0.1)
        a = None if abs(rung - h) <= 1e-12 * h else self._matrix(ch)
        return pre.solve(b, x0=x0, atol=accuracy_k * lam_min, a=a)


def run_adaptive(stepper) -> Iterator:
    """Iterate TR-BDF2 steps under error control, yielding StepEvents (see :class:`solver.transient.stepping.Stepper`)."""

    p = stepper.problem
    plan: AdaptivePlan = stepper.plan
    t_start = _time.perf_counter()
    loads = LoadCombiner(p)
    k_mat = p.stiffness
    lumped = p.lumped
    consistent = p.capacity is not None
    mass = (lambda v: p.capacity @ v) if consistent else (lambda v: lumped * v)
    solver = _StageSolver(stepper)
    cg_acc = CG_ACCURACY * plan.local_tol

    d = p.initial.astype(float).copy()
    t = 0.0
    c_n = loads.coefficients(0.0, "right")
    bd_n = loads.bd(d)
    q_in0 = loads.heat_in(c_n)
    q_out0 = loads.convected_out(bd_n, c_n)
    step = 0
    yield stepper._event(0, stepper.n_steps, 0.0, 0.0, d, True, q_in0, q_out0, q_in0 - q_out0, 0.0, t_start)

    g_n = None  # M·f at tₙ⁺ (W): heat rate vector, F − K·d
    h = plan.base
    restart_h = plan.base  # first step after a jump; learned from the last jump's accepted first step
    after_jump = True
    anchor = 0.0
    mark_i = 1
    h_min = plan.base * MIN_STEP_FACTOR
    try:
        while mark_i < len(plan.marks):
            target = plan.marks[mark_i]
            if stepper.cancel is not None and stepper.cancel():
                raise Cancelled(f"cancelled at t = {t:g} s")
            if g_n is None:
                c_n = loads.coefficients(t, "right")
                g_n = loads.force(c_n) - k_mat @ d
                bd_n = loads.bd(d)
            while True:
                gap = target - t
                h_try, landing = choose_step(plan, h, gap, ladder_only=not solver.multigrid)
                ch = C_STAGE * h_try
                f_n = g_n / lumped  # slope estimate, K/s (exact for lumped capacity)
                # stage 1: trapezoidal rule to t + γh
                c_g = loads.coefficients(t + GAMMA * h_try, "left")
                rhs = mass(d) / ch + g_n + loads.force(c_g)
                u_g = solver.solve(h_try, rhs, d + GAMMA * h_try * f_n, cg_acc)
                g_g = mass(u_g - d) / ch - g_n
                # stage 2: BDF2 to t + h
                t1 = target if landing else t + h_try
                c_1 = loads.coefficients(t1, "left")
                base = A1 * u_g - A0 * d
                rhs = mass(base) / ch + loads.force(c_1)
                u_1 = solver.solve(h_try, rhs, u_g + (1.0 - GAMMA) * h_try * (g_g / lumped), cg_acc)
                if not np.all(np.isfinite(u_1)):
                    raise SolveError(f"non-finite temperature at t = {t1:g} s; the model is numerically unusable")
                g_1 = mass(u_1 - base) / ch
                # local error: C·h³·T''' from the slopes' second divided difference, then filtered
                est_g = (2.0 * ERROR_CONSTANT * h_try) * ((g_1 - g_g) / (1.0 - GAMMA) - (g_g - g_n) / GAMMA)
                est = solver.solve(h_try, est_g / ch, None, cg_acc)
                err = float(np.abs(est).max())
                if err <= plan.local_tol or h_try <= h_min:
                    break
                stepper.rejected_steps += 1
                factor = max(MIN_SHRINK, SAFETY * (plan.local_tol / err) ** (1.0 / 3.0))
                h = plan.snap(max(h_min, h_try * factor))
            if after_jump:
                restart_h = plan.snap(h_try) if not landing else restart_h
                after_jump = False
            # accepted: energy over the step with the scheme's own quadrature weights
            bd_g, bd_1 = loads.bd(u_g), loads.bd(u_1)
            q_in = W_TR * (loads.heat_in(c_n) + loads.heat_in(c_g)) + C_STAGE * loads.heat_in(c_1)
            q_out = (W_TR * (loads.convected_out(bd_n, c_n) + loads.convected_out(bd_g, c_g))
                     + C_STAGE * loads.convected_out(bd_1, c_1))
            stored = float(np.einsum("i,i->", lumped, u_1 - d)) / h_try
            resid = q_in - q_out - stored
            # next step size: one rung up at most; a landing step does not shrink the rung
            factor = MAX_GROWTH if err == 0.0 else min(MAX_GROWTH, SAFETY * (plan.local_tol / err) ** (1.0 / 3.0))
            proposal = plan.snap(max(h_min, h_try * factor))
            if landing:
                anchor = t1  # step sizes are aligned to the last mark
            if proposal > h_try and not landing:
                # grow only where the time since the last mark is a multiple of the new step, so
                # the ladder walk down to the next mark stays short (dyadic alignment)
                ratio = (t1 - anchor) / proposal
                if abs(ratio - round(ratio)) > 1e-6:
                    proposal = plan.snap(h_try)
            if not landing and factor >= 1.0 and proposal < h_try:
                # an off-ladder step (multigrid's first half of a landing pair) keeps its size so the
                # second half lands; snapping it down instead halves the gap again and again (Zeno)
                proposal = h_try
            h = max(proposal, h) if (landing and h_try < h and factor >= 1.0) else proposal
            t = t1
            d = u_1
            c_n, bd_n, g_n = c_1, bd_1, g_1
            if landing:
                mark_i += 1
                if plan.is_jump(t):
                    g_n = None  # the slope jumps with the load: recompute from the right-hand limit
                    h = min(h, restart_h)
                    after_jump = True
            step += 1
            last = mark_i >= len(plan.marks)
            if last:
                stepper._n_steps_estimate = step
            elif step >= stepper._n_steps_estimate:
                stepper._n_steps_estimate = step + max(1, int(step * (plan.duration - t) / max(t, 1e-300)))
            stepper.steps.append(_Taken(t - h_try, t))
            yield stepper._event(step, stepper.n_steps, t, h_try, d, landing and plan.is_output(t),
                                 q_in, q_out, stored, resid, t_start)
    finally:
        stepper.close()


class _Taken:
    """Record of an accepted step (t0, t1), kept in ``Stepper.steps`` for the run summary."""

    __slots__ = ("t0", "t1")

    def __init__(self, t0: float, t1: float):
        self.t0, self.t1 = t0, t1

    @property
    def dt(self) -> float:
        return self.t1 - self.t0
