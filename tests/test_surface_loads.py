"""Surface heat flux loads (``surface_loads``): absorbed flux on a part's side, with a profile.

Outside reference: the semi-infinite solid with a constant surface heat flux q'' from t = 0,
Carslaw & Jaeger, Conduction of Heat in Solids (2nd ed.), §2.9:
    T(x, t) − T₀ = (2q''/k)·√(αt/π)·exp(−x²/4αt) − (q''x/k)·erfc(x / 2√(αt)).
A finite column behaves as the semi-infinite solid while the far face is many penetration
depths √(αt) away.
"""
import numpy as np
import pytest
from scipy.special import erfc

import solver
from solver.errors import ModelError
from modelkit import SLOW, model_dict, part, problem_of, run_all

Q = 1500.0  # W/m² arriving
ALPHA_ABS = 0.6  # absorptivity
DEPTH_MM = 60.0


def semi_infinite_flux(x_m, t_s, q, k=1.0, alpha=1e-6):
    """Carslaw & Jaeger §2.9 (see module doc), K above the initial temperature."""
    s = np.sqrt(alpha * t_s)
    return (2.0 * q / k) * s / np.sqrt(np.pi) * np.exp(-x_m ** 2 / (4 * s * s)) - (q * x_m / k) * erfc(x_m / (2 * s))


def column(cell_mm=0.5, step_s=0.5, duration_s=100.0, flux=None, **extra):
    d = model_dict([part("col", "slow", (0, 0, 0), (1, 1, DEPTH_MM))], materials={"slow": SLOW},
                   cell_mm=cell_mm, duration_s=duration_s, step_s=step_s, scheme="crank-nicolson",
                   mass="consistent", output_every_s=25.0, method="full", initial_c=20.0)
    d["surface_loads"] = [{"name": "sun", "part": "col", "side": "z+", "absorptivity": ALPHA_ABS,
                           "flux_w_m2": flux if flux is not None else {"type": "constant", "value": Q}}]
    d.update(extra)
    return d


def test_plate_under_flux_matches_semi_infinite_solid():
    model, problem = problem_of(column())
    times, fields = run_all(problem)
    z = problem.mesh.nodes[:, 2]
    x = DEPTH_MM * 1e-3 - z  # depth below the heated face, m
    errs = []
    for t, f in zip(times, fields):
        if t < 25.0:
            continue
        exact = semi_infinite_flux(x, t, ALPHA_ABS * Q)
        rise = f - 20.0
        errs.append(np.abs(rise - exact).max() / exact.max())
    assert max(errs) < 0.01, errs  # within 1 % of the surface rise (about 11 K at 100 s)
    # surface rise at 100 s: 2 q'' √(αt/π) / k
    top = np.isclose(z, DEPTH_MM * 1e-3)
    assert fields[-1][top].mean() - 20.0 == pytest.approx(2 * ALPHA_ABS * Q * np.sqrt(1e-4 / np.pi), rel=0.01)


def test_surface_flux_error_falls_with_mesh():
    """Error at the heated face falls under refinement (about second order in h for P1 + CN)."""
    errors = []
    for cell in (2.0, 1.0, 0.5):
        _, problem = problem_of(column(cell_mm=cell, step_s=0.25, duration_s=50.0))
        times, fields = run_all(problem)
        z = problem.mesh.nodes[:, 2]
        top = np.isclose(z, DEPTH_MM * 1e-3)
        exact = semi_infinite_flux(0.0, times[-1], ALPHA_ABS * Q)
        errors.append(abs(fields[-1][top].mean() - 20.0 - exact))
    order = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    assert errors[-1] < errors[0] / 3
    assert order.min() > 1.3, (errors, order)


def test_energy_balance_with_a_table_flux():
    """Absorbed heat = stored heat (adiabatic column), every step, to round-off; the absorbed
    watts are α·A·q''(t) (the face is 1 mm × 1 mm)."""
    flux = {"type": "table", "points": [[0, 0], [40, 2000], [80, 500]]}
    model, problem = problem_of(column(cell_mm=1.0, duration_s=100.0, step_s=1.0, flux=flux))
    area = 1e-6
    evs = list(solver.Stepper(problem))
    for ev in evs[1:]:
        assert abs(ev.energy_residual_w) <= 1e-9 * max(abs(ev.heat_in_w), 1e-12)
    # heat in at t = 40 s is α A q''
    assert problem.heat_input(40.0) == pytest.approx(ALPHA_ABS * area * 2000.0)
    stored = float(problem.lumped @ (evs[-1].field - 20.0))
    absorbed = ALPHA_ABS * area * (0.5 * 40 * 2000 + 0.5 * 40 * (2000 + 500) + 20 * 500)
    assert stored == pytest.approx(sum(ev.heat_in_w * ev.dt for ev in evs[1:]), rel=1e-9)
    # the damped start (two backward-Euler half steps) takes the ramp's end value: 1e-4 off the integral
    assert stored == pytest.approx(absorbed, rel=1e-3)


def test_reduced_method_carries_the_surface_load():
    """The surface load is one more load shape: the reduced basis reproduces the stepped run."""
    d = column(cell_mm=1.0, duration_s=100.0, step_s=1.0)
    d["convection"] = [{"name": "back", "part": "col", "side": "z-", "h": 50.0}]
    d["run"]["method"] = "full"
    _, p_full = problem_of(d)
    full = list(solver.Stepper(p_full))
    d["run"]["method"] = "reduced"
    _, p_red = problem_of(d)
    st = solver.Stepper(p_red)
    assert st.method == "reduced"
    red = [ev for ev in st if ev.is_output]
    full_out = [ev for ev in full if ev.is_output]
    assert [e.time_s for e in red] == [e.time_s for e in full_out]
    diff = max(float(np.abs(a.part_max - b.part_max).max()) for a, b in zip(red, full_out))
    assert diff < 0.2  # the reduced basis integrates exactly in time; CN with 1 s steps differs slightly


def test_bad_surface_load_input_names_the_field():
    d = column()
    d["surface_loads"][0]["absorptivity"] = 1.5
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "surface_loads[0].absorptivity" in str(e.value)
    d = column(flux={"type": "constant", "value": -5.0})
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "surface_loads[0].flux_w_m2" in str(e.value)
    d = column()
    d["surface_loads"][0]["part"] = "nothing"
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "surface_loads[0].part" in str(e.value)
    d = column(flux="sunny")
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "surface_loads[0].flux_w_m2" in str(e.value)
