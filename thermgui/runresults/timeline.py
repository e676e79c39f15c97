"""Time slider over the output times, with play/pause and single steps."""
from __future__ import annotations

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtGui import QKeySequence, QShortcut
from PySide6.QtWidgets import QHBoxLayout, QLabel, QSlider, QStyle, QToolButton, QWidget

from .timefmt import format_time


class TimelineBar(QWidget):
    """Signal ``indexChanged(int)`` when the shown output changes (slider, buttons or playback)."""

    indexChanged = Signal(int)

    def __init__(self, parent=None, frame_interval_ms: int = 250):
        super().__init__(parent)
        self._times: list[float] = []
        self._override: str | None = None  # a live frame's time shown instead of the slider's
        self._span = 0.0
        st = self.style()
        # single arrows for single steps (the "skip to start / end" icons promised a jump)
        self.back_button = self._button(st.standardIcon(QStyle.SP_ArrowLeft), "One output back (,)")
        self.play_button = self._button(st.standardIcon(QStyle.SP_MediaPlay), "Play / pause (Space)")
        self.play_button.setCheckable(True)
        self.forward_button = self._button(st.standardIcon(QStyle.SP_ArrowRight), "One output forward (.)")
        self.back_button.setShortcut(Qt.Key_Comma)
        self.forward_button.setShortcut(Qt.Key_Period)
        self.slider = QSlider(Qt.Horizontal)
        self.slider.setRange(0, 0)
        self.slider.setPageStep(1)
        self.slider.setToolTip("Output time shown in the view")
        self.label = QLabel("no results yet")
        self.label.setMinimumWidth(170)
        lay = QHBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        for w in (self.back_button, self.play_button, self.forward_button):
            lay.addWidget(w)
        lay.addWidget(self.slider, 1)
        lay.addWidget(self.label)
        self.timer = QTimer(self)
        self.timer.setInterval(frame_interval_ms)
        self.timer.timeout.connect(self._tick)
        self.slider.valueChanged.connect(self._on_value)
        self.back_button.clicked.connect(lambda: self.step(-1))
        self.forward_button.clicked.connect(lambda: self.step(1))
        self.play_button.toggled.connect(self.set_playing)
        # Space plays / pauses anywhere in the window while there are results (a text field that
        # has the focus still takes its spaces: it claims the key first)
        self.space = QShortcut(QKeySequence(Qt.Key_Space), self, context=Qt.WindowShortcut)
        self.space.activated.connect(lambda: self.set_playing(not self.timer.isActive()))
        self.setEnabled(False)

    def _button(self, icon, tip):
        b = QToolButton(self)
        b.setIcon(icon)
        b.setToolTip(tip)
        b.setAutoRaise(True)
        return b

    # ------------------------------------------------------------ content
    def set_times(self, times, span_s: float) -> None:
        """Output times in seconds; keeps following the newest one if it was shown."""
        at_end = self.slider.value() >= self.slider.maximum()
        self._times = list(times)
        self._span = span_s
        self.setEnabled(bool(self._times))
        self.slider.blockSignals(True)
        self.slider.setRange(0, max(0, len(self._times) - 1))
        self.slider.blockSignals(False)
        if at_end and self._times:
            self.set_index(len(self._times) - 1)
        self._update_label()

    @property
    def index(self) -> int:
        return self.slider.value()

    def set_index(self, i: int) -> None:
        i = max(0, min(int(i), self.slider.maximum()))
        if i == self.slider.value():
            self._update_label()
            self.indexChanged.emit(i)
        else:
            self.slider.setValue(i)

    def step(self, delta: int) -> None:
        self.set_index(self.slider.value() + delta)

    def _on_value(self, i: int) -> None:
        self._override = None  # the user moved the slider: its time is the one shown
        self._update_label()
        self.indexChanged.emit(i)

    def show_time_text(self, text: str | None) -> None:
        """Show ``text`` (e.g. the time of a live frame beyond the last output) instead of the
        slider's time; None goes back to the slider's time."""
        self._override = text
        self._update_label()

    def _update_label(self) -> None:
        if not self._times:
            self.label.setText("no results yet")
            return
        i = self.slider.value()
        shown = self._override or f"t = {format_time(self._times[i], self._span)}"
        self.label.setText(f"{shown}  of {format_time(self._span, self._span)}")

    # ------------------------------------------------------------ playback
    def set_playing(self, on: bool) -> None:
        st = self.style()
        self.play_button.blockSignals(True)
        self.play_button.setChecked(on)
        self.play_button.blockSignals(False)
        self.play_button.setIcon(st.standardIcon(QStyle.SP_MediaPause if on else QStyle.SP_MediaPlay))
        if on:
            if self.slider.value() >= self.slider.maximum():
                self.set_index(0)
            self.timer.start()
        else:
            self.timer.stop()

    def _tick(self) -> None:
        if self.slider.value() >= self.slider.maximum():
            self.set_playing(False)
        else:
            self.step(1)
