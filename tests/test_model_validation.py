"""Model-file validation: every bad input names the field path and the problem (NOTES.md §3, §4).

The contract checked here is the team's own (NOTES.md); the cases are chosen by hand, one
per rule in the schema. ``parse_model`` / ``load_model`` must raise ModelError, never
anything else, and the first reported path must be the offending field.
"""
from __future__ import annotations

import copy
import json

import pytest

import solver
from conftest import minimal_model_dict
from solver.model.modelfile import load_model


def _set(path, value):
    """A mutator that sets d[path...] = value (path as a tuple of keys and indices)."""
    def mutate(d):
        obj = d
        for key in path[:-1]:
            obj = obj[key]
        obj[path[-1]] = value
    return mutate


def _delete(path):
    def mutate(d):
        obj = d
        for key in path[:-1]:
            obj = obj[key]
        del obj[path[-1]]
    return mutate


def _second_part(name="cube"):
    def mutate(d):
        p = copy.deepcopy(d["parts"][0])
        p["name"] = name
        p["origin_mm"] = [20, 0, 0]
        d["parts"].append(p)
    return mutate


def _load(profile):
    return _set(("heat_loads", 0, "profile"), profile)


PULSE = {"type": "pulse", "high": 2.0, "low": 0.0, "period_s": 4.0, "duty": 0.5}

# (id, mutation, expected first path, words the message must contain)
CASES = [
    ("wrong format", _set(("format",), "other-format"), "format", "thermgui-model"),
    ("missing format", _delete(("format",)), "format", "missing"),
    ("wrong version", _set(("version",), 2), "version", "version"),
    ("unknown top key", _set(("colour",), "red"), "colour", "unknown key"),
    ("unknown part key", _set(("parts", 0, "colour"), "red"), "parts[0].colour", "unknown key"),
    ("unknown run key", _set(("run", "solver"), "fast"), "run.solver", "unknown key"),
    ("nan size", _set(("parts", 0, "size_mm", 2), float("nan")), "parts[0].size_mm[2]", "finite"),
    ("inf ambient", _set(("ambient_c",), float("inf")), "ambient_c", "finite"),
    ("negative size", _set(("parts", 0, "size_mm", 1), -3.0), "parts[0].size_mm[1]", "greater than 0"),
    ("zero size", _set(("parts", 0, "size_mm", 2), 0.0), "parts[0].size_mm[2]", "greater than 0"),
    ("two-value size", _set(("parts", 0, "size_mm"), [1.0, 2.0]), "parts[0].size_mm", "3"),
    ("text origin", _set(("parts", 0, "origin_mm", 0), "12"), "parts[0].origin_mm[0]", "number"),
    ("negative h", _set(("convection", 0, "h"), -5.0), "convection[0].h", "greater than 0"),
    ("negative watts", _load({"type": "constant", "value": -1.0}), "heat_loads[0].profile", "negative"),
    ("negative duration", _set(("run", "duration_s"), -10.0), "run.duration_s", "greater than 0"),
    ("negative cell", _set(("mesh", "cell_mm"), -1.0), "mesh.cell_mm", "greater than 0"),
    ("below absolute zero", _set(("initial_c",), -300.0), "initial_c", "absolute zero"),
    ("unknown material", _set(("parts", 0, "material"), "unobtainium"), "parts[0].material", "unknown material"),
    ("unknown part in load", _set(("heat_loads", 0, "part"), "nope"), "heat_loads[0].part", "unknown part"),
    ("unknown part in convection", _set(("convection", 0, "part"), "nope"), "convection[0].part", "unknown part"),
    ("duplicate part", _second_part("cube"), "parts[1].name", "duplicate"),
    ("bad side", _set(("convection", 0, "side"), "top"), "convection[0].side", "x-"),
    ("bad scheme", _set(("run", "scheme"), "runge-kutta"), "run.scheme", "backward-euler"),
    ("bad profile type", _load({"type": "sine", "value": 1.0}), "heat_loads[0].profile", "profile type"),
    ("duty zero", _load(dict(PULSE, duty=0.0)), "heat_loads[0].profile.duty", "greater than 0"),
    ("duty above one", _load(dict(PULSE, duty=1.5)), "heat_loads[0].profile.duty", "less than or equal to 1"),
    ("table times not increasing", _load({"type": "table", "points": [[0, 1.0], [5, 2.0], [5, 3.0]]}),
     "heat_loads[0].profile.points[2][0]", "increase"),
    ("table time negative", _load({"type": "table", "points": [[-1, 1.0], [5, 2.0]]}),
     "heat_loads[0].profile.points[0][0]", "negative"),
    ("step longer than duration", _set(("run", "step_s"), 20.0), "run.step_s", "longer than the duration"),
    ("forward euler consistent", lambda d: d["run"].update(scheme="forward-euler", mass="consistent"),
     "run.mass", "lumped"),
    ("pulse too fast for the run", _load(dict(PULSE, period_s=1e-6)), "heat_loads[0].profile.period_s",
     "5 million"),
    ("negative conductivity", _set(("materials",), {"m": {"conductivity": -1.0, "density": 1.0,
                                                            "specific_heat": 1.0}}),
     "materials.m.conductivity", "greater than 0"),
    ("negative orthotropic conductivity", _set(("materials",), {"m": {"conductivity": [1.0, -1.0, 1.0],
                                                                      "density": 1.0, "specific_heat": 1.0}}),
     "materials.m.conductivity[1]", "greater than 0"),
    ("two conductivities", _set(("materials",), {"m": {"conductivity": [1.0, 2.0], "density": 1.0,
                                                        "specific_heat": 1.0}}),
     "materials.m.conductivity", "at least 3"),
    ("text conductivity", _set(("materials",), {"m": {"conductivity": "high", "density": 1.0,
                                                       "specific_heat": 1.0}}),
     "materials.m.conductivity", "a number or a list of three numbers"),
    ("min layers zero", _set(("mesh", "min_layers"), 0), "mesh.min_layers", "greater than or equal to 1"),
    ("bad ambient", _set(("convection", 0, "ambient_c"), "warm"), "convection[0].ambient_c", "number"),
]


