"""Radiation to the surroundings (``emissivity``, ``surroundings_c`` on a convection entry).

Outside reference: a lumped body (Bi ≪ 0.1) cooling by convection and radiation together,
    ρcV dT/dt = −h A (T − T∞) − ε σ A (T⁴ − T_s⁴)      (T in kelvin),
the radiation law from Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, §1.2.3
(eq. 1.7, and the combined surface energy balance of §1.3), integrated by
scipy.integrate.solve_ivp (Radau, tight tolerances).
"""
import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import solver
from solver.errors import ModelError, SolveError
from solver.fem.radiation import KELVIN, SIGMA
from modelkit import model_dict, part, problem_of

SIDE_MM = 20.0
RHO, CP = 2000.0, 1000.0
H, EPS = 8.0, 0.85
T0, T_AMB, T_SUR = 300.0, 25.0, 5.0


def body(step_s=2.0, duration_s=600.0, scheme="crank-nicolson", method="full", surroundings=T_SUR, **conv_extra):
    mats = {"lumpy": {"conductivity": 1.0e7, "density": RHO, "specific_heat": CP}}
    c = {"name": "all round", "part": "cube", "side": "exposed", "h": H, "emissivity": EPS}
    if surroundings is not None:
        c["surroundings_c"] = surroundings
    c.update(conv_extra)
    d = model_dict([part("cube", "lumpy", (0, 0, 0), (SIDE_MM,) * 3)], materials=mats, convection=[c],
                   cell_mm=5.0, duration_s=duration_s, step_s=step_s, scheme=scheme, mass="lumped",
                   output_every_s=60.0, method=method, ambient_c=T_AMB, initial_c=T0)
    d["mesh"]["tolerance_k"] = None
    return d


def lumped_reference(t_eval, t_sur=T_SUR):
    a = 6 * (SIDE_MM * 1e-3) ** 2
    c = RHO * CP * (SIDE_MM * 1e-3) ** 3

    def rhs(t, y):
        tk = y[0] + KELVIN
        return [(-H * a * (y[0] - T_AMB) - EPS * SIGMA * a * (tk ** 4 - (t_sur + KELVIN) ** 4)) / c]
    sol = solve_ivp(rhs, (0.0, float(t_eval[-1])), [T0], method="Radau", t_eval=t_eval, rtol=1e-12, atol=1e-12)
    return sol.y[0]


def run_outputs(d):
    _, problem = problem_of(d)
    st = solver.Stepper(problem)
    evs = list(st)
    out = [e for e in evs if e.is_output]
    return st, evs, np.array([e.time_s for e in out]), np.array([e.part_max[0] for e in out])


def test_lumped_body_convection_and_radiation_against_solve_ivp():
    st, evs, times, temps = run_outputs(body())
    ref = lumped_reference(times)
    assert np.abs(temps - ref).max() < 0.02, np.abs(temps - ref).max()
    assert temps[-1] < 120.0  # it has cooled a long way: radiation matters here
    # without radiation it would be much hotter: the check can tell radiation is there
    _, _, _, temps_conv = run_outputs(body(surroundings=None, emissivity=None))
    assert temps_conv[-1] - temps[-1] > 20.0
    # energy in = stored + convected + radiated, every step (to the Newton tolerance)
    for ev in evs[1:]:
        assert abs(ev.energy_residual_w) < 1e-6 * max(abs(ev.convected_out_w), 1e-12)
    assert st.method == "full" and st.newton["iterations"] >= len(evs) - 1


def test_crank_nicolson_error_second_order_in_the_step():
    errs = []
    for dt in (8.0, 4.0, 2.0):
        _, _, times, temps = run_outputs(body(step_s=dt, duration_s=240.0))
        errs.append(np.abs(temps - lumped_reference(times)).max())
    order = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    assert order.min() > 1.7, (errs, order)


