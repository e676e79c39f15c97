"""Error-controlled adaptive steps (TR-BDF2) against a converged fixed-step reference.

The reference is the same semi-discrete system integrated with Crank–Nicolson (with backward-
Euler start-up after each jump) at a step about 100× below the scale of the load changes, whose peak
temperatures no longer move by more than a few milli-kelvin when the step is halved (checked
below). Invented scenario: a small aluminium tray carrying a silicon die under a pulsed load.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
import sympy

import solver
from solver.transient import adaptive
from solver.transient.stepping import Stepper


def _model(tolerance=None, step_s=0.5, duration=90.0, scheme="crank-nicolson", mass="lumped"):
    # these checks are about the time integrator: "auto" could pick the reduced basis instead
    run = {"duration_s": duration, "step_s": step_s, "scheme": scheme, "mass": mass, "output_every_s": 10.0,
           "method": "full"}
    if tolerance is not None:
        run["tolerance_k"] = tolerance
    d = {
        "format": "thermgui-model", "version": 1, "title": "adaptive check (invented)",
        "ambient_c": 25.0, "initial_c": 25.0,
        "parts": [
            {"name": "tray", "material": "aluminium-6061", "origin_mm": [0, 0, 0], "size_mm": [24, 16, 2]},
            {"name": "pad", "material": "pcb-4layer-effective", "origin_mm": [4, 4, 2], "size_mm": [10, 8, 1]},
            {"name": "die", "material": "silicon", "origin_mm": [6, 5, 3], "size_mm": [5, 5, 0.6],
             "rated_c": 90.0},
        ],
        "heat_loads": [
            {"part": "die", "profile": {"type": "pulse", "high": 6.0, "low": 0.5, "period_s": 30, "duty": 0.3,
                                        "start_s": 2.5}},
            {"part": "pad", "profile": {"type": "table", "points": [[0, 0.0], [40, 1.0], [70, 0.2]]}},
        ],
        "convection": [{"name": "under", "part": "tray", "side": "z-", "h": 60.0},
                       {"name": "all die", "part": "die", "side": "exposed", "h": 10.0}],
        "mesh": {"cell_mm": 2.0, "min_layers": 1},
        "run": run,
    }
    return solver.parse_model(d)


def _peaks(problem, **kw):
    st = Stepper(problem, **kw)
    peak = None
    events = []
    for ev in st:
        peak = ev.part_max.copy() if peak is None else np.maximum(peak, ev.part_max)
        events.append((ev.time_s, ev.dt, ev.is_output, ev.energy_residual_w, ev.heat_in_w))
    return peak, events, st


@pytest.fixture(scope="module")
def reference():
    """Converged fixed-step peaks (and a check that halving the step no longer moves them)."""
    fine = _peaks(solver.build_problem(_model(step_s=0.04)))[0]
    finer = _peaks(solver.build_problem(_model(step_s=0.02)))[0]
    assert np.abs(fine - finer).max() < 5e-3
    return finer


@pytest.mark.parametrize("tol", [0.5, 0.05])
def test_peaks_within_tolerance_of_converged_reference(reference, tol):
    problem = solver.build_problem(_model(tolerance=tol))
    peak, events, st = _peaks(problem)
    err = np.abs(peak - reference).max()
    assert err <= tol, f"peak error {err:.4f} K above the tolerance {tol} K"
    assert st.adaptive and st.scheme.startswith("tr-bdf2")
    assert events[-1][0] == pytest.approx(90.0, abs=1e-9)
    assert st.n_steps == len(events) - 1  # final count reported


def test_error_falls_with_tolerance_and_steps_adapt(reference):
    errs, counts = [], []
    for tol in (0.5, 0.02):
        peak, events, st = _peaks(solver.build_problem(_model(tolerance=tol)))
        errs.append(np.abs(peak - reference).max())
        counts.append(len(events) - 1)
    assert counts[1] > counts[0]
    assert errs[1] < errs[0]
    assert errs[1] <= 0.02
    # the step grows when the field settles: the largest step is many times the first one
    _, events, _ = _peaks(solver.build_problem(_model(tolerance=0.1)))
    dts = np.array([e[1] for e in events[1:]])
    assert dts.max() >= 8 * dts.min()


def test_lands_on_breakpoints_and_outputs_with_ladder_steps():
    problem = solver.build_problem(_model(tolerance=0.1))
    _, events, st = _peaks(problem, linear_solver="direct")
    times = np.array([e[0] for e in events])
    for t in [2.5, 11.5, 32.5, 41.5, 62.5, 71.5, 40.0, 70.0]:  # pulse edges and table corners
        assert np.min(np.abs(times - t)) < 1e-9, t
    outs = [e[0] for e in events if e[2]]
    np.testing.assert_allclose(outs, np.arange(0.0, 90.1, 10.0), atol=1e-9)
    # with a direct solver every step but rare landing remainders is a rung 0.5·2^k
    dts = np.array([e[1] for e in events[1:]])
    on_ladder = np.isclose(np.log2(dts / 0.5), np.round(np.log2(dts / 0.5)), atol=1e-9)
    assert on_ladder.mean() > 0.9
    assert st.factorizations <= 16


def test_energy_balance_every_step():
    """Heat in = stored + convected out with the scheme's own quadrature, to solver round-off."""
    problem = solver.build_problem(_model(tolerance=0.1))
    _, events, _ = _peaks(problem, linear_solver="direct")
    flows = max(abs(e[4]) for e in events)
    assert max(abs(e[3]) for e in events[1:]) < 1e-8 * flows


