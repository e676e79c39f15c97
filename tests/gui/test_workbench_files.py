"""Files in the workbench: save and reopen, bad files, unsaved-changes prompt, recent files, recovery."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from solver.model.modelfile import load_model
from thermgui.fileops import recovery_file

from .guikit import ROOT, SAMPLE, ScriptedPrompts

pytestmark = pytest.mark.gui


def edit_some(window):
    """A few edits of different kinds, as a user might make them."""
    w = window
    w.item_tree.select("parts", w.document.model.part_index("regulator"))
    w.properties.forms["parts"].dims.fields[1].set_text_and_commit("7.5")
    w.actions_["add_load"].trigger()
    w.properties.forms["heat_loads"].profile.fields["constant"]["value"].set_text_and_commit("0.25")
    w.item_tree.select("parts", w.document.model.part_index("lid"))
    w.properties.forms["parts"].rated.set_text_and_commit("60")


def test_save_reopen_gives_the_same_model(open_main_window, sample_copy, tmp_path):
    w = open_main_window(sample_copy)
    edit_some(w)
    assert w.document.dirty
    edited = w.document.model_dict()
    target = tmp_path / "saved" / "radio box v2.json"
    target.parent.mkdir()
    w.prompts.paths.append(str(target))
    assert w.actions_["save_as"].trigger() is None and target.exists()
    assert not w.document.dirty and w.document.path == target
    assert "radio box v2.json" in w.windowTitle() and not w.isWindowModified()
    # no temporary file is left beside the model
    assert [p.name for p in target.parent.iterdir()] == ["radio box v2.json"]
    # the file on disk holds the edited model, and the engine reads it
    assert load_model(target).to_json_dict() == edited
    # open it in a fresh window: everything equal, nothing to save
    w2 = open_main_window(target)
    assert w2.document.model_dict() == edited
    assert not w2.document.dirty
    assert str(target.resolve()) == w2.fileops.recent_files()[0]
    # the three edits are there as the user made them
    m = w2.document.model
    assert m.parts[m.part_index("regulator")].size_mm[1] == 7.5
    assert m.parts[m.part_index("lid")].rated_c == 60
    assert [h.part for h in m.heat_loads][-1] == "regulator" and m.heat_loads[-1].profile.value == 0.25


def test_bad_file_gives_a_message_and_keeps_the_model(main_window, tmp_path):
    w = main_window
    before, path_before = w.document.model_dict(), w.document.path
    bad = json.loads(SAMPLE.read_text())
    bad["parts"][2]["size_mm"][1] = -80
    bad_file = tmp_path / "broken box.json"
    bad_file.write_text(json.dumps(bad))
    w.prompts.paths.append(str(bad_file))
    w.actions_["open"].trigger()
    (msg,) = w.prompts.errors()
    assert "broken box.json" in msg and "parts[2].size_mm[1]" in msg and "greater than 0" in msg
    assert w.document.model_dict() == before and w.document.path == path_before
    # not JSON at all
    junk = tmp_path / "junk.json"
    junk.write_text("{ this is not json")
    assert not w.fileops.open_path(junk)
    assert "junk.json" in w.prompts.errors()[-1] and "not valid JSON" in w.prompts.errors()[-1]
    assert w.document.model_dict() == before


def test_app_started_on_a_bad_file_opens_a_new_model(open_main_window, tmp_path):
    bad_file = tmp_path / "unknown key.json"
    d = json.loads(SAMPLE.read_text())
    d["colour"] = "red"
    bad_file.write_text(json.dumps(d))
    prompts = ScriptedPrompts()
    w = open_main_window(bad_file, prompts=prompts)
    (msg,) = prompts.errors()
    assert "unknown key.json" in msg and "colour" in msg and "unknown key" in msg
    assert w.document.path is None and not w.document.dirty
    assert [p.name for p in w.document.model.parts] == ["base plate"]


def test_unsaved_changes_prompt(main_window):
    w = main_window
    w.item_tree.select("parts", 0)
    w.properties.forms["parts"].rated.set_text_and_commit("90")
    edited = w.document.model_dict()
    w.prompts.answers.append("cancel")
    assert not w.fileops.new_file()
    assert w.document.model_dict() == edited
    assert w.prompts.messages[-1][0] == "ask" and "not saved" in w.prompts.messages[-1][2]
    w.prompts.answers.append("discard")
    assert w.fileops.new_file()
    assert [p.name for p in w.document.model.parts] == ["base plate"] and w.document.path is None
    # closing with unsaved changes asks too; "cancel" keeps the window open
    w.item_tree.select("parts", 0)
    w.properties.forms["parts"].rated.set_text_and_commit("90")
    w.prompts.answers.append("cancel")
    assert not w.close()
    assert w.isVisible()


def test_autosave_and_recovery_after_a_crash(open_main_window, sample_copy, gui_state, qtbot):
    w = open_main_window(sample_copy, autosave_s=0.2)
    rec = recovery_file(sample_copy, gui_state / "recovery")
    assert not rec.exists()
    w.item_tree.select("parts", w.document.model.part_index("main board"))
    w.properties.forms["parts"].corner.fields[2].set_text_and_commit("12")
    edited = w.document.model_dict()
    qtbot.waitUntil(rec.exists, timeout=5000)  # written by the autosave timer
    assert json.loads(rec.read_text())["model"] == edited
    assert load_model(sample_copy).to_json_dict() != edited  # the model file itself is untouched
    # "crash": the window goes away without the normal close (no prompt, recovery file kept)
    w.fileops.timer.stop()
    w.shutdown()
    assert rec.exists()
    # next start on the same file: the kept changes are offered back
    prompts = ScriptedPrompts()
    prompts.answers.append("yes")
    w2 = open_main_window(sample_copy, prompts=prompts)
    asks = [t for k, _, t in prompts.messages if k == "ask"]
    assert len(asks) == 1 and "unsaved changes" in asks[0] and SAMPLE.name in asks[0]
    assert w2.document.model_dict() == edited
    assert w2.document.dirty and w2.document.path == sample_copy
    # saving clears the recovery file
    assert w2.fileops.save()
    assert not rec.exists() and not w2.document.dirty


def test_declined_recovery_is_deleted(open_main_window, sample_copy, gui_state):
    rec = recovery_file(sample_copy, gui_state / "recovery")
    rec.parent.mkdir(parents=True)
    d = load_model(sample_copy).to_json_dict()
    d["title"] = "kept copy"
    rec.write_text(json.dumps({"format": "thermgui-recovery", "version": 1, "model_path": str(sample_copy),
                               "saved_at": "earlier", "model": d}))
    prompts = ScriptedPrompts()
    prompts.answers.append("no")
    w = open_main_window(sample_copy, prompts=prompts)
    assert w.document.model.title != "kept copy" and not w.document.dirty
    assert not rec.exists()


def test_save_picture(main_window, tmp_path):
    w = main_window
    out = tmp_path / "view.png"
    w.prompts.paths.append(str(out))
    w.actions_["picture"].trigger()
    assert out.exists() and out.stat().st_size > 1000


def test_thermgui_command_opens_a_window(tmp_path):
    """`thermgui` with no argument stays up on the default sample until it is stopped."""
    env = {**os.environ, "THERMGUI_STATE_DIR": str(tmp_path)}  # DISPLAY comes from pytest-xvfb
    code = ("import sys\n"
            "from PySide6.QtCore import QTimer\n"
            "import thermgui.app as a\n"
            "orig = a.open_window\n"
            "def spy(*args, **kw):\n"
            "    w = orig(*args, **kw)\n"
            "    print('TITLE', w.windowTitle(), len(w.document.model.parts), w.isVisible(), flush=True)\n"
            "    print('PATH', w.document.path, flush=True)\n"
            "    w.document.undo_stack.setClean()\n"
            "    QTimer.singleShot(1500, w.close)\n"
            "    return w\n"
            "a.open_window = spy\n"
            "from thermgui.cli import main\n"
            "sys.exit(main([]))\n")
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert "Traceback" not in r.stderr
    n_parts = len(load_model(SAMPLE).parts)
    # the bundled sample opens as an unsaved copy, so saving never overwrites the shipped file
    assert f"TITLE {SAMPLE.name} (sample copy)[*] — thermgui {n_parts} True" in r.stdout
    # a normal close keeps the window layout for next time
    assert "PATH None" in r.stdout
    assert "geometry" in (tmp_path / "settings.ini").read_text()


def test_open_a_results_folder(open_main_window, tmp_path):
    """`thermgui open FOLDER` on a finished run opens the model stored with the run
    (showing the stored results is the results module's part, tested there)."""
    from solver.run.cli import solve_to_folder
    from solver.model.modelfile import parse_model

    cube = {"format": "thermgui-model", "version": 1, "title": "warm cube",
            "parts": [{"name": "cube", "material": "aluminium-6061", "origin_mm": [0, 0, 0],
                       "size_mm": [10, 10, 10], "rated_c": 100.0}],
            "heat_loads": [{"part": "cube", "profile": {"type": "constant", "value": 1.0}}],
            "convection": [{"name": "all", "part": "cube", "side": "exposed", "h": 10.0}],
            "mesh": {"cell_mm": 5.0, "min_layers": 2},
            "run": {"duration_s": 10.0, "step_s": 1.0, "scheme": "backward-euler", "mass": "lumped",
                    "output_every_s": 5.0}}
    model_file = tmp_path / "cube.json"
    model_file.write_text(json.dumps(cube))
    out = tmp_path / "cube results"
    assert solve_to_folder(model_file, out, quiet=True) == 0
    stored = json.loads((out / "run.json").read_text())["model"]
    w = open_main_window(out)
    assert w.prompts.errors() == []
    assert w.document.model_dict() == parse_model(stored).to_json_dict()
    assert w.document.path is None and not w.document.dirty
    # a damaged results folder is reported and changes nothing
    before = w.document.model_dict()
    (out / "run.json").write_text("{ broken")
    assert not w.fileops.open_path(out)
    assert "cube results" in w.prompts.errors()[-1] and "damaged" in w.prompts.errors()[-1]
    assert w.document.model_dict() == before


def test_recent_files_menu(open_main_window, sample_copy, tmp_path):
    w = open_main_window(sample_copy)
    other = tmp_path / "other.json"
    other.write_text(sample_copy.read_text())
    assert w.fileops.open_path(other)
    titles = [a.text() for a in w.recent_menu.actions() if a.text()]
    assert titles[:2] == ["other.json", sample_copy.name]
    # a recent file that has gone away: a message, and it leaves the list
    other.unlink()
    next(a for a in w.recent_menu.actions() if a.text() == "other.json").trigger()
    assert "other.json" in w.prompts.errors()[-1] and "file not found" in w.prompts.errors()[-1]
    assert [a.text() for a in w.recent_menu.actions() if a.text()][0] == sample_copy.name
