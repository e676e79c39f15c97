"""Every bundled sample runs headless to its end and its results pass physical sanity checks.

Each sample is run once (module-scoped fixture) through :class:`solver.run.session.RunSession`,
the same path ``thermgui solve`` takes; the power stage writes its result files to a temporary
folder, the others keep their results in memory (the file writers are tested elsewhere). To keep
this file within its time budget the radio box runs the first half of its profile (set in
``STORY``); the others run full length. The checks use only the model file and the step stream:

* energy: heat generated and absorbed (integrated here from the model file's profiles, not from
  the solver's; a surface load's area is its face's rectangle, checked to be uncovered) = heat
  stored (from each part's mean temperature times ρ·c·volume of its box, with ρ·c from the
  material table, plus each air volume's ρ·c·V times its rise; V checked against the housing's
  inside minus the parts in it) + heat convected and radiated out (from the step stream), and
  the per-step residual the solver reports is at round-off (to the radiation iterations'
  tolerance where a sample radiates);
* bounds from the comparison (maximum) principle for the heat equation with non-negative
  sources and Robin boundaries (Evans, Partial Differential Equations, §7.1.4, weak maximum
  principle for parabolic equations, from memory; radiation to surroundings and exchange with
  inside air only move heat toward their temperatures, so the principle still applies): no
  temperature below the coldest of the initial, ambient and radiation surroundings temperatures; and, writing T ≤ T_ref + w with w the response to the
  sources alone from zero (w ≥ 0, ∫ρc·w dV ≤ energy generated so far), the capacity-weighted
  mean of the whole model, and of each part, stays below T_ref + E_in(t) / C (C of the whole
  model, or of that part). T_ref is the hottest of the initial and ambient temperatures.
  (A part's *maximum* is not bounded by such an average: a small hot die may well exceed it.)
* the story each sample tells: the power stage's Q2 die exceeds its rating during the run
  and nothing else does; the radio box stays within ratings with the radio module closest;
  the tracker's part with the least margin changes from the charger IC to the battery.
"""
from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest

from solver.model.modelfile import load_model, parse_model
from solver.run.session import RunSession

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = sorted((ROOT / "samples").glob("*.json"))
MM3 = 1e-9  # m³ per mm³

# Discrete solutions on graded grids with Crank–Nicolson may undershoot a little where the
# continuous problem cannot; a hundredth of a kelvin is far below any engineering meaning.
UNDERSHOOT_TOL_K = 0.01

# What each sample is built to show (see its "title").
STORY = {
    "outdoor_radio_box.json": {"over": set(), "least_margin_at": [(900.0, "radio module")], "duration_s": 900.0,
                               "write_files": False},
    "compact_power_stage.json": {"over": {"Q2 die"}, "least_margin_at": [(600.0, "Q2 die")], "write_files": True},
    # end of full-current charging, then the end of the warm afternoon
    "handheld_tracker.json": {"over": set(), "least_margin_at": [(2700.0, "charger IC"), (14400.0, "battery")],
                              "write_files": False},
}


# ------------------------------------------------------------------ profiles, from the file
def profile_integral(p: dict, t_end: float) -> float:
    """∫₀^t_end of a model-file profile (W → J), from the format's definition (NOTES §3)."""
    kind = p["type"]
    if kind == "constant":
        return p["value"] * t_end
    if kind == "step":
        return p["value"] * max(0.0, t_end - p.get("start_s", 0.0))
    if kind == "pulse":
        start, period, duty = p.get("start_s", 0.0), p["period_s"], p["duty"]
        high, low = p["high"], p.get("low", 0.0)
        before = low * min(t_end, start)
        span = max(0.0, t_end - start)
        full = math.floor(span / period)
        rest = span - full * period
        on = full * duty * period + min(rest, duty * period)
        return before + high * on + low * (span - on)
    if kind == "table":  # first value before the first point, last after the last, linear between
        t_pts = np.array([q[0] for q in p["points"]])
        v_pts = np.array([q[1] for q in p["points"]])
        knots = np.unique(np.concatenate([[0.0, t_end], t_pts[(t_pts > 0) & (t_pts < t_end)]]))
        return float(np.trapezoid(np.interp(knots, t_pts, v_pts), knots))  # exact: linear between knots
    raise ValueError(kind)


def profile_levels(p) -> list[float]:
    if isinstance(p, (int, float)):
        return [float(p)]
    if p["type"] in ("constant", "step"):
        return [p["value"]] + ([0.0] if p["type"] == "step" and p.get("start_s", 0.0) > 0 else [])
    if p["type"] == "pulse":
        return [p["high"], p.get("low", 0.0)]
    return [v for _, v in p["points"]]


