"""One form per kind of item. Units: mm, W, °C, W/(m²·K), s.

A form shows one item of the document's model and turns each confirmed field into an edit
through :meth:`ItemForm.commit`, which builds the new model dict and hands it to the
document; the document validates it and refuses it (with a message naming the field) when
it would make the model invalid.
"""
from __future__ import annotations

from PySide6.QtWidgets import QComboBox, QFormLayout, QLabel, QLineEdit, QPushButton, QVBoxLayout, QWidget

from solver.model.modelfile import MASS_KINDS, SCHEMES, SIDES

from .. import edits
from .fields import TIME_UNITS, NumberField, Vec3Field
from .material_picker import MaterialPicker
from .profile_editor import ProfileEditor

SIDE_LABELS = {"x-": "x− face", "x+": "x+ face", "y-": "y− face", "y+": "y+ face", "z-": "z− face (bottom)",
               "z+": "z+ face (top)", "exposed": "every exposed face"}
AXES = "xyz"


class ItemForm(QWidget):
    """Base: ``panel`` supplies ``document``, ``report(message)`` and the current index."""

    kind = ""

    def __init__(self, panel):
        super().__init__()
        self.panel = panel
        self.index = -1
        outer = QVBoxLayout(self)
        outer.setContentsMargins(6, 6, 6, 6)
        self.layout_ = QFormLayout()
        outer.addLayout(self.layout_)
        outer.addStretch(1)  # spare height goes below the fields, not between them
        self.layout_.setRowWrapPolicy(QFormLayout.DontWrapRows)

    @property
    def doc(self):
        return self.panel.document

    def item(self, d: dict) -> dict:
        return d[self.kind][self.index]

    def what(self) -> str:
        d = self.doc.model_dict()
        return f"{self.kind_word()} '{edits.item_label(d, self.kind, self.index)}'"

    def kind_word(self) -> str:
        return {"parts": "part", "heat_loads": "heat load", "convection": "convection face",
                "probes": "probe", "materials": "material", "surface_loads": "surface flux",
                "contacts": "contact", "air_volumes": "inside air volume"}.get(self.kind, self.kind)

    def commit(self, path: tuple, value, label: str) -> bool:
        """Set one value (``path`` inside the model dict) as one undoable edit; a refusal names
        the field by ``label`` (as the form shows it), not by its path in the file."""
        new = edits.set_value(self.doc.model_dict(), path, value)
        sel = (self.kind, self.index)
        return self.doc.try_edit(new, f"Set {label} of {self.what()}", self.panel.report, sel, sel,
                                 labels={self.doc.path_text(path): label[:1].upper() + label[1:]})

    def reject_text(self, label: str, text: str, units=None) -> None:
        label = label[:1].upper() + label[1:]
        if units:
            self.panel.report(f"{label} of {self.what()}: {text!r} is not understood; type a number, optionally "
                              f"with one of the units {', '.join(units)} (for example 30 {units[1] if len(units) > 1 else units[0]}). "
                              "The model is unchanged.")
        else:
            self.panel.report(f"{label} of {self.what()}: {text!r} is not a number; the model is unchanged.")
        self.load()

    def align_units(self) -> None:
        """One width for the unit labels of this form's number fields and a common right edge for
        every field, so the boxes line up; long choices give way instead of widening the form."""
        from PySide6.QtWidgets import QComboBox

        labels = [f.unit for f in self.findChildren(NumberField) if f.layout().indexOf(f.unit) >= 0]
        labels += [f.unit for f in self.findChildren(Vec3Field)]
        if labels:
            width = max(lab.sizeHint().width() for lab in labels)
            for lab in labels:
                lab.setFixedWidth(width)
        for c in self.findChildren(QComboBox):
            c.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
            c.setMinimumContentsLength(10)
        for e in self.findChildren(QLineEdit):
            e.setMinimumWidth(50)
        self.layout_.setFieldGrowthPolicy(QFormLayout.AllNonFixedFieldsGrow)

    def name_edit(self, on_commit) -> QLineEdit:
        e = QLineEdit()
        e.editingFinished.connect(lambda: on_commit(e))
        return e

    def rename(self, e: QLineEdit) -> None:
        d = self.doc.model_dict()
        old = self.item(d).get("name")
        new = e.text().strip()
        if new == old:
            return
        sel = (self.kind, self.index)
        self.doc.try_edit(edits.rename_item(d, self.kind, self.index, new),
                          f"Rename {self.kind_word()} '{old}' to '{new}'", self.panel.report, sel, sel)

    def load(self) -> None:
        """Fill the fields from the document's model; every concrete form overrides this."""


