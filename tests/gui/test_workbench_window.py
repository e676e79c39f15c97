"""The workbench driven as a user would: pick in the 3D view, type into forms, undo, add, place."""
from __future__ import annotations

import pytest
from PySide6.QtCore import QEvent, QPoint, QPointF, Qt
from PySide6.QtGui import QMouseEvent
from PySide6.QtTest import QTest
from PySide6.QtWidgets import QApplication

from thermgui import edits

pytestmark = pytest.mark.gui


def click_view(window, point_mm):
    """Left-click the 3D view where the point (mm) is drawn."""
    vp = window.viewport
    vp.plotter.render()
    x, y = vp.screen_position(point_mm)
    QTest.mouseClick(vp.plotter.interactor, Qt.LeftButton, Qt.NoModifier, QPoint(x, y))
    QTest.qWait(20)


def type_into(line_edit, text):
    line_edit.setFocus()
    line_edit.selectAll()
    QTest.keyClicks(line_edit, text)
    QTest.keyClick(line_edit, Qt.Key_Return)


def part(window, name):
    return window.document.model.parts[window.document.model.part_index(name)]


def test_click_in_view_selects_part_in_tree_and_form(main_window):
    w = main_window
    click_view(w, [60, 40, 40])  # centre of the lid's top face: the lid is in front
    assert w.item_tree.current() == ("parts", w.document.model.part_index("lid"))
    assert w.viewport.selected_part == "lid"
    assert w.properties.title.text() == "Part · lid"
    # hide the lid with its check box, then click on the regulator's top face
    w.item_tree.part_row("lid").setCheckState(0, Qt.Unchecked)
    assert "lid" in w.viewport.hidden_parts
    click_view(w, [78, 43, 13.0])
    assert w.item_tree.current() == ("parts", w.document.model.part_index("regulator"))
    assert w.viewport.selected_part == "regulator"
    assert w.properties.forms["parts"].name.text() == "regulator"
    # and the other way: choosing a row in the list selects the part in the view
    w.item_tree.select("parts", w.document.model.part_index("main board"))
    assert w.viewport.selected_part == "main board"
    # a click into empty space clears the selection
    QTest.mouseClick(w.viewport.plotter.interactor, Qt.LeftButton, Qt.NoModifier, QPoint(5, 200))
    QTest.qWait(20)
    assert w.item_tree.current() is None and w.viewport.selected_part is None


def test_clicking_again_reaches_the_part_behind(main_window):
    w = main_window
    click_view(w, [60, 40, 40])
    assert w.viewport.selected_part == "lid"
    click_view(w, [60, 40, 40])
    behind = w.viewport.selected_part
    assert behind not in (None, "lid")
    # the part now selected really lies on the ray through that pixel, behind the lid
    x, y = w.viewport.screen_position([60, 40, 40])
    ray = [n for n, _ in w.viewport.parts_under(x, w.viewport.plotter.height() - y)]
    assert ray[0] == "lid" and ray[1] == behind


def test_size_typed_in_form_then_undo_redo(main_window):
    w = main_window
    i = w.document.model.part_index("regulator")
    w.item_tree.select("parts", i)
    size_x = w.properties.forms["parts"].dims.fields[0].edit
    type_into(size_x, "10")
    assert part(w, "regulator").size_mm == [10.0, 6.0, 1.4]
    assert w.document.dirty and w.isWindowModified()
    undo, redo = w.actions_["undo"], w.actions_["redo"]
    assert undo.shortcut().toString() == "Ctrl+Z"
    assert {s.toString() for s in redo.shortcuts()} == {"Ctrl+Shift+Z", "Ctrl+Y"}
    assert "size x" in undo.text() and "regulator" in undo.text()
    undo.trigger()
    assert part(w, "regulator").size_mm == [6.0, 6.0, 1.4]
    assert size_x.text() == "6"  # the form follows the undo
    assert not w.document.dirty
    redo.trigger()
    assert part(w, "regulator").size_mm == [10.0, 6.0, 1.4]
    # the keyboard shortcuts reach the same actions
    w.activateWindow()
    assert QTest.qWaitForWindowActive(w)
    w.item_tree.setFocus()
    QTest.keyClick(w.item_tree, Qt.Key_Z, Qt.ControlModifier)
    assert part(w, "regulator").size_mm == [6.0, 6.0, 1.4]
    QTest.keyClick(w.item_tree, Qt.Key_Y, Qt.ControlModifier)
    assert part(w, "regulator").size_mm == [10.0, 6.0, 1.4]


