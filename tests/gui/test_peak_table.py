"""The peak table read as a design review reads it: review order, the error band, amber for at
risk and red for over (table, item list, 3D frames), times in the slider's unit, columns that fit.

The run is the engine's own ``thermgui solve`` output for an invented chip-on-plate scenario. The
error band is written into peaks.csv by hand (as the engine's accuracy estimate writes it), so
one part lands at risk: its rating lies inside peak ± error (NOTES.md §4 additions).
"""
from __future__ import annotations

import csv
import re

import pytest

pytest.importorskip("pytestqt")
from PySide6.QtTest import QTest  # noqa: E402

from modelkit import chip_on_plate  # noqa: E402
from solver.run.cli import solve_to_folder  # noqa: E402
from solver.model.modelfile import parse_model, save_model  # noqa: E402
from solver.io.runstore import record_edits  # noqa: E402
from thermgui.runresults.peakview import VERDICT_FILL  # noqa: E402

pytestmark = pytest.mark.gui


@pytest.fixture
def banded_run(tmp_path):
    """A 10 min run (the slider shows minutes): chip over, plate at risk (error band edited in), foot unrated."""
    path = tmp_path / "chip.json"
    save_model(parse_model(chip_on_plate(duration_s=600.0, step_s=5.0, output_every_s=60.0)), path)
    out = tmp_path / "out"
    assert solve_to_folder(path, out, quiet=True) == 0
    with open(out / "peaks.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    head = rows[0]
    k_err, k_status, k_margin = head.index("peak_error_k"), head.index("status"), head.index("margin_k")
    by = {r[0]: r for r in rows[1:]}
    by["chip"][k_err] = "1.30"
    by["plate"][k_err] = f"{float(by['plate'][k_margin]) + 1.0:.2f}"  # the rating inside the band
    by["plate"][k_status] = "at-risk"
    with open(out / "peaks.csv", "w", newline="") as fh:
        csv.writer(fh).writerows(rows)
    # an edited run file is otherwise the user's and the folder reads as changed: record it as the run's own
    record_edits(out, ["peaks.csv"])
    return out, by, head


def test_first_over_is_rounded_in_peaks_csv(banded_run):
    _, by, head = banded_run
    text = by["chip"][head.index("first_over_s")]
    assert re.fullmatch(r"\d+\.\d{2}", text), text  # 0.01 s, not 12 digits


def test_review_order_band_and_verdict_colours(open_main_window, banded_run, artifacts):
    out, by, head = banded_run
    w = open_main_window(out)
    res = w.results
    t = res.table
    # review order: over, then at risk, then ok, then unrated - not by name either way
    order = [r[0] for r in t.shown_rows()]
    assert order == ["chip", "plate", "foot"]
    assert order != sorted(order) and order != sorted(order, reverse=True)
    # copied rows are the CSV rows, in the shown order
    assert t.shown_rows()[0] == by["chip"]
    text = {row[0]: row for row in t.shown_text()}
    col = t.column
    peak = float(by["chip"][head.index("peak_c")])
    assert text["chip"][col("peak")] == f"{peak:.1f} ± 1.3"
    assert text["chip"][col("status")] == "OVER" and text["plate"][col("status")] == "AT RISK"
    # times in the slider's unit (minutes for a 10 min run), rounded to 0.1 min
    assert "min" in res.timeline.label.text()
    assert t.table.horizontalHeaderItem(col("peak_time")).text().replace("\n", " ") == "Peak at (min)"
    assert text["chip"][col("peak_time")] == f"{float(by['chip'][head.index('peak_time_s')]) / 60:.1f}"
    assert text["chip"][col("first_over")] == f"{float(by['chip'][head.index('first_over_s')]) / 60:.1f}"
    hot = [float(by["chip"][head.index(c)]) for c in ("hotspot_x_mm", "hotspot_y_mm", "hotspot_z_mm")]
    assert text["chip"][col("hotspot")] == ", ".join(f"{v:.1f}" for v in hot)
    # over rows red, at-risk rows amber, ok rows plain
    row_of = {r[0]: i for i, r in enumerate(t.shown_rows())}
    fill = lambda name: t.table.item(row_of[name], 1).background().color().name()  # noqa: E731
    assert fill("chip") == VERDICT_FILL["over"] and fill("plate") == VERDICT_FILL["at-risk"]
    assert fill("chip") != fill("plate") and fill("foot") not in VERDICT_FILL.values()
    assert t.marked_parts("over") == {"chip"} and t.marked_parts("at-risk") == {"plate"}
    # the shown (last) time: chip framed red, plate amber, in the item list and the 3D view
    res.timeline.set_index(res.store.n_frames - 1)
    assert w.item_tree.marked_parts == {"chip"} and w.item_tree.at_risk_parts == {"plate"}
    assert w.viewport._marked == {"chip"} and w.viewport._at_risk == {"plate"}
    colours = sorted(a.GetProperty().GetColor() for a in w.viewport._mark_actors)
    assert len(colours) == 2 and colours[0] != colours[1]
    assert "AT RISK" in res.view._over_text and "OVER RATING" in res.view._over_text
    # clicking another heading re-sorts; the verdict heading brings the review order back
    t.table.sortItems(col("part"))
    assert [r[0] for r in t.shown_rows()] == ["chip", "foot", "plate"]
    t.table.sortItems(col("status"))
    assert [r[0] for r in t.shown_rows()] == order


@pytest.mark.parametrize("size", [(1366, 768), (1920, 1080)], ids=lambda s: f"{s[0]}x{s[1]}")
def test_columns_fit(open_main_window, banded_run, artifacts, size):
    out, _, _ = banded_run
    w = open_main_window(out, size=size)
    w.fit_docks()
    for _ in range(3):
        QTest.qWait(50)
    table = w.results.table.table
    widths = sum(table.columnWidth(c) for c in range(table.columnCount()))
    assert widths <= table.viewport().width() + 1, (widths, table.viewport().width())
    assert not table.horizontalScrollBar().isVisible()
    assert w.results.chart.width() >= 300  # the chart keeps a readable width
    w.viewport.plotter.render()
    w.grab().save(str(artifacts / f"peak-table-{size[0]}x{size[1]}.png"))
