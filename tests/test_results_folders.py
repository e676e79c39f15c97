"""Results folders as units: staging, manifest, lock, foreign files, kill -9, two runs, damaged folders.

The promises checked here are listed in docs/reliability.md. Timing only decides when to send a
signal (poll until a run has written frames); nothing asserts on wall time.
"""
from __future__ import annotations

import copy
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import solver
from solver.io import runstore
from solver.run.cli import solve_to_folder
from solver.errors import ModelError
from solver.io.runfolder import load_run
from solver.io.fieldseries import FIELD_FILE, LEGACY_SERIES
from tests.hostile_cases import BASE
from tests.runfolderkit import HDF_DAMAGE, field_frames, staged_frames, to_legacy_layout, truncate

ROOT = Path(__file__).resolve().parent.parent


def _write(tmp: Path, d: dict, name="model.json") -> Path:
    p = tmp / name
    p.write_text(json.dumps(d))
    return p


def _solve(model_path, out, *args) -> tuple[int, str]:
    import io

    err = io.StringIO()
    rc = solve_to_folder(model_path, out, quiet=True, err=err, force="--force" in args)
    return rc, err.getvalue()


def _slow_model() -> dict:
    d = copy.deepcopy(BASE)
    d["parts"][0]["size_mm"] = [40, 40, 4]
    d["mesh"]["cell_mm"] = 1.0
    d["run"].update(duration_s=400, step_s=1.0, output_every_s=1.0)
    d["mesh"]["max_levels"] = 2  # accuracy control: the file's mesh and one refinement (streamed)
    return d


def _env():
    return dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))


def _start(model_path, out) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "thermgui", "solve", str(model_path), "--out", str(out), "--quiet"],
                            env=_env(), cwd=str(ROOT), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def _wait_for_frames(out: Path, n: int, proc: subprocess.Popen, limit_s: float = 300.0) -> None:
    """Poll the field file in the staging folder beside ``out`` until it holds ``n`` frames (a
    limit on waiting, not a timed assertion)."""
    t0 = time.monotonic()
    while time.monotonic() - t0 < limit_s:
        assert proc.poll() is None, proc.communicate()
        if staged_frames(out) >= n:
            return
        time.sleep(0.05)
    raise AssertionError("the run never wrote frames")


# ---------------------------------------------------------------- complete runs
def test_a_run_leaves_a_complete_folder_with_a_manifest(tmp_path):
    out = tmp_path / "R"
    rc, err = _solve(_write(tmp_path, BASE), out)
    assert rc == 0, err
    m = json.loads((out / runstore.MANIFEST_NAME).read_text())
    assert m["state"] == "complete" and m["model_sha256"] == runstore.model_hash(solver.parse_model(BASE))
    assert set(m["files"]) == {"peaks.csv", "history.csv", "run.json", FIELD_FILE}
    assert len(m["frames"]) == 3  # t = 0, 2, 4 s
    for rel, meta in m["files"].items():
        assert (out / rel).stat().st_size == meta["bytes"]
    assert m["files"][FIELD_FILE]["bytes"] > 0
    run = load_run(out)
    assert run.notice is None and len(run.times) == 3 and field_frames(out) == 3
    assert [f["time_s"] for f in m["frames"]] == list(run.times)
    assert sorted(p.name for p in out.iterdir()) == sorted([*m["files"], runstore.MANIFEST_NAME])
    assert not list(tmp_path.glob(".R.*")), "no lock or staging folder is left behind"


