"""Start the app exactly as the ``thermgui`` command does (no arguments), look at it, and close it.

Run as a script by tests/gui/test_first_start.py in a fresh Xvfb screen of a chosen size, with a
fresh state folder and HOME:  ``python start_as_user.py REPORT.json SHOT.png [options]``

Nothing in the app is replaced: message boxes are recorded (so none blocks), and a timer, started
before ``thermgui.cli.main(...)``, reads the window once it is up, saves a picture and closes it.
Options (also used to make the docs' screenshots, see docs/workbench.md):
  --open FILE     start as ``thermgui open FILE`` instead of ``thermgui``
  --save-as REL   first save the model as HOME/REL (File ▸ Save As), so results go beside it
  --select PART   select that part in the list before looking
  --run           press Run and wait for the run to finish before looking
  --at-peak PART  after the run, move the slider to the output nearest that part's peak
"""
from __future__ import annotations

import json
import sys
from pathlib import Path

from PySide6.QtCore import QTimer
from PySide6.QtWidgets import QApplication, QMessageBox

REPORT, SHOT = Path(sys.argv[1]), Path(sys.argv[2])
DO_RUN = "--run" in sys.argv


def _option(name):
    return sys.argv[sys.argv.index(name) + 1] if name in sys.argv else None


OPEN, SAVE_AS, SELECT, AT_PEAK = _option("--open"), _option("--save-as"), _option("--select"), _option("--at-peak")
boxes = []


def _box(kind):
    def f(parent, title, text, *a, **k):
        boxes.append([kind, title, text])
        return QMessageBox.No
    return f


for _kind in ("warning", "information", "critical", "question"):
    setattr(QMessageBox, _kind, staticmethod(_box(_kind)))


def _inside(widget, screen_rect) -> bool:
    """The widget is shown and lies wholly on the screen."""
    if not widget.isVisible():
        return False
    tl = widget.mapToGlobal(widget.rect().topLeft())
    br = widget.mapToGlobal(widget.rect().bottomRight())
    return screen_rect.contains(tl) and screen_rect.contains(br)


def look(win):
    res = win.results
    avail = win.screen().availableGeometry()
    view = win.viewport
    info = {
        "message_boxes": boxes,
        "error_shown": res.status.message.isVisible(),
        "error_text": res.status.message.text(),
        "status_line": res.status.detail.text(),
        "screen": [avail.width(), avail.height()],
        "window": [win.frameGeometry().width(), win.frameGeometry().height()],
        "view": [view.width(), view.height()],
        "table": [res.table.table.viewport().width(), res.table.table.viewport().height()],
        "table_columns_width": sum(res.table.table.columnWidth(c) for c in range(res.table.table.columnCount())
                                   if not res.table.table.isColumnHidden(c)),
        "status_bar_on_screen": _inside(win.statusBar(), avail),
        "chart_on_screen": _inside(res.chart, avail),
        "caution_on_screen": _inside(res.status.caution, avail),
        "toolbar_fits": win.toolbar.sizeHint().width() <= win.width(),
        "rows": res.table.shown_rows(),
        "title": win.windowTitle(),
    }
    win.viewport.plotter.render()
    win.grab().save(str(SHOT))
    REPORT.write_text(json.dumps(info, indent=1))


def watch():
    wins = [w for w in QApplication.topLevelWidgets() if hasattr(w, "results") and w.isVisible()]
    if not wins:
        QTimer.singleShot(200, watch)
        return
    win = wins[0]
    win.document.undo_stack.setClean()
    if SAVE_AS:
        target = Path.home() / SAVE_AS
        target.parent.mkdir(parents=True, exist_ok=True)
        assert win.fileops.save_to(target)
    if SELECT:
        win.item_tree.select_part(SELECT)

    def finish():
        if AT_PEAK:
            from solver.results.recorder import PEAK_COLUMNS

            row = next(r for r in win.results.table.shown_rows() if r[0] == AT_PEAK)
            t_peak = float(row[PEAK_COLUMNS.index("peak_time_s")])  # by name: columns were added before it
            win.results.timeline.set_index(win.results.store.index_at(t_peak))
        look(win)
        win.close()

    def wait_run():
        if win.results.running or win.results.store is None or not win.results.store.complete:
            QTimer.singleShot(300, wait_run)
        else:
            QTimer.singleShot(800, finish)

    if DO_RUN:
        QTimer.singleShot(1000, lambda: (win.results.run_action.trigger(), QTimer.singleShot(500, wait_run)))
    else:
        QTimer.singleShot(1500, finish)


app = QApplication(sys.argv[:1])  # the one make_application() then reuses
QTimer.singleShot(0, watch)
from thermgui.cli import main  # noqa: E402

sys.exit(main(["open", OPEN] if OPEN else []))