def test_multigrid_matches_direct():
    problem = solver.build_problem(_model(tolerance=0.1))
    p_direct, _, _ = _peaks(problem, linear_solver="direct")
    p_mg, _, st = _peaks(problem, linear_solver="multigrid")
    assert st.choice.method == "multigrid"
    assert np.abs(p_direct - p_mg).max() < 0.02


def test_multigrid_halving_toward_a_mark_ends_in_a_landing():
    """Multigrid splits a short gap into two equal steps; the second must land (regression: the
    controller snapped the half step down a rung and halved the remaining gap toward zero)."""
    problem = solver.build_problem(_model(tolerance=0.1))
    _, ev_direct, _ = _peaks(problem, linear_solver="direct")
    _, ev_mg, st = _peaks(problem, linear_solver="multigrid")
    dts = np.array([e[1] for e in ev_mg[1:]])
    # the smallest step is the restart after a load jump, as with the direct solver, not a sliver
    assert dts.min() >= min(e[1] for e in ev_direct[1:]) * (1.0 - 1e-9)
    assert len(ev_mg) <= 2 * len(ev_direct)
    assert st.rejected_steps <= 2 * max(1, st.n_steps // 10)


def test_error_constant_by_taylor_expansion():
    """TR-BDF2 on y' = λy: one step minus e^{λh} = C (λh)³ + O(h⁴) with C = √2/2 − 2/3."""
    z = sympy.symbols("z")
    g = 2 - sympy.sqrt(2)
    d = (1 - g) / (2 - g)
    u_g = (1 + g * z / 2) / (1 - g * z / 2)
    u_1 = (u_g / (g * (2 - g)) - (1 - g) ** 2 / (g * (2 - g))) / (1 - d * z)
    c3 = sympy.series(u_1 - sympy.exp(z), z, 0, 4).removeO().coeff(z, 3)
    assert abs(float(c3) - adaptive.ERROR_CONSTANT) < 1e-15
    assert math.isclose(adaptive.C_STAGE, float(d)) and math.isclose(adaptive.C_STAGE, float(g / 2))


def test_adaptive_key_is_validated():
    with pytest.raises(solver.ModelError) as e:
        _model(tolerance=-1.0)
    assert "run.tolerance_k" in str(e.value)
    with pytest.raises(solver.ModelError) as e:
        _model(tolerance=0.1, scheme="forward-euler")
    assert "run.tolerance_k" in str(e.value)
    # without the key the steps stay fixed
    st = Stepper(solver.build_problem(_model()))
    assert not st.adaptive and st.scheme == "crank-nicolson"
