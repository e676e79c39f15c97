"""Lumped air node inside a sealed box (``air_volumes``).

Outside reference: the two-node network (housing, inside air) integrated by
scipy.integrate.solve_ivp (Radau):
    C₁ T₁' = P − (hA)ₒ (T₁ − T∞) − (hA)ᵢ (T₁ − T₂),    C₂ T₂' = (hA)ᵢ (T₁ − T₂),
with a housing of very high conductivity so that it is one temperature (the lumped-capacitance
condition Bi ≪ 0.1: Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, §5.1-5.2).
"""
import csv
import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import solver
from solver.errors import ModelError
from modelkit import model_dict, part, problem_of

RHO_C_WALL = 1.0e6  # J/(m³ K)
H_OUT, H_IN = 10.0, 4.0  # W/(m² K)
P = 1.0  # W
AIR_RHO, AIR_CP = 50.0, 1007.0  # a dense invented gas, so the air's time constant (~84 s) is resolved
WALL_NAMES = ("bottom", "top", "xlo", "xhi", "ylo", "yhi")
A_OUT = 2 * 50 * 50 + 2 * 50 * 40 + 2 * 40 * 40  # mm², the outside faces with a convection entry
A_IN = 6 * 40 * 40  # mm², the cavity's faces
V_AIR = 40.0 ** 3  # mm³


def box(method="full", scheme="crank-nicolson", mass="lumped", volume=None, enclosed=WALL_NAMES, duration_s=600.0):
    mats = {"lumpy": {"conductivity": 1.0e4, "density": 1000.0, "specific_heat": 1000.0}}
    parts = [part("bottom", "lumpy", (0, 0, 0), (50, 50, 5)), part("top", "lumpy", (0, 0, 45), (50, 50, 5)),
             part("xlo", "lumpy", (0, 0, 5), (5, 50, 40)), part("xhi", "lumpy", (45, 0, 5), (5, 50, 40)),
             part("ylo", "lumpy", (5, 0, 5), (40, 5, 40)), part("yhi", "lumpy", (5, 45, 5), (40, 5, 40))]
    conv = [{"name": f"out-{n}", "part": n, "side": s, "h": H_OUT}
            for n, s in zip(WALL_NAMES, ("z-", "z+", "x-", "x+", "y-", "y+"))]
    d = model_dict(parts, materials=mats, heat_loads=[{"part": "top", "profile": {"type": "constant", "value": P}}],
                   convection=conv, cell_mm=5.0, duration_s=duration_s, step_s=1.0, scheme=scheme, mass=mass,
                   output_every_s=50.0, method=method, ambient_c=25.0, initial_c=25.0)
    av = {"name": "inside air", "enclosed_by": list(enclosed), "initial_c": 40.0, "rated_c": 40.5,
          "density": AIR_RHO, "specific_heat": AIR_CP,
          "faces": [{"part": n, "side": "exposed", "h": H_IN} for n in WALL_NAMES]}
    if volume is not None:
        av["volume_mm3"] = volume
    d["air_volumes"] = [av]
    d["mesh"]["tolerance_k"] = None
    return d


def two_node_reference(t_eval):
    c1 = RHO_C_WALL * (50.0 ** 3 - V_AIR) * 1e-9
    c2 = AIR_RHO * AIR_CP * V_AIR * 1e-9
    go, gi = H_OUT * A_OUT * 1e-6, H_IN * A_IN * 1e-6

    def rhs(t, y):
        t1, t2 = y
        return [(P - go * (t1 - 25.0) - gi * (t1 - t2)) / c1, gi * (t1 - t2) / c2]
    sol = solve_ivp(rhs, (0.0, float(t_eval[-1])), [25.0, 40.0], method="Radau", t_eval=t_eval,
                    rtol=1e-10, atol=1e-10)
    return sol.y


def test_volume_and_exchange_from_the_enclosure():
    _, problem = problem_of(box())
    air = problem.air
    assert air.volume_m3[0] == pytest.approx(V_AIR * 1e-9, rel=1e-12)
    assert air.area_m2[0] == pytest.approx(A_IN * 1e-6, rel=1e-12)  # only the faces toward the air
    assert air.capacity_j_k[0] == pytest.approx(AIR_RHO * AIR_CP * V_AIR * 1e-9)
    assert problem.n_nodes == problem.mesh.n_nodes + 1


