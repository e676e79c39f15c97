"""The app never loses the user's files or work: Run keeps the user's files in the results folder,
damaged results folders are refused in the window (no traceback, the open model stays), saving
keeps the file mode and symlinks, recovery is kept per window, a killed save leaves no debris.
Promises and the tests behind them: docs/reliability.md.
"""
from __future__ import annotations

import json
import os
import shutil
import signal
import stat
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("pytestqt")

from solver.run.cli import solve_to_folder  # noqa: E402
from solver.model.modelfile import load_model, parse_model, save_model  # noqa: E402
from solver.io.runfolder import load_run  # noqa: E402
from thermgui.runresults import results_folder_for  # noqa: E402
from modelkit import chip_on_plate  # noqa: E402
from runfolderkit import staged_frames, to_legacy_layout, truncate  # noqa: E402

from .guikit import ScriptedPrompts  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
pytestmark = pytest.mark.gui


def _window(open_main_window, tmp_path, d=None):
    path = tmp_path / "chip.json"
    save_model(parse_model(d or chip_on_plate()), path)
    win = open_main_window(path)
    return win, path


def _run(qtbot, win):
    """Wait for the run to end (a refused run may end before a signal wait could be set up)."""
    res = win.results
    qtbot.waitUntil(lambda: not res.running, timeout=600000)  # accuracy control solves several meshes


def test_app_run_keeps_the_users_files_in_the_results_folder(qtbot, tmp_path, open_main_window):
    win, path = _window(open_main_window, tmp_path)
    folder = results_folder_for(path)
    folder.mkdir()
    (folder / "my notes.txt").write_text("measured 61 °C on the bench")
    (folder / "photos").mkdir()
    (folder / "photos" / "board.png").write_bytes(b"\x89PNG....")
    res = win.results
    assert res.start_run()  # nothing of an earlier run: no question
    _run(qtbot, win)
    assert res.store.complete
    assert (folder / "my notes.txt").read_text() == "measured 61 °C on the bench"
    assert (folder / "photos" / "board.png").read_bytes() == b"\x89PNG...."
    assert len(load_run(folder).times) == res.store.n_frames
    # a second Run asks first; "no" changes nothing
    before = {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()}
    assert not res.start_run()
    ask = win.prompts.messages[-1]
    assert ask[0] == "ask" and "earlier run" in ask[2] and "my notes.txt" in ask[2]
    assert {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()} == before
    # "yes" replaces the run's own files and keeps the user's
    win.prompts.answers.append("yes")
    assert res.start_run()
    _run(qtbot, win)
    assert (folder / "my notes.txt").read_text() == "measured 61 °C on the bench"
    assert (folder / "photos" / "board.png").exists()
    assert load_run(folder).notice is None


def _unsealed_folder(tmp_path, layout="vtkhdf") -> Path:
    """A finished run as written before manifests: field.vtkhdf, or the earlier field.pvd layout."""
    model = tmp_path / "m.json"
    save_model(parse_model(chip_on_plate()), model)
    out = tmp_path / "old.results"
    assert solve_to_folder(model, out, quiet=True) == 0
    (out / "manifest.json").unlink()  # as written before manifests
    return to_legacy_layout(out) if layout == "pvd" else out


def _deep(d):
    (d / "run.json").write_text("[" * 100_000 + "]" * 100_000)


def _huge_name(d):
    info = json.loads((d / "run.json").read_text())
    info["model"]["parts"][0]["name"] = "n" * 131_072
    (d / "run.json").write_text(json.dumps(info))


DAMAGE = {  # (layout of the folder, damage done to it)
    "non-numeric history.csv": ("vtkhdf", lambda d: (d / "history.csv").write_text("time_s,max:chip\nnoon,hot\n")),
    "list in run.json": ("vtkhdf", lambda d: (d / "run.json").write_text("[1, 2, 3]")),
    "truncated field.vtkhdf": ("vtkhdf", lambda d: truncate(d / "field.vtkhdf", 0.5)),
    "garbage field.vtkhdf": ("vtkhdf", lambda d: (d / "field.vtkhdf").write_bytes(b"\x89HDF\r\n\x1a\ngarbage" * 40)),
    "truncated .vtu frame": ("pvd", lambda d: truncate(sorted((d / "field").glob("*.vtu"))[-1], 0.5)),
    "garbage pvd": ("pvd", lambda d: (d / "field.pvd").write_bytes(b"\x00\xffgarbage<<")),
    "131 KB part name": ("vtkhdf", _huge_name),
    "deeply nested run.json": ("vtkhdf", _deep),
}


