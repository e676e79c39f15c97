"""Time integration of M d' + K d = F(t) against scipy's solve_ivp on the same semi-discrete system.

Outside reference: ``scipy.integrate.solve_ivp`` (BDF, rtol = atol = 1e-10) applied to
``problem.mass_matrix``, ``problem.stiffness`` and ``problem.load(t)``, restarted at every
profile breakpoint (see tests/modelkit.py). Expected orders: 1 for backward Euler, 2 for
Crank–Nicolson (theta-method theory, common practice, no source needed beyond the
definition). The damped Crank–Nicolson start-up (two backward-Euler half steps after t = 0
and after each jump, Rannacher's remedy) must keep order 2 and remove the oscillation that
plain Crank–Nicolson shows after a sudden load drop on a stiff mesh with a large step.
"""
from __future__ import annotations

import functools

import numpy as np
import pytest

from modelkit import model_dict, part, problem_of, reference_ivp
from solver import Stepper

SOLID = {"s": {"conductivity": 2.0, "density": 1000.0, "specific_heat": 1000.0}}
OUTPUTS = np.array([0.0, 8.0, 16.0, 24.0, 32.0])

LOADS = {
    # piecewise linear watts (corners at 8, 16, 24 s) and a piecewise linear ambient (corner at 12 s)
    "table": ({"type": "table", "points": [[0, 0.0], [8, 2.0], [16, 0.5], [24, 1.0]]},
              {"type": "table", "points": [[0, 20.0], [12, 45.0], [32, 30.0]]}, (8.0, 12.0, 16.0, 24.0)),
    # square wave: 3 W for 2 s of every 8 s, 0.5 W otherwise (jumps every 2 / 6 s); ambient ramps
    "pulse": ({"type": "pulse", "high": 3.0, "low": 0.5, "period_s": 8.0, "duty": 0.25, "start_s": 4.0},
              {"type": "table", "points": [[0, 20.0], [12, 45.0], [32, 30.0]]},
              (4.0, 6.0, 12.0, 14.0, 20.0, 22.0, 28.0, 30.0)),
    # no heat at all: only the ambient moves (checks the convection load path by itself)
    "ambient": ({"type": "constant", "value": 0.0},
                {"type": "table", "points": [[0, 20.0], [6, 60.0], [20, 10.0], [26, 35.0]]}, (6.0, 20.0, 26.0)),
}


def _model(kind: str, step: float, scheme: str, mass: str = "consistent") -> dict:
    load, amb, _ = LOADS[kind]
    return model_dict([part("plate", "s", (0, 0, 0), (12, 12, 2)), part("chip", "s", (4, 4, 2), (6, 6, 4))],
                      SOLID, heat_loads=[{"part": "chip", "profile": load}],
                      convection=[{"name": "bottom", "part": "plate", "side": "z-", "h": 200.0, "ambient_c": amb},
                                  {"name": "chip top", "part": "chip", "side": "z+", "h": 20.0}],
                      cell_mm=3.0, duration_s=float(OUTPUTS[-1]), step_s=step, scheme=scheme, mass=mass,
                      output_every_s=8.0, ambient_c=20.0, initial_c=20.0, method="full")


@functools.lru_cache(maxsize=None)
def _reference(kind: str, mass: str = "consistent") -> np.ndarray:
    _, problem = problem_of(_model(kind, 1.0, "backward-euler", mass))
    return reference_ivp(problem, OUTPUTS, breaks=LOADS[kind][2])


def _error(kind: str, step: float, scheme: str, damp: bool = True, mass: str = "consistent") -> float:
    _, problem = problem_of(_model(kind, step, scheme, mass))
    fields = np.array([ev.field for ev in Stepper(problem, damp_after_jumps=damp) if ev.is_output])
    assert fields.shape[0] == len(OUTPUTS)
    return float(np.abs(fields - _reference(kind, mass)).max())


def _orders(kind, scheme, damp=True, steps=(1.0, 0.5, 0.25), mass="consistent"):
    errs = np.array([_error(kind, s, scheme, damp, mass) for s in steps])
    return errs, np.log2(errs[:-1] / errs[1:])


CN_STEPS = (0.5, 0.25, 0.125)


def _assert_order(errs, orders, expected, tol=0.15):
    """Observed order between the two finest steps near ``expected``; never below it by more than tol.

    (Coarse pairs may converge faster than asymptotically, as error terms cancel.)
    """
    assert abs(orders[-1] - expected) < tol, f"errors {errs}, orders {orders}"
    assert orders.min() > expected - tol, f"errors {errs}, orders {orders}"


def test_reference_is_not_trivial():
    """The reference solution moves by tens of kelvin (so small errors mean something)."""
    ref = _reference("table")
    assert np.ptp(ref[-1]) > 1.0 and ref.max() - 20.0 > 10.0


@pytest.mark.parametrize("kind", ["table", "ambient"])
def test_backward_euler_first_order(kind):
    errs, orders = _orders(kind, "backward-euler")
    _assert_order(errs, orders, 1.0)