@pytest.mark.parametrize("method, mass", [("full", "lumped"), ("full", "consistent"), ("reduced", "lumped")])
def test_box_and_air_against_two_node_network(method, mass):
    _, problem = problem_of(box(method=method, mass=mass))
    st = solver.Stepper(problem)
    assert st.method == method
    evs = [ev for ev in st]
    out = [ev for ev in evs if ev.is_output]
    times = np.array([ev.time_s for ev in out])
    ref = two_node_reference(times)
    housing = np.array([ev.part_max.max() for ev in out])
    air = np.array([ev.air[0] for ev in out])
    assert len(out[0].field) == problem.mesh.n_nodes
    assert np.abs(air - ref[1]).max() < 0.005, np.abs(air - ref[1]).max()
    assert np.abs(housing - ref[0]).max() < 0.005, np.abs(housing - ref[0]).max()
    assert air[0] == 40.0 and air.min() < 39.0  # it starts hot and cools into the housing first
    # energy: heat in = stored (housing and air) + convected out, every step
    for ev in evs[1:]:
        assert abs(ev.energy_residual_w) < 1e-8 * max(abs(ev.heat_in_w), abs(ev.stored_w), 1e-12)


def test_air_in_history_and_peaks(tmp_path):
    path = tmp_path / "box.json"
    path.write_text(json.dumps(box(duration_s=300.0)))
    from solver.run.cli import solve_to_folder

    solve_to_folder(path, tmp_path / "out", quiet=True)
    with open(tmp_path / "out" / "history.csv") as fh:
        rows = list(csv.reader(fh))
    assert rows[0][-1] == "air:inside air"
    with open(tmp_path / "out" / "peaks.csv") as fh:
        peaks = {r["part"]: r for r in csv.DictReader(fh)}
    row = peaks["inside air"]
    assert float(row["peak_c"]) == pytest.approx(40.0)  # its start is its hottest
    assert float(row["rated_c"]) == 40.5 and row["status"] == "ok" and row["hotspot_x_mm"] == ""
    info = json.loads((tmp_path / "out" / "run.json").read_text())
    assert info["air_volumes"][0]["volume_mm3"] == pytest.approx(V_AIR)


def test_open_box_is_refused_and_faces_must_face_the_air():
    d = box(enclosed=("bottom", "xlo", "xhi", "ylo", "yhi"))  # no lid: the air reaches outside
    with pytest.raises(ModelError) as e:
        problem_of(d)
    assert "air_volumes[0].enclosed_by" in str(e.value) and "do not enclose" in str(e.value)
    d = box()
    d["air_volumes"][0]["faces"][1]["side"] = "z+"  # the lid's top faces the outside, not the air
    _, problem = problem_of(d)
    assert any("'top'" in w and "toward the enclosed air" in w for w in problem.warnings)
    assert problem.air.area_m2[0] == pytest.approx(5 * 40 * 40 * 1e-6)  # the lid's inside no longer counts
    d["air_volumes"][0]["faces"] = [{"part": "top", "side": "z+", "h": 4.0}]
    with pytest.raises(ModelError) as e:
        problem_of(d)
    assert "air_volumes[0].faces" in str(e.value) and "no listed face" in str(e.value)
    d = box(volume=-5.0)
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "air_volumes[0].volume_mm3" in str(e.value)
    d = box()
    d["air_volumes"][0]["name"] = "top"
    with pytest.raises(ModelError) as e:
        solver.parse_model(d)
    assert "air_volumes[0].name" in str(e.value)


def test_given_volume_overrides_the_enclosure():
    _, problem = problem_of(box(volume=32000.0))
    assert problem.air.volume_m3[0] == pytest.approx(32000.0e-9)


def test_whatif_refuses_air_volumes():
    from solver.answers.unitresponse import require_linear

    with pytest.raises(ModelError) as e:
        require_linear(solver.parse_model(box()))
    assert "air_volumes" in str(e.value)
