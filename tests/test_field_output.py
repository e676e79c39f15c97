"""The field file (solver/io/fieldseries.py): VTKHDF written beside the stepping, read back by VTK's
own vtkHDFReader (a general VTK reader, outside this project) and by pyvista; folders written
before it (field.pvd + whole-mesh .vtu frames) still open; writer errors name the folder.
Invented scenario: the chip-on-plate test model."""
from __future__ import annotations

import io
import json
import shutil

import numpy as np
import pytest

import solver
from solver.run.cli import solve_to_folder
from solver.io.fieldseries import FIELD_FILE, FieldWriteError, FieldWriter, open_field_series
from solver.io.runfolder import is_run_folder, load_run
from solver.run.session import RunSession
from tests.modelkit import chip_on_plate
from tests.runfolderkit import to_legacy_layout


@pytest.fixture(scope="module")
def problem():
    return solver.build_problem(solver.parse_model(chip_on_plate()))


def _vtk_frames(path):
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkIOHDF import vtkHDFReader

    r = vtkHDFReader()
    r.SetFileName(str(path))
    r.Update()
    times = np.array(r.GetOutputInformation(0).Get(r.GetExecutive().TIME_STEPS()))
    frames = []
    for k in range(r.GetNumberOfSteps()):
        r.SetStep(k)
        r.Update()
        out = r.GetOutput()
        frames.append(vtk_to_numpy(out.GetPointData().GetArray("temperature_c")).copy())
        assert out.GetNumberOfPoints() > 0 and out.GetNumberOfCells() > 0
    return times, np.array(frames)


@pytest.mark.parametrize("compression", [None, 1], ids=["plain", "gzip-1"])
def test_frames_round_trip_through_vtk_and_our_reader(tmp_path, problem, compression):
    rng = np.random.default_rng(7)
    n = problem.n_nodes
    frames = rng.normal(40.0, 5.0, (9, n))
    times = np.arange(9) * 2.5
    w = FieldWriter(tmp_path, problem, compression=compression, queue_frames=2)  # small queue: the caller waits
    for t, f in zip(times, frames):
        w(t, f)
    w.close()
    assert w.written_files() == [FIELD_FILE] and w.n_frames == 9
    vt, vf = _vtk_frames(tmp_path / FIELD_FILE)
    np.testing.assert_allclose(vt, times)
    np.testing.assert_array_equal(vf, frames.astype(np.float32))
    s = open_field_series(tmp_path)
    assert s.layout == "vtkhdf" and len(s) == 9
    np.testing.assert_array_equal(s.field(4), frames[4].astype(np.float32))
    g = s.geometry()
    np.testing.assert_allclose(g["points_mm"], problem.mesh.nodes * 1000.0)
    np.testing.assert_array_equal(g["tets"], problem.mesh.tets)
    np.testing.assert_array_equal(g["part_id"], problem.mesh.tet_part)
    s.close()  # the file is not held open; a later read opens it again
    np.testing.assert_array_equal(s.field(8), frames[8].astype(np.float32))
    s.close()


def test_fields_none_writes_nothing(tmp_path, problem):
    w = FieldWriter(tmp_path, problem, fields="none")
    w(0.0, np.zeros(problem.n_nodes))
    w.close()
    assert w.written_files() == [] and not any(tmp_path.iterdir())
    with pytest.raises(ValueError):
        FieldWriter(tmp_path, problem, fields="some")


def test_writer_failure_is_an_oserror_naming_the_folder(tmp_path, problem):
    (tmp_path / FIELD_FILE).mkdir()  # the file cannot be created where a folder of that name is
    w = FieldWriter(tmp_path, problem)
    with pytest.raises(FieldWriteError) as e:
        for k in range(200):  # the error arrives on the writer thread; a later call or close reports it
            w(float(k), np.zeros(problem.n_nodes))
        w.close()
    assert str(tmp_path) in str(e.value) and "cannot write the temperature field" in str(e.value)
    assert isinstance(e.value, OSError)
    w.abort()  # idempotent after the failure


