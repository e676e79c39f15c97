"""Qt-free results logic: the store filled live vs. reopened from disk, frame lookup, colour range,
over-rating sets, the exported peak table vs. ``thermgui solve``, time formatting, error paths.

The references here are the engine's own files written by the command line (``peaks.csv``,
``history.csv``, the .vtu frames) and direct numpy reductions of the stored frames.
"""
from __future__ import annotations

import numpy as np
import pytest

from solver.run.cli import solve_to_folder
from solver.errors import ModelError
from solver.model.modelfile import parse_model, save_model
from solver.io.runfolder import load_run
from solver.results.recorder import PEAK_COLUMNS
from solver.run.session import RunSession
from thermgui.runresults.autocut import hottest_spot, on_outer_box, revealing_cut_z
from thermgui.runresults.messages import describe_error, item_for_path
from thermgui.runresults.runpanel import remaining_seconds
from thermgui.runresults.store import ResultsStore, peaks_tsv, results_folder_for
from thermgui.runresults.timefmt import format_duration, format_time, time_unit
from modelkit import chip_on_plate




@pytest.fixture(scope="module")
def solved(tmp_path_factory):
    """The same model solved by the command line (folder) and streamed into a live store."""
    base = tmp_path_factory.mktemp("store")
    model = parse_model(chip_on_plate())
    model_path = base / "chip.json"
    save_model(model, model_path)
    assert solve_to_folder(model_path, base / "cli", quiet=True) == 0
    session = RunSession(model, base / "live")
    live = ResultsStore.for_problem(session.problem, base / "live")
    level = 0
    for ev in session.events():
        if ev.level != level:  # a finer mesh of the accuracy ladder: the store starts again, as in the app
            level = ev.level
            live = ResultsStore.for_problem(session.problem, base / "live")
        if ev.is_output:
            live.add_frame(ev.time_s, ev.field, ev.part_max)
    live.set_peak_rows(session.finish())
    return {"base": base, "live": live, "cli": base / "cli", "model": model}


def test_live_store_matches_cli_files(solved):
    live = solved["live"]
    run = load_run(solved["cli"])
    assert np.allclose(live.times, run.times)
    assert live.times == [0.0, 10.0, 20.0, 30.0, 40.0, 50.0, 60.0]
    for i in range(live.n_frames):
        assert np.allclose(live.frame(i), run.field(i), atol=1e-4)
    # peak table text is byte-identical to peaks.csv written by `thermgui solve`
    assert live.peaks_csv_text().encode() == (solved["cli"] / "peaks.csv").read_bytes()


def test_reopened_store_equals_live(solved):
    live = solved["live"]
    reopened = ResultsStore.from_finished(load_run(solved["cli"]))
    assert reopened.part_names == live.part_names
    assert np.array_equal(np.isnan(reopened.rated_c), np.isnan(live.rated_c))
    assert np.allclose(reopened.points_mm, live.points_mm)
    assert np.array_equal(reopened.tets, live.tets)
    for i in range(live.n_frames):
        assert np.allclose(reopened.frame(i), live.frame(i), atol=1e-4)
    # part maxima from history.csv (4 decimals) agree with the frames' own maxima per part
    _, pm = reopened.history()
    assert np.allclose(pm, np.array(live.part_max), atol=1e-3)
    assert reopened.peaks_csv_text() == live.peaks_csv_text()
    assert reopened.complete and reopened.folder == solved["cli"]


def test_part_max_recomputed_from_frame_matches_engine(solved):
    live = solved["live"]
    i = live.n_frames - 1
    assert np.allclose(live._part_max_of(live.frame(i)), live.part_max[i], atol=1e-4)


def test_colour_range_is_global_unless_per_frame(solved):
    live = solved["live"]
    frames = np.array(live.frames)
    lo, hi = live.colour_range(2)
    assert lo == pytest.approx(frames.min()) and hi == pytest.approx(frames.max())
    assert live.colour_range(5) == (lo, hi)  # fixed across time
    lo2, hi2 = live.colour_range(2, per_frame=True)
    assert lo2 == pytest.approx(frames[2].min()) and hi2 == pytest.approx(frames[2].max())
    assert hi2 < hi  # still heating, so an earlier frame tops out lower
    # the initial frame is uniform: the range is widened so a colour scale can be drawn
    lo0, hi0 = live.colour_range(0, per_frame=True)
    assert hi0 - lo0 == pytest.approx(1.0)


