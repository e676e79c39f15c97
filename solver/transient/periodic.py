"""Periodic steady state of a duty cycle (``run.periodic: true``), solved directly.

For loads and ambients that repeat with period P, the linear model settles into a cycle whose
start state d₀ satisfies d₀ = Φ(P) d₀ + g (Φ the state transition over one period, g the
response to one period of loads from zero). In the modal coordinates of a reduced basis
(:mod:`solver.transient.krylov`, :mod:`solver.transient.modal`) Φ(P) is diagonal, e^{−λP}, so
``z₀ = ζ / (1 − e^{−λP})`` mode by mode, ζ being one period integrated exactly from z = 0. The
basis grows until two successive bases agree on d₀ within a tenth of ``run.tolerance_k`` (at
most 0.01 K) at every node. The run then covers one period [0, P] from d₀ with the usual machinery (full or
reduced), so peaks, history and files are those of the settled cycle; the closure
max|d(P) − d₀| is reported as a check.

Periodic profiles: constant (any period), pulse (its period; the phase of ``start_s`` is kept,
the pulse is taken as having always repeated), step with ``start_s`` 0 (a constant). Tables and
later steps are not periodic and are refused, as are pulses of different periods.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from solver.errors import ModelError, SolveError
from solver.transient.krylov import KrylovBasis
from solver.transient.modal import ModalSystem
from solver.model.profiles import Constant, Pulse
from solver.transient.reduced import SampleGrid

DEFAULT_TOLERANCE_K = 0.01  # on the start state: its error runs through the whole cycle
MAX_BLOCKS = 24
PERIOD_RTOL = 1e-9


@dataclass
class CycleInfo:
    period_s: float
    basis_size: int = 0
    change_k: float = float("nan")  # d₀ change between the last two bases, K
    closure_k: float = float("nan")  # max |d(P) − d₀| of the stepped cycle, K

    def describe(self) -> str:
        s = (f"periodic steady state of a {self.period_s:g} s cycle: start state from a reduced basis of "
             f"{self.basis_size} vectors (last change {self.change_k:.2g} K)")
        if np.isfinite(self.closure_k):
            s += f"; cycle closure |T(P) - T(0)| ≤ {self.closure_k:.2g} K"
        return s


def _profiles(model):
    out = [(f"heat_loads[{i}].profile", hl.profile) for i, hl in enumerate(model.heat_loads)]
    out += [(f"convection[{i}].ambient_c", c.ambient_c) for i, c in enumerate(model.convection)
            if c.ambient_c is not None]
    return out


def cycle_period(model) -> float:
    """The shared period in s, or a ModelError naming the profile that does not repeat with it."""
    issues, period, first = [], None, None
    for path, p in _profiles(model):
        if p.type == "constant" or (p.type == "pulse" and (p.high == p.low or p.duty >= 1.0)):
            continue
        if p.type == "step":
            if p.start_s > 0:
                issues.append((f"{path}.start_s", "a step that starts after t = 0 does not repeat; run.periodic "
                                                  "needs loads and ambients that repeat with one period"))
            continue
        if p.type == "table":
            if len({float(v) for _, v in p.points}) > 1:
                issues.append((f"{path}", "a table profile does not repeat (its last value holds); run.periodic "
                                          "needs constant or pulse profiles"))
            continue
        if period is None:
            period, first = float(p.period_s), path
        elif abs(float(p.period_s) - period) > PERIOD_RTOL * period:
            issues.append((f"{path}.period_s", f"period {p.period_s:g} s differs from {first}.period_s "
                                               f"({period:g} s); run.periodic needs one shared period"))
    if issues:
        raise ModelError(issues)
    return period if period is not None else float(model.run.duration_s)


def cycle_model(model):
    """A copy of the model whose run covers one period (duration = period, output and step
    sizes capped to fit it)."""
    period = cycle_period(model)
    run = model.run
    upd = {"duration_s": period}
    if run.step_s > period:
        upd["step_s"] = period / 20.0
    if run.output_every_s is not None and run.output_every_s > period:
        upd["output_every_s"] = None
    return model.model_copy(update={"run": run.model_copy(update=upd)}), period


def _periodic_profile(prof, period: float):
    """The profile as a function that has always repeated: a pulse's start moved to (−P, 0]."""
    if isinstance(prof, Pulse):
        start = prof.start_s - math.ceil(prof.start_s / prof.period_s) * prof.period_s
        return Pulse(prof.high, prof.low, prof.period_s, prof.duty, start)
    if hasattr(prof, "level") and getattr(prof, "start_s", 1.0) <= 0:  # a step from t = 0
        return Constant(prof.level)
    return prof


def make_periodic(problem, period: float) -> None:
    """Replace the problem's profiles by their always-repeating versions (in place)."""
    problem.heat_profiles = [(p, _periodic_profile(f, period)) for p, f in problem.heat_profiles]
    problem.conv_loads = [(b, _periodic_profile(a, period)) for b, a in problem.conv_loads]
    problem.surface_loads = [(s, _periodic_profile(f, period)) for s, f in problem.surface_loads]
    problem._basis = None


def settle(problem, period: float, method: str = "pardiso", tolerance_k: float | None = None) -> CycleInfo:
    """Set ``problem.initial`` to the start of the settled cycle; returns what was done."""
    if not problem.conv_loads:
        raise ModelError(("convection", "no convection face: without a path to ambient the temperature never "
                                        "settles into a cycle (run.periodic needs convection)"))
    tol = DEFAULT_TOLERANCE_K if tolerance_k is None else min(DEFAULT_TOLERANCE_K, 0.1 * float(tolerance_k))
    info = CycleInfo(period)
    grid = SampleGrid(problem)
    problem.initial = np.zeros(problem.n_nodes)  # the basis from the load patterns only
    shift = 1.0 / math.sqrt(float(problem.model.run.step_s) * period)
    basis = KrylovBasis(problem, shift, method=method, max_columns=int(min(256, 1.5e9 // (8 * problem.n_nodes))))
    load_b = problem._load_basis()
    prev = None
    try:
        for block in range(1, MAX_BLOCKS + 1):
            added = basis.grow()
            v = basis.V
            kr = v.T @ (problem.stiffness @ v)
            modal = ModalSystem(kr, (load_b.T @ v).T, np.zeros(v.shape[1]))
            if np.any(modal.lam <= 1e-12 * max(modal.lam.max(), 1e-300)):
                raise SolveError("a mode without heat loss: the model has no periodic steady state")
            z, _ = modal.propagate(grid.t0, grid.t1, grid.c0, grid.c1)
            z0 = z[:, -1] / -np.expm1(-modal.lam * period)
            d0 = v @ (modal.phi @ z0)
            if prev is not None:
                info.change_k = float(np.max(np.abs(d0 - prev)))
            prev = d0
            info.basis_size = basis.size
            if (block >= 3 and info.change_k <= tol) or added == 0 or basis.full:
                break
    finally:
        basis.close()
    if not (info.change_k <= tol):
        problem.warnings.append(f"the periodic start state changed by {info.change_k:.2g} K in the last basis "
                                f"block (tolerance {tol:g} K)")
    problem.initial = prev
    return info


def start_cycle(problem, period: float, linear_solver: str = "auto") -> CycleInfo:
    """Make the problem's profiles periodic and set its initial field to the settled cycle's start."""
    from solver.linalg.linsolve import choose_method

    make_periodic(problem, period)
    method = choose_method(problem.n_free, linear_solver).method
    return settle(problem, period, method="pardiso" if method == "pardiso-single" else method,
                  tolerance_k=problem.model.run.tolerance_k)