def reference_temperatures(data: dict) -> tuple[float, float]:
    """(coldest, hottest) of the initial temperatures and every ambient the model uses."""
    temps = [data.get("initial_c", 25.0)] + [p["initial_c"] for p in data["parts"] if "initial_c" in p]
    temps += [a["initial_c"] for a in data.get("air_volumes", []) if "initial_c" in a]
    default_amb = data.get("ambient_c", 25.0)
    for c in data.get("convection", []):
        temps += profile_levels(c["ambient_c"]) if "ambient_c" in c else [default_amb]
        if "surroundings_c" in c:
            temps += profile_levels(c["surroundings_c"])
    return min(temps), max(temps)


def face_area_mm2(data: dict, part_name: str, side: str) -> float:
    """Area of one side of a part's box (mm²), after checking that no other box touches that plane
    inside the face (so the whole rectangle is uncovered)."""
    parts = {p["name"]: p for p in data["parts"]}
    p = parts[part_name]
    ax = "xyz".index(side[0])
    lo, hi = p["origin_mm"], [p["origin_mm"][k] + p["size_mm"][k] for k in range(3)]
    plane = hi[ax] if side[1] == "+" else lo[ax]
    others = [k for k in range(3) if k != ax]
    for q in data["parts"]:
        if q["name"] == part_name:
            continue
        qlo, qhi = q["origin_mm"], [q["origin_mm"][k] + q["size_mm"][k] for k in range(3)]
        if qlo[ax] <= plane <= qhi[ax] and all(min(hi[k], qhi[k]) > max(lo[k], qlo[k]) for k in others):
            raise AssertionError(f"{q['name']} touches the {side} face of {part_name}")
    return float(np.prod([p["size_mm"][k] for k in others]))


def part_capacities(data: dict, model) -> np.ndarray:
    """ρ·c·V of each part's box in J/K (the samples have no overlapping boxes)."""
    table = model.material_table()
    return np.array([table[p["material"]].volumetric_heat_capacity * np.prod(p["size_mm"]) * MM3
                     for p in data["parts"]])


# ------------------------------------------------------------------ one run per sample
class Observed:
    """What the checks need from one complete run."""

    def __init__(self, path: Path, out_dir: Path | None, duration_s: float | None = None):
        self.path = path
        self.data = json.loads(path.read_text(encoding="utf-8"))
        load_model(path)  # the file as shipped is valid
        if duration_s is not None:
            self.data["run"]["duration_s"] = duration_s
        self.model = parse_model(self.data, str(path))
        self.out_dir = out_dir
        # one solve on the file's mesh: the invariants below hold for any mesh, and the accuracy
        # ladder of the default run is checked on the default sample by test_default_sample_run_is_bounded
        session = RunSession(self.model, out_dir, tolerance_k=False)
        self.problem = session.problem
        self.duration = float(self.model.run.duration_s)
        times, field_min, part_mean, part_max, air = [], [], [], [], []
        e_out = 0.0
        level = 0
        for ev in session.events():
            if ev.level != level:  # a finer mesh of the accuracy ladder: only the last one is reported
                level = ev.level
                times, field_min, part_mean, part_max, air = [], [], [], [], []
                e_out = 0.0
            times.append(ev.time_s)
            air.append(np.array(ev.air))
            field_min.append(float(ev.field.min()))
            part_mean.append(np.array(ev.part_mean))
            part_max.append(np.array(ev.part_max))
            e_out += ev.convected_out_w * ev.dt
        self.complete = session.complete
        self.rows = {r.part: r for r in session.finish()}
        self.times = np.array(times)
        self.field_min = np.array(field_min)
        self.part_mean = np.array(part_mean)
        self.part_max = np.array(part_max)
        self.air = np.array(air).reshape(len(times), len(self.model.air_volumes))
        self.air_capacity = np.array([a.density * a.specific_heat for a in self.model.air_volumes]) * (
            self.problem.air.volume_m3 if self.problem.air is not None else np.zeros(0))
        self.e_out = e_out
        self.rel_residual = session.recorder.relative_energy_residual
        self.capacity = part_capacities(self.data, self.model)
        self.cold_ref, self.hot_ref = reference_temperatures(self.data)

    def energy_in(self, t: float) -> float:
        """J generated in parts plus J absorbed from surface fluxes up to ``t``."""
        e = sum(profile_integral(hl["profile"], t) for hl in self.data.get("heat_loads", []))
        for sl in self.data.get("surface_loads", []):
            flux = sl["flux_w_m2"] if isinstance(sl["flux_w_m2"], dict) else {"type": "constant",
                                                                              "value": sl["flux_w_m2"]}
            area = face_area_mm2(self.data, sl["part"], sl["side"]) * 1e-6
            e += sl.get("absorptivity", 1.0) * area * profile_integral(flux, t)
        return e