@pytest.mark.parametrize("damp", [False, True], ids=["plain", "damped"])
@pytest.mark.parametrize("kind", ["table", "ambient"])
def test_crank_nicolson_second_order(kind, damp):
    errs, orders = _orders(kind, "crank-nicolson", damp, steps=CN_STEPS)
    _assert_order(errs, orders, 2.0)
    assert errs[-1] < 0.01  # kelvin, at 0.125 s steps


def test_crank_nicolson_lumped_mass_second_order():
    """The same with the lumped capacity the app uses by default (its own semi-discrete system)."""
    errs, orders = _orders("table", "crank-nicolson", True, steps=CN_STEPS, mass="lumped")
    _assert_order(errs, orders, 2.0)


@pytest.mark.parametrize("scheme,order", [("backward-euler", 1.0), ("crank-nicolson", 2.0)])
def test_pulse_source_with_ambient_table(scheme, order):
    """Jumps landed exactly and evaluated one-sided: the scheme keeps its order across the edges.

    A source-term sign or side error (F(tₙ) vs F(tₙ₊₁), or left/right value at an edge) would
    leave an O(1) error per jump and break the order.
    """
    errs, orders = _orders("pulse", scheme, steps=CN_STEPS if order == 2.0 else (1.0, 0.5, 0.25))
    _assert_order(errs, orders, order)


# ---------------------------------------------------------------- stiff load drop
@functools.lru_cache(maxsize=None)
def _drop_case():
    """Copper chip on a thin aluminium plate, 1 mm cells, 1 s steps (λ_max·Δt ≈ 10⁴); 5 W off at t = 10 s."""
    d = model_dict([part("plate", "aluminium-6061", (0, 0, 0), (10, 10, 1)),
                    part("chip", "copper", (4, 4, 1), (2, 2, 1))],
                   heat_loads=[{"part": "chip", "profile": {"type": "pulse", "high": 5.0, "low": 0.0,
                                                             "period_s": 100.0, "duty": 0.1}}],
                   convection=[{"name": "bottom", "part": "plate", "side": "z-", "h": 500.0}],
                   cell_mm=1.0, duration_s=20.0, step_s=1.0, scheme="crank-nicolson", mass="lumped",
                   output_every_s=1.0, method="full")
    _, problem = problem_of(d)
    times = np.arange(0.0, 21.0)
    ref = reference_ivp(problem, times, breaks=[10.0], rtol=1e-8, atol=1e-8)  # errors compared are ≥ 0.01 K
    runs = {damp: np.array([ev.field for ev in Stepper(problem, damp_after_jumps=damp) if ev.is_output])
            for damp in (True, False)}
    return problem, times, ref, runs


def test_stiff_problem_is_stiff():
    from solver.transient.stepping import largest_eigenvalue

    problem, *_ = _drop_case()
    assert largest_eigenvalue(problem.stiffness, problem.lumped) * 1.0 > 1e3


def test_crank_nicolson_after_load_drop_damped_vs_plain():
    problem, times, ref, runs = _drop_case()
    hot = int(np.argmax(ref[10]))
    after = times > 10.0
    # the reference cools monotonically at the hot spot after the drop
    assert np.all(np.diff(ref[times >= 10.0, hot]) < 0)
    err_damped = np.abs(runs[True][after] - ref[after]).max()
    err_plain = np.abs(runs[False][after] - ref[after]).max()
    rise = ref[10, hot] - 25.0
    # damped: close to the reference and monotone like it (no overshoot, no ringing)
    assert err_damped < 0.05 * rise, f"damped error {err_damped:.3f} K of a {rise:.1f} K rise"
    assert np.all(np.diff(runs[True][times >= 10.0, hot]) < 0)
    # plain Crank–Nicolson: the error at the hot spot flips sign every step (ringing) and is far larger
    e_plain = runs[False][after, hot] - ref[after, hot]
    assert np.all(np.sign(e_plain[1:]) == -np.sign(e_plain[:-1])), e_plain
    assert err_plain > 4.0 * err_damped
    # the planned steps show the damping: backward-Euler half steps right after the jump
    steps = Stepper(problem).steps
    after_jump = [s for s in steps if 10.0 - 1e-9 <= s.t0 < 11.0 - 1e-9]
    assert [s.theta for s in after_jump] == [1.0, 1.0] and after_jump[0].dt == pytest.approx(0.5)
    plain_steps = Stepper(problem, damp_after_jumps=False).steps
    assert all(s.theta == 0.5 for s in plain_steps)


# ---------------------------------------------------------------- forward Euler
def _fe_model(step: float, mass: str = "lumped", n_steps: int = 60) -> dict:
    return model_dict([part("bar", "aluminium-6061", (0, 0, 0), (12, 6, 4)),
                       part("pad", "s", (0, 0, 4), (6, 6, 2))], SOLID,
                      heat_loads=[{"part": "pad", "profile": {"type": "constant", "value": 0.5}}],
                      convection=[{"name": "all", "part": "bar", "side": "exposed", "h": 40.0}],
                      cell_mm=2.0, duration_s=n_steps * step, step_s=step, scheme="forward-euler", mass=mass,
                      output_every_s=step, initial_c=80.0, ambient_c=20.0, method="full")


