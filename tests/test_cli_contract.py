"""The ``thermgui solve`` contract of NOTES.md §4: exit status, messages, output files.

End-to-end checks start the real command (``python -m thermgui``) in a subprocess; the many
bad-input cases call ``solver.run.cli.solve_to_folder`` (what ``thermgui solve`` runs) in-process
with its error stream captured. The written field series is read back with pyvista (an
outside reader of VTK XML) and compared with history.csv.
"""
from __future__ import annotations

import csv
import io
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from conftest import minimal_model_dict
from modelkit import model_dict, part
from solver.run.cli import solve_to_folder

PEAK_HEADER = ["part", "rated_c", "peak_c", "peak_error_k", "peak_time_s", "margin_k", "first_over_s",
               "hotspot_x_mm", "hotspot_y_mm", "hotspot_z_mm", "status"]


def _thermgui(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "thermgui", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd, timeout=300)


def _write(path: Path, d) -> Path:
    path.write_text(d if isinstance(d, str) else json.dumps(d, indent=2))
    return path


def _solve_in_process(model_path, out_dir):
    err, out = io.StringIO(), io.StringIO()
    rc = solve_to_folder(model_path, out_dir, quiet=True, stream=out, err=err)
    return rc, err.getvalue()


# ---------------------------------------------------------------- bad input
def _fe_too_big_step(d):
    d["run"].update(scheme="forward-euler", mass="lumped", step_s=5.0, duration_s=10.0)


BAD = [
    ("wrong format", lambda d: d.update(format="other"), "format"),
    ("wrong version", lambda d: d.update(version=3), "version"),
    ("unknown key", lambda d: d["mesh"].update(cells=4), "mesh.cells"),
    ("negative size", lambda d: d["parts"][0]["size_mm"].__setitem__(2, -1.0), "parts[0].size_mm[2]"),
    ("zero size", lambda d: d["parts"][0]["size_mm"].__setitem__(0, 0), "parts[0].size_mm[0]"),
    ("unknown material", lambda d: d["parts"][0].update(material="cheese"), "parts[0].material"),
    ("unknown part", lambda d: d["heat_loads"][0].update(part="ghost"), "heat_loads[0].part"),
    ("duplicate part", lambda d: d["parts"].append(dict(d["parts"][0], origin_mm=[30, 0, 0])), "parts[1].name"),
    ("bad side", lambda d: d["convection"][0].update(side="front"), "convection[0].side"),
    ("duty", lambda d: d["heat_loads"][0].update(profile={"type": "pulse", "high": 1.0, "period_s": 2.0,
                                                          "duty": 0.0}), "heat_loads[0].profile.duty"),
    ("table times", lambda d: d["heat_loads"][0].update(profile={"type": "table", "points": [[0, 1], [3, 1], [2, 1]]}),
     "heat_loads[0].profile.points[2][0]"),
    ("step over duration", lambda d: d["run"].update(step_s=60.0), "run.step_s"),
    ("mesh too large", lambda d: (d["parts"][0].update(size_mm=[3000, 3000, 3000]),
                                  d["mesh"].update(cell_mm=0.02)), "mesh.cell_mm"),
    ("forward euler above limit", _fe_too_big_step, "run.step_s"),
    ("probe outside", lambda d: d.update(probes=[{"name": "p", "at_mm": [-5, 0, 0]}]), "probes[0].at_mm"),
]


@pytest.mark.parametrize("mutate,path", [b[1:] for b in BAD], ids=[b[0] for b in BAD])
def test_bad_input_exit_2_names_file_and_field_writes_nothing(tmp_path, mutate, path):
    d = minimal_model_dict()
    mutate(d)
    model = _write(tmp_path / "enclosure.json", d)
    out = tmp_path / "results"
    rc, err = _solve_in_process(model, out)
    assert rc == 2, err
    assert err.startswith(f"{model}: "), err
    assert f": {path}: " in err, err
    assert "Traceback" not in err
    assert not out.exists()