class PartForm(ItemForm):
    kind = "parts"

    def __init__(self, panel):
        super().__init__(panel)
        self.name = self.name_edit(self.rename)
        self.material = MaterialPicker()
        self.material.materialChosen.connect(lambda m: self.commit(("parts", self.index, "material"), m, "material"))
        self.corner = Vec3Field("mm")
        self.corner.committed.connect(lambda a, v: self.commit(("parts", self.index, "origin_mm", a), v,
                                                               f"position {AXES[a]}"))
        self.corner.rejected.connect(lambda a, t: self.reject_text(f"position {AXES[a]}", t))
        self.dims = Vec3Field("mm")
        self.dims.committed.connect(lambda a, v: self.commit(("parts", self.index, "size_mm", a), v,
                                                             f"size {AXES[a]}"))
        self.dims.rejected.connect(lambda a, t: self.reject_text(f"size {AXES[a]}", t))
        self.rated = NumberField("°C", optional=True, placeholder="no rating")
        self.rated.committed.connect(lambda v: self.commit(("parts", self.index, "rated_c"), v, "rated temperature"))
        self.rated.rejected.connect(lambda t: self.reject_text("rated temperature", t))
        self.initial = NumberField("°C", optional=True, placeholder="model default")
        self.initial.committed.connect(lambda v: self.commit(("parts", self.index, "initial_c"), v,
                                                             "initial temperature"))
        self.initial.rejected.connect(lambda t: self.reject_text("initial temperature", t))
        self.place = QPushButton("Place onto a face of another part…")
        self.place.clicked.connect(lambda: self.panel.placeRequested.emit())
        L = self.layout_
        L.addRow("Name", self.name)
        L.addRow("Material", self.material)
        L.addRow("Corner (min)", self.corner)
        L.addRow("Size", self.dims)
        L.addRow("Rated at", self.rated)
        L.addRow("Starts at", self.initial)
        L.addRow("", self.place)
        hint = QLabel("Corner = the box's lowest x, y, z. Leave \"Rated at\" empty for parts without a limit.")
        hint.setWordWrap(True)
        hint.setStyleSheet("color: #5a6472;")
        L.addRow(hint)

    def load(self):
        d = self.doc.model_dict()
        p = self.item(d)
        self.name.setText(p["name"])
        self.material.set_choices(self.doc.model, p["material"])
        self.corner.set_values(p["origin_mm"])
        self.dims.set_values(p["size_mm"])
        self.rated.set_value(p.get("rated_c"))
        self.initial.set_value(p.get("initial_c"))


def part_combo(on_pick) -> QComboBox:
    c = QComboBox()
    c.activated.connect(lambda i: on_pick(c.itemText(i)))
    return c


def fill_parts(combo: QComboBox, d: dict, current: str) -> None:
    combo.blockSignals(True)
    combo.clear()
    combo.addItems([p["name"] for p in d["parts"]])
    i = combo.findText(current)
    if i < 0:
        combo.addItem(current)
        i = combo.count() - 1
    combo.setCurrentIndex(i)
    combo.blockSignals(False)


class HeatLoadForm(ItemForm):
    kind = "heat_loads"

    def __init__(self, panel):
        super().__init__(panel)
        self.part = part_combo(lambda n: self.commit(("heat_loads", self.index, "part"), n, "part"))
        self.profile = ProfileEditor("W")
        self.profile.profileCommitted.connect(lambda p: self.commit(("heat_loads", self.index, "profile"), p,
                                                                    "power profile"))
        self.profile.rejected.connect(lambda msg: (self.panel.report(f"{self.what()}: {msg}; the model is "
                                                                     "unchanged."), self.load()))
        self.layout_.addRow("Heats part", self.part)
        self.layout_.addRow("Power", self.profile)
        hint = QLabel("The watts are spread evenly over the part's volume.")
        hint.setStyleSheet("color: #5a6472;")
        self.layout_.addRow(hint)

    def load(self):
        d = self.doc.model_dict()
        it = self.item(d)
        fill_parts(self.part, d, it["part"])
        m = self.doc.model
        self.profile.set_profile(it["profile"], m.heat_loads[self.index].profile, m.run.duration_s)


