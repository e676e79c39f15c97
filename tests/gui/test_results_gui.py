"""Run and results in a window, driven as a user would (pytest-qt, real widgets under Xvfb).

Uses the real MainWindow when it exists, otherwise a stand-in main window with exactly the
attributes the results half relies on (document, viewport.plotter, item_tree.mark_parts, menus,
toolbar, add_dock). References: the engine's own ``thermgui solve`` output for the same model.
"""
from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
import pyvista as pv

pytest.importorskip("pytestqt")
from PySide6.QtCore import QObject, QPointF, Qt, Signal  # noqa: E402
from PySide6.QtGui import QGuiApplication  # noqa: E402
from PySide6.QtWidgets import QMainWindow, QMenu, QToolBar, QTreeWidget, QDockWidget, QVBoxLayout, QWidget  # noqa: E402

from solver.cli import solve_to_folder  # noqa: E402
from solver.model import parse_model, save_model  # noqa: E402
from thermgui.runresults import install, results_folder_for  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "tests" / "_artifacts"
pv.global_theme.multi_samples = 0
pytestmark = pytest.mark.gui


def chip_on_plate(**run) -> dict:
    """Invented scenario: a 1.5 W package on an aluminium plate, rated 40 °C (it goes over)."""
    r = {"duration_s": 60.0, "step_s": 2.0, "scheme": "backward-euler", "mass": "lumped", "output_every_s": 10.0}
    r.update(run)
    return {
        "format": "thermgui-model", "version": 1, "title": "chip on plate (test scenario)",
        "ambient_c": 25.0, "initial_c": 25.0,
        "parts": [
            {"name": "plate", "material": "aluminium-6061", "origin_mm": [0, 0, 0], "size_mm": [40, 30, 3],
             "rated_c": 100.0},
            {"name": "chip", "material": "mould-compound", "origin_mm": [15, 10, 3], "size_mm": [10, 10, 2],
             "rated_c": 40.0},
            {"name": "foot", "material": "aluminium-6061", "origin_mm": [0, 0, -4], "size_mm": [6, 6, 4]},
        ],
        "heat_loads": [{"part": "chip", "profile": {"type": "constant", "value": 1.5}}],
        "convection": [{"name": "underside", "part": "plate", "side": "z-", "h": 10.0},
                       {"name": "top", "part": "plate", "side": "z+", "h": 6.0}],
        "mesh": {"cell_mm": 3.0, "min_layers": 2},
        "run": r,
    }


# ---------------------------------------------------------------- stand-in window
class _Doc(QObject):
    changed = Signal()

    def __init__(self, model, path):
        super().__init__()
        self.model, self.path = model, path


class _View(QWidget):
    def __init__(self):
        super().__init__()
        from pyvistaqt import QtInteractor
        self.plotter = QtInteractor(self, auto_update=False)
        QVBoxLayout(self).addWidget(self.plotter.interactor)
        self.plotter.set_background("#e9edf2", top="#ffffff")
        self._marks = []
        self.mode = "edit"
        self.highlighted: set = set()

    def set_mode(self, mode):
        self.mode = mode

    def highlight_parts(self, names):
        """Crimson frames around the named parts (as the real viewport does)."""
        self.highlighted = set(names)
        for a in self._marks:
            self.plotter.remove_actor(a, render=False)
        self._marks = []
        for p in self.parent_model().parts:
            if p.name in self.highlighted:
                o, s = p.origin_mm, p.size_mm
                box = pv.Box(bounds=(o[0], o[0] + s[0], o[1], o[1] + s[1], o[2], o[2] + s[2]))
                self._marks.append(self.plotter.add_mesh(box.extract_feature_edges(), color="#d0103a",
                                                         line_width=4, render=False))


class _Tree(QTreeWidget):
    itemChosen = Signal(str, int)

    def __init__(self):
        super().__init__()
        self.marked_parts: set = set()
        self.selected = None

    def mark_parts(self, over):
        self.marked_parts = set(over)

    def select(self, kind, index, emit=True):
        self.selected = (kind, index)