def test_negative_size_is_refused_with_a_message(main_window):
    w = main_window
    before = w.document.model_dict()
    i = w.document.model.part_index("radio module")
    w.item_tree.select("parts", i)
    size_z = w.properties.forms["parts"].dims.fields[2].edit
    type_into(size_z, "-2")
    errors = w.prompts.errors()
    assert len(errors) == 1
    # named as the form names it (issue 13), not by its path in the file
    assert "Size z: input should be greater than 0" in errors[0] and f"parts[{i}]" not in errors[0]
    assert "radio module" in errors[0] and "unchanged" in errors[0]
    assert w.document.model_dict() == before
    assert size_z.text() == "2.4"
    assert not w.document.undo_stack.canUndo()
    # text that is not a number is refused the same way
    type_into(size_z, "abc")
    assert len(w.prompts.errors()) == 2 and "not a number" in w.prompts.errors()[1]
    assert w.document.model_dict() == before


def test_add_heat_load_and_edit_its_profile(main_window):
    w = main_window
    w.item_tree.select("parts", w.document.model.part_index("regulator"))
    n = len(w.document.model.heat_loads)
    w.actions_["add_load"].trigger()
    loads = w.document.model.heat_loads
    assert len(loads) == n + 1 and loads[-1].part == "regulator"
    assert w.item_tree.current() == ("heat_loads", n)
    form = w.properties.forms["heat_loads"]
    type_into(form.profile.fields["constant"]["value"].edit, "2.5")
    assert w.document.model.heat_loads[n].profile.value == 2.5
    xs, ys = form.profile.curve.getData()
    # the preview's time axis is in the run's unit (minutes for the sample's 30 min), never "ks"
    assert max(ys) == 2.5 and xs[-1] * 60 == pytest.approx(w.document.model.run.duration_s)
    axis = form.profile.plot.getAxis("bottom")
    assert axis.labelText == "time (min)" and not axis.autoSIPrefix
    # switch to a repeating pulse: the preview shows both levels
    form.profile.kind.setCurrentIndex(2)
    prof = w.document.model.heat_loads[n].profile
    assert prof.type == "pulse" and prof.high == 2.5
    xs, ys = form.profile.curve.getData()
    assert set(ys) == {prof.high, prof.low}
    w.actions_["undo"].trigger()
    w.actions_["undo"].trigger()
    assert w.document.model.heat_loads[n].profile.value == 1.0
    w.actions_["undo"].trigger()
    assert len(w.document.model.heat_loads) == n


def test_duplicate_rename_delete_are_undoable(main_window):
    w = main_window
    m = w.document.model
    i = m.part_index("radio module")
    w.item_tree.select("parts", i)
    w.actions_["duplicate"].trigger()
    assert w.document.model.parts[i + 1].name == "radio module copy"
    assert w.item_tree.current() == ("parts", i + 1)
    name_field = w.properties.forms["parts"].name
    type_into(name_field, "radio module B")
    assert w.document.model.parts[i + 1].name == "radio module B"
    # renaming to an existing name is refused, naming the field
    type_into(name_field, "regulator")
    assert "duplicate part name" in w.prompts.errors()[-1]
    assert w.document.model.parts[i + 1].name == "radio module B"
    # deleting the original takes its heat load along; undo brings both back
    w.item_tree.select("parts", i)
    w.actions_["delete"].trigger()
    assert "radio module" not in [p.name for p in w.document.model.parts]
    assert [h.part for h in w.document.model.heat_loads] == ["regulator"]
    w.actions_["undo"].trigger()
    assert [h.part for h in w.document.model.heat_loads] == ["radio module", "regulator"]
    assert w.document.model.parts[i].name == "radio module"