@pytest.fixture(scope="module", params=[p.name for p in SAMPLES])
def observed(request, tmp_path_factory) -> Observed:
    path = ROOT / "samples" / request.param
    story = STORY.get(path.name, {})
    out_dir = tmp_path_factory.mktemp(path.stem) if story.get("write_files") else None
    return Observed(path, out_dir, story.get("duration_s"))


# ------------------------------------------------------------------ the checks
def test_there_are_samples_and_the_default_is_one_of_them():
    from thermgui.cli import default_sample

    names = {p.name for p in SAMPLES}
    assert len(names) >= 3, names
    assert default_sample().name in names
    assert set(STORY) <= names, "a sample this file describes is missing"


@pytest.mark.parametrize("path", SAMPLES, ids=[p.name for p in SAMPLES])
def test_sample_is_a_valid_model_of_invented_scenario(path):
    model = load_model(path)  # raises ModelError naming the field if not
    assert "invented" in model.title.lower(), "every sample says in its title that it is invented"
    assert model.heat_loads and model.convection
    assert any(p.rated_c is not None for p in model.parts)


def test_runs_to_the_end_and_writes_results(observed):
    assert observed.complete
    assert observed.times[0] == 0.0 and observed.times[-1] == pytest.approx(observed.duration)
    if observed.out_dir is None:
        return
    for name in ("peaks.csv", "history.csv", "run.json", "field.vtkhdf"):
        assert (observed.out_dir / name).is_file(), name
    with open(observed.out_dir / "peaks.csv", newline="", encoding="utf-8") as fh:
        rows = {r["part"]: r for r in csv.DictReader(fh)}
    assert set(rows) == {p["name"] for p in observed.data["parts"]} | {a["name"] for a in
                                                                      observed.data.get("air_volumes", [])}
    for name, row in observed.rows.items():
        assert rows[name]["status"] == row.status
        assert float(rows[name]["peak_c"]) == pytest.approx(row.peak_c, abs=1e-3)


def test_energy_balance(observed):
    assert observed.rel_residual < 1e-9  # radiation included: its iterations stop at 1e-7 K
    # the samples' boxes do not overlap, so each part holds its whole box
    vol_mm3 = np.array([np.prod(p["size_mm"]) for p in observed.data["parts"]])
    assert observed.problem.part_volume / MM3 == pytest.approx(vol_mm3, rel=1e-9)
    e_in = observed.energy_in(observed.duration)
    stored = float(observed.capacity @ (observed.part_mean[-1] - observed.part_mean[0]))
    stored += float(observed.air_capacity @ (observed.air[-1] - observed.air[0])) if len(observed.air_capacity) else 0.0
    assert e_in > 0
    # 1e-6, or 2e-5 with a sloped surface flux: the damped backward-Euler half steps after each jump
    # take a ramp's value at their end (radio box: 30 jumps × α·A·slope·(Δt/2)² = 0.04 J of 3083 J)
    sloped = any(isinstance(sl["flux_w_m2"], dict) and sl["flux_w_m2"]["type"] == "table"
                 for sl in observed.data.get("surface_loads", []))
    assert stored + observed.e_out == pytest.approx(e_in, rel=2e-5 if sloped else 1e-6)


def test_air_volume_is_the_housing_inside_minus_the_parts_in_it():
    """The radio box's inside air: the housing's inner box (walls 3 mm, 120 × 80 × 40 outside)
    minus the board, standoffs, module and regulator, by hand from the file."""
    data = json.loads((ROOT / "samples" / "outdoor_radio_box.json").read_text(encoding="utf-8"))
    model = parse_model(data)
    from solver.fem.problem import build_problem

    problem = build_problem(model)
    inner = 114.0 * 74.0 * 34.0
    walls = {"base", "lid", "wall west", "wall east", "wall south", "wall north"}
    inside = sum(np.prod(p["size_mm"]) for p in data["parts"] if p["name"] not in walls)
    assert problem.air.volume_m3[0] / MM3 == pytest.approx(inner - inside, rel=1e-9)


def test_nothing_colder_than_the_coldest_start_or_ambient(observed):
    assert observed.field_min.min() >= observed.cold_ref - UNDERSHOOT_TOL_K


