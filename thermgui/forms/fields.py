"""Entry fields with units: a number box that commits on Enter / focus loss, and an x-y-z triple.

A field only parses text; whether the value is allowed is decided by the model check
(:func:`solver.model.modelfile.parse_model`) when the form commits it, so every limit has one home.
"""
from __future__ import annotations

import math
import re

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


# time units a field may be typed in: name -> (seconds, other spellings)
TIME_UNITS = {"s": (1.0, ("sec", "secs", "second", "seconds")), "min": (60.0, ("mins", "minute", "minutes")),
              "h": (3600.0, ("hr", "hrs", "hour", "hours"))}
_WITH_UNIT = re.compile(r"^\s*([-+]?[0-9.,]+(?:[eE][-+]?[0-9]+)?)\s*([^\d\s].*?)?\s*$")


def parse_with_unit(text: str, units: dict):
    """``(value in the first unit of units, unit typed)`` from "30 min", "1.5 h", "90" (the
    first unit); None for empty; ValueError naming the problem otherwise."""
    t = text.strip()
    if not t:
        return None
    m = _WITH_UNIT.match(t)
    if not m:
        raise ValueError("not a number")
    v = parse_number(m.group(1))
    word = (m.group(2) or "").strip().lower()
    if not word:
        return v
    for name, (size, spellings) in units.items():
        if word == name or word in spellings:
            return v * size
    raise ValueError(f"unit {word!r} not known")


def format_with_unit(v, units: dict) -> str:
    """``v`` (in the first unit) in the largest unit that shows it exactly: 1800 -> '30 min'."""
    if v is None:
        return ""
    v = float(v)
    for name, (size, _) in sorted(units.items(), key=lambda kv: -kv[1][0]):
        q = v / size
        if abs(v) >= size and abs(q * 1000 - round(q * 1000)) < 1e-6:
            return f"{format_number(q)} {name}"
    return f"{format_number(v)} {next(iter(units))}"


class NumberField(QWidget):
    """A line edit with a unit label. ``committed(value)`` (float, or None when emptied and
    ``optional``) fires when the text changed and was confirmed; ``rejected(text)`` when the
    text is not a number (the field then shows the last good value again)."""

    committed = Signal(object)
    rejected = Signal(str)

    def __init__(self, unit: str = "", optional: bool = False, placeholder: str = "", parent=None,
                 units: dict | None = None):
        super().__init__(parent)
        self.optional = optional
        self.units = units  # e.g. TIME_UNITS: the text carries its unit ("30 min"); values in the first one
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
        if units:
            self.unit.setText("")
            self.edit.setToolTip("Type a number with a unit: " + ", ".join(units) + " (for example 30 min)")
        self._shown = ""
        self.edit.editingFinished.connect(self._finish)
        self.edit.returnPressed.connect(self._finish)

    def unit_names(self) -> list[str]:
        return list(self.units or ([self.unit.text()] if self.unit.text() else []))

    def _format(self, v) -> str:
        return format_with_unit(v, self.units) if self.units else format_number(v)

    def set_value(self, v) -> None:
        self._shown = self._format(v)
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
            v = parse_with_unit(text, self.units) if self.units else parse_number(text)
        except ValueError:
            self.edit.setText(self._shown)
            self.rejected.emit(text)
            return
        if v is None and not self.optional:
            self.edit.setText(self._shown)
            self.rejected.emit(text)
            return
        self._shown = self._format(v)
        self.edit.setText(self._shown)
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
        self.unit = QLabel(unit)
        lay.addWidget(self.unit)

    def set_values(self, values) -> None:
        for f, v in zip(self.fields, values):
            f.set_value(v)
