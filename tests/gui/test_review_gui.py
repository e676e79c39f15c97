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
