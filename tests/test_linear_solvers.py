"""Linear solvers for the step matrix, and the automatic choice between them.

Reference: scipy's general sparse solver (``spsolve``) on the same matrix.
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse.linalg as spla

import solver
from solver.linalg import linsolve
from solver.transient.stepping import Stepper


def _problem(mass="lumped"):
    d = {
        "format": "thermgui-model", "version": 1, "title": "solver check (invented)",
        "parts": [
            {"name": "plate", "material": "aluminium-6061", "origin_mm": [0, 0, 0], "size_mm": [30, 20, 3]},
            {"name": "board", "material": "pcb-4layer-effective", "origin_mm": [2, 2, 3], "size_mm": [26, 16, 1.6]},
            {"name": "chip", "material": "mould-compound", "origin_mm": [10, 6, 4.6], "size_mm": [6, 6, 1.2]},
        ],
        "heat_loads": [{"part": "chip", "profile": {"type": "pulse", "high": 3.0, "low": 0.2, "period_s": 8,
                                                    "duty": 0.5}}],
        "convection": [{"name": "below", "part": "plate", "side": "z-", "h": 25.0}],
        "mesh": {"cell_mm": 1.5, "min_layers": 2},
        "run": {"duration_s": 12, "step_s": 0.5, "scheme": "crank-nicolson", "mass": mass, "output_every_s": 4},
    }
    return solver.build_problem(solver.parse_model(d))


@pytest.fixture(scope="module")
def system():
    p = _problem()
    a = p.step_matrix(0.7, 1.0)
    b = p.lumped / 0.7 * 40.0 + p.load(1.0)
    return p, a, b, spla.spsolve(a.tocsc(), b)


@pytest.mark.parametrize("method", ["pardiso", "pardiso-single", "superlu", "multigrid"])
def test_each_solver_matches_spsolve(system, method):
    p, a, b, ref = system
    if method.startswith("pardiso") and not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    s = linsolve.make_solver(a, method, upper=p.pattern.upper())
    x = s.solve(b)
    assert np.abs(x - ref).max() < 1e-8 * np.abs(ref).max()
    s.close()


def test_pardiso_several_right_hand_sides_without_refinement(system):
    """Several right-hand sides in one call match spsolve column by column, and PARDISO performed
    no iterative refinement steps (iparm(7) reports them; refinement would triple each solve)."""
    p, a, b, ref = system
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    rhs = np.column_stack([b, p.lumped, np.sin(np.arange(p.n_nodes))])
    s = linsolve.make_solver(a, "pardiso", upper=p.pattern.upper())
    x = s.solve(rhs)
    assert s.ps.get_iparm(7) == 0
    s.close()
    for j in range(rhs.shape[1]):
        r = spla.spsolve(a.tocsc(), rhs[:, j])
        assert np.abs(x[:, j] - r).max() < 1e-10 * np.abs(r).max()


def test_multigrid_warm_start_and_nearby_matrix(system):
    p, a, b, ref = system
    s = linsolve.MultigridCGSolver(a)
    s.solve(b)
    cold = s.iterations
    s.solve(b, x0=ref + 1e-6)
    assert s.iterations < cold  # the previous answer as the start saves iterations
    # a neighbouring step size reuses the hierarchy as preconditioner
    a2 = p.step_matrix(0.9, 1.0)
    b2 = p.lumped / 0.9 * 40.0 + p.load(1.0)
    x2 = s.solve(b2, a=a2)
    ref2 = spla.spsolve(a2.tocsc(), b2)
    assert np.abs(x2 - ref2).max() < 1e-8 * np.abs(ref2).max()


def test_automatic_choice_and_reason(monkeypatch):
    gb = 1024**3
    small = linsolve.choose_method(20_000, available_bytes=16 * gb)
    assert small.method == ("pardiso" if linsolve.have_pardiso() else "multigrid") and "nodes" in small.reason
    big = linsolve.choose_method(2_000_000, available_bytes=16 * gb)
    assert big.method == "multigrid" and "not fit" in big.reason
    assert linsolve.choose_method(200_000, adaptive=True, available_bytes=16 * gb).method == "multigrid"
    # memory decides: the same size on a small machine goes iterative
    assert linsolve.choose_method(150_000, available_bytes=1 * gb).method == "multigrid"
    assert linsolve.choose_method(150_000, requested="direct").method in ("pardiso", "superlu")
    assert linsolve.choose_method(150_000, requested="multigrid").method == "multigrid"
    monkeypatch.setattr(linsolve, "have_pardiso", lambda: False)
    assert linsolve.choose_method(20_000, available_bytes=16 * gb).method == "multigrid"
    monkeypatch.setattr(linsolve, "have_pyamg", lambda: False)
    last = linsolve.choose_method(20_000, available_bytes=16 * gb)
    assert last.method == "superlu" and "last resort" in last.reason or "SuperLU" in last.reason
    with pytest.raises(ValueError):
        linsolve.choose_method(10, requested="magic")


def test_single_precision_factor_is_refined_in_double(system):
    """The single-precision factor alone leaves a residual far above double round-off; refinement
    against the double matrix brings the solution to spsolve's within 1e-6 K (its stopping rule)."""
    p, a, b, ref = system
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    raw = linsolve.make_solver(a, "pardiso-single", upper=p.pattern.upper(), refine=False)
    x_raw = raw.solve(b)
    raw.close()
    s = linsolve.make_solver(a, "pardiso-single", upper=p.pattern.upper())
    x = s.solve(b)
    s.close()
    assert np.linalg.norm(a @ x_raw - b) > 1e-9 * np.linalg.norm(b)  # single precision really was used
    assert 1 <= s.iterations <= 3
    assert np.abs(x - ref).max() < 1e-6
    assert np.abs(x - ref).max() < 1e-3 * np.abs(x_raw - ref).max()


