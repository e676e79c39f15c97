"""Entry fields with units: a number box that commits on Enter / focus loss, and an x-y-z triple.

A field only parses text; whether the value is allowed is decided by the model check
(:func:`solver.model.parse_model`) when the form commits it, so every limit has one home.
"""
from __future__ import annotations

import math

from PySide6.QtCore import Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QLineEdit, QWidget


def format_number(v) -> str:
    if v is None:
        return ""
    return f"{float(v):.6g}"


def parse_number(text: str):
    """float from user text ("12.5", "12,5", "1e3"); None for empty; ValueError otherwise."""
    t = text.strip().replace(",", ".")
    if not t:
        return None
    v = float(t)
    if not math.isfinite(v):
        raise ValueError("not a finite number")
    return v


class NumberField(QWidget):
    """A line edit with a unit label. ``committed(value)`` (float, or None when emptied and
    ``optional``) fires when the text changed and was confirmed; ``rejected(text)`` when the
    text is not a number (the field then shows the last good value again)."""

    committed = Signal(object)
    rejected = Signal(str)

    def __init__(self, unit: str = "", optional: bool = False, placeholder: str = "", parent=None):
        super().__init__(parent)
        self.optional = optional
        self.edit = QLineEdit()
        self.edit.setPlaceholderText(placeholder)
        self.edit.setMinimumWidth(60)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(4)
        lay.addWidget(self.edit, 1)
        self.unit = QLabel(unit)
        self.unit.setMinimumWidth(0)
        if unit:
            lay.addWidget(self.unit)
        self._shown = ""
        self.edit.editingFinished.connect(self._finish)
        self.edit.returnPressed.connect(self._finish)

    def set_value(self, v) -> None:
        self._shown = format_number(v)
        self.edit.setText(self._shown)

    def text(self) -> str:
        return self.edit.text()

    def set_text_and_commit(self, text: str) -> None:
        """Type ``text`` and confirm it, as a user would (for scripted use)."""
        self.edit.setText(text)
        self._finish()

    def _finish(self):
        text = self.edit.text()
        if text.strip() == self._shown.strip():
            return
        try:
            v = parse_number(text)
        except ValueError:
            self.edit.setText(self._shown)
            self.rejected.emit(text)
            return
        if v is None and not self.optional:
            self.edit.setText(self._shown)
            self.rejected.emit(text)
            return
        self._shown = format_number(v)
        self.committed.emit(v)


class Vec3Field(QWidget):
    """Three number fields x, y, z sharing one unit; ``committed(axis, value)``."""

    committed = Signal(int, object)
    rejected = Signal(int, str)

    def __init__(self, unit: str = "mm", parent=None):
        super().__init__(parent)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(3)
        self.fields = []
        for a, axis in enumerate("xyz"):
            lab = QLabel(axis)
            lab.setStyleSheet("color: #5a6472;")
            f = NumberField()
            f.edit.setToolTip(f"{axis} in {unit}")
            f.committed.connect(lambda v, a=a: self.committed.emit(a, v))
            f.rejected.connect(lambda t, a=a: self.rejected.emit(a, t))
            lay.addWidget(lab)
            lay.addWidget(f, 1)
            self.fields.append(f)
        lay.addWidget(QLabel(unit))

    def set_values(self, values) -> None:
        for f, v in zip(self.fields, values):
            f.set_value(v)