def test_material_picker_offers_library(main_window):
    w = main_window
    w.item_tree.select("parts", w.document.model.part_index("main board"))
    picker = w.properties.forms["parts"].material
    offered = {picker.itemData(k) for k in range(picker.count())} - {None}
    from solver.model.materials import BUILTIN_MATERIALS
    assert set(BUILTIN_MATERIALS) <= offered
    picker.choose("copper")
    assert part(w, "main board").material == "copper"
    w.actions_["undo"].trigger()
    assert part(w, "main board").material == "pcb-4layer-effective"


def drag(widget, start: QPoint, end: QPoint, steps: int = 10):
    """Press, move with the button held, release (QTest.mouseMove cannot hold a button)."""
    def send(kind, pos, button, buttons):
        QApplication.sendEvent(widget, QMouseEvent(kind, QPointF(pos), QPointF(widget.mapToGlobal(pos)),
                                                   button, buttons, Qt.NoModifier))
    send(QEvent.MouseButtonPress, start, Qt.LeftButton, Qt.LeftButton)
    for k in range(1, steps + 1):
        send(QEvent.MouseMove, start + (end - start) * k / steps, Qt.NoButton, Qt.LeftButton)
    send(QEvent.MouseButtonRelease, end, Qt.LeftButton, Qt.NoButton)
    QTest.qWait(20)


def test_handle_drag_resizes_part_snapped(main_window):
    w = main_window
    vp = w.viewport
    w.item_tree.part_row("lid").setCheckState(0, Qt.Unchecked)
    w.item_tree.select("parts", w.document.model.part_index("main board"))
    w.snap_box.setValue(5.0)
    before = part(w, "main board")
    o, s = before.origin_mm, before.size_mm
    for _ in range(2):
        vp.plotter.render()
        QTest.qWait(20)
    # grab the handle in the middle of the +x face and pull it
    x, y = vp.screen_position([o[0] + s[0], o[1] + s[1] / 2, o[2] + s[2] / 2])
    drag(vp.plotter.interactor, QPoint(x, y), QPoint(x + 30, y + 20))
    after = part(w, "main board")
    assert w.document.undo_stack.undoText() == "Resize part 'main board'"
    assert after.size_mm[0] != s[0]
    assert (after.origin_mm[0] + after.size_mm[0]) % 5.0 == pytest.approx(0.0, abs=1e-9)  # snapped face
    assert after.origin_mm == o and after.size_mm[1:] == s[1:]  # nothing else moved
    w.actions_["undo"].trigger()
    assert part(w, "main board").size_mm == s


def test_handle_frame_move_keeps_size(main_window):
    w = main_window
    vp = w.viewport
    w.item_tree.select("parts", w.document.model.part_index("regulator"))
    w.snap_box.setValue(0.5)
    p = part(w, "regulator")
    o, s = list(p.origin_mm), list(p.size_mm)
    # the frame as a drag leaves it: moved by (+3.3, -1.1, 0) mm
    vp._box.PlaceWidget((o[0] + 3.3, o[0] + 3.3 + s[0], o[1] - 1.1, o[1] - 1.1 + s[1], o[2], o[2] + s[2]))
    vp._box.InvokeEvent("EndInteractionEvent")
    q = part(w, "regulator")
    assert q.size_mm == s
    assert q.origin_mm == [edits.snap(o[0] + 3.3, 0.5), edits.snap(o[1] - 1.1, 0.5), o[2]]
    assert w.document.undo_stack.undoText() == "Move part 'regulator'"


