"""Sweeps on Dask: equal to serial runs, a killed worker's case retried, bad input, unreachable scheduler."""
from __future__ import annotations

import json

import pytest

import solver
from solver.results.recorder import PeakRow
from solver.run.session import RunSession
from solver.answers.sweep import make_cases, read_sweep, run_sweep, sweep_to_folder
from tests import modelkit as mk
from tests.sweep_tasks import dies_once

distributed = pytest.importorskip("distributed")


def write_sweep(tmp_path, variables) -> str:
    d = mk.chip_on_plate(duration_s=120.0, step_s=1.0, scheme="crank-nicolson", output_every_s=20.0)
    (tmp_path / "m.json").write_text(json.dumps(d))
    path = tmp_path / "s.json"
    path.write_text(json.dumps({"format": "thermgui-sweep", "version": 1, "model": "m.json", "variables": variables}))
    return str(path)


VARS = [{"field": "heat_loads[0].scale", "values": [0.9, 1.1]},
        {"field": "ambient_offset_k", "values": [0.0, 8.0]},
        {"field": "convection[0].h", "factors": [0.7, 1.3]}]


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0")
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


def assert_same_results(a, b):
    """Two sweeps' results equal to round-off: Dask's workers run PARDISO on one thread (the nanny
    sets MKL_NUM_THREADS=1), this process may run it on two, so the sums differ in the last bits."""
    assert len(a) == len(b)
    for (rows_a, err_a), (rows_b, err_b) in zip(a, b):
        assert err_a == pytest.approx(err_b, rel=1e-6, abs=1e-9)
        assert [r["part"] for r in rows_a] == [r["part"] for r in rows_b]
        for ra, rb in zip(rows_a, rows_b):
            assert ra["status"] == rb["status"] and ra["rated_c"] == rb["rated_c"]
            for key in ("peak_c", "peak_error_k", "peak_time_s", "margin_k"):
                if ra[key] is None or rb[key] is None:
                    assert ra[key] is rb[key] is None, key
                else:
                    assert ra[key] == pytest.approx(rb[key], abs=1e-9), (ra["part"], key)