def test_the_field_file_is_whole_before_the_manifest_is_written(tmp_path, monkeypatch):
    """The background writer has finished and closed field.vtkhdf when the manifest is written and
    the staging folder moved into place; the manifest holds the file's final size."""
    import threading

    import h5py

    before = {t.ident for t in threading.enumerate()}
    seen = {}
    real = runstore.RunFolder.commit

    def commit(self, written, info):
        f = self.write_dir / FIELD_FILE
        seen["writers"] = [t.name for t in threading.enumerate() if t.name == "field-writer" and t.ident not in before]
        seen["written"] = list(written)
        with h5py.File(f, "r") as fh:  # a file still open for writing in this process would be refused here
            seen["steps"] = int(fh["VTKHDF"]["Steps"].attrs["NSteps"])
        seen["bytes"] = f.stat().st_size
        return real(self, written, info)

    monkeypatch.setattr(runstore.RunFolder, "commit", commit)
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    m = json.loads((out / runstore.MANIFEST_NAME).read_text())
    assert seen["writers"] == [] and FIELD_FILE in seen["written"]
    assert seen["steps"] == len(m["frames"]) == 3
    assert m["files"][FIELD_FILE]["bytes"] == seen["bytes"] == (out / FIELD_FILE).stat().st_size


def test_a_rerun_replaces_only_its_own_files(tmp_path):
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    fewer = copy.deepcopy(BASE)
    fewer["run"]["output_every_s"] = 4.0
    assert _solve(_write(tmp_path, fewer, "m2.json"), out)[0] == 0
    run = load_run(out)
    assert len(run.times) == 2 and field_frames(out) == 2
    m = json.loads((out / runstore.MANIFEST_NAME).read_text())
    assert sorted(p.name for p in out.iterdir()) == sorted([*m["files"], runstore.MANIFEST_NAME])


def test_a_rerun_over_a_folder_of_the_pvd_layout_removes_its_frames_and_keeps_the_users(tmp_path):
    out = tmp_path / "R"
    model = _write(tmp_path, BASE)
    assert _solve(model, out)[0] == 0
    to_legacy_layout(out)
    (out / "notes.txt").write_text("mine")
    assert len(list((out / "field").glob("*.vtu"))) == 3
    rc, err = _solve(model, out)
    assert rc == 2 and "notes.txt" in err  # the user's file: refused without --force
    assert _solve(model, out, "--force")[0] == 0
    assert not (out / LEGACY_SERIES).exists() and not (out / "field").exists(), "the earlier run's frames go"
    assert (out / "notes.txt").read_text() == "mine"
    assert load_run(out).notice is None and field_frames(out) == 3


def test_foreign_files_refuse_the_folder_and_force_keeps_them(tmp_path):
    out = tmp_path / "R"
    out.mkdir()
    (out / "my notes.txt").write_text("mine")
    (out / "pics").mkdir()
    (out / "pics" / "view.png").write_bytes(b"\x89PNG")
    model = _write(tmp_path, BASE)
    rc, err = _solve(model, out)
    assert rc == 2 and "--out" in err and "my notes.txt" in err and "--force" in err
    assert sorted(p.name for p in out.rglob("*")) == ["my notes.txt", "pics", "view.png"]
    rc, err = _solve(model, out, "--force")
    assert rc == 0, err
    assert (out / "my notes.txt").read_text() == "mine" and (out / "pics" / "view.png").read_bytes() == b"\x89PNG"
    assert load_run(out).notice is None
    rc, err = _solve(model, out, "--force")  # again: the run's own files are replaced, the user's stay
    assert rc == 0 and (out / "my notes.txt").read_text() == "mine"


def test_a_file_the_user_changed_counts_as_theirs(tmp_path):
    out = tmp_path / "R"
    model = _write(tmp_path, BASE)
    assert _solve(model, out)[0] == 0
    (out / "peaks.csv").write_text("my own table\n")
    with pytest.raises(ModelError, match="mixed or damaged.*peaks.csv.*counts as yours") as e:
        load_run(out)
    assert "move it out of the folder" in str(e.value)
    rc, err = _solve(model, out, "--force")
    assert rc == 2 and "peaks.csv" in err and "never replaces" in err
    assert (out / "peaks.csv").read_text() == "my own table\n"
    # moved away, the earlier run's other files are replaced by the next run
    (out / "peaks.csv").rename(tmp_path / "my table.csv")
    assert _solve(model, out)[0] == 0 and load_run(out).notice is None


