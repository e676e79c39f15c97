"""Forms for the enclosure physics beyond conduction and convection: surface heat fluxes,
contact resistances and inside air volumes. Units: mm, W/m², K·m²/W, W/(m²·K), °C."""
from __future__ import annotations

from PySide6.QtWidgets import QComboBox, QLabel, QLineEdit

from .. import edits
from .fields import NumberField
from .item_forms import SIDE_LABELS, ItemForm, fill_parts, part_combo, side_combo
from .profile_editor import ProfileEditor


def hint_label(text: str) -> QLabel:
    lab = QLabel(text)
    lab.setWordWrap(True)
    lab.setStyleSheet("color: #5a6472;")
    return lab


class SurfaceLoadForm(ItemForm):
    """A surface heat flux (sun, a heater film): absorptivity × W/m² on a part's side."""

    kind = "surface_loads"

    def __init__(self, panel):
        super().__init__(panel)
        self.name = self.name_edit(self.rename)
        self.part = part_combo(lambda n: self.commit(("surface_loads", self.index, "part"), n, "part"))
        self.side = side_combo(lambda s: self.commit(("surface_loads", self.index, "side"), s, "face"))
        self.absorb = NumberField("")
        self.absorb.committed.connect(lambda v: self.commit(("surface_loads", self.index, "absorptivity"), v,
                                                            "absorptivity"))
        self.absorb.rejected.connect(lambda t: self.reject_text("absorptivity", t))
        self.profile = ProfileEditor("W/m²")
        self.profile.profileCommitted.connect(lambda p: self.commit(("surface_loads", self.index, "flux_w_m2"), p,
                                                                    "flux profile"))
        self.profile.rejected.connect(lambda msg: (self.panel.report(f"{self.what()}: {msg}; the model is "
                                                                     "unchanged."), self.load()))
        L = self.layout_
        L.addRow("Name", self.name)
        L.addRow("On part", self.part)
        L.addRow("Where", self.side)
        L.addRow("Absorbs", self.absorb)
        L.addRow("Arriving flux", self.profile)
        L.addRow(hint_label("Absorbed W/m² = absorptivity (0–1) × arriving flux, on the uncovered faces of "
                            "that side. Clear-sky noon sun is roughly 1000 W/m²; light grey paint absorbs "
                            "about 0.3–0.5 of it, white about 0.2 (from memory)."))

    def load(self):
        d = self.doc.model_dict()
        it = self.item(d)
        self.name.setText(it["name"])
        fill_parts(self.part, d, it["part"])
        self.side.setCurrentIndex(self.side.findData(it["side"]))
        self.absorb.set_value(it.get("absorptivity", 1.0))
        spec = self.doc.model.surface_loads[self.index].flux_w_m2
        self.profile.set_profile(spec.model_dump(), spec, self.doc.model.run.duration_s)


class ContactForm(ItemForm):
    """A contact resistance between two touching parts."""

    kind = "contacts"
    FACES = (None, "x-", "x+", "y-", "y+", "z-", "z+")

    def __init__(self, panel):
        super().__init__(panel)
        self.name = QLineEdit()
        self.name.setPlaceholderText("(the two parts)")
        self.name.editingFinished.connect(lambda: self.commit(("contacts", self.index, "name"),
                                                              self.name.text().strip() or None, "name"))
        self.first = part_combo(lambda n: self.commit(("contacts", self.index, "parts", 0), n, "first part"))
        self.second = part_combo(lambda n: self.commit(("contacts", self.index, "parts", 1), n, "second part"))
        self.side = QComboBox()
        self.side.addItem("every face they share", None)
        for s in self.FACES[1:]:
            self.side.addItem("first part's " + SIDE_LABELS[s], s)
        self.side.activated.connect(lambda i: self.commit(("contacts", self.index, "side"), self.side.itemData(i),
                                                          "touching face"))
        self.res = NumberField("K·m²/W")
        self.res.committed.connect(self._set_resistance)
        self.res.rejected.connect(lambda t: self.reject_text("contact resistance", t))
        L = self.layout_
        L.addRow("Name", self.name)
        L.addRow("Part", self.first)
        L.addRow("Touches", self.second)
        L.addRow("Where", self.side)
        L.addRow("Resistance", self.res)
        self.cond = QLabel("")
        self.cond.setStyleSheet("color: #5a6472;")
        L.addRow("", self.cond)
        L.addRow(hint_label("Typical interfaces: 1e-5 (bonded, greased) to 1e-3 K·m²/W (dry, light pressure); "
                            "common practice, no source. The touching faces are tinted in the view."))

    def _set_resistance(self, v):
        new = edits.set_value(self.doc.model_dict(), ("contacts", self.index, "conductance_w_m2k"), None)
        new = edits.set_value(new, ("contacts", self.index, "resistance_k_m2_w"), v)
        sel = (self.kind, self.index)
        self.doc.try_edit(new, f"Set resistance of {self.what()}", self.panel.report, sel, sel,
                          labels={self.doc.path_text(("contacts", self.index, "resistance_k_m2_w")): "Resistance"})

    def load(self):
        d = self.doc.model_dict()
        it = self.item(d)
        self.name.setText(it.get("name") or "")
        fill_parts(self.first, d, it["parts"][0])
        fill_parts(self.second, d, it["parts"][1])
        self.side.setCurrentIndex(max(0, self.side.findData(it.get("side"))))
        r = self.doc.model.contacts[self.index].resistance
        self.res.set_value(r)
        self.cond.setText(f"= {1.0 / r:,.0f} W/(m²·K)" if r > 0 else "(perfect contact)")


