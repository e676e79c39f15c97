"""Energy bookkeeping, profile semantics (NOTES.md §3), heat-load spreading and probe interpolation.

Outside references: conservation of energy (heat in = heat stored + heat convected out);
box geometry arithmetic (volumes, areas, centroids); the closed-form integral of a square
wave; and the fact that P1 interpolation reproduces linear fields exactly (common practice,
no source).
"""
from __future__ import annotations

import math

import numpy as np
import pytest

import solver
from modelkit import model_dict, part, problem_of
from solver import RunRecorder, Stepper
from solver.mesh.mesher import MM
from solver.model.modelfile import PulseProfile, StepProfile, TableProfile
from solver.model.profiles import make_profile

PULSE = {"type": "pulse", "high": 4.0, "low": 0.5, "period_s": 7.0, "duty": 0.3, "start_s": 2.5}


def _energy_model(scheme: str, mass: str, step: float = 0.5, slow: bool = False) -> dict:
    """Three parts, a square-wave and a ramp load, a ramped ambient. ``slow``: plastics, so that
    forward Euler's stability limit allows steps of a few hundredths of a second."""
    mats = ("potting-epoxy", "mould-compound", "abs") if slow else ("aluminium-6061", "silicon", "fr4-bare")
    die_h = 2.0 if slow else 1.0
    return model_dict([part("base", mats[0], (0, 0, 0), (16, 12, 2)),
                       part("die", mats[1], (5, 4, 2), (5, 4, die_h)),
                       part("lid", mats[2], (0, 0, 6), (16, 12, 1.5))],
                      heat_loads=[{"part": "die", "profile": PULSE},
                                  {"part": "lid", "profile": {"type": "table", "points": [[0, 0.0], [9, 1.0]]}}],
                      convection=[{"name": "under", "part": "base", "side": "z-", "h": 150.0,
                                   "ambient_c": {"type": "table", "points": [[0, 25.0], [10, 40.0]]}},
                                  {"name": "lid top", "part": "lid", "side": "z+", "h": 12.0}],
                      cell_mm=2.0, duration_s=20.0, step_s=step, scheme=scheme, mass=mass, output_every_s=5.0,
                      initial_c=60.0 if slow else 25.0)


def _pulse_energy(t_end: float) -> float:
    """∫₀^t_end P dt of the square wave in closed form (J)."""
    p = PULSE
    on = p["duty"] * p["period_s"]
    total = p["low"] * min(t_end, p["start_s"])
    t = p["start_s"]
    while t < t_end:
        high_end = min(t + on, t_end)
        period_end = min(t + p["period_s"], t_end)
        total += p["high"] * (high_end - t) + p["low"] * (period_end - high_end)
        t += p["period_s"]
    return total


@pytest.mark.parametrize("scheme,mass", [("backward-euler", "consistent"), ("backward-euler", "lumped"),
                                         ("crank-nicolson", "consistent"), ("crank-nicolson", "lumped"),
                                         ("forward-euler", "lumped")])
def test_energy_balance_every_step(scheme, mass):
    slow = scheme == "forward-euler"
    step = 0.5
    if slow:
        _, trial = problem_of(_energy_model("backward-euler", "lumped", slow=True))
        n = math.ceil(1.0 / (0.9 * solver.critical_step(trial)))
        step = 1.0 / n  # 1 s is a multiple: every edge and output still lands
    model, problem = problem_of(_energy_model(scheme, mass, step, slow))
    rec = RunRecorder(problem)
    d0 = problem.initial.copy()
    for ev in Stepper(problem):
        rec.add(ev)
    assert rec.relative_energy_residual < 1e-9
    e = rec.energy
    assert abs(e["in_j"] - e["out_j"] - e["stored_j"]) < 1e-9 * e["in_j"]
    # stored heat = Σ ρc ∫ (T_end − T_0) dV, with ∫ Nᵢ dV = lumped row sums / ρc for P1
    assert e["stored_j"] == pytest.approx(float(problem.lumped @ (ev.field - d0)), rel=1e-9)
    # heat in: the square wave is integrated exactly (edges landed); the ramp by the step
    # quadrature (trapezoid for Crank–Nicolson, but the damped start-up steps are backward Euler)
    ramp = 4.5 + 11.0  # ∫ of the 0→1 W ramp over 9 s, then 1 W held to 20 s
    assert e["in_j"] == pytest.approx(_pulse_energy(20.0) + ramp, rel=2e-3 if scheme == "crank-nicolson" else 2e-2)
    # heat did leave and the stored heat changed (a non-trivial balance)
    assert e["out_j"] > 0.05 * e["in_j"] and abs(e["stored_j"]) > 0.05 * e["in_j"]