class ConvectionForm(ItemForm):
    kind = "convection"

    def __init__(self, panel):
        super().__init__(panel)
        self.name = self.name_edit(self.rename)
        self.part = part_combo(lambda n: self.commit(("convection", self.index, "part"), n, "part"))
        self.side = side_combo(lambda s: self.commit(("convection", self.index, "side"), s, "face"))
        self.h = NumberField("W/(m²·K)")
        self.h.committed.connect(lambda v: self.commit(("convection", self.index, "h"), v, "film coefficient"))
        self.h.rejected.connect(lambda t: self.reject_text("film coefficient", t))
        self.air = QComboBox()
        self.air.addItems(["the model's ambient", "its own temperature profile"])
        self.air.activated.connect(self._air_mode)
        self.profile = ProfileEditor("°C")
        self.profile.profileCommitted.connect(lambda p: self.commit(("convection", self.index, "ambient_c"), p,
                                                                    "surrounding temperature"))
        self.profile.rejected.connect(lambda msg: (self.panel.report(f"{self.what()}: {msg}; the model is "
                                                                     "unchanged."), self.load()))
        self.eps = NumberField("", optional=True, placeholder="no radiation")
        self.eps.committed.connect(self._set_emissivity)
        self.eps.rejected.connect(lambda t: self.reject_text("emissivity", t))
        self.sky = NumberField("°C", optional=True, placeholder="as the surroundings")
        self.sky.committed.connect(lambda v: self.commit(("convection", self.index, "surroundings_c"), v,
                                                         "radiation surroundings"))
        self.sky.rejected.connect(lambda t: self.reject_text("radiation surroundings", t))
        self.sky_note = QLabel("")
        self.sky_note.setStyleSheet("color: #5a6472;")
        L = self.layout_
        L.addRow("Name", self.name)
        L.addRow("On part", self.part)
        L.addRow("Where", self.side)
        L.addRow("Coefficient", self.h)
        L.addRow("Surroundings", self.air)
        L.addRow("", self.profile)
        L.addRow("Emissivity", self.eps)
        L.addRow("Radiates to", self.sky)
        L.addRow("", self.sky_note)
        hint = QLabel("Typical coefficients: still air 5–10, fan-blown air 25–100 W/(m²·K) "
                      "(common practice, no source). Only uncovered faces of the part exchange heat. "
                      "An emissivity (0–1; painted surfaces about 0.85–0.95, bare aluminium about 0.05, "
                      "from memory) adds radiation to the surroundings, or to the temperature under "
                      "\"Radiates to\" (for example a cool sky).")
        hint.setWordWrap(True)
        hint.setStyleSheet("color: #5a6472;")
        L.addRow(hint)

    def _set_emissivity(self, v):
        if v is None:  # no radiation: the radiating surroundings go with it
            new = edits.set_value(self.doc.model_dict(), ("convection", self.index, "emissivity"), None)
            new = edits.set_value(new, ("convection", self.index, "surroundings_c"), None)
            sel = (self.kind, self.index)
            self.doc.try_edit(new, f"Remove radiation of {self.what()}", self.panel.report, sel, sel)
            return
        self.commit(("convection", self.index, "emissivity"), v, "emissivity")

    def _air_mode(self, i):
        if i == 0:
            self.commit(("convection", self.index, "ambient_c"), None, "surroundings")
        else:
            amb = self.doc.model.ambient_c
            self.commit(("convection", self.index, "ambient_c"), {"type": "constant", "value": amb}, "surroundings")

    def load(self):
        d = self.doc.model_dict()
        it = self.item(d)
        self.name.setText(it["name"])
        fill_parts(self.part, d, it["part"])
        self.side.setCurrentIndex(self.side.findData(it["side"]))
        self.h.set_value(it["h"])
        self.eps.set_value(it.get("emissivity"))
        sky = it.get("surroundings_c")
        radiates = it.get("emissivity") is not None
        self.sky.setEnabled(radiates and (sky is None or sky.get("type") == "constant"))
        self.sky.set_value(sky.get("value") if isinstance(sky, dict) and sky.get("type") == "constant" else None)
        self.sky_note.setText("(a profile of surroundings temperatures, kept as in the file)"
                              if isinstance(sky, dict) and sky.get("type") != "constant" else "")
        own = it.get("ambient_c") is not None
        self.air.setCurrentIndex(1 if own else 0)
        self.profile.setVisible(own)
        if own:
            m = self.doc.model
            self.profile.set_profile(it["ambient_c"], m.convection[self.index].ambient_c, m.run.duration_s)


def side_combo(on_pick, sides=SIDES) -> QComboBox:
    c = QComboBox()
    for s in sides:
        c.addItem(SIDE_LABELS[s], s)
    c.activated.connect(lambda i: on_pick(c.itemData(i)))
    return c


