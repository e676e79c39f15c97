"""Periodic steady state (run.periodic) against a long brute-force transient that settles into it."""
from __future__ import annotations

import json

import numpy as np
import pytest

import solver
from solver.run.cli import solve_to_folder
from solver.errors import ModelError
from solver.run.session import RunSession
from tests import modelkit as mk

PERIOD = 60.0


def pulsed(**run) -> dict:
    d = mk.chip_on_plate(**run)
    d["heat_loads"] = [{"part": "chip", "profile": {"type": "pulse", "high": 4.0, "low": 0.5,
                                                   "period_s": PERIOD, "duty": 0.25, "start_s": 10.0}}]
    d["convection"][0]["ambient_c"] = {"type": "pulse", "high": 30.0, "low": 25.0, "period_s": PERIOD,
                                       "duty": 0.5, "start_s": 40.0}
    return d


def cycle_extremes(d, periodic: bool, periods: int):
    # stepped in full: every step is an event, so the trough is seen (a reduced run reports events
    # at outputs and peaks only)
    run = dict(duration_s=PERIOD * periods, step_s=0.5, scheme="crank-nicolson", output_every_s=PERIOD,
               periodic=periodic, method="full")
    model = solver.parse_model(mk.with_run(d, **run))
    session = RunSession(model, tolerance_k=False)  # one mesh: the comparison is about the cycle, not the mesh
    names = [p.name for p in model.parts]
    hi = np.full(len(names), -np.inf)
    lo = np.full(len(names), np.inf)
    t_last = model.run.duration_s if not periodic else PERIOD
    for ev in session.events():
        if ev.time_s >= t_last - PERIOD - 1e-9:
            hi = np.maximum(hi, ev.part_max)
            lo = np.minimum(lo, ev.part_max)
    return hi, lo, session


def test_periodic_cycle_matches_the_settled_brute_force_cycle():
    """Brute force: 150 periods (9000 s, the plate's cooling time is about 300 s) stepped from
    ambient; its last period is the reference. The direct cycle must agree within 0.05 K (the
    issue's bound) on every part's peak and trough over the cycle."""
    d = pulsed()
    hi_ref, lo_ref, brute = cycle_extremes(d, False, 150)
    hi, lo, cyc = cycle_extremes(d, True, 150)
    assert cyc.cycle is not None and cyc.model.run.duration_s == PERIOD
    assert np.max(np.abs(hi - hi_ref)) < 0.05, hi - hi_ref
    assert np.max(np.abs(lo - lo_ref)) < 0.05, lo - lo_ref
    assert cyc.cycle.closure_k < 0.05
    # and the cycle is really one that repeats: not the start-up from ambient
    assert hi_ref[1] - (25.0 + 0.5) > 1.0


def test_periodic_rejects_non_repeating_loads():
    d = pulsed()
    d["heat_loads"].append({"part": "plate", "profile": {"type": "pulse", "high": 1, "low": 0, "period_s": 45.0,
                                                        "duty": 0.5}})
    with pytest.raises(ModelError) as e:
        RunSession(solver.parse_model(mk.with_run(d, periodic=True)))
    assert e.value.first_path == "heat_loads[1].profile.period_s"
    d = pulsed()
    d["heat_loads"][0]["profile"] = {"type": "table", "points": [[0, 1.0], [100, 2.0]]}
    with pytest.raises(ModelError) as e:
        RunSession(solver.parse_model(mk.with_run(d, periodic=True)))
    assert e.value.first_path == "heat_loads[0].profile"


def test_periodic_cli_exit_2_names_the_field(tmp_path, capsys):
    d = pulsed()
    d["heat_loads"][0]["profile"] = {"type": "step", "value": 2.0, "start_s": 5.0}
    path = tmp_path / "m.json"
    path.write_text(json.dumps(mk.with_run(d, periodic=True)))
    assert solve_to_folder(path, tmp_path / "out", quiet=True) == 2
    assert "heat_loads[0].profile.start_s" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()
