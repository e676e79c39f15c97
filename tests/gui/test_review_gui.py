"""Design-review touches in the window, driven through real widgets: File ▸ Export Report…, export
dialogs that start in the model's folder, and the small things of issue 13."""
from __future__ import annotations

from solver.results.recorder import PEAK_COLUMNS

from pathlib import Path

import pytest

pytest.importorskip("pytestqt")

from modelkit import chip_on_plate  # noqa: E402
from solver.model.modelfile import parse_model, save_model  # noqa: E402

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


def covered_chip() -> dict:
    """Invented scenario: the chip on its plate under a cover plate, so from outside only the
    cover shows (the chip is hidden inside the model's bounding box)."""
    d = chip_on_plate(duration_s=300.0, step_s=1.0, output_every_s=5.0)
    d["parts"].append({"name": "cover", "material": "aluminium-6061", "origin_mm": [0, 0, 8],
                       "size_mm": [40, 30, 2]})
    d["convection"].append({"name": "cover top", "part": "cover", "side": "z+", "h": 8.0})
    return d


def test_live_view_cut_one_time_and_colour_range(qtbot, open_main_window, tmp_path):
    path = tmp_path / "covered.json"
    save_model(parse_model(covered_chip()), path)
    win = open_main_window(path)
    res = win.results
    seen = []
    original = res._live_refresh

    def recording():
        original()
        if res.running and res.results_shown:
            seen.append({"cut": res.view.cut, "choice": res.cut_choice.currentText(),
                         "caption": res.view.caption_text, "label": res.timeline.label.text(),
                         "bar": res.status.bar.format(), "clim": res.view.colour_range,
                         "zmax": float(res.store.points_mm[res.view.point_ids, 2].max()),
                         "hottest": max(float(f.max()) for f in res.store.frames)})

    res._live_refresh = recording
    res._redraw.timeout.disconnect()
    res._redraw.timeout.connect(res._live_refresh)
    run_to_end(qtbot, win)
    assert seen, "no live frame was drawn while running"
    first = seen[0]
    # cut across z from the first live frame, just above the hidden chip (top at z = 5 mm; cells 3 mm)
    assert first["cut"] is not None and first["cut"][0] == "z" and first["choice"] == "Cut across z"
    assert first["zmax"] < 8.0  # the cover (z 8-10 mm) is not drawn
    for s in seen:
        # one time: the view's caption and the slider's label give the same time; the bar none
        t_caption = s["caption"].split("   ")[0].replace(" (computing)", "")
        assert s["label"].startswith(t_caption), s
        assert "t =" not in s["bar"]
        # the cool end fixed at the starting temperature, the hot end following the run
        lo, hi = s["clim"]
        assert lo == pytest.approx(25.0, abs=1e-3) and hi >= lo + 5.0 - 1e-6
        assert hi >= s["hottest"] - 1e-3
    # after the run the cut stays (the hot spot is still hidden) and the status says where it is
    assert res.view.cut == first["cut"] and "view cut at z" in res.status.detail.text()


def test_chart_empty_state_merged_limits_and_emphasis(qtbot, open_main_window, tmp_path):
    import numpy as np

    from thermgui.runresults.chart import EMPTY_TEXT

    d = chip_on_plate(duration_s=600.0, step_s=5.0, output_every_s=60.0)
    d["parts"][0]["rated_c"] = 40.0  # plate and chip share one rating
    path = tmp_path / "chip.json"
    save_model(parse_model(d), path)
    win = open_main_window(path)
    chart = win.results.chart
    # before any run: a sentence, no empty 0-1 axes
    assert chart.is_empty and chart.empty_text.toPlainText() == EMPTY_TEXT
    assert not chart.plotItem.getAxis("left").isVisible() and not chart.plotItem.getAxis("bottom").isVisible()
    run_to_end(qtbot, win)
    assert not chart.is_empty and chart.plotItem.getAxis("left").isVisible()
    # equal ratings: one line, one label naming both parts
    assert set(chart.limits) == {"plate", "chip"} and chart.limits["plate"] is chart.limits["chip"]
    assert list(chart.limit_lines) == [40.0]
    assert "plate" in chart.limit_lines[40.0].label.toPlainText() and "chip" in chart.limit_lines[40.0].label.toPlainText()
    # both are over: drawn heavier than a curve that is not (foot, shown on its own is ok-width)
    assert chart.curves["chip"].opts["pen"].widthF() > 2.5
    win.results.set_chart_parts(["foot"])
    assert chart.curves["foot"].opts["pen"].widthF() < 2.5
    # the error band, once the peak table carries one: shaded between peak ± error
    s = win.results.store
    k = PEAK_COLUMNS.index("peak_error_k")
    for r in s.peak_rows:
        r[k] = "2.00"
    win.results.set_chart_parts([])
    lower, upper, _ = chart.bands["chip"]
    y = chart.curves["chip"].getData()[1]
    assert np.allclose(upper.getData()[1] - y, 2.0) and np.allclose(y - lower.getData()[1], 2.0)
