"""The model's items as a tree: study settings, parts, heat loads, convection faces, probes and
the model's own materials.

Each leaf carries ``(kind, index)``; ``kind`` is one of :data:`thermgui.edits.KINDS` or
"study". Part rows have a check box that shows or hides the part in the 3D view.
:meth:`ItemTree.mark_parts` flags parts (warning icon, crimson bold text), e.g. over rating.
"""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QBrush, QColor, QFont, QIcon
from PySide6.QtWidgets import QAbstractItemView, QStyle, QTreeWidget, QTreeWidgetItem

from .edits import item_label

ROLE = Qt.UserRole
GROUPS = [("parts", "Parts"), ("heat_loads", "Heat loads"), ("convection", "Convection faces"),
          ("surface_loads", "Surface fluxes"), ("contacts", "Contacts"), ("air_volumes", "Inside air"),
          ("probes", "Probes"), ("materials", "Own materials")]
STUDY_LABEL = "Study settings"
MARK_COLOUR = QColor("#b0102f")  # over rating
RISK_COLOUR = QColor("#8a5300")  # at risk (amber)


class ItemTree(QTreeWidget):
    """Signals: ``itemChosen(kind, index)`` when the user selects a row (index -1 for a
    group or nothing), ``visibilityChanged(hidden_part_names: set)``."""

    itemChosen = Signal(str, int)
    visibilityChanged = Signal(object)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.setHeaderHidden(True)
        self.setColumnCount(1)
        self.setSelectionMode(QAbstractItemView.SingleSelection)
        self.setUniformRowHeights(True)
        self._groups: dict[str, QTreeWidgetItem] = {}
        self._marked: set[str] = set()
        self._at_risk: set[str] = set()
        self._hidden: set[str] = set()
        self._rebuilding = False
        self._study = QTreeWidgetItem([STUDY_LABEL])
        self._study.setData(0, ROLE, ("study", 0))
        self._study.setIcon(0, self.style().standardIcon(QStyle.SP_FileDialogDetailedView))
        self.addTopLevelItem(self._study)
        for kind, label in GROUPS:
            g = QTreeWidgetItem([label])
            g.setData(0, ROLE, (kind, -1))
            f = g.font(0)
            f.setBold(True)
            g.setFont(0, f)
            g.setFlags(g.flags() & ~Qt.ItemIsSelectable | Qt.ItemIsEnabled)
            self.addTopLevelItem(g)
            g.setExpanded(True)
            self._groups[kind] = g
        self.itemSelectionChanged.connect(self._on_selection)
        self.itemChanged.connect(self._on_item_changed)

    # ------------------------------------------------------------ content
    def show_model(self, model_dict: dict) -> None:
        """Rebuild the rows from a model dict, keeping the selection and hidden parts."""
        current = self.current()
        self._rebuilding = True
        try:
            part_names = {p["name"] for p in model_dict.get("parts", [])}
            self._hidden &= part_names
            for kind, g in self._groups.items():
                items = model_dict.get(kind, [])
                while g.childCount() > len(items):
                    g.removeChild(g.child(g.childCount() - 1))
                while g.childCount() < len(items):
                    g.addChild(QTreeWidgetItem([""]))
                for i in range(len(items)):
                    row = g.child(i)
                    row.setText(0, item_label(model_dict, kind, i))
                    row.setData(0, ROLE, (kind, i))
                    if kind == "parts":
                        row.setFlags(row.flags() | Qt.ItemIsUserCheckable)
                        name = items[i]["name"]
                        row.setCheckState(0, Qt.Unchecked if name in self._hidden else Qt.Checked)
                        row.setToolTip(0, f"{name}: {items[i]['material']}; untick to hide it in the 3D view")
                g.setText(0, f"{dict(GROUPS)[kind]} ({len(items)})")
            self._apply_marks()
        finally:
            self._rebuilding = False
        if current:
            self.select(*current, emit=False)

    def current(self) -> tuple[str, int] | None:
        items = self.selectedItems()
        if not items:
            return None
        data = items[0].data(0, ROLE)
        return tuple(data) if data else None

    def row(self, kind: str, index: int) -> QTreeWidgetItem | None:
        if kind == "study":
            return self._study
        g = self._groups.get(kind)
        if g is None or not 0 <= index < g.childCount():
            return None
        return g.child(index)

    def select(self, kind: str, index: int, emit: bool = True) -> None:
        """Select the row of ``(kind, index)`` (clears the selection if there is none);
        ``itemChosen`` fires once, and only if the selection really changed."""
        row = self.row(kind, index)
        before = self.current()
        self.blockSignals(True)
        try:
            self.clearSelection()
            if row is not None:
                row.setSelected(True)
                self.setCurrentItem(row)
                self.scrollToItem(row)
        finally:
            self.blockSignals(False)
        after = self.current()
        if emit and after != before:
            self._on_selection()

    def select_part(self, name: str, emit: bool = True) -> None:
        g = self._groups["parts"]
        for i in range(g.childCount()):
            if g.child(i).text(0) == name:
                self.select("parts", i, emit)
                return
        self.select("none", -1, emit)

    def part_row(self, name: str) -> QTreeWidgetItem | None:
        g = self._groups["parts"]
        for i in range(g.childCount()):
            if g.child(i).text(0) == name:
                return g.child(i)
        return None

    # ------------------------------------------------------------ marks
    def mark_parts(self, over, at_risk=()) -> None:
        """Flag parts over their rating (warning icon, crimson bold text) and at risk (amber text,
        information icon)."""
        self._marked = set(over)
        self._at_risk = set(at_risk) - self._marked
        self._apply_marks()

    @property
    def marked_parts(self) -> set[str]:
        return set(self._marked)

    @property
    def at_risk_parts(self) -> set[str]:
        return set(self._at_risk)

    def _apply_marks(self) -> None:
        g = self._groups["parts"]
        warn = self.style().standardIcon(QStyle.SP_MessageBoxWarning)
        risk_icon = self.style().standardIcon(QStyle.SP_MessageBoxInformation)
        plain = QBrush()
        risky = self.at_risk_parts
        for i in range(g.childCount()):
            row = g.child(i)
            on = row.text(0) in self._marked
            risk = not on and row.text(0) in risky
            f = QFont(row.font(0))
            f.setBold(on or risk)
            row.setFont(0, f)
            row.setForeground(0, QBrush(MARK_COLOUR) if on else QBrush(RISK_COLOUR) if risk else plain)
            row.setIcon(0, warn if on else risk_icon if risk else QIcon())
            row.setToolTip(0, "over its rating at the shown time" if on else
                           "at risk: its rating lies within the error band of its temperature" if risk else "")

    # ------------------------------------------------------------ visibility
    def hidden_parts(self) -> set[str]:
        return set(self._hidden)

    def set_part_visible(self, name: str, visible: bool) -> None:
        row = self.part_row(name)
        if row is not None:
            row.setCheckState(0, Qt.Checked if visible else Qt.Unchecked)

    def _on_item_changed(self, row, _column):
        if self._rebuilding:
            return
        data = row.data(0, ROLE)
        if not data or data[0] != "parts" or data[1] < 0:
            return
        name = row.text(0)
        hidden = row.checkState(0) == Qt.Unchecked
        before = set(self._hidden)
        (self._hidden.add if hidden else self._hidden.discard)(name)
        if self._hidden != before:
            self.visibilityChanged.emit(set(self._hidden))

    def _on_selection(self):
        cur = self.current()
        if cur is None:
            self.itemChosen.emit("none", -1)
        else:
            self.itemChosen.emit(cur[0], cur[1])