def test_forward_euler_message_states_the_limit(tmp_path):
    d = minimal_model_dict()
    _fe_too_big_step(d)
    rc, err = _solve_in_process(_write(tmp_path / "m.json", d), tmp_path / "o")
    assert rc == 2 and "critical step is" in err and "s (2/λ_max" in err


def test_bad_input_leaves_an_existing_folder_untouched(tmp_path):
    out = tmp_path / "previous results"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    d = minimal_model_dict()
    d["parts"][0]["material"] = "cheese"
    rc, _ = _solve_in_process(_write(tmp_path / "m.json", d), out)
    assert rc == 2
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]


def test_missing_file_and_broken_json_through_the_command(tmp_path):
    """The real command line: exit 2, file named, line and column for broken JSON, no --out folder."""
    out = tmp_path / "out"
    missing = tmp_path / "nowhere.json"
    r = _thermgui("solve", missing, "--out", out)
    assert r.returncode == 2 and str(missing) in r.stderr and "not found" in r.stderr
    assert "Traceback" not in r.stderr
    broken = _write(tmp_path / "broken.json", '{"format": "thermgui-model",\n "version": 1,\n "parts": [}\n')
    r = _thermgui("solve", broken, "--out", out)
    assert r.returncode == 2 and str(broken) in r.stderr and "line 3, column 12" in r.stderr, r.stderr
    assert not out.exists()


def test_main_writes_errors_to_the_current_stderr(tmp_path, capsys):
    import thermgui.cli

    bad = _write(tmp_path / "m.json", "{")
    rc = thermgui.cli.main(["solve", str(bad), "--out", str(tmp_path / "o")])
    assert rc == 2
    assert str(bad) in capsys.readouterr().err


def test_version_and_help(capsys):
    r = _thermgui("--version")  # the real command once
    assert r.returncode == 0 and r.stdout.startswith("thermgui ")
    import thermgui.cli

    for args, words in ((["--help"], "solve"), (["solve", "--help"], "--out")):
        with pytest.raises(SystemExit) as done:
            thermgui.cli.main(args)
        assert done.value.code == 0
        assert words in capsys.readouterr().out


# ---------------------------------------------------------------- a successful run
RATED_HOT, RATED_OK = 80.0, 200.0


def _good_model() -> dict:
    return model_dict(
        [part("base", "aluminium-6061", (0, 0, 0), (20, 12, 2), rated_c=RATED_OK),
         part("chip", "mould-compound", (6, 4, 2), (6, 4, 1.5), rated_c=RATED_HOT),
         part("cover", "abs", (0, 0, 3.5), (20, 12, 1.5))],  # the cover rests on the chip
        heat_loads=[{"part": "chip", "profile": {"type": "pulse", "high": 3.0, "low": 0.5, "period_s": 6.0,
                                                  "duty": 0.5}}],
        convection=[{"name": "under", "part": "base", "side": "z-", "h": 40.0},
                    {"name": "cover top", "part": "cover", "side": "z+", "h": 8.0}],
        probes=[{"name": "chip centre", "at_mm": [9.0, 6.0, 2.75]}, {"name": "base corner", "at_mm": [0, 0, 0]}],
        cell_mm=2.0, duration_s=10.1, step_s=0.25, scheme="crank-nicolson", mass="lumped",
        output_every_s=0.25)


@pytest.fixture(scope="module")
def good_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("good")
    model = _write(folder / "good model.json", _good_model())
    out = folder / "results dir"
    r = _thermgui("solve", model, "--out", out)
    return r, out