@pytest.mark.parametrize("kind", list(DAMAGE))
def test_damaged_results_folder_is_refused_in_the_window(qtbot, tmp_path, open_main_window, kind):
    win, path = _window(open_main_window, tmp_path)
    before = win.document.model.to_json_dict()
    layout, damage = DAMAGE[kind]
    folder = _unsealed_folder(tmp_path, layout)
    damage(folder)
    # File > Open on the folder: an error in the window, the open model stays as it was
    assert not win.fileops.open_path(folder, ask_first=False)
    errors = win.prompts.errors()
    assert errors and str(folder) in errors[-1] and "nothing was changed" in errors[-1]
    assert "Traceback" not in errors[-1]
    assert win.document.model.to_json_dict() == before and win.document.path == path
    if kind == "131 KB part name":
        return  # its frames and tables are intact: the results menu may show them (the model is refused)
    # the results menu's open: the message goes to the run panel
    assert win.open_results(folder) is None
    assert win.results.status.message.isVisible() and str(folder) in win.results.status.message.text()


def test_a_cut_short_run_folder_says_incomplete(qtbot, tmp_path, open_main_window):
    win, path = _window(open_main_window, tmp_path)
    folder = tmp_path / "cut.results"
    staging = tmp_path / ".cut.results.staging-4194999"
    staging.mkdir()
    (staging / ".thermgui-staging").write_text(json.dumps({"pid": 4_194_999, "host": os.uname().nodename,
                                                          "started": "2026-01-01T00:00:00Z"}))
    assert not win.fileops.open_path(folder, ask_first=False)
    assert "incomplete" in win.prompts.errors()[-1] and "cut short" in win.prompts.errors()[-1]
    assert win.document.path == path


def test_open_a_finished_run_in_either_field_layout(qtbot, tmp_path, open_main_window):
    """As ``thermgui open DIR`` does (open_window on the folder): a complete field.vtkhdf run opens
    without a note; the same run in the earlier .pvd layout opens the same frames, with a note."""
    model = tmp_path / "m.json"
    save_model(parse_model(chip_on_plate()), model)
    new = tmp_path / "new.results"
    assert solve_to_folder(model, new, quiet=True) == 0
    old = tmp_path / "old.results"
    shutil.copytree(new, old)
    to_legacy_layout(old)
    win = open_main_window(new)
    res = win.results
    assert not win.prompts.errors() and res.store is not None and res.results_shown
    frames = len(load_run(new).times)
    assert res.store.n_frames == frames and not res.status.message.isVisible()
    last = res.store.frame(frames - 1).copy()
    assert win.fileops.open_path(old, ask_first=False)
    assert not win.prompts.errors() and res.store.n_frames == frames
    np.testing.assert_array_equal(res.store.frame(frames - 1), last)
    note = res.status.message.text()
    assert res.status.message.isVisible() and "before results folders carried a manifest" in note
    assert "field.pvd" in note


