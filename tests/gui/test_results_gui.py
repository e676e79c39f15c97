"""Run and results in the main window, driven as a user would (pytest-qt, real widgets under Xvfb).

Reference for the numbers: the engine's own ``thermgui solve`` output for the same model.
"""
from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
import pyvista as pv

pytest.importorskip("pytestqt")
from PySide6.QtCore import QPointF, Qt  # noqa: E402
from PySide6.QtGui import QGuiApplication  # noqa: E402

from solver.run.cli import solve_to_folder  # noqa: E402
from solver.model.modelfile import parse_model, save_model  # noqa: E402
from thermgui.runresults import results_folder_for  # noqa: E402
from modelkit import chip_on_plate

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "tests" / "_artifacts"
pv.global_theme.multi_samples = 0
pytestmark = pytest.mark.gui




def make_window(open_main_window, model_dict, folder: Path):
    """The real main window on a saved copy of ``model_dict`` (shared fixture from conftest)."""
    path = folder / "chip.json"
    save_model(parse_model(model_dict), path)
    win = open_main_window(path)
    assert win.document.path == path and hasattr(win, "results")
    return win, path


def highlighted(win) -> set:
    return set(win.viewport._marked)


def run_to_end(qtbot, win, timeout=60000):
    res = win.results
    with qtbot.waitSignal(res.worker.done, timeout=timeout):
        pass
    qtbot.waitUntil(lambda: not res.running, timeout=timeout)


def shot(win, name):
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    win.viewport.plotter.render()
    win.grab().save(str(ARTIFACTS / name))


# ---------------------------------------------------------------- tests
@pytest.fixture(scope="module")
def cli_peaks(tmp_path_factory):
    """peaks.csv and frames written by `thermgui solve` for the test model."""
    base = tmp_path_factory.mktemp("cli")
    path = base / "chip.json"
    save_model(parse_model(chip_on_plate()), path)
    assert solve_to_folder(path, base / "out", quiet=True) == 0
    return base / "out"