def test_single_precision_factor_too_inexact_for_refinement_falls_back_to_cg(system, monkeypatch):
    """When plain refinement would not contract (a factor made deliberately poor here: every
    solve scaled by 0.3, so each refinement removes only 30 % of the error), the solver switches
    to CG preconditioned by the factor and still reaches spsolve's solution."""
    p, a, b, ref = system
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    s = linsolve.make_solver(a, "pardiso-single", upper=p.pattern.upper())
    exact = s._solve
    monkeypatch.setattr(s, "_solve", lambda rhs: 0.3 * exact(rhs))
    x = s.solve(b)
    s.close()
    assert np.abs(x - ref).max() < 1e-6
    assert s.iterations >= 2


def test_choice_with_measured_factor_size():
    """PARDISO's analysis of the real pattern replaces the worst-case estimate: double precision
    when the factors are small, single precision (half the memory) up to the budget, multigrid
    beyond; several step matrices count together."""
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    gb = 1024**3
    avail = 16 * gb
    assert linsolve.choose_method(200_000, factor_bytes=0.3e9, available_bytes=avail).method == "pardiso"
    mid = linsolve.choose_method(1_000_000, factor_bytes=2.2e9, available_bytes=avail)
    assert mid.method == "pardiso-single" and "measured" in mid.reason and "single precision" in mid.reason
    # three such factors (6.6 GB, 3.3 GB in single precision) fit DIRECT_MAX_BYTES (4 GB); four do not
    assert linsolve.choose_method(1_000_000, factor_bytes=2.2e9, available_bytes=avail,
                                  matrices=3).method == "pardiso-single"
    assert linsolve.choose_method(1_000_000, factor_bytes=2.2e9, available_bytes=avail,
                                  matrices=4).method == "multigrid"
    assert linsolve.choose_method(200_000, factor_bytes=0.3e9, available_bytes=avail, matrices=2).method == "pardiso"
    assert linsolve.choose_method(1_000_000, factor_bytes=10e9, available_bytes=avail).method == "multigrid"
    # a short run does not repay a large single-precision factorization
    short = linsolve.choose_method(1_000_000, factor_bytes=2.2e9, available_bytes=avail, steps=10)
    assert short.method == "multigrid" and "10 steps" in short.reason
    assert linsolve.choose_method(1_000_000, factor_bytes=2.2e9, available_bytes=avail,
                                  steps=500).method == "pardiso-single"
    # the analysis is only worth running where the estimate alone would not pick double precision
    assert not linsolve.needs_analysis(20_000)
    assert linsolve.needs_analysis(1_000_000, available_bytes=avail)
    assert not linsolve.needs_analysis(1_000_000, requested="multigrid")
    assert not linsolve.needs_analysis(1_000_000, adaptive=True)


def test_stepper_measures_the_factor_and_picks_single_precision(monkeypatch):
    """The wiring end to end, with the limits shrunk to this small model's size: the worst-case
    estimate rules out double precision, so the stepper asks PARDISO's analysis, picks single
    precision refined in double, and the run matches SuperLU's at every output."""
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    p = _problem()
    measured = linsolve.pardiso_factor_bytes(p.step_matrix(1.0, 1.0), p.pattern.upper())
    monkeypatch.setattr(linsolve, "FACTOR_BYTES_AT_1M", 1e15)  # the estimate alone: far too big
    monkeypatch.setattr(linsolve, "DOUBLE_FACTOR_MAX_BYTES", 0.5 * measured)
    monkeypatch.setattr(linsolve, "DIRECT_MAX_BYTES", 10 * measured)
    monkeypatch.setattr(linsolve, "SINGLE_MIN_STEPS", 1)  # this run has only a few dozen steps
    st = Stepper(p)
    assert st.choice.method == "pardiso-single" and "measured" in st.choice.reason
    fields = np.array([ev.field.copy() for ev in st])
    ref = np.array([ev.field.copy() for ev in Stepper(p, linear_solver="superlu")])
    np.testing.assert_allclose(fields, ref, atol=1e-6, rtol=0)
    # and beyond what even single precision may use: multigrid
    monkeypatch.setattr(linsolve, "DIRECT_MAX_BYTES", 0.1 * measured)
    assert Stepper(p).choice.method == "multigrid"