def test_place_onto_face_clicked_in_view(main_window):
    w = main_window
    w.item_tree.select("parts", w.document.model.part_index("regulator"))
    w.actions_["place"].trigger()
    assert w.viewport.pick_mode == "face"
    click_view(w, [60, 40, 40])  # the lid's top face
    assert w.viewport.pick_mode == "select"
    assert part(w, "regulator").origin_mm == [75.0, 40.0, 40.0]
    assert w.viewport.selected_part == "regulator"  # the moved part stays selected
    w.actions_["undo"].trigger()
    assert part(w, "regulator").origin_mm == [75.0, 40.0, 11.6]


def test_study_settings_form(main_window, artifacts):
    w = main_window
    w.item_tree.select("study", 0)
    f = w.properties.forms["study"]
    assert w.properties.grab().save(str(artifacts / "workbench-study-form.png"))
    step = w.document.model.run.step_s
    type_into(f.numbers[("run", "duration_s")].edit, "900")
    assert w.document.model.run.duration_s == 900
    type_into(f.numbers[("run", "step_s")].edit, "1000")
    assert "Time step: step (1000 s) is longer" in w.prompts.errors()[-1]  # the form's label, not run.step_s
    assert w.document.model.run.step_s == step
    # durations typed in minutes or hours; shown in the largest unit that shows them exactly
    dur = f.numbers[("run", "duration_s")]
    type_into(dur.edit, "45 min")
    assert w.document.model.run.duration_s == 2700 and dur.edit.text() == "45 min"
    type_into(dur.edit, "1.5 h")
    assert w.document.model.run.duration_s == 5400 and dur.edit.text() == "1.5 h"
    n_errors = len(w.prompts.errors())
    type_into(dur.edit, "2 weeks")  # a unit the form cannot parse: named, and the value reverts
    assert len(w.prompts.errors()) == n_errors + 1
    msg = w.prompts.errors()[-1]
    assert msg.startswith("Duration of the study: '2 weeks' is not understood") and "s, min, h" in msg
    assert w.document.model.run.duration_s == 5400 and dur.edit.text() == "1.5 h"
    # the fields line up: every number box ends at the same x, and nothing is cut off at the right
    rights = {e.mapTo(f, e.rect().topRight()).x() for e in (n.edit for n in f.numbers.values())}
    assert len(rights) == 1, rights
    scroll = w.properties._pages["study"]
    assert not scroll.horizontalScrollBar().isVisible()
    # the solution method and its tolerance, undoable like every edit
    f.method.setCurrentIndex(f.method.findData("reduced"))
    f.method.activated.emit(f.method.currentIndex())
    assert w.document.model.run.method == "reduced"
    assert "0.1" in f.numbers[("run", "tolerance_k")].edit.placeholderText()
    type_into(f.numbers[("run", "tolerance_k")].edit, "0.05")
    assert w.document.model.run.tolerance_k == 0.05
    type_into(f.numbers[("run", "tolerance_k")].edit, "-1")
    assert "tolerance" in w.prompts.errors()[-1].lower()
    assert w.document.model.run.tolerance_k == 0.05
    w.actions_["undo"].trigger()
    w.actions_["undo"].trigger()
    assert w.document.model.run.method in (None, "auto") and w.document.model.run.tolerance_k is None
    assert f.method.currentData() == "auto"  # absent in the file = automatic
    assert "if reduced" in f.numbers[("run", "tolerance_k")].edit.placeholderText()


def test_marks_in_tree_and_view(main_window):
    w = main_window
    w.item_tree.mark_parts({"regulator"})
    row = w.item_tree.part_row("regulator")
    assert row.font(0).bold() and not row.icon(0).isNull()
    assert not w.item_tree.part_row("lid").font(0).bold()
    w.viewport.highlight_parts({"regulator"})
    assert len(w.viewport._mark_actors) == 1
    w.viewport.set_mode("results")
    assert not any(a.GetVisibility() for a in w.viewport._actors.values())
    click_view(w, [60, 40, 40])  # parts can still be picked over the drawn field
    assert w.item_tree.current() == ("parts", w.document.model.part_index("lid"))
    w.viewport.set_mode("edit")
    assert all(a.GetVisibility() for a in w.viewport._actors.values())


