"""run.method = "auto": the cost rule (solver/transient/methodchoice.py) and the runs it picks.

The rule itself is ours (its constants come from our benchmark measurements, benchmarks/README.md);
what is checked against an outside reference is that the run it picks agrees with scipy's
``solve_ivp`` (BDF, rtol 1e-10) of the same semi-discrete system within the run's tolerance.
Invented scenario: a power die on a copper tab, pulsed for twenty minutes.
"""
from __future__ import annotations

import json

import numpy as np
import pytest

import solver
from solver.transient.methodchoice import RunShape, choose_run_method, predicted_costs
from solver.transient.stepping import Stepper
from tests.modelkit import reference_ivp


def _pulsed(duration=1280.0, step_s=1.0, scheme="crank-nicolson", method=None, output_every_s=20.0):
    run = {"duration_s": duration, "step_s": step_s, "scheme": scheme, "mass": "lumped",
           "output_every_s": output_every_s}
    if method is not None:
        run["method"] = method
    return {
        "format": "thermgui-model", "version": 1, "title": "auto method check (invented)",
        "ambient_c": 25.0, "initial_c": 25.0,
        "parts": [
            {"name": "tab", "material": "copper", "origin_mm": [0, 0, 0], "size_mm": [20, 12, 1.5]},
            {"name": "die", "material": "silicon", "origin_mm": [6, 4, 1.5], "size_mm": [4, 4, 0.5], "rated_c": 90.0},
        ],
        "heat_loads": [{"part": "die", "profile": {"type": "pulse", "high": 3.0, "low": 0.3, "period_s": 120,
                                                   "duty": 0.25, "start_s": 0}}],
        "convection": [{"name": "under", "part": "tab", "side": "z-", "h": 60.0},
                       {"name": "die top", "part": "die", "side": "z+", "h": 10.0}],
        "mesh": {"cell_mm": 2.0, "min_layers": 1},
        "run": run,
    }


def _stepper(d, **kw):
    return Stepper(solver.build_problem(solver.parse_model(d)), **kw)


# ------------------------------------------------------------ the rule on its own
def test_long_pulsed_run_gets_the_reduced_basis():
    # the relay-box run: 125k nodes, 1280 Crank-Nicolson steps on two step matrices, 6 loads
    c = choose_run_method(RunShape(nodes=125_000, steps=1280, step_matrices=2, load_shapes=6, events=61 + 20))
    assert c.method == "reduced" and "1,280 steps" in c.reason and "pays" in c.reason
    assert c.reduced_cost < 0.5 * c.full_cost


def test_few_steps_and_short_explicit_runs_step_the_full_system():
    few = choose_run_method(RunShape(nodes=125_000, steps=20, step_matrices=1, load_shapes=3, events=21))
    assert few.method == "full" and "cheaper" in few.reason
    explicit = choose_run_method(RunShape(nodes=20_000, steps=2000, step_matrices=1, load_shapes=2, events=100,
                                          explicit=True))
    assert explicit.method == "full" and "forward-Euler" in explicit.reason
    full, reduced, _ = predicted_costs(RunShape(nodes=20_000, steps=2000, step_matrices=1, load_shapes=2,
                                                events=100, explicit=True))
    assert full == pytest.approx(2000 * 0.05) and reduced > 0.5 * full  # not worth the risk of a fallback


def test_a_basis_too_large_for_memory_is_not_tried():
    c = choose_run_method(RunShape(nodes=1_000_000, steps=3600, step_matrices=2, load_shapes=40, events=100,
                                   max_columns=187))
    assert c.method == "full" and "memory" in c.reason


def test_explicit_requests_are_kept_and_unknown_ones_refused():
    shape = RunShape(nodes=1000, steps=5, step_matrices=1, load_shapes=1, events=6)
    assert choose_run_method(shape, "reduced").method == "reduced"
    long = RunShape(nodes=1000, steps=5000, step_matrices=1, load_shapes=1, events=6)
    assert choose_run_method(long, "full").method == "full"
    with pytest.raises(ValueError):
        choose_run_method(shape, "fastest")


def test_model_file_accepts_auto_and_names_a_bad_method():
    assert solver.parse_model(_pulsed(method="auto")).run.method == "auto"
    with pytest.raises(solver.ModelError) as e:
        solver.parse_model(_pulsed(method="quick"))
    assert "run.method" in e.value.describe()


# ------------------------------------------------------------ the runs it picks
@pytest.fixture(scope="module")
def pulsed_reference():
    d = _pulsed()
    p = solver.build_problem(solver.parse_model(d))
    times = np.arange(0.0, 1281.0, 20.0)
    breaks = [b.time_s for b in p.breakpoints(1280.0)]
    ref = reference_ivp(p, times, breaks=breaks)
    return p, times, np.array([p.part_nodes.maxima(f) for f in ref])


def _history(st):
    rec = solver.RunRecorder(st.problem, keep_fields=False)
    for ev in st:
        rec.add(ev)
    times, pmax, _ = rec.history_arrays()
    return np.asarray(times), np.asarray(pmax)


def test_default_long_pulsed_run_is_reduced_and_agrees_with_solve_ivp(pulsed_reference):
    _, times, ref_max = pulsed_reference
    st = _stepper(_pulsed())  # no method in the file: auto
    assert st.method_choice.requested == "auto" and st.method == "reduced"
    t, pmax = _history(st)
    np.testing.assert_allclose(t, times, atol=1e-9)
    assert np.abs(pmax - ref_max).max() < 0.1  # the reduced run's default tolerance, K
    # and the full system stepped by Crank-Nicolson agrees with both (its own step error is small here)
    t_full, pmax_full = _history(_stepper(_pulsed(method="full")))
    assert np.abs(pmax_full - ref_max).max() < 0.1
    assert np.abs(pmax_full - pmax).max() < 0.1


def test_few_steps_and_forward_euler_are_stepped(pulsed_reference):
    short = _stepper(_pulsed(duration=20.0, output_every_s=10.0))
    assert short.method == "full" and short.method_choice.reason.startswith("stepping is cheaper")
    assert short.scheme == "crank-nicolson"
    d = _pulsed(duration=0.05, step_s=5e-5, scheme="forward-euler", output_every_s=0.01)  # critical: 6.5e-5 s
    fe = _stepper(d)
    assert fe.method == "full" and fe.scheme == "forward-euler" and "forward-Euler" in fe.method_choice.reason


def test_cli_reports_the_choice(tmp_path, capsys):
    from solver.run.cli import solve_to_folder

    path = tmp_path / "m.json"
    path.write_text(json.dumps(_pulsed(duration=200.0)))
    rc = solve_to_folder(path, tmp_path / "out", fields="none")
    assert rc == 0
    out = capsys.readouterr().out
    info = json.loads((tmp_path / "out" / "run.json").read_text())
    assert info["solver"]["method"] in ("full", "reduced") and info["solver"]["method_requested"] == "auto"
    assert f"method: {info['solver']['method']} ({info['solver']['method_reason']})" in out
    assert info["field_series"] is None and not (tmp_path / "out" / "field.vtkhdf").exists()
    assert (tmp_path / "out" / "peaks.csv").is_file() and (tmp_path / "out" / "history.csv").is_file()
