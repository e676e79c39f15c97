"""Material choice: the model's own materials first, then the built-in library.

Each entry's tooltip shows conductivity W/(m·K), density kg/m³ and specific heat J/(kg·K)
and the library's note on where the figures come from.
"""
from __future__ import annotations

from PySide6.QtCore import Signal
from PySide6.QtGui import QStandardItem
from PySide6.QtWidgets import QComboBox

from solver.model.materials import BUILTIN_MATERIALS


def describe(mat) -> str:
    k = mat.conductivity
    ks = f"{k[0]:g}" if len(set(k)) == 1 else " / ".join(f"{v:g}" for v in k) + " (x / y / z)"
    text = f"k = {ks} W/(m·K), ρ = {mat.density:g} kg/m³, c = {mat.specific_heat:g} J/(kg·K)"
    if mat.note:
        text += f"\n{mat.note}"
    if mat.source:
        text += f"\nsource: {mat.source}"
    return text


class MaterialPicker(QComboBox):
    """``materialChosen(name)`` when the user picks a different material."""

    materialChosen = Signal(str)

    def __init__(self, parent=None):
        super().__init__(parent)
        self._loading = False
        self.setMinimumContentsLength(14)
        self.activated.connect(self._activated)

    def set_choices(self, model, current: str) -> None:
        """Fill from ``model`` (solver.model.modelfile.Model) and show ``current``."""
        self._loading = True
        try:
            self.clear()
            table = model.material_table()
            own = sorted(model.materials)
            builtin = sorted(k for k in BUILTIN_MATERIALS if k not in model.materials)
            for title, names in (("In this model", own), ("Built-in library", builtin)):
                if not names:
                    continue
                self.addItem(title)
                head = self.model().item(self.count() - 1)
                if isinstance(head, QStandardItem):
                    head.setEnabled(False)
                    f = head.font()
                    f.setBold(True)
                    head.setFont(f)
                for n in names:
                    self.addItem("   " + n, n)
                    self.setItemData(self.count() - 1, describe(table[n]), 3)  # Qt.ToolTipRole
            if current not in table:
                self.addItem(f"   {current} (unknown)", current)
            idx = self.findData(current)
            self.setCurrentIndex(idx)
            self.setToolTip(describe(table[current]) if current in table else "unknown material")
        finally:
            self._loading = False

    def current_material(self) -> str:
        return self.currentData() or ""

    def choose(self, name: str) -> None:
        """Pick ``name`` as a user would (for scripted use)."""
        i = self.findData(name)
        if i >= 0:
            self.setCurrentIndex(i)
            self._activated(i)

    def _activated(self, i):
        if self._loading:
            return
        name = self.itemData(i)
        if name:
            self.materialChosen.emit(name)