def test_probes_and_convection_faces_are_drawn(main_window):
    w = main_window
    m = w.document.model
    assert w.viewport._probe_actor is not None
    assert w.viewport._probe_actor.GetMapper().GetInput().n_points > 0
    i = next(k for k, c in enumerate(m.convection) if c.side == "z+")
    w.item_tree.select("convection", i)
    quad = w.viewport._face_actor.GetMapper().GetInput()
    p = m.parts[m.part_index(m.convection[i].part)]
    # the tint lies on the part's top plane (a hair above it) and covers its footprint
    assert quad.bounds[4] == pytest.approx(p.origin_mm[2] + p.size_mm[2], abs=1.0)
    assert quad.bounds[1] - quad.bounds[0] == pytest.approx(p.size_mm[0])
    w.item_tree.select("parts", 0)
    assert w.viewport._face_actor is None


def test_editing_screenshot(main_window, artifacts):
    w = main_window
    w.resize(1440, 920)
    w.item_tree.select("parts", w.document.model.part_index("radio module"))
    for _ in range(2):  # the first frame after a layout change can use the old viewport size
        w.viewport.plotter.render()
        QTest.qWait(50)
    img = w.grab()
    assert img.save(str(artifacts / "workbench-editing.png"))
    # the 3D area is drawn: its pixels are not all one colour
    view = w.viewport.grab().toImage()
    colours = {view.pixel(x, y) for x in range(0, view.width(), 23) for y in range(0, view.height(), 23)}
    assert len(colours) > 20


def test_plain_keys_in_view_do_not_reach_vtk(main_window):
    """VTK's one-letter keys (w = wireframe, q/e = quit) must not act inside the app."""
    w = main_window
    view = w.viewport.plotter.interactor
    view.setFocus()
    for key in (Qt.Key_W, Qt.Key_Q, Qt.Key_E):
        QTest.keyClick(view, key)
    actor = next(iter(w.viewport._actors.values()))
    assert actor.GetProperty().GetRepresentation() == 2  # VTK_SURFACE
    assert not w.viewport.plotter._closed
    click_view(w, [60, 40, 40])  # the view still answers
    assert w.viewport.selected_part == "lid"


def test_own_material_from_datasheet(main_window):
    w = main_window
    board = w.document.model.part_index("main board")
    w.item_tree.select("parts", board)
    w.actions_["add_material"].trigger()
    name = "pcb-4layer-effective (own data)"
    assert list(w.document.model.materials) == [name]
    assert w.item_tree.current() == ("materials", 0)
    form = w.properties.forms["materials"]
    assert form.kxyz.isVisibleTo(form) and not form.k.isVisibleTo(form)
    type_into(form.kxyz.fields[2].edit, "0.55")  # through-thickness value from a datasheet
    assert w.document.model.materials[name].conductivity == [30.0, 30.0, 0.55]
    type_into(form.rho.edit, "-3")
    assert "Density: input should be greater than 0" in w.prompts.errors()[-1]
    assert w.document.model.materials[name].density == 2200.0
    # the part picks it up from its material list, then a rename follows into the part
    w.item_tree.select("parts", board)
    w.properties.forms["parts"].material.choose(name)
    assert part(w, "main board").material == name
    w.item_tree.select("materials", 0)
    type_into(form.name, "board rev B")
    assert part(w, "main board").material == "board rev B"
    assert "main board" in form.used.text()
    # deleting it while the board uses it is refused, naming the part's field
    w.actions_["delete"].trigger()
    assert f"parts[{board}].material" in w.prompts.errors()[-1]
    assert "board rev B" in w.document.model.materials