def test_square_wave_energy_exact_for_every_scheme():
    """Piecewise-constant watts with landed edges: the step quadrature is exact for any θ."""
    for scheme in ("backward-euler", "crank-nicolson"):
        d = _energy_model(scheme, "lumped")
        d["heat_loads"] = d["heat_loads"][:1]
        _, problem = problem_of(d)
        rec = RunRecorder(problem)
        for ev in Stepper(problem):
            rec.add(ev)
        assert rec.energy["in_j"] == pytest.approx(_pulse_energy(20.0), rel=1e-12)


def test_capacity_and_convection_against_geometry():
    model, problem = problem_of(_energy_model("backward-euler", "lumped"))
    table = model.material_table()
    heat_cap = sum(table[p.material].volumetric_heat_capacity * np.prod(p.size_mm) * MM**3 for p in model.parts)
    assert problem.lumped.sum() == pytest.approx(heat_cap, rel=1e-12)
    # a uniform 60 °C field at t = 0 loses h·A·(60 − T_amb) through each entry
    d = np.full(problem.n_nodes, 60.0)
    expected = 150.0 * 16 * 12 * MM**2 * (60.0 - 25.0) + 12.0 * 16 * 12 * MM**2 * (60.0 - 25.0)
    assert problem.convected_out(d, 0.0) == pytest.approx(expected, rel=1e-12)
    # at t = 10 s the first ambient is 40 °C
    expected10 = 150.0 * 16 * 12 * MM**2 * (60.0 - 40.0) + 12.0 * 16 * 12 * MM**2 * (60.0 - 25.0)
    assert problem.convected_out(d, 10.0) == pytest.approx(expected10, rel=1e-12)


# ---------------------------------------------------------------- profiles
def test_pulse_edges_are_landed_exactly():
    _, problem = problem_of(_energy_model("crank-nicolson", "lumped", step=0.45))
    ends = np.array([s.t1 for s in Stepper(problem).steps])
    p = PULSE
    edges = []
    for k in range(10):
        t0 = p["start_s"] + k * p["period_s"]
        for t in (t0, t0 + p["duty"] * p["period_s"]):
            if 0 < t < 20.0:
                edges.append(t)
    assert len(edges) >= 5
    for t in edges:
        assert np.min(np.abs(ends - t)) < 1e-12, f"edge {t} s not landed"
    # steps never exceed the nominal step and tile [0, duration] without gaps
    steps = Stepper(problem).steps
    assert max(s.dt for s in steps) <= 0.45 + 1e-12
    assert steps[0].t0 == 0.0 and steps[-1].t1 == 20.0
    assert all(abs(a.t1 - b.t0) < 1e-12 for a, b in zip(steps[:-1], steps[1:]))


def test_pulse_one_sided_values():
    f = make_profile(PulseProfile(type="pulse", high=4.0, low=0.5, period_s=7.0, duty=0.3, start_s=2.5))
    assert f.value(0.0) == 0.5 and f.value(2.4) == 0.5  # low before start
    assert f.value(2.5, "left") == 0.5 and f.value(2.5, "right") == 4.0  # rising edge at start
    off = 2.5 + 0.3 * 7.0
    assert f.value(off, "left") == 4.0 and f.value(off, "right") == 0.5  # high on [start, start + duty·period)
    assert f.value(9.5, "left") == 0.5 and f.value(9.5, "right") == 4.0  # next period starts high
    assert f.value(9.5 + 2.0) == 4.0 and f.value(9.5 + 2.2) == 0.5
    # duty 1: always high after the start, one edge only
    g = make_profile(PulseProfile(type="pulse", high=3.0, low=1.0, period_s=5.0, duty=1.0, start_s=1.0))
    assert g.value(1.0, "left") == 1.0 and g.value(1.0) == 3.0 and g.value(5.999) == 3.0 and g.value(6.0) == 3.0
    assert [b.time_s for b in g.breakpoints(30.0)] == [1.0]


