"""Reduced-basis runs (run.method = "reduced") against outside references.

* The phi functions against their integral definition, evaluated by scipy's ``quad``
  (φ_k(x) = ∫₀¹ e^{−x(1−θ)} θ^{k−1}/(k−1)! dθ; Hochbruck & Ostermann, "Exponential integrators",
  Acta Numerica 19 (2010), eq. 2.10, written here in decaying form).
* Exact modal integration against scipy's ``solve_ivp`` (Radau, rtol 1e-11).
* Peaks of a reduced run against a converged fixed-step Crank–Nicolson run of the full system
  (step ~100× below the load time scale; halving it moves peaks by < 5 mK, checked).
Invented scenario: a copper tab with a power die and a warm-up heater, a part with its own
initial temperature, and an ambient that follows a table.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp

import solver
from solver.linalg import linsolve
from solver.transient import reduced
from solver.errors import Cancelled, ModelError
from solver.transient.krylov import KrylovBasis, mass_times
from solver.transient.modal import ModalSystem, phi_functions
from solver.transient.stepping import Stepper


def _model_dict(method="reduced", tolerance=0.05, step_s=0.5, mass="lumped", duration=120.0):
    run = {"duration_s": duration, "step_s": step_s, "scheme": "crank-nicolson", "mass": mass,
           "output_every_s": 10.0, "method": method}
    if tolerance is not None:
        run["tolerance_k"] = tolerance
    return {
        "format": "thermgui-model", "version": 1, "title": "reduced-basis check (invented)",
        "ambient_c": 22.0, "initial_c": 22.0,
        "parts": [
            {"name": "tab", "material": "copper", "origin_mm": [0, 0, 0], "size_mm": [20, 12, 1.5]},
            {"name": "carrier", "material": "pcb-4layer-effective", "origin_mm": [2, 2, 1.5], "size_mm": [12, 8, 1.2],
             "initial_c": 35.0},
            {"name": "die", "material": "silicon", "origin_mm": [5, 4, 2.7], "size_mm": [4, 4, 0.5], "rated_c": 60.0},
        ],
        "heat_loads": [
            {"part": "die", "profile": {"type": "pulse", "high": 5.0, "low": 0.4, "period_s": 40, "duty": 0.3,
                                        "start_s": 5}},
            {"part": "carrier", "profile": {"type": "table", "points": [[0, 0.0], [30, 1.2], [90, 0.3]]}},
        ],
        "convection": [
            {"name": "under", "part": "tab", "side": "z-", "h": 40.0,
             "ambient_c": {"type": "table", "points": [[0, 22.0], [60, 30.0]]}},
            {"name": "die top", "part": "die", "side": "z+", "h": 12.0},
        ],
        "mesh": {"cell_mm": 2.0, "min_layers": 1},
        "run": run,
    }


def _run(d, **kw):
    p = solver.build_problem(solver.parse_model(d))
    st = Stepper(p, **kw)
    rec = solver.RunRecorder(p, keep_fields=False)
    for ev in st:
        rec.add(ev)
    return p, st, rec


def _peaks(rec):
    return np.array([r.peak_c for r in rec.peak_rows()])


@pytest.fixture(scope="module")
def converged():
    """Peaks and output history of the full system, fixed-step Crank–Nicolson, converged in the step."""
    _, _, fine = _run(_model_dict(method="full", tolerance=None, step_s=0.05))
    _, _, half = _run(_model_dict(method="full", tolerance=None, step_s=0.1))
    assert np.abs(_peaks(fine) - _peaks(half)).max() < 5e-3  # the reference no longer moves with the step
    return fine


@pytest.mark.parametrize("x", [0.0, 1e-9, 1e-4, 0.0099, 0.0101, 0.3, 2.0, 40.0])
def test_phi_functions_match_their_integral_definition(x):
    got = phi_functions(np.array([x]))
    for k, val in enumerate(got, start=1):
        ref = quad(lambda th: math.exp(-x * (1 - th)) * th ** (k - 1) / math.factorial(k - 1), 0, 1,
                   epsabs=1e-15, epsrel=1e-13)[0]
        assert val[0] == pytest.approx(ref, rel=1e-10, abs=1e-15)


def test_modal_integration_is_exact_for_piecewise_linear_loads():
    rng = np.random.default_rng(7)
    a = rng.normal(size=(5, 5))
    k_r = a @ a.T + np.diag([0.0, 0.01, 0.5, 3.0, 40.0])  # stiff and slow modes together
    b_r = rng.normal(size=(5, 2))
    q0 = rng.normal(size=5)
    t = np.array([0.0, 0.7, 2.0, 2.0 + 1e-3, 5.0])
    c_knots = np.array([[1.0, 0.0], [2.0, -1.0], [0.5, 3.0], [0.0, 0.0], [4.0, 1.0]])
    sysm = ModalSystem(k_r, b_r, q0)
    c0, c1 = c_knots[:-1], c_knots[1:]  # linear on each interval (continuous here)
    z, zint = sysm.propagate(t[:-1], t[1:], c0, c1)
    q = sysm.coordinates(z)

    def rhs(tt, y):
        c = np.array([np.interp(tt, t, c_knots[:, j]) for j in range(2)])
        return -k_r @ y + b_r @ c

    sol = solve_ivp(rhs, (0, t[-1]), q0, method="Radau", t_eval=t, rtol=1e-11, atol=1e-12, dense_output=True,
                    first_step=1e-4, max_step=0.05)
    np.testing.assert_allclose(q, sol.y, rtol=1e-7, atol=1e-8)
    for k in range(len(t) - 1):  # the interval integrals, against quadrature of the ODE solution
        ref = np.array([quad(lambda s: sol.sol(s)[i], t[k], t[k + 1], epsabs=1e-12)[0] for i in range(5)])
        np.testing.assert_allclose(sysm.coordinates(zint[:, k]), ref, rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize("mass", ["lumped", "consistent"])
def test_basis_is_capacity_orthonormal_and_holds_uniform_and_initial_fields(mass):
    p = solver.build_problem(solver.parse_model(_model_dict(mass=mass)))
    basis = KrylovBasis(p, 0.05, method="superlu", max_columns=40)
    for _ in range(3):
        basis.grow()
    v = basis.V
    basis.close()
    np.testing.assert_allclose(v.T @ mass_times(p, v), np.eye(v.shape[1]), atol=1e-10)
    for field in (np.ones(p.n_nodes), p.initial):
        coef = v.T @ mass_times(p, field)
        np.testing.assert_allclose(v @ coef, field, atol=1e-9 * np.abs(field).max())


@pytest.mark.parametrize("tolerance", [0.2, 0.05, 0.01])
def test_reduced_peaks_stay_within_tolerance_of_converged_full_run(converged, tolerance):
    p, st, rec = _run(_model_dict(tolerance=tolerance))
    assert st.method == "reduced" and st.reduced_info.converged
    assert st.reduced_info.error_estimate_k <= tolerance
    err = np.abs(_peaks(rec) - _peaks(converged))
    assert err.max() <= tolerance, (err, st.reduced_info.describe())
    # outputs: every output time is an event, and the part maxima there agree as well
    t_ref, pmax_ref, _ = converged.history_arrays()
    t_red, pmax_red, _ = rec.history_arrays()
    np.testing.assert_allclose(t_red, t_ref)
    assert np.abs(pmax_red - pmax_ref).max() <= tolerance
    # the global heat balance holds to round-off between events
    assert rec.relative_energy_residual < 1e-9
    # the die crosses its rating: the first time over is bracketed by events one sample apart
    die = [r for r in rec.peak_rows() if r.part == "die"][0]
    die_ref = [r for r in converged.peak_rows() if r.part == "die"][0]
    assert die.status == "over" and die_ref.status == "over"
    assert abs(die.first_over_s - die_ref.first_over_s) <= 0.5


def test_reduced_run_on_a_single_precision_factorization(converged):
    """Basis directions from a single-precision factorization (no refinement: the projection is
    exact on whatever the basis spans, and the error check judges the result) still give peaks
    within the tolerance of the converged full run."""
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    p, st, rec = _run(_model_dict(tolerance=0.05), linear_solver="pardiso-single")
    assert st.choice.method == "pardiso-single" and st.method == "reduced" and st.reduced_info.converged
    assert np.abs(_peaks(rec) - _peaks(converged)).max() <= 0.05


def test_consistent_capacity_reduced_run_matches_full_run():
    _, _, full = _run(_model_dict(method="full", tolerance=None, step_s=0.05, mass="consistent"))
    _, st, red = _run(_model_dict(tolerance=0.05, mass="consistent"))
    assert st.method == "reduced"
    assert np.abs(_peaks(red) - _peaks(full)).max() <= 0.05


def test_unreachable_tolerance_falls_back_to_the_full_system(monkeypatch):
    monkeypatch.setattr(reduced, "MAX_BLOCKS", reduced.MIN_BLOCKS + 1)
    monkeypatch.setattr(reduced, "DEFAULT_TOLERANCE_K", 1e-12)
    p, st, rec = _run(_model_dict(tolerance=None, step_s=1.0, duration=40.0))
    assert st.method == "full" and not st.reduced_info.converged
    assert any("stepped instead" in w for w in p.warnings)
    _, _, full = _run(_model_dict(method="full", tolerance=None, step_s=1.0, duration=40.0))
    np.testing.assert_allclose(_peaks(rec), _peaks(full), atol=1e-9)


def test_cancel_while_building_the_basis():
    p = solver.build_problem(solver.parse_model(_model_dict()))
    st = Stepper(p, cancel=lambda: True)
    with pytest.raises(Cancelled):
        list(st)


def test_method_is_validated_with_its_field_path():
    d = _model_dict()
    d["run"]["method"] = "quick"
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "run.method" in e.value.describe()


def test_error_sweep_in_single_precision_matches_double():
    """The basis-error estimate's sweep over every node picks rows in single precision but reports
    a double-precision value: it equals the brute-force double maximum (to round-off) on random
    data, including a spike on one node at one coarse sample."""
    from solver.transient.reduced import estimate_error

    rng = np.random.default_rng(7)
    n, r, samples = 20_000, 12, 90
    v = np.asfortranarray(rng.standard_normal((n, r)))
    q_big = rng.standard_normal((r, samples)) * 30.0
    q_small = q_big[:8] + 1e-3 * rng.standard_normal((8, samples))
    nodes = np.array([3, 50, 700])
    coarse = np.arange(0, samples, 3)
    dq = q_big.copy()
    dq[:8] -= q_small
    exact = max(np.abs(v[nodes] @ dq).max(), np.abs(v @ dq[:, coarse]).max())
    got = estimate_error(v, q_big, q_small, nodes, coarse)
    assert got == pytest.approx(exact, rel=1e-12)
    v[12_345] *= 40.0  # one node far off: the sweep must find it
    exact = max(np.abs(v[nodes] @ dq).max(), np.abs(v @ dq[:, coarse]).max())
    assert estimate_error(v, q_big, q_small, nodes, coarse) == pytest.approx(exact, rel=1e-12)
    assert estimate_error(v, q_big, q_small, nodes) == pytest.approx(np.abs(v[nodes] @ dq).max(), rel=1e-12)
