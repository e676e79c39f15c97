"""Run status: progress with estimated time left, messages from the engine, and the caution note."""
from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QPainter
from PySide6.QtWidgets import QHBoxLayout, QLabel, QProgressBar, QSizePolicy, QVBoxLayout, QWidget

from .timefmt import format_duration, format_time

CAUTION_TEXT = ("Engineering estimates (conduction model, assumed convection): confirm by measurement on real "
                "hardware; defer to the applicable safety standards, codes and licensed practice.")
ERROR_STYLE = ("QLabel { background: #fdecee; color: #7a0c1f; border: 1px solid #d0103a; border-radius: 3px;"
               " padding: 4px; }")
CAUTION_STYLE = ("QLabel { background: #fff6dc; color: #4a3b00; border: 1px solid #e0b000; border-radius: 3px;"
                 " padding: 3px; }")


def remaining_seconds(step: int, n_steps: int, elapsed_s: float) -> float | None:
    """Estimated wall time left from the pace so far (None before the first step)."""
    if step <= 0 or n_steps <= 0:
        return None
    return elapsed_s * (n_steps - step) / step


class ElidingLabel(QLabel):
    """A one-line label that gives way to its neighbours and ends in "…" when it is cut short
    (the whole text stays in ``text()`` and the tooltip)."""

    def __init__(self, text: str = "", parent=None):
        super().__init__(text, parent)
        self.setSizePolicy(QSizePolicy.Ignored, QSizePolicy.Preferred)

    def setText(self, text: str) -> None:  # noqa: N802 - Qt's name
        super().setText(text)
        self.setToolTip(text)

    def paintEvent(self, event) -> None:  # noqa: N802 - Qt's name
        painter = QPainter(self)
        shown = self.fontMetrics().elidedText(self.text(), Qt.ElideRight, self.contentsRect().width())
        painter.drawText(self.contentsRect(), int(self.alignment()) | int(Qt.AlignVCenter), shown)


class RunStatus(QWidget):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.bar = QProgressBar()
        self.bar.setRange(0, 1000)
        self.bar.setValue(0)
        self.bar.setFormat("idle")
        self.bar.setTextVisible(True)
        # room for the longest progress text; the line beside it gives way (its tooltip keeps it all)
        self.bar.setMinimumWidth(self.bar.fontMetrics().horizontalAdvance(
            "100 % · about 59 min 59 s left") + 30)
        self.detail = ElidingLabel("Press Run (F5) to solve the model.")
        self.message = QLabel()
        self.message.setWordWrap(True)
        self.message.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.message.setStyleSheet(ERROR_STYLE)
        self.message.hide()
        self.caution = QLabel("⚠ " + CAUTION_TEXT)
        self.caution.setWordWrap(True)
        self.caution.setStyleSheet(CAUTION_STYLE)
        self.caution.setToolTip("Results are engineering estimates from a conduction model with assumed convection "
                                "coefficients. Confirm them by measurement on real hardware, and defer to the "
                                "applicable safety standards, codes and licensed practice before relying on them.")
        top = QHBoxLayout()
        top.addWidget(self.bar, 1)
        top.addWidget(self.detail, 2)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.addLayout(top)
        lay.addWidget(self.message)
        self._span = 0.0

    def preparing(self, text: str) -> None:
        self.message.hide()
        # No busy (indeterminate) bar: its animation repaints the window about 40 times a second,
        # and with the 3D view in the window every repaint is composed through OpenGL, which in
        # software costs a CPU core the solver needs (measured: 0.8 CPU-s per second)
        self.bar.setRange(0, 1000)
        self.bar.setValue(0)
        self.bar.setFormat("preparing")
        self.detail.setText(text)

    def started(self, describe: str, span_s: float) -> None:
        self._span = span_s
        self.bar.setRange(0, 1000)
        self.bar.setValue(0)
        self.bar.setFormat("%p %")
        self.detail.setText(describe)  # the label's tooltip holds the whole text

    def progress(self, step: int, n_steps: int, time_s: float, elapsed_s: float) -> None:
        """Progress in the bar itself (the line beside it keeps the run's description): without a
        graphics card every repaint is composed through software OpenGL together with the 3D view,
        and a wide label repainting cost the solver about twice the bar's share (measured: 0.07
        against 0.03-0.04 CPU-s per update)."""
        self.bar.setRange(0, 1000)
        self.bar.setValue(int(1000 * step / max(1, n_steps)))
        left = remaining_seconds(step, n_steps, elapsed_s)
        text = "%p %"  # the model time shows once, with the drawn field (view caption and slider)
        if left is not None:
            text += f" · about {format_duration(left)} left"
        self.bar.setFormat(text)
        self.bar.setToolTip(f"step {step:,} of {n_steps:,}, computing t = {format_time(time_s, self._span or None)}")

    def finished(self, text: str) -> None:
        self.bar.setRange(0, 1000)
        self.bar.setValue(1000)
        self.bar.setFormat("done")
        self.detail.setText(text)

    def stopped(self, text: str) -> None:
        self.bar.setRange(0, 1000)
        self.bar.setFormat("stopped")
        self.detail.setText(text)

    def show_error(self, headline: str, details: str) -> None:
        self.bar.setRange(0, 1000)
        self.bar.setValue(0)
        self.bar.setFormat("not run")
        self.detail.setText(headline)
        self.message.setStyleSheet(ERROR_STYLE)
        self.message.setText(f"<b>{_html(headline)}</b><br>{_html(details).replace(chr(10), '<br>')}")
        self.message.show()

    def show_note(self, text: str) -> None:
        """A note that stays in the panel until the next run or error (not an error: caution colours)."""
        self.message.setStyleSheet(CAUTION_STYLE)
        self.message.setText(f"<b>Note:</b> {_html(text)}")
        self.message.show()

    def clear_error(self) -> None:
        self.message.hide()
        self.message.clear()
        self.message.setStyleSheet(ERROR_STYLE)


def _html(s: str) -> str:
    return s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
