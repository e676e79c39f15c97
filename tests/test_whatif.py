"""What-if by superposition of unit responses against a fresh full solve of the changed model."""
from __future__ import annotations

import copy
import csv
import json

import numpy as np
import pytest

import solver
from thermgui import cli
from solver.run.session import RunSession
from solver.answers.whatifcommand import whatif_to_folder
from tests import modelkit as mk


def base_model() -> dict:
    d = mk.chip_on_plate(duration_s=300.0, step_s=0.5, scheme="crank-nicolson", output_every_s=30.0)
    d["parts"].append({"name": "chip2", "material": "mould-compound", "origin_mm": [3, 3, 3],
                       "size_mm": [6, 6, 2], "rated_c": 60.0})
    d["heat_loads"] = [
        {"part": "chip", "profile": {"type": "pulse", "high": 2.0, "low": 0.4, "period_s": 50.0, "duty": 0.3}},
        {"part": "chip2", "profile": {"type": "table", "points": [[0, 0.0], [100, 1.5], [200, 0.5]]}}]
    d["convection"][1]["ambient_c"] = {"type": "table", "points": [[0, 25.0], [300, 35.0]]}
    return d


def changed_model(d: dict, chip_scale: float, offset: float) -> dict:
    """The what-if written out by hand: chip ×scale, every ambient +offset, initial as before."""
    d = copy.deepcopy(d)
    p = d["heat_loads"][0]["profile"]
    p["high"] *= chip_scale
    p["low"] *= chip_scale
    d["initial_c"] = d["initial_c"]
    d["ambient_c"] += offset
    d["convection"][1]["ambient_c"]["points"] = [[t, v + offset] for t, v in d["convection"][1]["ambient_c"]["points"]]
    d["convection"][0]["ambient_c"] = 25.0 + offset
    return d


def read_peaks(path):
    with open(path) as f:
        return {r["part"]: r for r in csv.DictReader(f)}


def band_status(row) -> str:
    """The verdict a peaks.csv row's band implies (over / at-risk / ok, as docs/accuracy.md says)."""
    from solver.results.recorder import PeakRow

    rated = float(row["rated_c"]) if row["rated_c"] else None
    err = float(row["peak_error_k"]) if row["peak_error_k"] else None
    return PeakRow(row["part"], rated, float(row["peak_c"]), 0.0, None, None, (), 0.0, err).status


def test_whatif_equals_fresh_solve(tmp_path, capsys):
    """Peaks and history of the superposed what-if against a fresh Crank–Nicolson solve of the
    changed model at the same step (0.05 K, the issue's bound); with ``--tolerance none`` the
    peaks are the file's mesh's and every part carries a band from two finer meshes; the stored
    unit responses are reused on a second what-if."""
    d = base_model()
    path = tmp_path / "m.json"
    path.write_text(json.dumps(d))
    out = tmp_path / "wi"
    assert whatif_to_folder(path, out, ["chip=1.3"], 5.0, quiet=True, tolerance_k=None) == 0
    assert (out / "unit-responses" / "level-2.npz").exists()
    got = read_peaks(out / "peaks.csv")
    fresh = RunSession(solver.parse_model(changed_model(d, 1.3, 5.0)), tolerance_k=False)
    for _ in fresh.events():
        pass
    rows = {r.part: r for r in fresh.finish()}
    for part, r in rows.items():
        assert abs(float(got[part]["peak_c"]) - r.peak_c) < 0.05, (part, got[part]["peak_c"], r.peak_c)
        assert got[part]["peak_error_k"] and float(got[part]["peak_error_k"]) > 0, part
        assert got[part]["status"] == band_status(got[part])
    t, pmax, _ = fresh.recorder.history_arrays()
    with open(out / "history.csv") as f:
        hist = list(csv.DictReader(f))
    assert [float(h["time_s"]) for h in hist] == list(t)
    for k, p in enumerate(fresh.model.parts):
        col = np.array([float(h[f"max:{p.name}"]) for h in hist])
        assert np.max(np.abs(col - pmax[:, k])) < 0.05
    # second what-if: no new solve, and the base case (no change) equals the model's own run
    capsys.readouterr()
    assert whatif_to_folder(path, out, [], 0.0, tolerance_k=None) == 0
    assert "reusing stored unit responses" in capsys.readouterr().err
    base = RunSession(solver.parse_model(d), tolerance_k=False)
    for _ in base.events():
        pass
    got = read_peaks(out / "peaks.csv")
    for r in base.finish():
        assert abs(float(got[r.part]["peak_c"]) - r.peak_c) < 0.05