def test_record_edits_makes_an_edited_file_the_runs_own(tmp_path):
    out = tmp_path / "R"
    model = _write(tmp_path, BASE)
    assert _solve(model, out)[0] == 0
    rows = (out / "peaks.csv").read_text().splitlines()
    rows[1] = rows[1].replace(",ok", ",at-risk")
    (out / "peaks.csv").write_text("\n".join(rows) + "\n")
    with pytest.raises(ModelError, match="mixed or damaged"):
        load_run(out)
    runstore.record_edits(out, ["peaks.csv"])
    assert load_run(out).peaks[0]["status"] == "at-risk"
    assert runstore.foreign_files(out) == []
    assert _solve(model, out)[0] == 0  # now the run's own: a rerun replaces it without --force
    assert load_run(out).peaks[0]["status"] == "ok"
    for bad in ("../model.json", "nothing.csv"):
        with pytest.raises(ModelError, match="not a file inside"):
            runstore.record_edits(out, [bad])
    (out / runstore.MANIFEST_NAME).unlink()
    with pytest.raises(ModelError, match="no complete manifest"):
        runstore.record_edits(out, ["peaks.csv"])


def test_frames_of_another_run_make_a_folder_mixed(tmp_path):
    a, b = tmp_path / "A", tmp_path / "B"
    assert _solve(_write(tmp_path, BASE), a)[0] == 0
    finer = copy.deepcopy(BASE)
    finer["mesh"]["cell_mm"] = 1.0
    assert _solve(_write(tmp_path, finer, "fine.json"), b)[0] == 0
    shutil.copy(b / FIELD_FILE, a / FIELD_FILE)
    with pytest.raises(ModelError, match="mixed or damaged.*field.vtkhdf"):
        load_run(a)
    # the same without a manifest (a folder written before manifests): the node counts give it away
    (a / runstore.MANIFEST_NAME).unlink()
    with pytest.raises(ModelError, match="mixed"):
        load_run(a)


def test_frames_of_another_run_make_a_pvd_folder_mixed(tmp_path):
    a, b = tmp_path / "A", tmp_path / "B"
    assert _solve(_write(tmp_path, BASE), a)[0] == 0
    finer = copy.deepcopy(BASE)
    finer["mesh"]["cell_mm"] = 1.0
    assert _solve(_write(tmp_path, finer, "fine.json"), b)[0] == 0
    to_legacy_layout(a)
    to_legacy_layout(b)
    shutil.copy(sorted((b / "field").glob("*.vtu"))[-1], sorted((a / "field").glob("*.vtu"))[-1])
    with pytest.raises(ModelError, match="mixed"):
        run = load_run(a)
        run.field(len(run.times) - 1)


def test_a_folder_without_manifest_opens_with_a_notice(tmp_path):
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    (out / runstore.MANIFEST_NAME).unlink()
    run = load_run(out)
    assert run.notice and "before results folders carried a manifest" in run.notice
    assert len(run.times) == 3 and np.isfinite(run.field(2)).all()


def test_a_folder_of_the_pvd_layout_opens_with_a_notice(tmp_path):
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    want = load_run(out)
    want_last = want.field(2).copy()
    want.series.close()
    to_legacy_layout(out)
    run = load_run(out)
    assert run.series.layout == "pvd"
    assert run.notice and "before results folders carried a manifest" in run.notice
    assert list(run.times) == list(want.times)
    np.testing.assert_array_equal(run.field(2), want_last)


# ---------------------------------------------------------------- damaged folders never raise anything else
def _unsealed(tmp_path) -> Path:
    """A complete run without its manifest: as written before manifests (field.vtkhdf layout)."""
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    (out / runstore.MANIFEST_NAME).unlink()
    return out


