"""Pure model edits behind the workbench commands (no Qt): every result must still validate."""
from __future__ import annotations

import json
from pathlib import Path

import pytest

from solver.errors import ModelError
from solver.model.modelfile import parse_model
from thermgui import edits

SAMPLE = Path(__file__).resolve().parents[2] / "samples" / "outdoor_radio_box.json"


@pytest.fixture
def sample() -> dict:
    return parse_model(json.loads(SAMPLE.read_text())).to_json_dict()


def names(d, kind="parts"):
    return [it["name"] for it in d[kind]]


def test_rename_part_updates_loads_and_faces(sample):
    i = names(sample).index("lid")
    new = edits.rename_item(sample, "parts", i, "top cover")
    parse_model(new)
    assert new["parts"][i]["name"] == "top cover"
    assert [c["part"] for c in new["convection"]].count("top cover") == 1
    assert "lid" not in [c["part"] for c in new["convection"]]
    assert sample["parts"][i]["name"] == "lid"  # the input is not modified


def test_delete_part_takes_its_loads_and_faces(sample):
    i = names(sample).index("radio module")
    new = edits.delete_item(sample, "parts", i)
    parse_model(new)
    assert "radio module" not in names(new)
    assert [h["part"] for h in new["heat_loads"]] == ["regulator"]


def test_duplicate_gets_fresh_name_and_same_box(sample):
    i = names(sample).index("regulator")
    new, j = edits.duplicate_item(sample, "parts", i)
    parse_model(new)
    assert j == i + 1 and new["parts"][j]["name"] == "regulator copy"
    assert new["parts"][j]["size_mm"] == sample["parts"][i]["size_mm"]
    again, k = edits.duplicate_item(new, "parts", i)
    assert again["parts"][k]["name"] == "regulator copy 2"


def test_new_items_validate(sample):
    d = sample
    for kind in edits.KINDS:
        d, i = edits.add_item(d, kind, edits.new_item(d, kind, "regulator"))
        parse_model(d)
    assert d["heat_loads"][-1]["part"] == "regulator"
    # the new probe sits at the regulator's centre: (75 + 3, 40 + 3, 11.6 + 0.7) mm
    assert d["probes"][-1]["at_mm"] == pytest.approx([78.0, 43.0, 12.3])
    # the new part sits on top of everything (the lid top is at z = 40 mm)
    assert d["parts"][-1]["origin_mm"][2] == 40.0


def test_drag_snaps_only_what_moved(sample):
    i = names(sample).index("regulator")  # origin (75, 40, 11.6), size (6, 6, 1.4)
    # a move: the size is kept exactly, moved coordinates snap, z did not move and stays 11.6
    moved = edits.drag_box(sample, i, [78.3, 38.9, 11.6], [84.3, 44.9, 13.0], step=0.5)
    assert moved["parts"][i]["origin_mm"] == [78.5, 39.0, 11.6]
    assert moved["parts"][i]["size_mm"] == [6.0, 6.0, 1.4]
    # a resize of the +x face: only that face snaps; the thickness is untouched
    grown = edits.drag_box(sample, i, [75.0, 40.0, 11.6], [83.7, 46.0, 13.0], step=1.0)
    assert grown["parts"][i]["origin_mm"] == [75.0, 40.0, 11.6]
    assert grown["parts"][i]["size_mm"] == pytest.approx([9.0, 6.0, 1.4])
    # a face dragged through the opposite one keeps one increment
    flat = edits.drag_box(sample, i, [75.0, 40.0, 11.6], [75.2, 46.0, 13.0], step=1.0)
    assert flat["parts"][i]["size_mm"][0] == 1.0
    parse_model(moved), parse_model(grown), parse_model(flat)


def test_place_onto_top_face_keeps_overlapping_footprint(sample):
    reg, board = names(sample).index("regulator"), names(sample).index("main board")
    moved = edits.set_value(sample, ("parts", reg, "origin_mm", 2), 30.0)  # float it above the board
    new = edits.place_onto(moved, reg, board, "z+")
    assert new["parts"][reg]["origin_mm"] == [75.0, 40.0, 11.6]


def test_place_onto_centres_when_footprint_is_off_the_face(sample):
    reg, sw = names(sample).index("regulator"), names(sample).index("standoff sw")
    new = edits.place_onto(sample, reg, sw, "z-")
    # standoff sw: origin (12, 12, 3), size (5, 5, 7); regulator 6 x 6 x 1.4 goes under it, centred
    assert new["parts"][reg]["origin_mm"] == pytest.approx([11.5, 11.5, 1.6])
    with pytest.raises(ValueError):
        edits.place_onto(sample, reg, reg, "z+")


def test_negative_size_is_refused_by_the_model_check(sample):
    bad = edits.set_value(sample, ("parts", 0, "size_mm", 1), -5.0)
    with pytest.raises(ModelError) as e:
        parse_model(bad)
    assert e.value.first_path == "parts[0].size_mm[1]"


def test_own_materials_add_rename_delete(sample):
    board = names(sample).index("main board")
    d, i = edits.add_item(sample, "materials", edits.new_item(sample, "materials", "main board"))
    parse_model(d)
    # starts from the part's library material (the layered board: 30 / 30 / 0.4 W/(m K))
    assert d["materials"]["pcb-4layer-effective (own data)"]["conductivity"] == [30.0, 30.0, 0.4]
    d = edits.set_value(d, ("parts", board, "material"), "pcb-4layer-effective (own data)")
    renamed = edits.rename_item(d, "materials", i, "board A rev 2")
    parse_model(renamed)
    assert renamed["parts"][board]["material"] == "board A rev 2"
    assert list(renamed["materials"]) == ["board A rev 2"]
    # deleting a material that a part still uses leaves an invalid model: the check names the part
    with pytest.raises(ModelError) as e:
        parse_model(edits.delete_item(renamed, "materials", i))
    assert e.value.first_path == f"parts[{board}].material"


def test_rename_and_delete_part_follow_contacts_fluxes_and_air(sample):
    i = names(sample).index("lid")
    new = edits.rename_item(sample, "parts", i, "top cover")
    parse_model(new)
    assert new["surface_loads"][0]["part"] == "top cover"
    assert "top cover" in new["air_volumes"][0]["enclosed_by"] and "lid" not in new["air_volumes"][0]["enclosed_by"]
    assert "top cover" in [f["part"] for f in new["air_volumes"][0]["faces"]]
    j = names(sample).index("radio module")
    gone = edits.delete_item(sample, "parts", j)
    parse_model(gone)
    assert all("radio module" not in c["parts"] for c in gone["contacts"])
    assert "radio module" not in [f["part"] for f in gone["air_volumes"][0]["faces"]]
    assert len(gone["contacts"]) == len(sample["contacts"]) - 1


def test_shared_faces_of_touching_boxes(sample):
    # the regulator (75..81, 40..46, 11.6..13.0) sits on the board's top (z = 11.6)
    rects = edits.shared_faces(sample, "regulator", "main board")
    assert len(rects) == 1
    ax, plane, lo, hi = rects[0]
    assert ax == 2 and plane == pytest.approx(11.6)
    assert lo[:2] == pytest.approx([75, 40]) and hi[:2] == pytest.approx([81, 46])
    assert edits.shared_faces(sample, "regulator", "lid") == []
    assert edits.new_item(sample, "contacts", "regulator")["parts"] == ["regulator", "main board"]