class ProbeForm(ItemForm):
    kind = "probes"

    def __init__(self, panel):
        super().__init__(panel)
        self.name = self.name_edit(self.rename)
        self.at = Vec3Field("mm")
        self.at.committed.connect(lambda a, v: self.commit(("probes", self.index, "at_mm", a), v,
                                                           f"position {AXES[a]}"))
        self.at.rejected.connect(lambda a, t: self.reject_text(f"position {AXES[a]}", t))
        self.layout_.addRow("Name", self.name)
        self.layout_.addRow("At", self.at)
        hint = QLabel("A probe records the temperature at one point over time.")
        hint.setStyleSheet("color: #5a6472;")
        self.layout_.addRow(hint)

    def load(self):
        it = self.item(self.doc.model_dict())
        self.name.setText(it["name"])
        self.at.set_values(it["at_mm"])


class StudyForm(ItemForm):
    """Title, default temperatures, mesh size and time stepping (the model's top-level fields)."""

    kind = "study"
    SCHEME_LABELS = {"backward-euler": "backward Euler (robust)", "crank-nicolson": "Crank–Nicolson (accurate)",
                     "forward-euler": "forward Euler (explicit)"}
    METHOD_LABELS = {"auto": "automatic (by predicted cost)", "full": "time steps on the full model",
                     "reduced": "reduced basis (fast)"}

    def __init__(self, panel):
        super().__init__(panel)
        self.title = QLineEdit()
        self.title.editingFinished.connect(lambda: self.commit(("title",), self.title.text(), "title"))
        L = self.layout_
        L.addRow("Title", self.title)
        self.numbers = {}
        for path, label, unit, optional in [
                (("ambient_c",), "Ambient", "°C", False), (("initial_c",), "Start temperature", "°C", False),
                (("mesh", "cell_mm"), "Cell size", "mm", False), (("mesh", "min_layers"), "Cells across thinnest",
                                                                  "cells", False),
                (("run", "duration_s"), "Duration", "s", False), (("run", "step_s"), "Time step", "s", False),
                (("run", "output_every_s"), "Save every", "s", True),
                (("run", "tolerance_k"), "Tolerance", "K", True)]:
            hint = {"output_every_s": "about 100 outputs", "tolerance_k": "fixed steps"}.get(path[-1], "")
            timed = unit == "s"  # times may be typed as 30 min or 2 h
            f = NumberField(unit, optional=optional, placeholder=hint, units=TIME_UNITS if timed else None)
            f.committed.connect(lambda v, p=path, lab=label: self.commit(p, self._typed(p, v), lab.lower()))
            f.rejected.connect(lambda t, lab=label, f=f: self.reject_text(lab.lower(), t, f.unit_names()))
            L.addRow(label, f)
            self.numbers[path] = f
        self.scheme = QComboBox()
        for s in SCHEMES:
            self.scheme.addItem(self.SCHEME_LABELS[s], s)
        self.scheme.activated.connect(lambda i: self.commit(("run", "scheme"), self.scheme.itemData(i),
                                                            "time scheme"))
        self.mass = QComboBox()
        for m in MASS_KINDS:
            self.mass.addItem(m, m)
        self.mass.activated.connect(lambda i: self.commit(("run", "mass"), self.mass.itemData(i), "capacity"))
        self.method = QComboBox()
        for m, text in self.METHOD_LABELS.items():
            self.method.addItem(text, m)
        self.method.setToolTip("Automatic: the reduced basis when it is predicted to cost less than half of "
                               "time stepping, else time steps. Reduced basis: one factorization and a few dozen "
                               "solves, integrated exactly; its error is kept within the tolerance (0.1 K if "
                               "empty). Fastest for long profiles with many load changes.")
        self.method.activated.connect(lambda i: self.commit(("run", "method"), self.method.itemData(i),
                                                            "solution method"))
        L.addRow("Time scheme", self.scheme)
        L.addRow("Heat capacity", self.mass)
        L.addRow("Solve by", self.method)

    @staticmethod
    def _typed(path, v):
        if path == ("mesh", "min_layers") and v is not None and float(v).is_integer():
            return int(v)
        return v

    def what(self) -> str:
        return "the study"

    def load(self):
        d = self.doc.model_dict()
        self.title.setText(d.get("title", ""))
        self.title.setCursorPosition(0)  # show the start of a long title
        for path, f in self.numbers.items():
            node = d
            for k in path:
                node = node.get(k) if isinstance(node, dict) else None
            f.set_value(node)
        self.scheme.setCurrentIndex(self.scheme.findData(d["run"]["scheme"]))
        self.mass.setCurrentIndex(self.mass.findData(d["run"]["mass"]))
        self.method.setCurrentIndex(self.method.findData(d["run"].get("method") or "auto"))
        method = d["run"].get("method") or "auto"
        self.numbers[("run", "tolerance_k")].edit.setPlaceholderText(
            {"reduced": "0.1 (default)", "full": "fixed steps"}.get(method, "0.1 if reduced, else fixed steps"))

    def commit(self, path, value, label):
        d = self.doc.model_dict()
        d.setdefault("mesh", {})
        d.setdefault("run", {})
        new = edits.set_value(d, path, value)
        return self.doc.try_edit(new, f"Set {label} of the study", self.panel.report, ("study", 0), ("study", 0),
                                 labels={self.doc.path_text(path): label[:1].upper() + label[1:]})