class StandInWindow(QMainWindow):
    def __init__(self, model, path):
        super().__init__()
        self.document = _Doc(model, path)
        self.viewport = _View()
        self.viewport.parent_model = lambda: self.document.model
        self.item_tree = _Tree()
        self.setCentralWidget(self.viewport)
        self.menus = {k: self.menuBar().addMenu(k.title()) for k in ("file", "edit", "view", "run", "help")}
        self.toolbar = QToolBar("main")
        self.addToolBar(self.toolbar)
        self.resize(1280, 900)
        install(self)

    def add_dock(self, widget, area, title):
        d = QDockWidget(title, self)
        d.setWidget(widget)
        self.addDockWidget(area, d)
        return d

    def closeEvent(self, event):
        self.viewport.plotter.close()
        super().closeEvent(event)


def make_window(qtbot, model_dict, folder: Path):
    model = parse_model(model_dict)
    path = folder / "chip.json"
    save_model(model, path)
    win = StandInWindow(model, path)
    qtbot.addWidget(win)
    win.show()
    qtbot.waitExposed(win)
    return win, path


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


def test_run_scrub_mark_export_reopen(qtbot, tmp_path, cli_peaks):
    win, path = make_window(qtbot, chip_on_plate(), tmp_path)
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
    assert (folder / "peaks.csv").is_file() and (folder / "field.pvd").is_file()
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
    assert win.item_tree.marked_parts == set() and win.viewport.highlighted == set()
    res.timeline.set_index(6)
    assert win.item_tree.marked_parts == {"chip"}
    assert win.viewport.highlighted == {"chip"}
    assert "chip" in res.view._over_text and "40 °C" in res.view._over_text
    assert res.table.marked_parts() == {"chip"}
    shot(win, "results-scrubbing-over-rating.png")

    # clicking the chart moves the slider to the nearest output
    chart = res.chart
    scene_pt = chart.plotItem.vb.mapViewToScene(QPointF(31.0, 30.0))
    view_pt = chart.mapFromScene(scene_pt)
    qtbot.mouseClick(chart.viewport(), Qt.LeftButton, pos=view_pt)
    assert res.timeline.index == 3

    # a cut keeps the scalar mapping right
    res.cut_choice.setCurrentIndex(1)
    assert res.view.surface.n_points > 0
    assert np.array_equal(res.view.shown_scalars(), store.frame(3)[res.view.point_ids])
    res.cut_choice.setCurrentIndex(0)

    # export equals `thermgui solve` on the same model, byte for byte
    out = tmp_path / "exported.csv"
    res.export_peaks(out)
    assert out.read_bytes() == (cli_peaks / "peaks.csv").read_bytes()
    with open(out, newline="") as fh:
        exported = list(csv.reader(fh))
    assert exported[0][0] == "part" and len(exported) == 4
    # copy: tab-separated, same cells (shown sorted as on screen)
    text = res.table.copy_to_clipboard()
    assert QGuiApplication.clipboard().text() == text
    lines = [l.split("\t") for l in text.splitlines()]
    assert lines[0] == exported[0]
    assert sorted(map(tuple, lines[1:])) == sorted(map(tuple, exported[1:]))

    # picture of the view
    png = tmp_path / "view.png"
    res.save_picture(png)
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


def test_refused_run_gives_message_and_keeps_model(qtbot, tmp_path):
    win, _ = make_window(qtbot, chip_on_plate(scheme="forward-euler", step_s=5.0), tmp_path)
    res = win.results
    before = json.dumps(win.document.model.model_dump(), sort_keys=True)
    res.start_run()
    run_to_end(qtbot, win)
    assert res.status.message.isVisible()
    text = res.status.message.text()
    assert "run.step_s" in text and "forward Euler" in text
    assert win.item_tree.selected == ("study", 0)
    assert json.dumps(win.document.model.model_dump(), sort_keys=True) == before
    assert res.run_action.isEnabled()


def test_stop_cancels_between_steps(qtbot, tmp_path):
    win, _ = make_window(qtbot, chip_on_plate(duration_s=20000.0, step_s=1.0, output_every_s=50.0), tmp_path)
    res = win.results
    res.start_run()
    qtbot.waitUntil(lambda: res.store is not None and res.store.n_frames >= 3 and res.timeline.isEnabled(),
                    timeout=60000)
    assert res.running and res.view.visible
    qtbot.wait(400)  # one live redraw
    shot(win, "results-running.png")
    res.stop_action.trigger()
    run_to_end(qtbot, win)
    assert "stopped" in res.status.bar.format()
    assert res.store.n_frames < 401 and not res.store.complete
    assert res.store.peak_rows is None
    # what was computed can still be scrubbed
    res.timeline.set_index(1)
    assert np.array_equal(res.view.shown_scalars(), res.store.frame(1)[res.view.point_ids])