def test_surroundings_default_to_the_ambient():
    _, _, times, temps = run_outputs(body(surroundings=None, duration_s=240.0))
    assert np.abs(temps - lumped_reference(times, t_sur=T_AMB)).max() < 0.02


def test_reduced_radiative_run_against_solve_ivp():
    """The reduced basis with radiation (projected system, θ steps, Newton) against the same lumped
    ODE as the full system's check."""
    st, evs, times, temps = run_outputs(body(method="reduced"))
    assert st.method == "reduced" and "radiation" in st.scheme
    ref = lumped_reference(times)
    assert np.abs(temps - ref).max() < 0.02, np.abs(temps - ref).max()
    assert st.reduced_info.converged and st.newton["iterations"] >= len(st.steps)
    for ev in evs[1:]:  # in = stored + convected + radiated between events
        assert abs(ev.energy_residual_w) < 1e-6 * max(abs(ev.convected_out_w), 1e-12)


def plate_with_hot_block(method, step_s=10.0, duration_s=600.0):
    """A 40×30×2 mm low-conductivity plate with a pulsed 6×6×2 mm block on it, both radiating
    (ε 0.9, surroundings 0 °C) and convecting (h 5); an invented case for the integrator check."""
    mats = {"plate": {"conductivity": 2.0, "density": 1800.0, "specific_heat": 1000.0},
            "block": {"conductivity": 20.0, "density": 2500.0, "specific_heat": 800.0}}
    conv = [{"name": "plate air", "part": "plate", "side": "exposed", "h": 5.0, "emissivity": 0.9,
             "surroundings_c": 0.0},
            {"name": "block air", "part": "block", "side": "exposed", "h": 5.0, "emissivity": 0.9}]
    loads = [{"part": "block", "profile": {"type": "pulse", "high": 3.0, "low": 0.5, "period_s": 120,
                                           "duty": 0.4, "start_s": 0}}]
    d = model_dict([part("plate", "plate", (0, 0, 0), (40, 30, 2)), part("block", "block", (10, 10, 2), (6, 6, 2))],
                   materials=mats, heat_loads=loads, convection=conv, cell_mm=2.0, duration_s=duration_s,
                   step_s=step_s, scheme="crank-nicolson", mass="lumped", output_every_s=30.0, method=method)
    d["mesh"]["tolerance_k"] = None
    return d


def test_reduced_radiative_bounds_its_own_errors_against_the_semi_discrete_system():
    """Outside reference: scipy's Radau (rtol 1e-10) integrates the same assembled semi-discrete
    system M d' = F(t) − K d − R(d), piece by piece between the load's jumps. The reduced run's
    reported errors (basis estimate + step-halving time error) must bracket its distance from that
    reference at each part's peak, and not by an absurd margin."""
    model, problem = problem_of(plate_with_hot_block("reduced"))
    st = solver.Stepper(problem)
    evs = list(st)
    peak = np.max([e.part_max for e in evs], axis=0)
    rad, m = problem.radiation, problem.lumped
    k = problem.stiffness

    def rhs(t, d):
        return (problem.load(t) - k @ d - rad.node_flow(d, rad.ts4(t))) / m

    def jac(t, d):
        import scipy.sparse as sps
        return sps.diags(1.0 / m) @ (-(k + sps.diags(rad.slope(d))))

    marks = sorted({0.0, float(model.run.duration_s)} | {b.time_s for b in problem.breakpoints(600.0)
                                                         if 0.0 < b.time_s < 600.0})
    d, ref_peak = problem.initial.astype(float), np.full(len(model.parts), -np.inf)
    for a, b in zip(marks[:-1], marks[1:]):
        sol = solve_ivp(lambda t, y: rhs(min(max(t, a + 1e-9), b - 1e-9), y), (a, b), d, method="Radau",
                        jac=jac, rtol=1e-10, atol=1e-10, t_eval=np.linspace(a, b, 41))
        for col in sol.y.T:
            ref_peak = np.maximum(ref_peak, problem.part_nodes.maxima(col))
        d = sol.y[:, -1]
    err = np.abs(peak - ref_peak)
    bound = np.asarray(st.reduced_info.time_error_k) + st.reduced_info.error_estimate_k
    assert np.all(err <= bound), (err, bound)
    assert err.max() > 0.005 and bound.max() < 10.0 * err.max() + 0.02, (err, bound)