def test_whatif_command_refines_like_solve(tmp_path, capsys):
    """``thermgui whatif`` with the file's mesh.tolerance_k (default 1 K) runs the same mesh ladder
    as ``thermgui solve``: with the loads as in the file its peaks are the run's, and so are its bands
    (within 0.1 K: the what-if adds the unit responses' basis change instead of the run's basis
    estimate), and its verdicts follow its band. A new tolerance is a new ladder (not the stored one)."""
    d = mk.chip_on_plate(duration_s=120.0, step_s=0.5, scheme="crank-nicolson", output_every_s=10.0)
    d["parts"][1]["rated_c"] = 50.0
    path = tmp_path / "m.json"
    path.write_text(json.dumps(d))
    out = tmp_path / "wi"
    assert cli.main(["whatif", str(path), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "on 3 meshes" in text
    got = read_peaks(out / "peaks.csv")
    session, run_rows = _run(d)
    assert session.level >= 2  # the run refined: the what-if's peaks are not the file mesh's
    for part, r in run_rows.items():
        assert abs(float(got[part]["peak_c"]) - r.peak_c) < 0.05, part
        assert abs(float(got[part]["peak_error_k"]) - r.peak_error_k) < 0.1, part
        assert got[part]["status"] == band_status(got[part])
    assert cli.main(["whatif", str(path), "--out", str(out), "--tolerance", "none"]) == 0
    assert "reusing stored" not in capsys.readouterr().err
    file_mesh = read_peaks(out / "peaks.csv")
    for part in ("chip", "plate"):  # another ladder: the file's mesh, whose wider band holds the refined peak
        coarse, fine = float(file_mesh[part]["peak_c"]), float(got[part]["peak_c"])
        assert abs(coarse - fine) <= float(file_mesh[part]["peak_error_k"]), part
    assert abs(float(file_mesh["chip"]["peak_c"]) - float(got["chip"]["peak_c"])) > 0.5  # not the same mesh
    with pytest.raises(SystemExit) as e:  # argparse: exit 2, the option named on stderr
        cli.main(["whatif", str(path), "--out", str(out), "--tolerance", "-1"])
    assert e.value.code == 2 and "--tolerance" in capsys.readouterr().err


def test_whatif_refuses_a_mesh_too_large_exit_2(tmp_path, capsys):
    """A file mesh that would not fit in memory: refused before allocation, exit 2 naming
    mesh.cell_mm, nothing written (the same refusal as thermgui solve)."""
    d = base_model()
    d["mesh"]["cell_mm"] = 0.01
    path = tmp_path / "m.json"
    path.write_text(json.dumps(d))
    assert whatif_to_folder(path, tmp_path / "o", [], 0.0, quiet=True) == 2
    assert "mesh.cell_mm" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_whatif_bad_scale_exit_2(tmp_path, capsys):
    path = tmp_path / "m.json"
    path.write_text(json.dumps(base_model()))
    assert whatif_to_folder(path, tmp_path / "o", ["nothing=2"], 0.0, quiet=True) == 2
    assert "--scale" in capsys.readouterr().err
    assert whatif_to_folder(path, tmp_path / "o", ["chip=abc"], 0.0, quiet=True) == 2
    assert not (tmp_path / "o").exists()


def test_superposition_refused_with_radiation():
    """A convection entry with an emissivity (radiation, once the model has that key) makes the
    model nonlinear: refused, naming the field."""
    from types import SimpleNamespace

    import pytest

    from solver.errors import ModelError
    from solver.answers.unitresponse import require_linear

    model = SimpleNamespace(convection=[SimpleNamespace(emissivity=None), SimpleNamespace(emissivity=0.9)])
    with pytest.raises(ModelError) as e:
        require_linear(model)
    assert e.value.first_path == "convection[1].emissivity"
    require_linear(SimpleNamespace(convection=[SimpleNamespace(emissivity=0.0)]))  # no radiation: fine


def test_whatif_refused_for_a_settled_cycle(tmp_path, capsys):
    """run.periodic: the settled cycle starts from a state that depends on the loads, so scaled loads
    cannot be superposed on it: exit 2 naming the field, nothing written (common practice, no source:
    the start state d0 = (I - Φ(P))⁻¹ g is itself linear in the loads, so keeping it is wrong)."""
    d = base_model()
    d["heat_loads"] = d["heat_loads"][:1]
    d["convection"][1].pop("ambient_c")
    d["run"]["periodic"] = True
    path = tmp_path / "m.json"
    path.write_text(json.dumps(d))
    solver.parse_model(d)  # a valid model
    assert whatif_to_folder(path, tmp_path / "o", ["chip=1.2"], 0.0, quiet=True) == 2
    assert "run.periodic" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def _run(d, tol="model"):
    s = RunSession(solver.parse_model(d), tolerance_k=tol)
    for _ in s.events():
        pass
    return s, {r.part: r for r in s.finish()}


def test_whatif_band_comes_from_the_runs_meshes():
    """A what-if in the app is bounded on the same meshes as the run (solver.answers.whatifband).
    Checks: (1) with the run's loads it reproduces the run's peaks and band; (2) linearity, exact
    for one heat load from a uniform start at the ambient (superposition, common practice, no
    source): the rise doubles with the load, and so does the grid-convergence bound (Roache's GCI
    is homogeneous of degree one in the level differences); (3) a fresh run of the changed model,
    with its own ladder, lands within the what-if's band."""
    from solver.answers.whatifband import evaluate_with_band, prepare_levels

    d = mk.chip_on_plate(duration_s=120.0, step_s=0.5, scheme="crank-nicolson", output_every_s=10.0)
    d["mesh"]["tolerance_k"] = None  # report the file's mesh; two finer meshes bound it
    session, run_rows = _run(d)
    levels = session.band_levels()
    assert levels is not None and levels.reported == 0 and len(levels.lines_mm) == 3
    wl = prepare_levels(session.model, levels, session.problem)
    rec1, b1 = evaluate_with_band(wl, [1.0])
    for i, p in enumerate(session.model.parts):
        assert abs(rec1.peak[i] - run_rows[p.name].peak_c) < 0.05
        assert abs(b1[i] - run_rows[p.name].peak_error_k) < 0.1 + 0.02 * run_rows[p.name].peak_error_k
    assert b1[1] > 0.2  # the chip's band is not negligible on this coarse mesh: the check can tell
    rec2, b2 = evaluate_with_band(wl, [2.0])
    c = wl.basis_change_k
    np.testing.assert_allclose(rec2.peak - 25.0, 2.0 * (rec1.peak - 25.0), rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(b2 - c, 2.0 * (b1 - c), rtol=1e-6, atol=1e-6)
    changed = copy.deepcopy(d)
    changed["heat_loads"][0]["profile"]["value"] *= 2.0
    changed["mesh"]["tolerance_k"] = 0.5
    fresh, fresh_rows = _run(changed)
    for i, p in enumerate(session.model.parts):
        assert abs(fresh_rows[p.name].peak_c - rec2.peak[i]) <= b2[i], p.name