def test_step_and_table_one_sided_values():
    s = make_profile(StepProfile(type="step", value=2.0, start_s=10.0))
    assert s.value(9.99) == 0.0 and s.value(10.0, "left") == 0.0 and s.value(10.0, "right") == 2.0
    assert s.value(50.0) == 2.0
    assert [(b.time_s, b.jump) for b in s.breakpoints(60.0)] == [(10.0, True)]
    t = make_profile(TableProfile(type="table", points=[[5.0, 10.0], [15.0, 30.0], [20.0, 0.0]]))
    assert t.value(0.0) == 10.0  # first value before the first point
    assert t.value(100.0) == 0.0  # last value after the last point
    assert t.value(10.0) == pytest.approx(20.0) and t.value(17.5) == pytest.approx(15.0)
    assert t.value(15.0, "left") == t.value(15.0, "right") == 30.0  # continuous: no jump
    assert all(not b.jump for b in t.breakpoints(100.0))


def test_heat_load_sides_at_a_step_edge():
    """problem.load uses the left value at a step end and the right one at a step start."""
    d = _energy_model("backward-euler", "lumped")
    d["heat_loads"] = [{"part": "die", "profile": {"type": "step", "value": 3.0, "start_s": 4.0}}]
    d["convection"] = [{"name": "under", "part": "base", "side": "z-", "h": 30.0, "ambient_c": 0.0}]
    _, problem = problem_of(d)
    assert problem.load(4.0, "left").sum() == pytest.approx(0.0, abs=1e-15)
    assert problem.load(4.0, "right").sum() == pytest.approx(3.0, rel=1e-12)


# ---------------------------------------------------------------- heat spreading
def test_heat_shares_and_full_watts_when_overlapped():
    """A part partly covered by a later part still gets all its watts, spread over what it holds."""
    d = model_dict([part("slab", "aluminium-6061", (0, 0, 0), (20, 10, 4)),
                    part("insert", "copper", (12, 0, 0), (8, 10, 4))],  # covers the slab's x > 12 end
                   heat_loads=[{"part": "slab", "profile": {"type": "constant", "value": 7.0}},
                               {"part": "insert", "profile": {"type": "constant", "value": 2.0}}],
                   convection=[{"name": "bottom", "part": "slab", "side": "z-", "h": 10.0, "ambient_c": 0.0}],
                   cell_mm=2.0)
    _, problem = problem_of(d)
    shares = problem.heat_shares
    np.testing.assert_allclose(np.asarray(shares.sum(axis=1)).ravel(), 1.0, rtol=1e-12)
    assert problem.load(0.0).sum() == pytest.approx(9.0, rel=1e-12)  # ambient 0 °C: only the watts
    # the slab's watts sit on what it still holds (x ≤ 12 mm): centroid at x = 6 mm, volume 12×10×4
    x = problem.mesh.nodes[:, 0] / MM
    assert (shares[0] @ x)[0] == pytest.approx(6.0, rel=1e-12)
    assert problem.part_volume[0] == pytest.approx(12 * 10 * 4 * MM**3, rel=1e-12)
    assert (shares[1] @ x)[0] == pytest.approx(16.0, rel=1e-12)
    assert problem.mesh.overlaps == [(1, 0, pytest.approx(8 * 10 * 4 * MM**3, rel=1e-12))]


# ---------------------------------------------------------------- probes
def _probe_problem(points_mm):
    d = model_dict([part("base", "aluminium-6061", (0, 0, 0), (16, 12, 2)),
                    part("die", "silicon", (5, 4, 2), (5, 4, 1.5))],
                   convection=[{"name": "under", "part": "base", "side": "z-", "h": 30.0}],
                   probes=[{"name": f"p{i}", "at_mm": list(map(float, p))} for i, p in enumerate(points_mm)],
                   cell_mm=1.7)
    return problem_of(d)