def test_run_scrub_mark_export_reopen(qtbot, tmp_path, cli_peaks, open_main_window):
    win, path = make_window(open_main_window, chip_on_plate(), tmp_path)
    res = win.results
    before = win.document.model.model_dump()
    assert res.start_run()
    assert res.stop_action.isEnabled() and not res.run_action.isEnabled()
    run_to_end(qtbot, win)
    store = res.store
    assert store.complete and store.n_frames == 7
    assert win.viewport.mode == "results"
    assert res.status.bar.value() == 1000
    # results kept next to the model
    folder = results_folder_for(path)
    assert (folder / "peaks.csv").is_file() and (folder / "field.vtkhdf").is_file()
    assert win.document.model.model_dump() == before

    # scrub: slider to output 2 → the actor's scalars are the stored snapshot at those points
    res.timeline.slider.setValue(2)
    shown = res.view.shown_scalars()
    assert np.array_equal(shown, store.frame(2)[res.view.point_ids])
    assert res.timeline.label.text().startswith("t = 20 s")
    assert res.chart.cursor_time() == pytest.approx(20.0)
    res.timeline.step(1)
    assert np.array_equal(res.view.shown_scalars(), store.frame(3)[res.view.point_ids])
    assert not np.array_equal(store.frame(3), store.frame(2))
    # colour scale fixed across time by default
    assert res.view.colour_range == pytest.approx(store.colour_range())
    res.rescale_box.setChecked(True)
    assert res.view.colour_range == pytest.approx((store.frame(3).min(), store.frame(3).max()))
    res.rescale_box.setChecked(False)

    # at t = 0 nothing is over; at the end the chip is marked in tree, view and table
    res.timeline.set_index(0)
    assert win.item_tree.marked_parts == set() and highlighted(win) == set()
    res.timeline.set_index(6)
    assert win.item_tree.marked_parts == {"chip"}
    assert highlighted(win) == {"chip"}
    assert "chip" in res.view._over_text and "40 °C" in res.view._over_text
    assert res.table.marked_parts() == {"chip"}
    shot(win, "results-scrubbing-over-rating.png")

    # choosing a part in the item list draws that part's curve; the rated parts by default
    assert set(res.chart.curves) == {"plate", "chip"} and set(res.chart.limits) == {"plate", "chip"}
    win.item_tree.select("parts", 2)
    assert set(res.chart.curves) == {"foot"} and not res.chart.limits
    res.set_chart_parts([])
    assert set(res.chart.curves) == {"plate", "chip"}

    # play runs through the outputs to the last one and stops
    res.timeline.set_index(0)
    res.timeline.set_playing(True)
    qtbot.waitUntil(lambda: not res.timeline.timer.isActive(), timeout=10000)
    assert res.timeline.index == 6
    assert np.array_equal(res.view.shown_scalars(), store.frame(6)[res.view.point_ids])

    # clicking the chart moves the slider to the nearest output
    chart = res.chart
    scene_pt = chart.plotItem.vb.mapViewToScene(QPointF(31.0, 30.0))
    view_pt = chart.mapFromScene(scene_pt)
    qtbot.mouseClick(chart.viewport(), Qt.LeftButton, pos=view_pt)
    assert res.timeline.index == 3

    # a cut keeps the scalar mapping right
    res.cut_choice.setCurrentIndex(2)  # across y, half kept
    assert res.view.surface.n_points > 0
    assert res.view.point_ids.max() < len(store.frame(3))
    kept_y = store.points_mm[res.view.point_ids, 1]
    assert kept_y.max() <= 0.5 * 30.0 + 3.0 + 1e-9  # no cell beyond the plane (plus one cell, 3 mm)
    assert np.array_equal(res.view.shown_scalars(), store.frame(3)[res.view.point_ids])
    assert res.view.colour_range == pytest.approx(store.colour_range())
    bar = win.viewport.plotter.scalar_bars["Temperature (°C)"]
    assert bar.GetLookupTable().GetRange() == pytest.approx(store.colour_range())
    shot(win, "results-cut.png")
    res.cut_choice.setCurrentIndex(0)

    # export equals `thermgui solve` on the same model, byte for byte
    out = tmp_path / "exported.csv"
    res.export_peaks(out)
    assert out.read_bytes() == (cli_peaks / "peaks.csv").read_bytes()
    with open(out, newline="") as fh:
        exported = list(csv.reader(fh))
    assert exported[0][0] == "part" and len(exported) == 4
    # copy: tab-separated, same cells (shown sorted as on screen)
    QGuiApplication.clipboard().clear()
    res.table.table.setFocus()
    qtbot.keyClick(res.table.table, Qt.Key_C, Qt.ControlModifier)
    text = QGuiApplication.clipboard().text()
    assert text == res.table.copy_to_clipboard()
    lines = [l.split("\t") for l in text.splitlines()]
    assert lines[0] == exported[0]
    assert sorted(map(tuple, lines[1:])) == sorted(map(tuple, exported[1:]))

    # picture of the view
    png = tmp_path / "view.png"
    assert win.save_picture(str(png))
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"

    # reopen the finished folder: same frames, no solving
    res.set_results_shown(False)
    assert win.viewport.mode == "edit" and win.item_tree.marked_parts == set()
    opened = win.open_results(folder)
    assert opened is not None and not res.running
    assert res.store is not store
    assert res.store.n_frames == store.n_frames
    for i in range(store.n_frames):
        assert np.allclose(res.store.frame(i), store.frame(i), atol=1e-4)
    res.timeline.set_index(4)
    assert np.allclose(res.view.shown_scalars(), store.frame(4)[res.view.point_ids], atol=1e-4)
    assert res.table.marked_parts() == {"chip"}

    # editing the model makes the results stale (view back to the boxes); undo makes them current
    d = win.document.model_dict()
    d["parts"][1]["rated_c"] = 45.0
    win.document.edit(d, "change rating")
    assert res.stale and win.viewport.mode == "edit" and not res.results_shown
    win.document.undo_stack.undo()
    assert not res.stale
    res.show_action.trigger()
    assert res.results_shown and win.viewport.mode == "results"

    # opening the model again in a new window finds the results beside it (no solving)
    win2 = open_main_window(path)
    r2 = win2.results
    assert r2.store is not None and r2.store.complete and not r2.running and r2.worker is None
    assert r2.store.n_frames == store.n_frames
    assert np.allclose(r2.store.frame(6), store.frame(6), atol=1e-4)
    assert win2.viewport.mode == "results" and win2.item_tree.marked_parts == {"chip"}
    # and opening the results folder itself loads its model and its frames
    assert win2.fileops.open_path(folder, ask_first=False)
    assert win2.document.model.to_json_dict() == win.document.model.to_json_dict()
    assert r2.store.folder == folder and r2.results_shown

    # a run the engine refuses leaves the earlier results in place
    d = win.document.model_dict()
    d["run"].update(scheme="forward-euler", step_s=5.0)
    win.document.edit(d, "explicit stepping")
    win.prompts.answers.append("yes")  # replacing the earlier results is asked first
    assert res.start_run()
    assert win.prompts.messages[-1][0] == "ask" and "earlier run" in win.prompts.messages[-1][2]
    run_to_end(qtbot, win)
    assert res.status.message.isVisible() and "run.step_s" in res.status.message.text()
    assert (folder / "peaks.csv").read_bytes() == (cli_peaks / "peaks.csv").read_bytes()