def test_live_colour_range_keeps_the_starting_temperature_as_its_cool_end(tmp_path):
    """Found by a GUI test that failed once in a full run: with only the uniform t = 0 frame
    stored, the padded range (25 ± 0.5) put the live scale's cool end at 24.5 °C."""
    import solver
    from thermgui.runresults.resultdisplay import LIVE_MIN_SPAN_K, live_colour_range

    problem = solver.build_problem(solver.parse_model(chip_on_plate()))
    store = ResultsStore.for_problem(problem, tmp_path)
    n = problem.n_nodes
    store.add_frame(0.0, np.full(n, 25.0))
    assert store.colour_range(None, False) == pytest.approx((24.5, 25.5))  # padded, for a still view
    warmer = np.linspace(25.0, 27.0, n)  # a live frame between outputs
    lo, hi = live_colour_range(*store.colour_range(None, False, pad=False), warmer)
    assert lo == pytest.approx(25.0) and hi == pytest.approx(25.0 + LIVE_MIN_SPAN_K)
    empty = ResultsStore.for_problem(problem, tmp_path)
    assert live_colour_range(*empty.colour_range(None, False, pad=False), warmer) == \
        pytest.approx((25.0, 25.0 + LIVE_MIN_SPAN_K))


def test_over_rating_sets(solved):
    live = solved["live"]
    assert live.over_at(0) == set()  # everything starts at 25 °C
    last = live.n_frames - 1
    chip = live.part_names.index("chip")
    assert live.part_max[last][chip] > 40.0, "scenario must overload the chip"
    assert live.over_at(last) == {"chip"}
    assert live.ever_over() == {"chip"}
    # the finished table says the same
    rows = {r[0]: r for r in live.peak_rows}
    st = PEAK_COLUMNS.index("status")
    assert rows["chip"][st] == "over" and rows["plate"][st] == "ok" and rows["foot"][st] == "unrated"
    assert live.rated_parts() == ["plate", "chip"]
    assert live.rating("foot") is None and live.rating("chip") == 40.0


def test_index_at_picks_nearest_output(solved):
    live = solved["live"]
    assert live.index_at(0.0) == 0
    assert live.index_at(14.0) == 1
    assert live.index_at(16.0) == 2
    assert live.index_at(1e6) == live.n_frames - 1


def test_tsv_has_header_and_rows(solved):
    live = solved["live"]
    lines = peaks_tsv(live.peak_rows).splitlines()
    assert lines[0].split("\t")[:3] == ["part", "rated_c", "peak_c"]
    assert len(lines) == 1 + len(live.part_names)
    assert all(len(l.split("\t")) == 11 for l in lines)


def test_results_folder_beside_model(tmp_path):
    assert results_folder_for(tmp_path / "box.json") == tmp_path / "box.results"


def test_time_formatting():
    assert time_unit(60) == ("s", 1.0)
    assert time_unit(1800) == ("min", 60.0)
    assert time_unit(4 * 3600) == ("h", 3600.0)
    assert format_time(30, 60) == "30 s"
    assert format_time(2.5) == "2.5 s"
    assert format_time(90, 1800) == "1.5 min"
    assert format_time(5400, 4 * 3600) == "1.5 h"
    assert format_duration(5) == "5 s"
    assert format_duration(200) == "3 min 20 s"
    assert format_duration(3900) == "1 h 05 min"
    assert format_duration(float("nan")) == "–"


def test_remaining_time_estimate():
    assert remaining_seconds(0, 100, 0.0) is None
    assert remaining_seconds(25, 100, 10.0) == pytest.approx(30.0)
    assert remaining_seconds(100, 100, 40.0) == 0.0


def test_error_paths_point_at_items():
    assert item_for_path("parts[3].size_mm[2]") == ("parts", 3)
    assert item_for_path("heat_loads[0].profile.value") == ("heat_loads", 0)
    assert item_for_path("run.step_s") == ("study", 0)
    assert item_for_path("") is None
    head, detail = describe_error(ModelError(("run.step_s", "too long")))
    assert "cannot be run" in head and detail == "run.step_s: too long"


def test_engine_refusal_is_a_model_error_naming_the_step():
    model = parse_model(chip_on_plate(scheme="forward-euler", step_s=5.0))
    with pytest.raises(ModelError) as err:
        RunSession(model, None)
    assert err.value.first_path == "run.step_s"
    assert item_for_path(err.value.first_path) == ("study", 0)