def test_analysis_reports_the_factor_size(system):
    """PARDISO's analysis phase (used to choose the solver) gives an upper figure for the factor."""
    p, a, b, ref = system
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    measured = linsolve.pardiso_factor_bytes(a, p.pattern.upper())
    s = linsolve.make_solver(a, "pardiso", upper=p.pattern.upper())
    nnz_factor = int(s.ps.get_iparm(18))  # non-zeros in the factor, reported by the factorization
    assert nnz_factor > a.nnz // 2
    # the analysis' figure covers the factor's values and what the factorization then reports
    assert measured >= max(8 * nnz_factor, s.factor_bytes())
    s.close()


@pytest.mark.parametrize("mass", ["lumped", "consistent"])
def test_stepper_results_agree_across_solvers(mass):
    p = _problem(mass)
    fields = {}
    for method in ("superlu", "pardiso", "pardiso-single", "multigrid"):
        if method.startswith("pardiso") and not linsolve.have_pardiso():
            continue
        st = Stepper(p, linear_solver=method)
        assert st.choice.method == method and st.choice.reason
        fields[method] = np.array([np.array(ev.field) for ev in st])
    ref = fields.pop("superlu")
    for method, f in fields.items():
        assert np.abs(f - ref).max() < 1e-6, method


@pytest.mark.parametrize("mass", ["lumped", "consistent"])
def test_fixed_step_run_with_multigrid_matches_direct_solver(mass):
    """Every step of a Crank–Nicolson run (pulse load: jumps, start-up half steps, equal steps in
    between, where multigrid starts from the extrapolated field) against the direct solver; the
    single-precision hierarchy is only a preconditioner, so CG still meets its double tolerance."""
    p = _problem(mass)
    fields = {}
    for method in ("superlu", "multigrid"):
        fields[method] = np.array([ev.field.copy() for ev in Stepper(p, linear_solver=method)])
    assert fields["multigrid"].shape == fields["superlu"].shape and len(fields["superlu"]) > 20
    np.testing.assert_allclose(fields["multigrid"], fields["superlu"], atol=1e-6, rtol=0)


def _cube_laplacian(n: int):
    """7-point Laplacian on an n³ grid plus a small shift (SPD), for factor-size growth checks."""
    import scipy.sparse as sp

    eye = sp.identity(n)
    d = sp.diags([-1.0, 2.0, -1.0], [-1, 0, 1], shape=(n, n))
    return (sp.kron(sp.kron(d, eye), eye) + sp.kron(sp.kron(eye, d), eye) + sp.kron(sp.kron(eye, eye), d)
            + 0.01 * sp.identity(n ** 3)).tocsr()


def test_factor_size_scaled_from_a_smaller_mesh_covers_the_measured_one():
    """A factor size predicted from a smaller mesh by N^(4/3) growth (nested dissection on 3D grids,
    George 1973, from memory) plus its margin covers what PARDISO measures on the larger mesh, and
    is not wildly above it; a single-precision factor counts double."""
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    small, large = _cube_laplacian(24), _cube_laplacian(34)
    s = linsolve.make_solver(small, "pardiso-single", refine=False)
    d = linsolve.make_solver(small, "pardiso")
    try:
        single, double = linsolve.measured_double_factor_bytes(s), linsolve.measured_double_factor_bytes(d)
        # the single factor's bytes, doubled: a little above the double factor's (its fixed share is not
        # halved), which errs on the safe side
        assert 0.9 * double <= single <= 1.5 * double
    finally:
        s.close()
        d.close()
    predicted = linsolve.scaled_factor_bytes(double, small.shape[0], large.shape[0])
    measured = linsolve.pardiso_factor_bytes(large)
    assert measured <= predicted <= 2.0 * measured
    assert linsolve.measured_double_factor_bytes(linsolve.make_solver(small, "superlu")) is None


def test_stepper_uses_a_predicted_factor_size_instead_of_the_analysis(monkeypatch):
    """With a factor size handed on from the previous mesh level, the stepper makes no PARDISO
    analysis, says where the size came from, and records the factor it then makes."""
    if not linsolve.have_pardiso():
        pytest.skip("pypardiso not installed")
    import solver.transient.stepping as stepping

    p = _problem()
    measured = linsolve.pardiso_factor_bytes(p.step_matrix(1.0, 1.0), p.pattern.upper())
    monkeypatch.setattr(linsolve, "FACTOR_BYTES_AT_1M", 1e15)
    monkeypatch.setattr(linsolve, "DOUBLE_FACTOR_MAX_BYTES", 0.5 * measured)
    monkeypatch.setattr(linsolve, "DIRECT_MAX_BYTES", 10 * measured)
    monkeypatch.setattr(linsolve, "SINGLE_MIN_STEPS", 1)

    def no_analysis(*a, **k):
        raise AssertionError("the analysis ran although a factor size was handed on")

    monkeypatch.setattr(stepping, "pardiso_factor_bytes", no_analysis)
    st = Stepper(p, factor_bytes_hint=measured)
    assert st.choice.method == "pardiso-single"
    assert "scaled from the previous mesh's factor" in st.choice.reason
    for _ in st:
        pass
    assert st.factor_bytes_measured is not None and st.factor_bytes_measured > 0
