"""Property forms for the selected item, stacked in one :class:`PropertyPanel`."""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QLabel, QScrollArea, QStackedWidget, QVBoxLayout, QWidget

from .. import edits
from .item_forms import ConvectionForm, HeatLoadForm, PartForm, ProbeForm, StudyForm

KIND_TITLES = {"parts": "Part", "heat_loads": "Heat load", "convection": "Convection face", "probes": "Probe",
               "study": "Study settings"}


class PropertyPanel(QWidget):
    """Shows the form of ``(kind, index)``; ``report(message)`` shows refusals to the user.
    ``placeRequested`` asks the window to run "place onto a face" for the shown part."""

    placeRequested = Signal()

    def __init__(self, document, report, parent=None):
        super().__init__(parent)
        self.document = document
        self.report = report
        self.kind, self.index = "none", -1
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        self.title = QLabel()
        self.title.setWordWrap(True)
        self.title.setStyleSheet("font-weight: bold; padding: 4px 6px; background: #dfe5ec; color: #1d2733;")
        lay.addWidget(self.title)
        self.stack = QStackedWidget()
        self.empty = QLabel("Select an item in the list or click a part in the 3D view.")
        self.empty.setWordWrap(True)
        self.empty.setAlignment(Qt.AlignTop | Qt.AlignLeft)
        self.empty.setMargin(8)
        self.stack.addWidget(self.empty)
        self.forms = {"parts": PartForm(self), "heat_loads": HeatLoadForm(self), "convection": ConvectionForm(self),
                      "probes": ProbeForm(self), "study": StudyForm(self)}
        for f in self.forms.values():
            self.stack.addWidget(f)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(self.stack)
        scroll.setFrameShape(QScrollArea.NoFrame)
        lay.addWidget(scroll, 1)
        document.changed.connect(self.reload)
        self.show_item("none", -1)

    def show_item(self, kind: str, index: int) -> None:
        self.kind, self.index = kind, index
        self.reload()

    def _show(self, page) -> None:
        """Show ``page``; the scroll area then sizes to that page, not to the tallest form."""
        from PySide6.QtWidgets import QSizePolicy

        for k in range(self.stack.count()):
            w = self.stack.widget(k)
            pol = QSizePolicy.Preferred if w is page else QSizePolicy.Ignored
            w.setSizePolicy(pol, pol)
        self.stack.setCurrentWidget(page)
        self.stack.adjustSize()

    def current_form(self):
        return self.forms.get(self.kind) if self.stack.currentWidget() is not self.empty else None

    def reload(self) -> None:
        d = self.document.model_dict()
        form = self.forms.get(self.kind)
        valid = form is not None and (self.kind == "study" or 0 <= self.index < len(d.get(self.kind, [])))
        if not valid:
            self._show(self.empty)
            self.title.setText("Properties")
            return
        form.index = self.index
        form.load()
        self._show(form)
        label = "" if self.kind == "study" else " · " + edits.item_label(d, self.kind, self.index)
        self.title.setText(KIND_TITLES[self.kind] + label)