def test_probe_at_a_node_is_the_node_value():
    _, problem = _probe_problem([[0, 0, 0]])
    nodes_mm = problem.mesh.nodes / MM
    picks = [0, problem.n_nodes // 3, problem.n_nodes - 1]
    _, problem = _probe_problem(nodes_mm[picks])
    field = np.random.default_rng(1).normal(50.0, 10.0, problem.n_nodes)
    np.testing.assert_allclose(problem.probes @ field, field[picks], rtol=1e-12)


def test_probe_interpolates_linear_field_exactly():
    rng = np.random.default_rng(7)
    pts = [rng.uniform([0, 0, 0], [16, 12, 2]) for _ in range(12)]
    pts += [rng.uniform([5, 4, 2], [10, 8, 3.5]) for _ in range(8)]
    pts += [[7.0, 5.0, 2.0], [16.0, 12.0, 0.0], [5.0, 4.0, 3.5], [8.0, 6.0, 1.0]]  # on faces, corners
    _, problem = _probe_problem(pts)
    n = problem.mesh.nodes
    field = 3.0 + 1200.0 * n[:, 0] - 700.0 * n[:, 1] + 5000.0 * n[:, 2]
    exact = [3.0 + 1.2 * p[0] - 0.7 * p[1] + 5.0 * p[2] for p in pts]
    np.testing.assert_allclose(problem.probes @ field, exact, rtol=1e-12, atol=1e-12)
    assert problem.probes.shape == (len(pts), problem.n_nodes)


def test_probe_outside_the_solid_is_refused():
    with pytest.raises(solver.ModelError) as err:
        _probe_problem([[1, 1, 1], [12.0, 10.0, 3.0]])  # second one above the base, beside the die
    assert err.value.first_path == "probes[1].at_mm"


def test_energy_balance_with_sub_millisecond_steps():
    """Forward Euler on a 1 mm copper cube (critical step ~8e-5 s), outputs every 0.07 s so the
    equal steps of different intervals differ in the last bits: the balance must still close."""
    d = model_dict([part("cube", "copper", (0, 0, 0), (1, 1, 1))],
                   heat_loads=[{"part": "cube", "profile": {"type": "pulse", "high": 2.0, "low": 0.0,
                                                             "period_s": 0.3, "duty": 0.37}}],
                   convection=[{"name": "all", "part": "cube", "side": "exposed", "h": 50.0}],
                   cell_mm=1.0, duration_s=0.35, step_s=1e-3, scheme="backward-euler", mass="lumped",
                   output_every_s=0.07, initial_c=80.0)
    _, trial = problem_of(d)
    d["run"].update(scheme="forward-euler", step_s=0.9 * solver.critical_step(trial))
    _, problem = problem_of(d)
    rec = RunRecorder(problem)
    for ev in Stepper(problem):
        rec.add(ev)
    assert rec.relative_energy_residual < 1e-9


# ---------------------------------------------------------------- initial field and part maxima
def test_initial_temperatures_later_part_wins_on_shared_nodes():
    d = model_dict([part("left", "aluminium-6061", (0, 0, 0), (10, 6, 4), initial_c=80.0),
                    part("right", "copper", (10, 0, 0), (10, 6, 4), initial_c=40.0),
                    part("top", "copper", (0, 0, 4), (20, 6, 2))],
                   convection=[{"name": "c", "part": "left", "side": "x-", "h": 5.0}], cell_mm=2.0, initial_c=25.0)
    _, problem = problem_of(d)
    x, z = problem.mesh.nodes[:, 0] / MM, problem.mesh.nodes[:, 2] / MM
    d0 = problem.initial
    below = z < 4 - 1e-9
    assert np.all(d0[below & (x < 10 - 1e-9)] == 80.0)
    assert np.all(d0[below & (x >= 10 - 1e-9)] == 40.0)  # the shared plane x = 10 goes to the later part
    assert np.all(d0[z > 4 + 1e-9] == 25.0)  # no initial_c of its own: the model's
    # part maxima include shared nodes: with T = x (mm), left reaches 10 and right starts at 10
    tmax = problem.part_nodes.maxima(x)
    tmin = problem.part_nodes.minima(x)
    assert tmax[0] == pytest.approx(10.0) and tmin[1] == pytest.approx(10.0) and tmax[2] == pytest.approx(20.0)