def test_refused_run_gives_message_and_keeps_model(qtbot, tmp_path, open_main_window):
    win, _ = make_window(open_main_window, chip_on_plate(scheme="forward-euler", step_s=5.0), tmp_path)
    res = win.results
    before = json.dumps(win.document.model.model_dump(), sort_keys=True)
    res.start_run()
    run_to_end(qtbot, win)
    assert res.status.message.isVisible()
    text = res.status.message.text()
    assert "run.step_s" in text and "forward Euler" in text
    assert win.item_tree.current() == ("study", 0)
    assert json.dumps(win.document.model.model_dump(), sort_keys=True) == before
    assert res.run_action.isEnabled()
    # a folder that holds no results is refused with a message, not a traceback
    (tmp_path / "not-results").mkdir()
    assert win.open_results(tmp_path / "not-results") is None
    assert "cannot be opened" in res.status.message.text() and "not a results folder" in res.status.message.text()


def test_reduced_basis_run_matches_the_command_line(qtbot, tmp_path, cli_peaks, open_main_window):
    """The study's "Solve by: reduced basis" gives the same peaks as stepping, within its tolerance,
    and the run says how it was solved."""
    win, _ = make_window(open_main_window, chip_on_plate(method="reduced", tolerance_k=0.05), tmp_path)
    res = win.results
    assert res.start_run()
    run_to_end(qtbot, win)
    assert res.store.complete and win.viewport.mode == "results"
    assert "reduced basis" in res.status.detail.text()
    cli = {r["part"]: float(r["peak_c"]) for r in csv.DictReader(open(cli_peaks / "peaks.csv"))}
    rows = res.store.peak_rows  # peaks.csv rows as text, PEAK_COLUMNS order
    assert sorted(r[0] for r in rows) == sorted(cli)
    for row in rows:
        # the reduced run's tolerance plus room for the stepped run's own time-step error (the
        # engine tests compare both with a converged reference more tightly)
        assert abs(float(row[2]) - cli[row[0]]) <= 0.1


def test_stop_cancels_between_steps(qtbot, tmp_path, open_main_window):
    # stepped (not "auto": the reduced basis would finish this in a second, before Stop is pressed)
    win, _ = make_window(open_main_window, chip_on_plate(duration_s=20000.0, step_s=1.0, output_every_s=50.0,
                                                         method="full"), tmp_path)
    res = win.results
    res.start_run()
    qtbot.waitUntil(lambda: res.store is not None and res.store.n_frames >= 3 and res.timeline.isEnabled()
                    and res.view.visible, timeout=60000)  # the field appears with the first live redraw
    assert res.running
    qtbot.wait(400)  # one live redraw
    # progress (every 2 s) shows in the bar itself: share done and time left; the model time shows
    # once, with the drawn field (view caption and slider label), not a third time here
    qtbot.waitUntil(lambda: res.status.bar.value() > 0, timeout=15000)
    assert "left" in res.status.bar.format() and "t = " not in res.status.bar.format()
    shot(win, "results-running.png")
    res.stop_action.trigger()
    run_to_end(qtbot, win)
    assert "stopped" in res.status.bar.format()
    assert res.store.n_frames < 401 and not res.store.complete
    assert res.store.peak_rows is None
    # what was computed can still be scrubbed
    res.timeline.set_index(1)
    assert np.array_equal(res.view.shown_scalars(), res.store.frame(1)[res.view.point_ids])
    # running the same mesh again keeps the drawn surface and still shows the new frames
    surface, first = res.view.surface, res.store
    res.start_run()
    qtbot.waitUntil(lambda: res.store is not first and res.store.n_frames >= 2 and res.timeline.isEnabled(),
                    timeout=60000)
    res.stop_run()
    run_to_end(qtbot, win)
    assert res.view.surface is surface
    res.timeline.set_index(1)
    assert np.array_equal(res.view.shown_scalars(), res.store.frame(1)[res.view.point_ids])