def test_mean_temperatures_within_the_energy_bound(observed):
    e_in = np.array([observed.energy_in(t) for t in observed.times])
    c_total = observed.capacity.sum()  # (the air's capacity only adds to C: leaving it out keeps the bound)
    whole_mean = observed.part_mean @ observed.capacity / c_total
    assert np.all(whole_mean <= observed.hot_ref + e_in / c_total + 1e-6)
    part_bound = observed.hot_ref + e_in[:, None] / observed.capacity[None, :]
    assert np.all(observed.part_mean <= part_bound + 1e-6)
    # and the model did heat up: the bound is not met trivially
    assert observed.part_max[-1].max() > observed.part_max[0].max() + 1.0


def test_rated_parts_reported_as_the_sample_intends(observed):
    story = STORY.get(observed.path.name)
    if story is None:
        pytest.skip(f"no story recorded here for {observed.path.name}")
    over = {name for name, r in observed.rows.items() if r.status == "over"}
    assert over == story["over"]
    for name in story["over"]:
        r = observed.rows[name]
        assert 0.0 < r.first_over_s < observed.duration
        assert r.peak_c > r.rated_c and r.margin_k < 0
        i = observed.model.part_index(name)
        k = int(np.searchsorted(observed.times, r.first_over_s))
        # the part's maximum is below its rating before the reported time and above after
        assert observed.part_max[:k, i].max() <= r.rated_c + 1e-9
        assert observed.part_max[k:, i].max() > r.rated_c
    rated = [i for i, p in enumerate(observed.model.parts) if p.rated_c is not None]
    ratings = np.array([observed.model.parts[i].rated_c for i in rated])
    margin = ratings[None, :] - observed.part_max[:, rated]
    least = [observed.model.parts[rated[j]].name for j in margin.argmin(axis=1)]
    for t, name in story["least_margin_at"]:
        k = int(np.argmin(np.abs(observed.times - t)))
        assert observed.times[k] == pytest.approx(t)
        assert least[k] == name, f"least margin at {t:g} s: {least[k]}, expected {name}"


@pytest.mark.gui
@pytest.mark.parametrize("path", SAMPLES, ids=[p.name for p in SAMPLES])
def test_sample_opens_in_the_app(path, qtbot, tmp_path, monkeypatch):
    import pyvista as pv

    from thermgui.app import open_window

    monkeypatch.setenv("THERMGUI_STATE_DIR", str(tmp_path / "state"))
    (tmp_path / "state").mkdir()
    pv.global_theme.multi_samples = 0

    class Prompts:
        """Records messages; answers every question with its last choice (cancel / no)."""

        def __init__(self):
            self.messages = []

        def error(self, title, text):
            self.messages.append(("error", title, text))

        def info(self, title, text):
            self.messages.append(("info", title, text))

        def ask(self, title, text, choices=("yes", "no")):
            self.messages.append(("ask", title, text))
            return choices[-1]

        def open_path(self, title, start=""):
            return ""

        save_path = image_path = open_path

    prompts = Prompts()
    window = open_window(path, prompts=prompts, auto_update=False, autosave_s=0)
    qtbot.addWidget(window)
    try:
        qtbot.waitExposed(window)
        assert [m for m in prompts.messages if m[0] == "error"] == []
        doc = window.document
        # a bundled sample opens as an unsaved copy of itself (saving asks where to put it)
        assert doc.path is None and doc.template_name == path.name
        assert doc.model.to_json_dict() == load_model(path).to_json_dict()
    finally:
        window.shutdown()


def test_default_sample_run_is_bounded(tmp_path):
    """The default sample as a user runs it (accuracy control on, shortened to 2 minutes): every
    rated peak has a finite bound, the record is in run.json, and each status follows the band."""
    data = json.loads((ROOT / "samples" / "outdoor_radio_box.json").read_text(encoding="utf-8"))
    data["run"]["duration_s"] = 120.0
    model = parse_model(data)
    session = RunSession(model, tmp_path / "out")
    for _ in session.events():
        pass
    rows = session.finish()
    info = json.loads((tmp_path / "out" / "run.json").read_text())
    levels = info["accuracy"]["levels"]
    assert len(levels) >= 3 and levels[-1]["nodes"] > levels[0]["nodes"]
    parts = {p.name for p in model.parts}
    for r in rows:
        if r.rated_c is None or r.part not in parts:  # air volume rows carry no mesh error estimate
            continue
        assert r.peak_error_k is not None and 0.0 <= r.peak_error_k < 20.0
        low, high = r.peak_c - r.peak_error_k, r.peak_c + r.peak_error_k
        assert r.status == ("over" if low > r.rated_c else "at-risk" if high >= r.rated_c else "ok")
    assert info["accuracy"]["converged"] or session.accuracy_warnings()