def test_delete_key_in_a_field_edits_text_not_the_model(main_window):
    w = main_window
    w.activateWindow()
    assert QTest.qWaitForWindowActive(w)
    n = len(w.document.model.parts)
    w.item_tree.select("parts", w.document.model.part_index("regulator"))
    field = w.properties.forms["parts"].name
    field.setFocus()
    field.setCursorPosition(0)
    QTest.keyClick(field, Qt.Key_Delete)
    assert field.text() == "egulator" and len(w.document.model.parts) == n
    QTest.keyClick(field, Qt.Key_Return)  # confirm: a rename, not a deletion
    assert "egulator" in [p.name for p in w.document.model.parts]
    # in the list, the same key deletes the selected part
    w.item_tree.setFocus()
    QTest.keyClick(w.item_tree, Qt.Key_Delete)
    assert len(w.document.model.parts) == n - 1
    assert "egulator" not in [p.name for p in w.document.model.parts]


def test_table_profile_points(main_window):
    w = main_window
    w.item_tree.select("heat_loads", 1)
    editor = w.properties.forms["heat_loads"].profile
    editor.kind.setCurrentIndex(3)  # "Table of points"
    prof = w.document.model.heat_loads[1].profile
    assert prof.type == "table" and len(prof.points) == 2
    editor.table.item(1, 1).setText("4")  # the value of the second point, W
    assert w.document.model.heat_loads[1].profile.points[1] == [60.0, 4.0]
    xs, ys = editor.curve.getData()
    assert max(ys) == 4.0  # held after the last point
    # a time that does not increase is refused, naming the point
    editor.table.item(1, 0).setText("0")
    assert "heat_loads[1].profile.points[1][0]" in w.prompts.errors()[-1]
    assert w.document.model.heat_loads[1].profile.points[1] == [60.0, 4.0]
    assert editor.table.item(1, 0).text() == "60"
    editor._add_point()
    assert len(w.document.model.heat_loads[1].profile.points) == 3


def test_forms_of_the_new_physics_items(main_window):
    """Surface flux, contact, inside air and radiation fields: shown from the sample, edited by typing."""
    w = main_window
    m = w.document.model
    w.item_tree.select("surface_loads", 0)
    f = w.properties.forms["surface_loads"]
    assert w.properties.title.text() == "Surface flux · sun on the lid"
    assert f.absorb.edit.text() == "0.25" and f.side.currentData() == "z+"
    type_into(f.absorb.edit, "0.4")
    assert w.document.model.surface_loads[0].absorptivity == 0.4
    type_into(f.absorb.edit, "1.5")  # outside 0–1: refused, the model keeps 0.4
    assert w.document.model.surface_loads[0].absorptivity == 0.4
    errors = w.prompts.errors()
    assert len(errors) == 1 and "Absorptivity" in errors[0] and "unchanged" in errors[0]
    w.item_tree.select("contacts", 0)
    c = w.properties.forms["contacts"]
    assert c.first.currentText() == m.contacts[0].parts[0] and c.second.currentText() == m.contacts[0].parts[1]
    type_into(c.res.edit, "0.001")
    assert w.document.model.contacts[0].resistance == 0.001
    assert w.viewport._face is not None and w.viewport._face[0] == "::contact"  # the touching faces are tinted
    w.item_tree.select("air_volumes", 0)
    a = w.properties.forms["air_volumes"]
    type_into(a.rated.edit, "65")
    assert w.document.model.air_volumes[0].rated_c == 65.0
    k = [i for i, cv in enumerate(m.convection) if cv.name == "west outside"][0]
    w.item_tree.select("convection", k)
    cf = w.properties.forms["convection"]
    assert cf.eps.edit.text() == "0.85"
    cf.eps.edit.setFocus()
    cf.eps.edit.clear()  # no radiation any more
    QTest.keyClick(cf.eps.edit, Qt.Key_Return)
    assert w.document.model.convection[k].emissivity is None
    w.actions_["undo"].trigger()
    assert w.document.model.convection[k].emissivity == 0.85