def test_a_killed_solve_and_a_truncated_field_file_are_refused_and_the_model_stays(qtbot, tmp_path,
                                                                                   open_main_window):
    from tests.test_results_folders import _slow_model

    win, path = _window(open_main_window, tmp_path)
    before = win.document.model.to_json_dict()
    slow = tmp_path / "slow.json"
    slow.write_text(json.dumps(_slow_model()))
    killed = tmp_path / "killed.results"
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, "-m", "thermgui", "solve", str(slow), "--out", str(killed), "--quiet"],
                            env=env, cwd=str(ROOT), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        t0 = time.monotonic()
        while staged_frames(killed) < 3:
            assert proc.poll() is None, proc.stderr.read()
            assert time.monotonic() - t0 < 300, "the solve never wrote frames"
            time.sleep(0.05)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    assert not win.fileops.open_path(killed, ask_first=False)
    said = win.prompts.errors()[-1]
    assert str(killed) in said and "incomplete" in said and "cut short" in said and "Traceback" not in said
    assert win.document.model.to_json_dict() == before and win.document.path == path
    # a complete run whose field.vtkhdf was cut in half afterwards
    cut = tmp_path / "cut.results"
    assert solve_to_folder(path, cut, quiet=True) == 0
    truncate(cut / "field.vtkhdf", 0.5)
    assert not win.fileops.open_path(cut, ask_first=False)
    said = win.prompts.errors()[-1]
    assert str(cut) in said and "field.vtkhdf" in said and "truncated" in said and "Traceback" not in said
    assert win.document.model.to_json_dict() == before and win.document.path == path
    assert win.open_results(cut) is None  # the results menu's open: the message in the run panel
    assert "truncated" in win.results.status.message.text()


# ---------------------------------------------------------------- saving
def test_saving_keeps_the_mode_and_writes_through_a_symlink(tmp_path):
    model = parse_model(chip_on_plate())
    target = tmp_path / "real" / "chip.json"
    target.parent.mkdir()
    save_model(model, target)
    os.chmod(target, 0o640)
    link = tmp_path / "link.json"
    link.symlink_to(target)
    edited = parse_model(dict(chip_on_plate(), title="edited through the link"))
    save_model(edited, link)
    assert link.is_symlink() and os.readlink(link) == str(target)
    assert load_model(target).title == "edited through the link"
    assert stat.S_IMODE(target.stat().st_mode) == 0o640
    fresh = tmp_path / "new.json"
    umask = os.umask(0o022)
    try:
        save_model(model, fresh)
    finally:
        os.umask(umask)
    assert stat.S_IMODE(fresh.stat().st_mode) == 0o644
    assert not list(tmp_path.rglob(".~*"))


SAVER = """
import sys, json
from solver.model.modelfile import parse_model, save_model
d = json.loads(open(sys.argv[1]).read())
big = dict(d, parts=d["parts"] + [dict(d["parts"][0], name=f"pad {i}", origin_mm=[100.0 + i, 0, 0])
                                   for i in range(6000)])
models = [parse_model(d), parse_model(big)]
print("ready", flush=True)
i = 0
while True:
    save_model(models[i % 2], sys.argv[2])
    i += 1
"""


def test_kill_9_during_saves_leaves_a_whole_model_and_no_debris_after_the_next_open(tmp_path, open_main_window):
    d = chip_on_plate()
    src = tmp_path / "src.json"
    src.write_text(json.dumps(d))
    target = tmp_path / "chip.json"
    save_model(parse_model(d), target)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, "-c", SAVER, str(src), str(target)], env=env,
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "ready"
    # wait until a temporary file is being written (kill in the middle of a save), at most ~30 s
    t0 = time.monotonic()
    while not list(tmp_path.glob(".~chip.json.*.tmp")) and time.monotonic() - t0 < 30:
        time.sleep(0.001)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    m = load_model(target)  # a whole model, old or new, never a torn file
    assert len(m.parts) in (len(d["parts"]), len(d["parts"]) + 6000)
    leftover = tmp_path / f".~chip.json.{proc.pid}.tmp"
    if not leftover.exists():  # the kill fell between two saves: leave the debris a kill would
        leftover.write_text("{ half a model")
    win = open_main_window(target)
    assert win.document.path == target
    assert not leftover.exists(), "the killed save's temporary file is removed on the next open"


