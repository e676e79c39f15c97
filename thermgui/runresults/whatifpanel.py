"""The "Change loads and ambient" panel: a scale factor per heat load and an ambient offset (K).

Only widgets: :class:`~thermgui.runresults.whatifcontrol.WhatIfControl` prepares the run's unit
responses and answers each change. Signals: ``changed(scales, offset_k)`` (after a value is
committed: Enter, arrows, leaving the box), ``resetRequested()``, ``prepareRequested()``,
``stopRequested()``.
"""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QDoubleSpinBox, QGridLayout, QHBoxLayout, QLabel, QPushButton, QSizePolicy,
                               QVBoxLayout, QWidget)

from .runpanel import ERROR_STYLE

MAX_FACTOR = 10.0
MAX_OFFSET_K = 50.0
NOTE_STYLE = "QLabel { color: #4a5360; }"


def describe_profile(profile) -> str:
    """A short text of a heat-load profile in watts (for the label beside its factor)."""
    kind = getattr(profile, "type", "")
    if kind == "constant":
        return f"{profile.value:g} W"
    if kind == "step":
        return f"{profile.value:g} W from {profile.start_s:g} s"
    if kind == "pulse":
        return f"pulse {profile.high:g}/{profile.low:g} W"
    if kind == "table":
        vals = [v for _, v in profile.points]
        return f"table up to {max(vals):g} W" if vals else "table"
    return kind


class WhatIfPanel(QWidget):
    changed = Signal(object, float)
    resetRequested = Signal()
    prepareRequested = Signal()
    stopRequested = Signal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.state = QLabel("Run the model (F5); then scale its heat loads or shift the ambient here.")
        self.state.setWordWrap(True)
        self.message = QLabel()  # a refusal or a failure, in the error style
        self.message.setWordWrap(True)
        self.message.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.message.setStyleSheet(ERROR_STYLE)
        self.message.hide()
        self.grid = QGridLayout()
        self.grid.setColumnStretch(0, 1)
        self.grid.setHorizontalSpacing(8)
        self.factors: list[QDoubleSpinBox] = []
        self.offset = QDoubleSpinBox()
        self.offset.setRange(-MAX_OFFSET_K, MAX_OFFSET_K)
        self.offset.setDecimals(1)
        self.offset.setSingleStep(1.0)
        self.offset.setSuffix(" K")
        self.offset.setKeyboardTracking(False)
        self.offset.setToolTip("Added to every ambient temperature (convection and the model's ambient), K; "
                               "initial temperatures stay as in the model")
        self.offset.valueChanged.connect(self._emit)
        self.reset_button = QPushButton("Back to the run's answer")
        self.reset_button.setToolTip("Factors 1, offset 0: the table and chart show the run itself again")
        self.reset_button.clicked.connect(self.resetRequested)
        self.prepare_button = QPushButton("Prepare")
        self.prepare_button.setToolTip("Compute the run's unit responses (once per run, on a worker thread)")
        self.prepare_button.clicked.connect(self.prepareRequested)
        self.stop_button = QPushButton("Stop")
        self.stop_button.clicked.connect(self.stopRequested)
        self.stop_button.hide()
        self.note = QLabel("Superposed from the run's unit responses, on the meshes its error band came from; the 3D view shows the run.")
        self.note.setWordWrap(True)
        self.note.setStyleSheet(NOTE_STYLE)
        buttons = QHBoxLayout()
        buttons.addWidget(self.reset_button)
        buttons.addStretch(1)
        buttons.addWidget(self.prepare_button)
        buttons.addWidget(self.stop_button)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(6, 4, 6, 4)
        lay.setSpacing(4)
        lay.addWidget(self.state)
        lay.addWidget(self.message)
        lay.addLayout(self.grid)
        lay.addLayout(buttons)
        lay.addWidget(self.note)
        lay.addStretch(1)
        self.setSizePolicy(QSizePolicy.Preferred, QSizePolicy.Preferred)
        self.set_loads([])
        self.set_ready(False)

    # ------------------------------------------------------------ contents
    def set_loads(self, heat_loads) -> None:
        """One factor per heat load of the run's model (``heat_loads`` from the model)."""
        while self.grid.count():
            w = self.grid.takeAt(0).widget()
            if w is not None and w is not self.offset:
                w.deleteLater()
        self.factors = []
        self.grid.addWidget(QLabel("Heat load"), 0, 0)
        self.grid.addWidget(QLabel("Factor"), 0, 1)
        seen: dict[str, int] = {}
        for i, hl in enumerate(heat_loads):
            seen[hl.part] = seen.get(hl.part, 0) + 1
            name = hl.part if seen[hl.part] == 1 else f"{hl.part} ({seen[hl.part]})"
            label = QLabel(f"{name} <span style='color:#5a6472'>{describe_profile(hl.profile)}</span>")
            label.setToolTip(f"heat_loads[{i}] on part {hl.part!r}")
            box = QDoubleSpinBox()
            box.setRange(0.0, MAX_FACTOR)
            box.setDecimals(2)
            box.setSingleStep(0.05)
            box.setValue(1.0)
            box.setSuffix(" ×")
            box.setKeyboardTracking(False)
            box.setToolTip(f"Multiplies the watts of heat_loads[{i}] at every time (1 = as in the model)")
            box.valueChanged.connect(self._emit)
            self.grid.addWidget(label, i + 1, 0)
            self.grid.addWidget(box, i + 1, 1)
            self.factors.append(box)
        row = len(heat_loads) + 1
        self.grid.addWidget(QLabel("Ambient offset"), row, 0)
        self.grid.addWidget(self.offset, row, 1)

    def values(self) -> tuple[list[float], float]:
        return [b.value() for b in self.factors], self.offset.value()

    def set_values(self, scales, offset_k: float, emit: bool = False) -> None:
        for b, v in zip(self.factors, scales):
            b.blockSignals(True)
            b.setValue(float(v))
            b.blockSignals(False)
        self.offset.blockSignals(True)
        self.offset.setValue(float(offset_k))
        self.offset.blockSignals(False)
        if emit:
            self._emit()

    def is_default(self) -> bool:
        scales, off = self.values()
        return all(abs(s - 1.0) < 1e-12 for s in scales) and abs(off) < 1e-12

    # ------------------------------------------------------------ states
    def set_ready(self, ready: bool) -> None:
        """Factors editable (unit responses in hand) or not."""
        for b in [*self.factors, self.offset]:
            b.setEnabled(ready)
        self.reset_button.setEnabled(ready)

    def show_state(self, text: str, preparing: bool = False, can_prepare: bool = False) -> None:
        self.state.setText(text)
        self.prepare_button.setVisible(can_prepare and not preparing)
        self.stop_button.setVisible(preparing)

    def show_message(self, text: str | None) -> None:
        self.message.setText(text or "")
        self.message.setVisible(bool(text))

    def _emit(self, *_):
        scales, off = self.values()
        self.changed.emit(scales, off)