TABLE_DAMAGE = {
    "history.csv not numbers": lambda d: (d / "history.csv").write_text("time_s,max:plate\nabc,def\n"),
    "history.csv empty": lambda d: (d / "history.csv").write_text(""),
    "run.json holds a list": lambda d: (d / "run.json").write_text("[1, 2]"),
    "run.json model is a list": lambda d: (d / "run.json").write_text('{"model": [1], "mesh": {}}'),
    "run.json nested 50k": lambda d: (d / "run.json").write_text("[" * 50_000 + "]" * 50_000),
    "run.json binary": lambda d: (d / "run.json").write_bytes(bytes(range(256))),
    "peaks.csv huge field": lambda d: (d / "peaks.csv").write_text("part\n" + "x" * 200_000 + "\n"),
    "peaks.csv missing": lambda d: (d / "peaks.csv").unlink(),
}
PVD_DAMAGE = {
    "field.pvd garbage": lambda d: (d / "field.pvd").write_text("<<<not xml"),
    "field.pvd points outside": lambda d: (d / "field.pvd").write_text(
        '<VTKFile><Collection><DataSet timestep="0" file="../../etc/passwd"/></Collection></VTKFile>'),
    "field.pvd bad time": lambda d: (d / "field.pvd").write_text(
        '<VTKFile><Collection><DataSet timestep="soon" file="x.vtu"/></Collection></VTKFile>'),
    "field.pvd no frames": lambda d: (d / "field.pvd").write_text("<VTKFile><Collection/></VTKFile>"),
    "a .vtu truncated": lambda d: truncate(sorted((d / "field").glob("*.vtu"))[-1], 0.5),
    "a .vtu missing": lambda d: sorted((d / "field").glob("*.vtu"))[-1].unlink(),
}


def _open_every_frame(out: Path) -> None:
    run = load_run(out)  # some damage only shows when the frames are read
    run.geometry()
    for i in range(len(run.times)):
        run.field(i)


@pytest.mark.parametrize("kind", list(TABLE_DAMAGE) + list(HDF_DAMAGE))
def test_damaged_folder_is_a_model_error(tmp_path, kind):
    out = _unsealed(tmp_path)
    (TABLE_DAMAGE | HDF_DAMAGE)[kind](out)
    with pytest.raises(ModelError) as err:
        _open_every_frame(out)
    assert str(out) in err.value.describe()
    if kind in HDF_DAMAGE:
        assert "field" in str(err.value)


@pytest.mark.parametrize("kind", list(TABLE_DAMAGE) + list(PVD_DAMAGE))
def test_damaged_folder_of_the_pvd_layout_is_a_model_error(tmp_path, kind):
    out = to_legacy_layout(_unsealed(tmp_path))
    (TABLE_DAMAGE | PVD_DAMAGE)[kind](out)
    with pytest.raises(ModelError) as err:
        _open_every_frame(out)
    assert str(out) in err.value.describe()


@pytest.mark.parametrize("kind", list(HDF_DAMAGE))
def test_a_damaged_field_file_under_a_manifest_is_refused_before_reading(tmp_path, kind):
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    HDF_DAMAGE[kind](out)
    with pytest.raises(ModelError, match="mixed or damaged.*field.vtkhdf"):
        load_run(out)


@pytest.mark.parametrize("cut", [0.5, 0.0])
def test_truncated_field_file_is_refused(tmp_path, cut):
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    truncate(out / FIELD_FILE, cut)
    with pytest.raises(ModelError, match="mixed or damaged.*field.vtkhdf"):
        load_run(out)
    (out / runstore.MANIFEST_NAME).unlink()
    with pytest.raises(ModelError, match="field.vtkhdf is damaged or truncated"):
        _open_every_frame(out)