@functools.lru_cache(maxsize=None)
def _fe_limit():
    """Critical step 2/λ_max with λ_max from scipy.linalg.eigh(K, M) (dense generalized problem)."""
    from scipy.linalg import eigh

    _, problem = problem_of(_fe_model(1e-3))
    lam = eigh(problem.stiffness.toarray(), np.diag(problem.lumped), eigvals_only=True)
    return problem, float(lam.max())


def test_largest_eigenvalue_matches_dense_scipy():
    from solver.transient.stepping import critical_step, largest_eigenvalue

    problem, lam_ref = _fe_limit()
    lam = largest_eigenvalue(problem.stiffness, problem.lumped)
    assert lam == pytest.approx(lam_ref, rel=1e-8)
    assert critical_step(problem) == pytest.approx(2.0 / lam_ref, rel=1e-8)


def test_forward_euler_just_below_limit_runs_and_stays_bounded():
    _, lam = _fe_limit()
    step = 0.95 * 2.0 / lam
    _, problem = problem_of(_fe_model(step, n_steps=400))
    stepper = Stepper(problem)
    assert stepper.critical_step_s == pytest.approx(2.0 / lam, rel=1e-8)
    assert max(s.dt for s in stepper.steps) <= stepper.critical_step_s
    fields = np.array([ev.field for ev in stepper if ev.is_output])
    times = np.array([0.0] + [s.t1 for s in stepper.steps if s.output])
    assert len(fields) == 401
    # bounded: the highest mode is damped by |1 − Δt·λ_max| = 0.9 per step, so no growth
    ref = reference_ivp(problem, times[::40])
    assert np.abs(fields[::40] - ref).max() < 0.02 * (80.0 - 20.0)
    assert np.abs(fields[-1] - ref[-1]).max() < np.abs(fields[40] - ref[1]).max() + 0.05


def test_forward_euler_just_above_limit_is_refused():
    import solver

    _, lam = _fe_limit()
    limit = 2.0 / lam
    model = solver.parse_model(_fe_model(1.05 * limit))
    problem = solver.build_problem(model)
    with pytest.raises(solver.ModelError) as err:
        Stepper(problem)
    assert err.value.first_path == "run.step_s"
    assert f"{limit:.4g}" in str(err.value)


def test_forward_euler_with_consistent_capacity_is_refused():
    import solver

    with pytest.raises(solver.ModelError) as err:
        solver.parse_model(_fe_model(1e-3, mass="consistent"))
    assert err.value.first_path == "run.mass"
    assert "lumped" in str(err.value)


# ---------------------------------------------------------------- abrupt ambient change
def test_abrupt_ambient_rise_no_overshoot():
    """Ambient steps from 20 to 80 °C at t = 5 s on a stiff mesh with 1 s steps.

    Physically (and by the maximum principle of the heat equation) no point may exceed 80 °C.
    Discrete maximum principle, from memory: lumped-capacity backward Euler keeps it when the
    conduction matrix has no positive off-diagonal entries (non-obtuse tetrahedra, as the
    Kuhn split of boxes gives; the consistent convection term adds small positive ones, so
    this is checked, not assumed). Crank–Nicolson does not; its damped start-up must keep the
    overshoot far below the plain scheme's.
    """
    amb = {"type": "pulse", "high": 80.0, "low": 20.0, "period_s": 1000.0, "duty": 1.0, "start_s": 5.0}
    d = model_dict([part("plate", "aluminium-6061", (0, 0, 0), (10, 10, 1)),
                    part("chip", "copper", (4, 4, 1), (2, 2, 1))],
                   convection=[{"name": "all", "part": "plate", "side": "exposed", "h": 2000.0, "ambient_c": amb}],
                   cell_mm=1.0, min_layers=2, duration_s=15.0, step_s=1.0, scheme="backward-euler", mass="lumped",
                   output_every_s=1.0, initial_c=20.0, ambient_c=20.0, method="full")
    _, problem = problem_of(d)
    k = problem.conductivity.tocoo()
    off = k.row != k.col
    assert k.data[off].max() <= 1e-12 * np.abs(k.data).max()  # M-matrix structure of conduction
    fields = np.array([ev.field for ev in Stepper(problem)])
    assert fields.max() <= 80.0 + 1e-9 and fields.min() >= 20.0 - 1e-9
    assert fields[-1].max() > 75.0  # it did warm up towards the new ambient

    d["run"]["scheme"] = "crank-nicolson"
    _, problem = problem_of(d)
    over = {damp: np.array([ev.field for ev in Stepper(problem, damp_after_jumps=damp)]).max() - 80.0
            for damp in (True, False)}
    assert over[False] > 1.0  # kelvin: plain Crank–Nicolson rings above the ambient
    assert over[True] < 0.05 and over[True] < 0.05 * over[False]