def test_dask_results_equal_serial_and_fresh_solve(tmp_path, client):
    path = write_sweep(tmp_path, VARS)
    model_dict, _, variables = read_sweep(path)
    cases = make_cases(variables)
    assert len(cases) == 8
    # tolerance none: every case's peaks on the file's mesh (as the fresh solve below), banded by two finer meshes
    serial = run_sweep(model_dict, cases, None, tolerance_k=None)
    on_dask = run_sweep(model_dict, cases, client, tolerance_k=None)
    assert_same_results(on_dask, serial)
    # and the folder written through the command line equals the serial one byte for byte
    assert sweep_to_folder(path, tmp_path / "a", serial=True, quiet=True, tolerance_k=None) == 0
    assert sweep_to_folder(path, tmp_path / "b", workers=2, quiet=True, tolerance_k=None) == 0
    for name in ("cases.csv", "worst.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    assert (tmp_path / "b" / "margin.png").stat().st_size > 1000
    # one case against a fresh full solve of the model written out by hand (0.05 K)
    case = cases[-1]  # chip ×1.1, ambient +8 K, h ×1.3
    d = json.loads((tmp_path / "m.json").read_text())
    d["heat_loads"][0]["profile"]["value"] *= 1.1
    d["ambient_c"] += 8.0
    d["convection"][0]["h"] *= 1.3
    assert case == {"heat_loads[0].scale": 1.1, "ambient_offset_k": 8.0, "convection[0].h": pytest.approx(d["convection"][0]["h"])}
    fresh = RunSession(solver.parse_model(d), tolerance_k=False)  # the file's mesh, as the sweep
    for _ in fresh.events():
        pass
    rows, _ = serial[-1]
    for r in fresh.finish():
        got = next(x for x in rows if x["part"] == r.part)
        assert abs(got["peak_c"] - r.peak_c) < 0.05
        assert got["peak_error_k"] is not None and got["peak_error_k"] > 0, r.part  # every peak banded
        assert got["status"] == PeakRow(r.part, r.rated_c, got["peak_c"], 0.0, None, None, (), 0.0,
                                        got["peak_error_k"]).status  # and its verdict follows the band


def test_killed_worker_case_is_retried(tmp_path, client):
    path = write_sweep(tmp_path, VARS[:1] + VARS[2:])
    model_dict, _, variables = read_sweep(path)
    cases = make_cases(variables)
    marker = tmp_path / "died"
    results = run_sweep(model_dict, cases, client, task=dies_once(str(marker)), tolerance_k=None)
    assert marker.exists()  # a worker did die mid-task ...
    assert all(r is not None for r in results)  # ... and its case was rerun, not lost
    assert_same_results(results, run_sweep(model_dict, cases, None, tolerance_k=None))


@pytest.mark.parametrize("var, path", [
    ({"field": "convection[7].h", "values": [1, 2]}, "variables[0].field"),
    ({"field": "parts[0].nothing", "values": [1]}, "variables[0].field"),
    ({"field": "ambient_c", "values": []}, "variables[0].values"),
    ({"field": "ambient_c", "range": [30, 20], "steps": 3}, "variables[0].range"),
    ({"field": "heat_loads[3].scale", "values": [1]}, "variables[0].field"),
])
def test_bad_sweep_exit_2_names_the_field(tmp_path, capsys, var, path):
    p = write_sweep(tmp_path, [var])
    assert sweep_to_folder(p, tmp_path / "out", serial=True, quiet=True) == 2
    assert path in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_invalid_case_exit_2(tmp_path, capsys):
    p = write_sweep(tmp_path, [{"field": "convection[0].h", "values": [5, -1]}])
    assert sweep_to_folder(p, tmp_path / "out", serial=True, quiet=True) == 2
    assert "convection[0].h" in capsys.readouterr().err


def test_unreachable_scheduler_exit_1_nothing_written(tmp_path, capsys):
    p = write_sweep(tmp_path, VARS[:1])
    assert sweep_to_folder(p, tmp_path / "out", scheduler="tcp://127.0.0.1:9", quiet=True) == 1
    msg = capsys.readouterr().err
    assert "scheduler" in msg and "nothing was written" in msg
    assert not (tmp_path / "out").exists()


def test_load_watts_and_ambient_superposed_from_one_solve(tmp_path):
    """A constant load's watts and the model's ambient (no entry has its own) are a scale and an
    offset: one solve serves every case, and a case equals a fresh solve (0.05 K)."""
    from solver.answers.sweep import group_cases

    path = write_sweep(tmp_path, [{"field": "heat_loads[0].profile.value", "values": [1.0, 2.0]},
                                  {"field": "ambient_c", "values": [20.0, 35.0]}])
    model_dict, _, variables = read_sweep(path)
    cases = make_cases(variables)
    assert len(group_cases(cases, model_dict)) == 1
    results = run_sweep(model_dict, cases, None, tolerance_k=None)
    d = json.loads((tmp_path / "m.json").read_text())
    d["heat_loads"][0]["profile"]["value"] = 2.0
    d["ambient_c"] = 35.0
    assert cases[3] == {"heat_loads[0].profile.value": 2.0, "ambient_c": 35.0}
    fresh = RunSession(solver.parse_model(d), tolerance_k=False)  # the file's mesh, as the sweep
    for _ in fresh.events():
        pass
    rows, _ = results[3]
    for r in fresh.finish():
        got = next(x for x in rows if x["part"] == r.part)
        assert abs(got["peak_c"] - r.peak_c) < 0.05, (r.part, got["peak_c"], r.peak_c)


def test_sweep_refines_like_solve(tmp_path):
    """With the file's mesh.tolerance_k (default 1 K) a sweep's structural case runs the mesh ladder of
    ``thermgui solve``: its unchanged case reproduces the run's refined peaks (0.05 K) and bands
    (0.1 K: the unit responses' basis change stands in for the run's basis estimate), and
    cases.csv carries the band."""
    import csv

    path = write_sweep(tmp_path, [{"field": "heat_loads[0].scale", "values": [1.0, 1.2]}])
    model_dict, _, variables = read_sweep(path)
    cases = make_cases(variables)
    results = run_sweep(model_dict, cases, None)
    run = RunSession(solver.parse_model(model_dict))
    for _ in run.events():
        pass
    assert run.level >= 2  # refined: not the file's mesh
    rows, _ = results[0]  # scale 1.0: the model as it is
    for r in run.finish():
        got = next(x for x in rows if x["part"] == r.part)
        assert abs(got["peak_c"] - r.peak_c) < 0.05, r.part
        assert abs(got["peak_error_k"] - r.peak_error_k) < 0.1, r.part
    assert sweep_to_folder(path, tmp_path / "o", serial=True, quiet=True) == 0
    with open(tmp_path / "o" / "cases.csv", newline="") as f:
        table = list(csv.DictReader(f))
    assert all(row["peak_error_k"] for row in table) and len(table) == 2 * len(rows)


def test_sweep_of_a_settled_cycle_refused_exit_2(tmp_path, capsys):
    """Sweep cases are superposed from unit responses, which a settled cycle's load-dependent start
    state breaks (as for thermgui whatif): exit 2 naming run.periodic, before any solve, nothing written."""
    path = write_sweep(tmp_path, VARS[:1])
    d = json.loads((tmp_path / "m.json").read_text())
    d["run"]["periodic"] = True
    (tmp_path / "m.json").write_text(json.dumps(d))
    solver.parse_model(d)  # a valid model
    assert sweep_to_folder(path, tmp_path / "o", serial=True, quiet=True) == 2
    assert "run.periodic" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()