def _csv(path):
    with open(path, newline="") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def test_success_exit_and_peaks_table(good_run):
    r, out = good_run
    assert r.returncode == 0, r.stderr
    header, rows = _csv(out / "peaks.csv")
    assert header == PEAK_HEADER
    by_part = {row[0]: dict(zip(header, row)) for row in rows}
    assert set(by_part) == {"base", "chip", "cover"}
    chip, base, cover = by_part["chip"], by_part["base"], by_part["cover"]
    assert chip["status"] == "over" and float(chip["peak_c"]) > RATED_HOT
    assert float(chip["margin_k"]) == pytest.approx(RATED_HOT - float(chip["peak_c"]), abs=2e-3)
    assert base["status"] == "ok" and base["first_over_s"] == "" and float(base["margin_k"]) > 0
    assert cover["status"] == "unrated" and cover["rated_c"] == cover["margin_k"] == cover["first_over_s"] == ""
    assert float(cover["peak_c"]) > 26.0  # heated through the chip it rests on
    # hot spots inside their parts
    hx, hy, hz = (float(chip[f"hotspot_{a}_mm"]) for a in "xyz")
    assert 6 <= hx <= 12 and 4 <= hy <= 8 and 2 <= hz <= 3.5


def test_history_rows_and_header(good_run):
    _, out = good_run
    header, rows = _csv(out / "history.csv")
    assert header == ["time_s", "max:base", "max:chip", "max:cover", "probe:chip centre", "probe:base corner"]
    times = np.array([float(r[0]) for r in rows])
    expected = np.append(np.arange(0.0, 10.0 + 1e-9, 0.25), 10.1)  # extra row: 10.1 is not a multiple
    np.testing.assert_allclose(times, expected, atol=1e-9)


def test_first_over_is_interpolated_and_peak_matches_history(good_run):
    _, out = good_run
    ph, prow = _csv(out / "peaks.csv")
    chip = dict(zip(ph, next(r for r in prow if r[0] == "chip")))
    hh, hrows = _csv(out / "history.csv")
    h = np.array([[float(v) for v in r] for r in hrows])
    t, m = h[:, 0], h[:, hh.index("max:chip")]
    k = int(np.argmax(m > RATED_HOT))
    assert k > 0
    crossing = t[k - 1] + (RATED_HOT - m[k - 1]) / (m[k] - m[k - 1]) * (t[k] - t[k - 1])
    first_over = float(chip["first_over_s"])
    assert t[k - 1] < first_over < t[k]
    # one row per step (0.25 s), except that a damped start-up splits a step in two halves that
    # are not rows: agree with row-wise interpolation to within that
    assert first_over == pytest.approx(crossing, abs=0.02)
    assert t[k] > 1.0  # the crossing is not at the trivial start
    assert float(chip["peak_c"]) == pytest.approx(m.max(), abs=1e-3)
    assert float(chip["peak_time_s"]) == pytest.approx(t[np.argmax(m)], abs=1e-9)


def test_field_series_opens_in_pyvista_and_matches_history(good_run):
    """field.vtkhdf is one time series for VTK's own reader (vtkHDFReader, a general VTK reader,
    not ours): every step has the whole mesh, the time of its history row, and temperatures whose
    part maxima are the history's."""
    pv = pytest.importorskip("pyvista")
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkIOHDF import vtkHDFReader

    _, out = good_run
    path = out / "field.vtkhdf"
    hh, hrows = _csv(out / "history.csv")
    h = np.array([[float(v) for v in r] for r in hrows])
    reader = vtkHDFReader()
    reader.SetFileName(str(path))
    reader.Update()
    assert reader.GetNumberOfSteps() == len(h)
    np.testing.assert_allclose(np.array(reader.GetOutputInformation(0).Get(
        reader.GetExecutive().TIME_STEPS())), h[:, 0], atol=1e-9)
    first = pv.read(path)  # pyvista opens it too (step 0)
    for i in range(len(h)):
        reader.SetStep(i)
        reader.Update()
        grid = pv.wrap(reader.GetOutput())
        assert grid.n_points == first.n_points and grid.n_cells == first.n_cells > 0
        assert grid.celltypes.max() == grid.celltypes.min() == 10  # VTK_TETRA
        temp = vtk_to_numpy(reader.GetOutput().GetPointData().GetArray("temperature_c"))
        part_id = np.asarray(grid.cell_data["part_id"])
        cells = grid.cells.reshape(-1, 5)[:, 1:]
        for p, name in enumerate(["base", "chip", "cover"]):
            nodes = np.unique(cells[part_id == p])
            assert temp[nodes].max() == pytest.approx(h[i, hh.index(f"max:{name}")], abs=2e-3)
        if i == 0:
            np.testing.assert_array_equal(temp, first.point_data["temperature_c"])
            # every tetrahedron has positive volume as VTK computes it
            assert np.asarray(grid.compute_cell_sizes(length=False, area=False)["Volume"]).min() > 0
    info = json.loads((out / "run.json").read_text())
    assert info["energy"]["relative_residual"] < 1e-9
    assert info["field_series"] == "field.vtkhdf" and not (out / "field.pvd").exists()