# ---------------------------------------------------------------- cut short
def test_kill_9_during_a_first_solve_leaves_an_incomplete_folder(tmp_path):
    out = tmp_path / "R"
    model = _write(tmp_path, _slow_model())
    proc = _start(model, out)
    _wait_for_frames(out, 5, proc)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    with pytest.raises(ModelError) as err:
        load_run(out)
    assert "incomplete" in str(err.value) and "cut short" in str(err.value)
    # the next run is not blocked by the dead run's lock, and cleans its staging folder
    quick = _write(tmp_path, BASE, "quick.json")
    rc, msg = _solve(quick, out)
    assert rc == 0, msg
    assert load_run(out).notice is None
    assert not list(tmp_path.glob(".R.*")), "the dead run's lock and staging folder are removed"


def test_kill_9_while_resolving_keeps_the_earlier_complete_run(tmp_path):
    out = tmp_path / "R"
    assert _solve(_write(tmp_path, BASE, "first.json"), out)[0] == 0
    before = {p: p.read_bytes() for p in out.rglob("*") if p.is_file()}
    proc = _start(_write(tmp_path, _slow_model()), out)
    _wait_for_frames(out, 5, proc)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    after = {p: p.read_bytes() for p in out.rglob("*") if p.is_file()}
    assert after == before, "the complete earlier run must stay exactly as it was"
    run = load_run(out)
    assert len(run.times) == 3 and run.notice is None


def test_a_crash_while_moving_files_into_place_reads_as_incomplete(tmp_path, monkeypatch):
    out = tmp_path / "R"
    model = _write(tmp_path, BASE)
    assert _solve(model, out)[0] == 0
    (out / "mine.txt").write_text("kept")
    calls = {"n": 0}
    real = os.replace

    def crash_on_third(a, b):
        calls["n"] += 1
        if calls["n"] == 3:  # 1: the "installing" marker, 2: the first file moved, 3: crash
            raise KeyboardInterrupt("simulated kill")
        return real(a, b)

    monkeypatch.setattr(runstore.os, "replace", crash_on_third)
    with pytest.raises(KeyboardInterrupt):
        solve_to_folder(model, out, quiet=True, force=True)
    monkeypatch.setattr(runstore.os, "replace", real)
    with pytest.raises(ModelError, match="incomplete"):
        load_run(out)
    assert (out / "mine.txt").read_text() == "kept"
    rc, err = _solve(model, out, "--force")
    assert rc == 0, err
    assert load_run(out).notice is None and (out / "mine.txt").read_text() == "kept"


def test_a_full_disk_at_the_end_leaves_the_folder_as_it_was(tmp_path, monkeypatch):
    import errno

    import solver.run.session as session_mod

    out = tmp_path / "R"
    model = _write(tmp_path, BASE)
    assert _solve(model, out)[0] == 0
    before = {p: p.read_bytes() for p in out.rglob("*") if p.is_file()}

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(session_mod, "write_run_info", full)
    rc, err = _solve(model, out)
    assert rc == 1 and "No space left" in err and "left as it was" in err
    assert {p: p.read_bytes() for p in out.rglob("*") if p.is_file()} == before
    assert not list(tmp_path.glob(".R.*"))


# ---------------------------------------------------------------- two runs, one folder
def test_two_runs_on_one_folder(tmp_path):
    out = tmp_path / "R"
    slow = _write(tmp_path, _slow_model(), "slow.json")
    a = _start(slow, out)
    _wait_for_frames(out, 2, a)
    b = subprocess.run([sys.executable, "-m", "thermgui", "solve", str(_write(tmp_path, BASE, "b.json")), "--out",
                        str(out), "--quiet"], env=_env(), cwd=str(ROOT), capture_output=True, text=True, timeout=120)
    assert b.returncode == 2, b.stderr
    assert "in use by another run" in b.stderr and f"pid {a.pid}" in b.stderr
    _, a_err = a.communicate(timeout=300)
    assert a.returncode == 0, a_err
    run = load_run(out)
    assert run.info["model"]["run"]["duration_s"] == 400 and len(run.times) == 401
    m = json.loads((out / runstore.MANIFEST_NAME).read_text())
    assert m["model_sha256"] == runstore.model_hash(solver.parse_model(_slow_model()))
    assert m["nodes"] == run.info["mesh"]["nodes"] == len(run.geometry()["points_mm"])