class MaterialForm(ItemForm):
    """A material of this model: conductivity W/(m·K) (one value, or x, y, z for layered boards),
    density kg/m³, specific heat J/(kg·K). It overrides a built-in material of the same name."""

    kind = "materials"

    def __init__(self, panel):
        super().__init__(panel)
        self.name = self.name_edit(self.rename)
        self.direction = QComboBox()
        self.direction.addItems(["same in every direction", "different along x, y, z"])
        self.direction.activated.connect(self._direction_changed)
        self.k = NumberField("W/(m·K)")
        self.k.committed.connect(lambda v: self.set_prop("conductivity", v, "conductivity"))
        self.k.rejected.connect(lambda t: self.reject_text("conductivity", t))
        self.kxyz = Vec3Field("W/(m·K)")
        self.kxyz.committed.connect(self._k_axis)
        self.kxyz.rejected.connect(lambda a, t: self.reject_text(f"conductivity {AXES[a]}", t))
        self.rho = NumberField("kg/m³")
        self.rho.committed.connect(lambda v: self.set_prop("density", v, "density"))
        self.rho.rejected.connect(lambda t: self.reject_text("density", t))
        self.cp = NumberField("J/(kg·K)")
        self.cp.committed.connect(lambda v: self.set_prop("specific_heat", v, "specific heat"))
        self.cp.rejected.connect(lambda t: self.reject_text("specific heat", t))
        self.used = QLabel()
        self.used.setWordWrap(True)
        self.used.setStyleSheet("color: #5a6472;")
        L = self.layout_
        L.addRow("Name", self.name)
        L.addRow("Conductivity", self.direction)
        L.addRow("", self.k)
        L.addRow("", self.kxyz)
        L.addRow("Density", self.rho)
        L.addRow("Specific heat", self.cp)
        L.addRow(self.used)

    def item(self, d: dict) -> dict:
        return edits.items_of(d, "materials")[self.index]

    def set_prop(self, key: str, value, label: str) -> bool:
        name = self.item(self.doc.model_dict())["name"]
        return self.commit(("materials", name, key), value, label)

    def _k_axis(self, axis: int, value) -> None:
        k = self.item(self.doc.model_dict())["conductivity"]
        ks = list(k) if isinstance(k, list) else [k, k, k]
        ks[axis] = value
        self.set_prop("conductivity", ks, f"conductivity {AXES[axis]}")

    def _direction_changed(self, i: int) -> None:
        k = self.item(self.doc.model_dict())["conductivity"]
        if i == 1 and not isinstance(k, list):
            self.set_prop("conductivity", [k, k, k], "conductivity directions")
        elif i == 0 and isinstance(k, list):
            self.set_prop("conductivity", max(k), "conductivity directions")

    def load(self):
        d = self.doc.model_dict()
        it = self.item(d)
        self.name.setText(it["name"])
        k = it["conductivity"]
        layered = isinstance(k, list)
        self.direction.setCurrentIndex(1 if layered else 0)
        self.k.setVisible(not layered)
        self.kxyz.setVisible(layered)
        if layered:
            self.kxyz.set_values(k)
        else:
            self.k.set_value(k)
        self.rho.set_value(it["density"])
        self.cp.set_value(it["specific_heat"])
        users = [p["name"] for p in d["parts"] if p["material"] == it["name"]]
        self.used.setText(("Used by: " + ", ".join(users)) if users else "Not used by any part yet: pick it "
                          "in a part's Material list.")