class AirVolumeForm(ItemForm):
    """Still air inside a sealed box, as one temperature."""

    kind = "air_volumes"

    def __init__(self, panel):
        super().__init__(panel)
        self.name = self.name_edit(self.rename)
        self.walls = QLineEdit()
        self.walls.setToolTip("Names of the parts that close the air off, separated by commas")
        self.walls.editingFinished.connect(self._set_walls)
        self.volume = NumberField("mm³", optional=True, placeholder="from the enclosed space")
        self.volume.committed.connect(lambda v: self.commit(("air_volumes", self.index, "volume_mm3"), v,
                                                            "air volume"))
        self.volume.rejected.connect(lambda t: self.reject_text("air volume", t))
        self.h = NumberField("W/(m²·K)")
        self.h.committed.connect(self._set_all_h)
        self.h.rejected.connect(lambda t: self.reject_text("inside coefficient", t))
        self.rated = NumberField("°C", optional=True, placeholder="no rating")
        self.rated.committed.connect(lambda v: self.commit(("air_volumes", self.index, "rated_c"), v,
                                                           "rated temperature"))
        self.rated.rejected.connect(lambda t: self.reject_text("rated temperature", t))
        self.initial = NumberField("°C", optional=True, placeholder="model default")
        self.initial.committed.connect(lambda v: self.commit(("air_volumes", self.index, "initial_c"), v,
                                                             "initial temperature"))
        self.initial.rejected.connect(lambda t: self.reject_text("initial temperature", t))
        self.faces = QLabel("")
        self.faces.setWordWrap(True)
        L = self.layout_
        L.addRow("Name", self.name)
        L.addRow("Enclosed by", self.walls)
        L.addRow("Volume", self.volume)
        L.addRow("Inside h (all)", self.h)
        L.addRow("Faces", self.faces)
        L.addRow("Rated at", self.rated)
        L.addRow("Starts at", self.initial)
        L.addRow(hint_label("One well-mixed air temperature with its own heat capacity, exchanging heat with "
                            "the listed faces toward it (typical inside coefficients 2–5 W/(m²·K), common "
                            "practice, no source). No air flow is modelled. Faces per part and side are "
                            "edited in the model file."))

    def _set_walls(self):
        names = [n.strip() for n in self.walls.text().split(",") if n.strip()]
        self.commit(("air_volumes", self.index, "enclosed_by"), names, "enclosing parts")

    def _set_all_h(self, v):
        d = self.doc.model_dict()
        faces = [dict(f, h=v) for f in self.item(d).get("faces", [])]
        self.commit(("air_volumes", self.index, "faces"), faces, "inside coefficient")

    def load(self):
        d = self.doc.model_dict()
        it = self.item(d)
        self.name.setText(it["name"])
        self.walls.setText(", ".join(it.get("enclosed_by", [])))
        self.volume.set_value(it.get("volume_mm3"))
        hs = {f["h"] for f in it.get("faces", [])}
        self.h.set_value(hs.pop() if len(hs) == 1 else None)
        self.faces.setText("; ".join(f"{f['part']} ({SIDE_LABELS[f['side']]}, h {f['h']:g})"
                                     for f in it.get("faces", [])))
        self.rated.set_value(it.get("rated_c"))
        self.initial.set_value(it.get("initial_c"))