def test_a_reader_refuses_a_folder_while_its_first_run_writes(tmp_path):
    out = tmp_path / "R"
    a = _start(_write(tmp_path, _slow_model()), out)
    try:
        _wait_for_frames(out, 2, a)
        with pytest.raises(ModelError, match="incomplete: a run is still writing"):
            load_run(out)
    finally:
        a.kill()
        a.wait()


def test_a_lock_of_a_dead_process_is_cleaned(tmp_path):
    out = tmp_path / "R"
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    runstore.lock_path(out).write_text(json.dumps({"pid": dead.pid, "host": os.uname().nodename, "started": "x"}))
    assert _solve(_write(tmp_path, BASE), out)[0] == 0
    assert not runstore.lock_path(out).exists()


def test_a_damaged_lock_file_is_cleaned_once_stale(tmp_path):
    out = tmp_path / "R"
    lock = runstore.lock_path(out)
    lock.write_text("")  # a run killed between creating and filling its lock
    old = time.time() - 60
    os.utime(lock, (old, old))
    assert _solve(_write(tmp_path, BASE), out)[0] == 0


# ---------------------------------------------------------------- planning and estimates
def test_output_landing_matches_the_brute_force_rule():
    from solver.transient.timegrid import TIME_TOL, output_times, plan_steps

    outs = output_times(37.0, 0.7)
    steps = plan_steps(37.0, 0.25, 0.5, [], outs)
    brute = [bool(np.any(np.abs(outs - s.t1) <= TIME_TOL)) for s in steps]
    assert [s.output for s in steps] == brute and sum(brute) == len(outs) - 1


@pytest.mark.parametrize("sample", ["outdoor_radio_box.json", "handheld_tracker.json", "compact_power_stage.json"])
def test_the_estimate_never_exceeds_the_real_mesh(sample):
    """The budget counts planes from the part faces; the mesher only adds planes (grading), so the
    counted grid is a lower bound of the real one and the solid nodes are bounded by the real count
    plus the nodes shared between parts."""
    from solver.mesh.budget import estimate
    from solver.mesh.mesher import build_mesh

    model = solver.load_model(ROOT / "samples" / sample)
    est = estimate(model)
    mesh = build_mesh(model)
    real_planes = [len(l) for l in mesh.lines]
    assert all(e <= r for e, r in zip(est.planes, [p - 1 for p in real_planes]))
    assert est.grid_points <= np.prod(real_planes)


def test_far_apart_parts_are_refused_before_allocation():
    import tracemalloc

    d = copy.deepcopy(BASE)
    d["parts"].append({"name": "far", "material": "blockium", "origin_mm": [4000.0] * 3, "size_mm": [10, 10, 10]})
    model = solver.parse_model(d)
    tracemalloc.start()
    try:
        with pytest.raises(ModelError) as err:
            solver.build_problem(model)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert err.value.first_path == "parts[2].origin_mm" and "far apart" in str(err.value)
    assert peak < 20e6  # bytes: nothing grid-sized was built


def test_out_dot_writes_into_the_working_folder_without_replacing_it(tmp_path, monkeypatch):
    here = tmp_path / "work"
    here.mkdir()
    inode = here.stat().st_ino
    model = _write(tmp_path, BASE)
    monkeypatch.chdir(here)
    assert _solve(model, ".")[0] == 0
    assert _solve(model, ".")[0] == 0  # again: its own files are replaced
    assert here.stat().st_ino == inode, "the folder itself must stay (it is someone's working folder)"
    assert len(load_run(here).times) == 3 and not list(tmp_path.glob(".work.*"))