def test_reduced_run_whose_iterations_fail_steps_the_full_system_and_says_so(monkeypatch):
    import solver.transient.reduced_radiative as rr

    monkeypatch.setattr(rr, "MAX_ITER", 1)  # no projected step converges in one iteration
    _, problem = problem_of(body(method="reduced", duration_s=120.0))
    st = solver.Stepper(problem)
    evs = list(st)
    assert st.method == "full" and st.newton["relinearisations"] >= 0
    assert any("did not converge" in w and "full system was stepped" in w for w in problem.warnings)
    out = [e for e in evs if e.is_output]
    times, temps = np.array([e.time_s for e in out]), np.array([e.part_max[0] for e in out])
    assert np.abs(temps - lumped_reference(times)).max() < 0.02


def test_full_is_kept_when_asked_and_the_reduced_run_when_it_pays():
    _, problem = problem_of(body(method="full", duration_s=60.0))
    assert solver.Stepper(problem).method == "full"
    _, problem = problem_of(body(method="auto", duration_s=600.0))
    st = solver.Stepper(problem)
    assert st.method == "reduced" and "reduced basis pays" in st.method_choice.reason


def test_superposition_answers_refuse_radiation():
    from solver.answers.unitresponse import require_linear

    with pytest.raises(ModelError) as e:
        require_linear(solver.parse_model(body()))
    assert "convection[0].emissivity" in str(e.value)
    d = body()
    d["run"]["periodic"] = True
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "run.periodic" in str(e.value)


@pytest.mark.parametrize("value, path", [(0.0, "convection[0].emissivity"), (1.2, "convection[0].emissivity"),
                                         ("shiny", "convection[0].emissivity")])
def test_bad_emissivity_names_the_field(value, path):
    d = body()
    d["convection"][0]["emissivity"] = value
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert path in str(e.value)


def test_surroundings_need_an_emissivity_and_sane_values():
    d = body()
    del d["convection"][0]["emissivity"]
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "convection[0].surroundings_c" in str(e.value)
    d = body(surroundings=-300.0)
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "convection[0].surroundings_c" in str(e.value)


def test_failed_iterations_name_the_faces(monkeypatch):
    import solver.fem.radiation as rad

    monkeypatch.setattr(rad, "MAX_ITER", 1)  # no step can converge in one iteration
    _, problem = problem_of(body(duration_s=60.0))
    with pytest.raises(SolveError) as e:
        list(solver.Stepper(problem))
    assert "'all round'" in str(e.value) and "did not converge" in str(e.value)


def test_run_record_states_the_method_and_iterations(tmp_path):
    path = tmp_path / "body.json"
    from solver.run.cli import solve_to_folder

    for method in ("full", "reduced"):
        path.write_text(json.dumps(body(duration_s=120.0, method=method)))
        solve_to_folder(path, tmp_path / method, quiet=True)
        info = json.loads((tmp_path / method / "run.json").read_text())
        assert info["solver"]["method"] == method
        assert info["solver"]["radiation_iterations"]["iterations"] > 0


def test_a_step_tolerance_keeps_fixed_steps_with_radiation():
    d = body(duration_s=120.0)
    d["run"]["tolerance_k"] = 0.1
    _, problem = problem_of(d)
    st = solver.Stepper(problem)
    assert not st.adaptive and st.scheme == "crank-nicolson"
    assert any("run.tolerance_k" in w and "radiation" in w for w in problem.warnings)
    times = [ev.time_s for ev in st]
    assert times[-1] == 120.0