# ---------------------------------------------------------------- recovery per window
def test_two_untitled_windows_keep_two_recovery_files(tmp_path, open_main_window, gui_state):
    w1 = open_main_window(None)
    w2 = open_main_window(None)
    for w, title in ((w1, "first window's edits"), (w2, "second window's edits")):
        w.document.edit(dict(w.document.model_dict(), title=title), "title")
        assert w.fileops.autosave() is not None
    p1, p2 = w1.fileops.recovery_path(), w2.fileops.recovery_path()
    assert p1 != p2 and p1.exists() and p2.exists()
    # both "crash"; files stay
    for w in (w1, w2):
        w.fileops.timer.stop()
        w.shutdown()
    # files of a live process are not offered: pretend the crashed session's pid is gone
    dead = 4_194_000
    for p in (p1, p2):
        p.rename(p.with_name(p.name.replace(f"-{os.getpid()}-", f"-{dead}-")))
    titles = set()
    for _ in range(2):
        prompts = ScriptedPrompts()
        prompts.answers.append("yes")
        w = open_main_window(None, prompts=prompts)
        titles.add(w.document.model.title)
    assert titles == {"first window's edits", "second window's edits"}


APP_RUN = """
import sys
from pathlib import Path
from thermgui.app import make_application, open_window
from tests.gui.guikit import ScriptedPrompts
app = make_application()
prompts = ScriptedPrompts()
prompts.answers.append("yes")  # replace the earlier results
w = open_window(Path(sys.argv[1]), prompts=prompts, auto_update=False, autosave_s=0)
assert w.results.start_run()
app.exec()
"""


def test_kill_9_during_an_app_run_keeps_the_earlier_results(tmp_path):
    from tests.test_results_folders import _slow_model

    slow = _slow_model()
    slow["run"]["duration_s"] = 1500
    path = tmp_path / "slow.json"
    save_model(parse_model(slow), path)
    quick = tmp_path / "quick.json"
    save_model(parse_model(chip_on_plate()), quick)
    folder = results_folder_for(path)
    assert solve_to_folder(quick, folder, quiet=True) == 0  # an earlier, complete run
    (folder / "notes.txt").write_text("mine")
    before = {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()}
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
               QT_QPA_PLATFORM="offscreen")
    proc = subprocess.Popen([sys.executable, "-c", APP_RUN, str(path)], env=env, cwd=str(ROOT),
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        t0 = time.monotonic()
        while staged_frames(folder) < 5:
            assert proc.poll() is None, proc.stderr.read()
            assert time.monotonic() - t0 < 300, "the app run never wrote frames"
            time.sleep(0.05)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    assert {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()} == before
    run = load_run(folder)
    assert run.notice is None and run.info["model"]["run"]["duration_s"] == chip_on_plate()["run"]["duration_s"]
    # the next run cleans the dead run's lock and staging folder
    assert solve_to_folder(quick, folder, quiet=True, force=True) == 0
    assert not list(tmp_path.glob(".slow.results.*"))
    assert (folder / "notes.txt").read_text() == "mine"


def test_a_results_folder_in_use_is_refused_in_the_window(qtbot, tmp_path, open_main_window):
    win, path = _window(open_main_window, tmp_path)
    folder = results_folder_for(path)
    holder = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        lock = folder.parent / f".{folder.name}.lock"
        lock.write_text(json.dumps({"pid": holder.pid, "host": os.uname().nodename, "started": "just now"}))
        res = win.results
        assert res.start_run()
        _run(qtbot, win)
        text = res.status.message.text()
        assert res.status.message.isVisible() and "in use by another run" in text and f"pid {holder.pid}" in text
        assert not folder.exists()
    finally:
        holder.kill()
        holder.wait()
    # once the holder is gone, Run works and leaves no lock behind
    assert res.start_run()
    _run(qtbot, win)
    assert res.store.complete and folder.is_dir() and not lock.exists()


@pytest.mark.parametrize("content", ["[" * 100_000 + "]" * 100_000, '["a list"]', '{"model": 5}', "\x00\xff"])
def test_a_damaged_recovery_file_is_reported_and_kept(open_main_window, gui_state, content):
    rec = gui_state / "recovery" / "untitled.recovery.json"
    rec.parent.mkdir(parents=True)
    rec.write_text(content)
    prompts = ScriptedPrompts()
    w = open_main_window(None, prompts=prompts)
    errors = prompts.errors()
    assert errors and "cannot be read" in errors[-1] and str(rec) in errors[-1]
    assert rec.exists() and w.document.path is None
