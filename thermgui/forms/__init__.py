"""Property forms for the selected item, stacked in one :class:`PropertyPanel`."""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QLabel, QScrollArea, QStackedWidget, QVBoxLayout, QWidget

from .. import edits
from .item_forms import ConvectionForm, HeatLoadForm, MaterialForm, PartForm, ProbeForm, StudyForm
from .physics_forms import AirVolumeForm, ContactForm, SurfaceLoadForm

KIND_TITLES = {"parts": "Part", "heat_loads": "Heat load", "convection": "Convection face", "probes": "Probe",
               "study": "Study settings", "materials": "Material", "surface_loads": "Surface flux",
               "contacts": "Contact", "air_volumes": "Inside air"}


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
                      "probes": ProbeForm(self), "study": StudyForm(self), "materials": MaterialForm(self),
                      "surface_loads": SurfaceLoadForm(self), "contacts": ContactForm(self),
                      "air_volumes": AirVolumeForm(self)}
        self._pages = {}
        for kind, f in self.forms.items():
            f.align_units()
            scroll = QScrollArea()  # one per form, so each scrolls only when it is itself too tall
            scroll.setWidgetResizable(True)
            scroll.setWidget(f)
            scroll.setFrameShape(QScrollArea.NoFrame)
            self.stack.addWidget(scroll)
            self._pages[kind] = scroll
        lay.addWidget(self.stack, 1)
        document.changed.connect(self.reload)
        self.show_item("none", -1)

    def show_item(self, kind: str, index: int) -> None:
        self.kind, self.index = kind, index
        self.reload()

    def _show(self, page) -> None:
        self.stack.setCurrentWidget(page)

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
        self._show(self._pages[self.kind])
        label = "" if self.kind == "study" else " · " + edits.item_label(d, self.kind, self.index)
        self.title.setText(KIND_TITLES[self.kind] + label)