def test_a_writer_thread_that_ends_unexpectedly_is_reported_not_waited_for(tmp_path, problem, monkeypatch):
    """Found in use: the writer thread died outside its error handling and the run waited on a
    full queue forever. Now the caller notices the thread is gone and raises."""
    import threading

    monkeypatch.setattr(FieldWriter, "_work", lambda self, geometry: None)  # ends at once, no error recorded
    w = FieldWriter(tmp_path, problem, queue_frames=1)
    outcome = {}

    def feed():
        try:
            for k in range(5):
                w(float(k), np.zeros(problem.n_nodes))
            outcome["result"] = "returned"
        except FieldWriteError as e:
            outcome["result"] = str(e)

    t = threading.Thread(target=feed, daemon=True)
    t.start()
    t.join(timeout=20.0)
    assert not t.is_alive(), "the caller is still waiting on a writer that no longer exists"
    assert "stopped unexpectedly" in outcome["result"] and str(tmp_path) in outcome["result"]


def test_a_missing_hdf5_package_is_reported_before_any_solving(tmp_path, problem, monkeypatch):
    import solver.io.fieldseries as fs

    def missing():
        raise OSError("the field file needs the h5py package (No module named 'h5py')")

    monkeypatch.setattr(fs, "_h5py", missing)
    with pytest.raises(OSError, match="h5py"):
        FieldWriter(tmp_path, problem)
    FieldWriter(tmp_path, problem, fields="none").close()  # no field file, no package needed
    model = tmp_path / "chip.json"
    model.write_text(json.dumps(chip_on_plate()))
    err = io.StringIO()
    assert solve_to_folder(model, tmp_path / "out", quiet=True, err=err) == 1
    assert "h5py" in err.getvalue() and "Traceback" not in err.getvalue()
    assert not (tmp_path / "out").exists()  # nothing half-written where the user asked for results


def test_cli_exit_1_with_the_folder_named_when_the_field_cannot_be_written(tmp_path):
    model = tmp_path / "chip.json"
    model.write_text(json.dumps(chip_on_plate()))
    out = tmp_path / "out"
    (out / FIELD_FILE).mkdir(parents=True)
    err = io.StringIO()
    rc = solve_to_folder(model, out, quiet=True, err=err)
    assert rc == 1
    msg = err.getvalue()
    assert str(out) in msg and "cannot write" in msg and "Traceback" not in msg


def _legacy_copy(src, dst):
    """The same run in the layout written before field.vtkhdf (and before manifests): field.pvd +
    one whole-mesh .vtu per frame."""
    shutil.copytree(src, dst)
    to_legacy_layout(dst)


def test_folders_written_before_still_open(tmp_path):
    model = tmp_path / "chip.json"
    model.write_text(json.dumps(chip_on_plate()))
    new = tmp_path / "new"
    assert solve_to_folder(model, new, quiet=True) == 0
    _legacy_copy(new, tmp_path / "old")
    a, b = load_run(new), load_run(tmp_path / "old")
    assert a.series.layout == "vtkhdf" and b.series.layout == "pvd"
    assert a.notice is None and "field.pvd layout" in b.notice
    np.testing.assert_array_equal(a.times, b.times)
    for key in ("points_mm", "tets", "part_id"):
        np.testing.assert_array_equal(a.geometry()[key], b.geometry()[key])
    for i in (0, len(a.times) - 1):
        np.testing.assert_array_equal(a.field(i), b.field(i))
    # the history's part maxima are the field's (outside check: plain numpy over the cells' nodes)
    geo = a.geometry()
    last = a.field(len(a.times) - 1)
    chip = [p["name"] for p in a.model_dict["parts"]].index("chip")
    nodes = np.unique(geo["tets"][geo["part_id"] == chip])
    assert last[nodes].max() == pytest.approx(a.history[-1, a.history_header.index("max:chip")], abs=2e-3)


def test_a_run_without_fields_is_still_a_results_folder(tmp_path):
    model = tmp_path / "chip.json"
    model.write_text(json.dumps(chip_on_plate()))
    out = tmp_path / "out"
    assert solve_to_folder(model, out, quiet=True, fields="none") == 0
    assert sorted(p.name for p in out.iterdir()) == ["history.csv", "manifest.json", "peaks.csv", "run.json"]
    assert is_run_folder(out)
    run = load_run(out)
    assert not run.has_fields and len(run.history) > 1


def test_session_lists_what_its_writer_wrote(tmp_path):
    s = RunSession(solver.parse_model(chip_on_plate()), tmp_path / "o")
    for _ in s.events():
        pass
    s.finish()
    assert s.written_files() == [FIELD_FILE] and (tmp_path / "o" / FIELD_FILE).is_file()
    assert len(open_field_series(tmp_path / "o")) == len(load_run(tmp_path / "o").history)