# ---------------------------------------------------------------- first cut that shows a hidden hot part
def box_nodes(x1=120.0, y1=80.0, z1=40.0) -> np.ndarray:
    """Corner and mid nodes of a closed housing spanning (0..x1, 0..y1, 0..z1) mm."""
    g = np.array(np.meshgrid([0, x1 / 2, x1], [0, y1 / 2, y1], [0, z1 / 2, z1], indexing="ij"))
    return g.reshape(3, -1).T


def test_hottest_spot_is_the_row_with_the_highest_peak(solved):
    import csv

    with open(solved["cli"] / "peaks.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    top = max(rows, key=lambda r: float(r["peak_c"]))
    name, xyz = hottest_spot(solved["live"].peak_rows)
    assert name == top["part"] == "chip"
    assert xyz == pytest.approx([float(top[f"hotspot_{a}_mm"]) for a in "xyz"])
    # unusable rows (empty part: no peak, no hot spot) are skipped, not fatal
    assert hottest_spot([["empty", "", "", "", "", "", "", "", "", "ok"]]) is None
    assert hottest_spot(None) is None


def test_hot_spot_on_the_outside_needs_no_cut(solved):
    live = solved["live"]
    name, xyz = hottest_spot(live.peak_rows)
    # the chip sits on top of the plate: its hottest node is on the model's top face, visible as is
    assert xyz[2] == pytest.approx(live.points_mm[:, 2].max())
    assert on_outer_box(xyz, live.points_mm)
    assert revealing_cut_z(xyz, live.points_mm, live.part_bounds_mm[name]) is None


def test_hidden_hot_spot_gets_a_cut_just_above_its_part():
    nodes = box_nodes()
    module = (25.0, 47.0, 25.0, 41.0, 11.6, 14.0)  # a part inside the housing, top at 14 mm
    spot = (36.0, 33.0, 14.0)
    assert not on_outer_box(spot, nodes)
    fraction, z = revealing_cut_z(spot, nodes, module, margin_mm=1.0)
    # plane wanted at 14 + 1 = 15 mm of 40 mm = 37.5 %, rounded up to the slider's whole per cent
    assert fraction == pytest.approx(0.38)
    assert z == pytest.approx(15.2)
    assert z > module[5]
    # without the part's bounds the plane goes just above the point itself
    assert revealing_cut_z((36.0, 33.0, 8.0), nodes, margin_mm=1.0)[0] == pytest.approx(0.23)
    # a hidden point in a part reaching the model's top: the plane goes through the point
    fraction, z = revealing_cut_z((60.0, 40.0, 20.0), nodes, (50, 70, 30, 50, 10, 40), margin_mm=1.0)
    assert fraction == pytest.approx(0.5) and z == pytest.approx(20.0)
    # never below the slider's smallest share
    assert revealing_cut_z((60.0, 40.0, 0.2), nodes, margin_mm=0.0, min_fraction=0.05)[0] == pytest.approx(0.05)


def test_points_on_any_face_of_the_box_are_outside():
    nodes = box_nodes()
    for p in [(0, 40, 20), (120, 40, 20), (60, 0, 20), (60, 80, 20), (60, 40, 0), (60, 40, 40)]:
        assert on_outer_box(p, nodes), p
        assert revealing_cut_z(p, nodes) is None
    assert not on_outer_box((60, 40, 20), nodes)


def test_air_volume_in_the_store_live_and_reopened(tmp_path):
    """Air temperatures reach the chart's series live (as the worker sends them: part maxima, then
    air) and from a reopened folder (the air:<name> column of history.csv)."""
    from test_air_volumes import box

    model = parse_model(box(duration_s=300.0))
    save_model(model, tmp_path / "box.json")
    solve_to_folder(tmp_path / "box.json", tmp_path / "out", quiet=True)
    session = RunSession(model, None, tolerance_k=False)
    live = ResultsStore.for_problem(session.problem)
    for ev in session.events():
        if ev.is_output:
            live.add_frame(ev.time_s, ev.field, np.concatenate([ev.part_max, ev.air]))
    names, times, values = live.series()
    assert names[-1] == "inside air" and values.shape == (len(times), len(model.parts) + 1)
    assert values[0, -1] == 40.0 and live.rating("inside air") == 40.5
    back = ResultsStore.from_finished(load_run(tmp_path / "out"))
    names_b, times_b, values_b = back.series()
    assert names_b == names and np.allclose(times_b, times)
    assert np.allclose(values_b[:, -1], values[:, -1], atol=1e-4)  # history.csv keeps 4 decimals
    assert "inside air" in {r[0] for r in back.peak_rows}