def test_first_picture_cuts_a_closed_housing_to_show_the_hottest_part(qtbot, tmp_path, open_main_window):
    """The default sample is a sealed housing: after a run the view is cut across z just above the
    hottest part (its hot spot lies inside the model), unless the user has chosen a cut."""
    model = json.loads((ROOT / "samples" / "outdoor_radio_box.json").read_text())
    model["run"].update(duration_s=60.0, output_every_s=15.0)  # a short run is enough for the picture
    win, path = make_window(open_main_window, model, tmp_path)
    res = win.results
    assert res.cut_choice.currentText() == "Whole model"
    assert res.start_run()
    run_to_end(qtbot, win, timeout=180000)
    store = res.store
    assert store.complete
    rows = {r[0]: r for r in store.peak_rows}
    hottest = max(rows, key=lambda n: float(rows[n][2]))
    spot = np.array([float(v) for v in rows[hottest][7:10]])
    top = store.part_bounds_mm[hottest][5]
    z_all = store.points_mm[:, 2]
    assert z_all.min() < spot[2] < z_all.max()  # inside: hidden by the lid when seen whole
    assert res.cut_choice.currentText() == "Cut across z" and res.cut_slider.isEnabled()
    plane = z_all.min() + res.cut_slider.value() / 100 * (z_all.max() - z_all.min())
    assert top < plane <= top + 2.0  # just above the hot part
    text = res.status.detail.text()
    assert f"view cut at z = {plane:.1f} mm" in text and hottest in text and "Whole model" in text
    # the hot-spot node is drawn, the lid is not, and the drawn colours are still the stored frame
    node = int(np.argmin(np.linalg.norm(store.points_mm - spot, axis=1)))
    assert node in set(res.view.point_ids.tolist())
    assert store.points_mm[res.view.point_ids, 2].max() < z_all.max()
    i = res.timeline.index
    assert np.array_equal(res.view.shown_scalars(), store.frame(i)[res.view.point_ids])
    shot(win, "results-default-sample-first.png")

    # the user's choice stands: Whole model stays when the results are opened again
    res.cut_choice.setCurrentIndex(0)
    assert store.points_mm[res.view.point_ids, 2].max() == pytest.approx(z_all.max())
    assert win.open_results(results_folder_for(path)) is not None
    assert res.cut_choice.currentText() == "Whole model"
    assert "view cut" not in res.status.detail.text()
    # a new window on the same model opens the results beside it with the revealing cut
    win2 = open_main_window(path)
    assert win2.results.store is not None and win2.results.cut_choice.currentText() == "Cut across z"
    assert "view cut at z =" in win2.results.status.detail.text()


def test_opens_folders_written_before_and_says_when_there_is_no_field(qtbot, tmp_path, open_main_window):
    """A folder in the earlier layout (field.pvd + whole-mesh .vtu frames) shows the same frames as
    the new one; a run solved with ``--fields none`` is refused with a message saying so."""
    from test_field_output import _legacy_copy

    win, path = make_window(open_main_window, chip_on_plate(), tmp_path)
    res = win.results
    assert solve_to_folder(path, tmp_path / "new", quiet=True) == 0
    _legacy_copy(tmp_path / "new", tmp_path / "old")
    assert win.open_results(tmp_path / "new") is not None
    new = res.store
    assert win.open_results(tmp_path / "old") is not None
    assert res.store is not new and res.store.n_frames == new.n_frames > 1
    for i in range(new.n_frames):
        np.testing.assert_array_equal(res.store.frame(i), new.frame(i))
    res.timeline.set_index(2)
    assert np.array_equal(res.view.shown_scalars(), new.frame(2)[res.view.point_ids])
    assert solve_to_folder(path, tmp_path / "bare", quiet=True, fields="none") == 0
    assert win.open_results(tmp_path / "bare") is None
    text = res.status.message.text()
    assert "no temperature field" in text and "--fields none" in text