@pytest.mark.parametrize("mutate,path,words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_bad_input_names_field_and_problem(mutate, path, words):
    d = minimal_model_dict()
    mutate(d)
    with pytest.raises(solver.ModelError) as err:
        solver.parse_model(d, source="model.json")
    e = err.value
    assert e.first_path == path, e.describe()
    text = e.describe()
    assert text.startswith(f"model.json: {path}: "), text
    assert words.lower() in text.lower(), text


def test_union_fields_report_one_user_path():
    """A number-or-list field reports the member that matches the input, never pydantic's tags."""
    d = minimal_model_dict()
    d["materials"] = {"m": {"conductivity": [1.0, -1.0, 1.0], "density": 1.0, "specific_heat": 1.0}}
    with pytest.raises(solver.ModelError) as err:
        solver.parse_model(d)
    assert [p for p, _ in err.value.issues] == ["materials.m.conductivity[1]"]
    assert "constrained" not in str(err.value) and "must be a number" not in str(err.value)


def test_the_base_model_is_valid():
    """The cases above differ from a valid model by exactly one change."""
    m = solver.parse_model(minimal_model_dict())
    assert m.parts[0].name == "cube"


def test_several_problems_are_all_listed():
    d = minimal_model_dict()
    d["parts"][0]["size_mm"][0] = -1
    d["convection"][0]["h"] = 0
    with pytest.raises(solver.ModelError) as err:
        solver.parse_model(d)
    paths = [p for p, _ in err.value.issues]
    assert "parts[0].size_mm[0]" in paths and "convection[0].h" in paths


def test_load_model_file_errors(tmp_path):
    missing = tmp_path / "absent.json"
    with pytest.raises(solver.ModelError) as err:
        load_model(missing)
    assert str(missing) in str(err.value) and "not found" in str(err.value)

    broken = tmp_path / "broken.json"
    broken.write_text('{\n  "format": "thermgui-model",\n  "version": 1,\n  "parts": [,]\n}\n')
    with pytest.raises(solver.ModelError) as err:
        load_model(broken)
    assert str(broken) in str(err.value) and "line 4, column 13" in str(err.value)

    nan_literal = tmp_path / "nan.json"
    nan_literal.write_text(json.dumps(dict(minimal_model_dict(), ambient_c=1.5)).replace("1.5", "NaN"))
    with pytest.raises(solver.ModelError) as err:
        load_model(nan_literal)
    assert "NaN" in str(err.value) and "finite" in str(err.value)

    huge = tmp_path / "huge.json"
    huge.write_text(json.dumps(dict(minimal_model_dict(), ambient_c=1.5)).replace("1.5", "1e999"))
    with pytest.raises(solver.ModelError) as err:
        load_model(huge)
    assert err.value.first_path == "ambient_c" and "finite" in str(err.value)

    folder = tmp_path / "folder.json"
    folder.mkdir()
    with pytest.raises(solver.ModelError) as err:
        load_model(folder)
    assert "folder" in str(err.value)

    repeated = tmp_path / "repeated.json"  # a key typed twice: JSON keeps the last silently, we refuse
    d = minimal_model_dict()
    text = json.dumps(d, indent=1).replace('"name": "%s"' % d["parts"][0]["name"],
                                           '"name": "first", "name": "%s"' % d["parts"][0]["name"], 1)
    repeated.write_text(text)
    with pytest.raises(solver.ModelError) as err:
        load_model(repeated)
    assert err.value.first_path == "parts[0].name" and "more than once" in str(err.value)

    not_object = tmp_path / "list.json"
    not_object.write_text("[1, 2]")
    with pytest.raises(solver.ModelError) as err:
        load_model(not_object)
    assert "JSON object" in str(err.value)


@pytest.mark.parametrize("mutate,path,words", [
    (_set(("probes",), [{"name": "air", "at_mm": [50.0, 50.0, 50.0]}]), "probes[0].at_mm", "not inside"),
    (_set(("mesh", "cell_mm"), 0.01), "mesh.cell_mm", "GB"),
], ids=["probe outside", "mesh too large"])
def test_problems_found_when_building(mutate, path, words):
    """Some input is only wrong once meshed; still a ModelError naming the field."""
    d = minimal_model_dict()
    d["parts"][0]["size_mm"] = [10.0, 10.0, 10.0]
    mutate(d)
    if path == "mesh.cell_mm":
        d["parts"][0]["size_mm"] = [2000.0, 2000.0, 2000.0]
    model = solver.parse_model(d)
    with pytest.raises(solver.ModelError) as err:
        solver.build_problem(model)
    assert err.value.first_path == path and words in str(err.value)


def test_heat_load_on_a_part_that_holds_no_volume(tmp_path):
    """A part entirely covered by a later one cannot take watts (NOTES.md §3: later part wins)."""
    d = minimal_model_dict()
    d["parts"].append(dict(d["parts"][0], name="shell", origin_mm=[-1, -1, -1], size_mm=[12, 12, 12]))
    model = solver.parse_model(d)
    with pytest.raises(solver.ModelError) as err:
        solver.build_problem(model)
    assert err.value.first_path == "heat_loads[0].part" and "no volume" in str(err.value)
    d["heat_loads"] = []
    with pytest.raises(solver.ModelError) as err:  # a rated part with no volume would be listed "ok"
        solver.build_problem(solver.parse_model(d))
    assert err.value.first_path == "parts[0].rated_c" and "no volume" in str(err.value)
    del d["parts"][0]["rated_c"]
    problem = solver.build_problem(solver.parse_model(d))
    assert any("'cube'" in w and "covered" in w for w in problem.warnings)
    assert any("'all'" in w and "no exposed face" in w for w in problem.warnings)


def test_save_then_load_round_trip(tmp_path):
    d = minimal_model_dict(probes=[{"name": "centre", "at_mm": [5.0, 5.0, 5.0]}])
    m = solver.parse_model(d)
    path = tmp_path / "saved.json"
    solver.save_model(m, path)
    again = load_model(path)
    assert again == m
