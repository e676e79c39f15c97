"""Design-review touches in the window, driven through real widgets: File ▸ Export Report…, export
dialogs that start in the model's folder, and the small things of issue 13."""
from __future__ import annotations

from pathlib import Path

import pytest

pytest.importorskip("pytestqt")

from modelkit import chip_on_plate  # noqa: E402
from solver.model import parse_model, save_model  # noqa: E402

pytestmark = pytest.mark.gui


def saved_chip(folder: Path, **run) -> Path:
    path = folder / "chip.json"
    save_model(parse_model(chip_on_plate(**run)), path)
    return path


def run_to_end(qtbot, win, timeout=60000):
    res = win.results
    assert res.start_run()
    qtbot.waitUntil(lambda: not res.running and res.store is not None and res.store.complete, timeout=timeout)


def menu_action(win, menu, text):
    return next(a for a in win.menus[menu].actions() if a.text().replace("&", "") == text)


def test_export_report_from_the_file_menu(qtbot, open_main_window, tmp_path):
    models = tmp_path / "models"
    models.mkdir()
    win = open_main_window(saved_chip(models))
    action = menu_action(win, "file", "Export Report…")
    assert not action.isEnabled()  # nothing to report before a run
    run_to_end(qtbot, win)
    assert action.isEnabled()
    target = tmp_path / "out" / "review.html"
    win.prompts.paths.append(str(target))
    action.trigger()
    # the dialog started in the model's folder, with a name after the model
    kind, title, start = win.prompts.messages[-1]
    assert kind == "path" and Path(start) == models / "chip-report.html"
    html = target.read_text(encoding="utf-8")
    assert "Design review: chip.results" in html and "OVER" in html
    assert "measurement on real hardware" in html
    assert win.prompts.errors() == [] and not win.results.status.message.isVisible()


def test_export_dialogs_start_in_the_model_folder(qtbot, open_main_window, tmp_path):
    models = tmp_path / "models"
    models.mkdir()
    win = open_main_window(saved_chip(models))
    run_to_end(qtbot, win)
    res = win.results
    out = tmp_path / "peaks-out.csv"
    win.prompts.paths.append(str(out))
    res.export_action.trigger()
    assert Path(win.prompts.messages[-1][2]) == models / "chip-peaks.csv"
    assert out.read_text().startswith("part,rated_c")
    win.prompts.paths.append("")  # cancelled: nothing written
    res._ask_picture()
    assert Path(win.prompts.messages[-1][2]) == models / "chip-view.png"


def test_undo_button_keeps_its_width(main_window):
    w = main_window
    button = w.toolbar.widgetForAction(w.actions_["undo_button"])
    before = (button.sizeHint().width(), w.toolbar.sizeHint().width())
    i = w.document.model.part_index("radio module")
    d = w.document.model_dict()
    d["parts"][i]["size_mm"][2] += 1.0
    w.document.edit(d, "Set size z of part 'radio module' in the long name of a command")
    assert w.actions_["undo"].text().startswith("&Undo Set size z")  # the menu item names the command
    assert button.text() == "Undo" and "Set size z" in button.toolTip()
    assert (button.sizeHint().width(), w.toolbar.sizeHint().width()) == before
    assert button.isEnabled()
    button.click()
    assert w.document.model.parts[i].size_mm[2] == d["parts"][i]["size_mm"][2] - 1.0
    assert not button.isEnabled()


def test_space_plays_and_step_buttons_show_single_steps(qtbot, open_main_window, tmp_path):
    from PySide6.QtCore import Qt
    from PySide6.QtWidgets import QApplication, QStyle

    win = open_main_window(saved_chip(tmp_path))
    run_to_end(qtbot, win)
    tl = win.results.timeline
    tl.set_index(0)
    win.activateWindow()  # window shortcuts answer in the active window
    qtbot.waitUntil(lambda: QApplication.activeWindow() is win, timeout=5000)
    win.viewport.plotter.interactor.setFocus()
    qtbot.keyClick(win.viewport.plotter.interactor, Qt.Key_Space)
    assert tl.timer.isActive()
    qtbot.keyClick(win.viewport.plotter.interactor, Qt.Key_Space)
    assert not tl.timer.isActive()
    # a text field with the focus still takes its spaces
    win.item_tree.select("study", 0)
    title = win.properties.forms["study"].title
    title.setFocus()
    title.end(False)
    qtbot.keyClick(title, Qt.Key_Space)
    assert title.text().endswith(" ") and not tl.timer.isActive()
    st = win.style()
    img = lambda icon: icon.pixmap(16, 16).toImage()  # noqa: E731
    assert img(tl.back_button.icon()) == img(st.standardIcon(QStyle.SP_ArrowLeft))
    assert img(tl.back_button.icon()) != img(st.standardIcon(QStyle.SP_MediaSkipBackward))
    assert img(tl.forward_button.icon()) != img(st.standardIcon(QStyle.SP_MediaSkipForward))


def test_unsaved_runs_leave_no_temp_folders(qtbot, open_main_window):
    import tempfile

    win = open_main_window(None)
    win.document.reset(parse_model(chip_on_plate()), None)
    res = win.results
    run_to_end(qtbot, win)
    first = res.store.folder
    root = first.parent
    assert Path(tempfile.gettempdir()).resolve() in root.resolve().parents and first.is_dir()
    assert str(first) in res.status.detail.text()  # the full path, not only the folder's name
    run_to_end(qtbot, win)
    assert res.store.folder != first and not root.exists()  # only the newest unsaved run is kept
    newest = res.store.folder.parent
    win.shutdown()
    assert not newest.exists()


def test_stale_temp_folders_are_removed(tmp_path, monkeypatch):
    import os
    import tempfile
    import time

    from thermgui.runresults.controller import TEMP_PREFIX, clean_stale_temp_runs

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    old, fresh = tmp_path / (TEMP_PREFIX + "old"), tmp_path / (TEMP_PREFIX + "fresh")
    other = tmp_path / "someone-else"
    for d in (old, fresh, other):
        (d / "untitled.results").mkdir(parents=True)
    week = time.time() - 8 * 86400
    for p in (old, old / "untitled.results", other, other / "untitled.results"):
        os.utime(p, (week, week))
    assert clean_stale_temp_runs() == [old]
    assert not old.exists() and fresh.exists() and other.exists()