def test_times_in_csv_keep_their_precision_on_long_runs(tmp_path):
    """Output every 1234.5678 s for ~3 hours: the written times must be the output times."""
    every = 1234.5678
    d = minimal_model_dict()
    d["parts"][0]["rated_c"] = 25.5
    d["run"].update(duration_s=9 * every, step_s=every, output_every_s=every, scheme="backward-euler")
    out = tmp_path / "out"
    rc, err = _solve_in_process(_write(tmp_path / "long.json", d), out)
    assert rc == 0, err
    _, rows = _csv(out / "history.csv")
    times = np.array([float(r[0]) for r in rows])
    np.testing.assert_allclose(times, every * np.arange(10), rtol=1e-12, atol=1e-9)
    ph, prow = _csv(out / "peaks.csv")
    cube = dict(zip(ph, prow[0]))
    assert float(cube["peak_time_s"]) == pytest.approx(9 * every, rel=1e-12)
    assert cube["status"] == "over" and 0.0 < float(cube["first_over_s"]) <= every


@pytest.mark.parametrize("n_points", [16384, 16385, 5000], ids=["full blocks", "one over", "partial"])
def test_vtu_writer_round_trip_through_pyvista(tmp_path, n_points):
    """Compressed blocks of 64 KiB: exactly full, one value over, and partial last blocks."""
    pv = pytest.importorskip("pyvista")
    from solver.io.vtkxml import write_vtu

    rng = np.random.default_rng(n_points)
    pts = rng.uniform(0, 10, (n_points, 3))
    tets = rng.integers(0, n_points, (4096, 4)).astype(np.int64)  # 4096·4·8 bytes = 2 full blocks
    temp = rng.normal(40, 5, n_points).astype(np.float32)
    part_id = rng.integers(0, 3, len(tets)).astype(np.int32)
    path = tmp_path / "frame.vtu"
    write_vtu(path, pts, tets, {"temperature_c": temp}, {"part_id": part_id}, 12.5)
    grid = pv.read(path)
    np.testing.assert_array_equal(np.asarray(grid.points, dtype=float), pts)
    np.testing.assert_array_equal(grid.cells.reshape(-1, 5)[:, 1:], tets)
    np.testing.assert_array_equal(grid.point_data["temperature_c"], temp)
    np.testing.assert_array_equal(grid.cell_data["part_id"], part_id)
    assert float(np.asarray(grid.field_data["TimeValue"])[0]) == 12.5


def test_fields_none_and_method_auto_on_the_command_line(tmp_path):
    model = _write(tmp_path / "m.json", _good_model())
    out = tmp_path / "bare"
    r = _thermgui("solve", model, "--out", out, "--fields", "none", "--method", "auto")
    assert r.returncode == 0, r.stderr
    assert sorted(p.name for p in out.iterdir()) == ["history.csv", "manifest.json", "peaks.csv", "run.json"]
    assert "fields: none written" in r.stdout and "method: " in r.stdout
    info = json.loads((out / "run.json").read_text())
    assert info["solver"]["method"] in ("full", "reduced") and info["solver"]["method_reason"]
    bad = _thermgui("solve", model, "--out", tmp_path / "x", "--fields", "some")
    assert bad.returncode == 2 and "--fields" in bad.stderr
