"""Questions and messages to the user, behind one small object so tests can script the answers.

The window calls ``prompts.error(...)``, ``prompts.ask(...)``, ``prompts.open_path(...)`` etc.;
:class:`DialogPrompts` shows the standard QMessageBox / QFileDialog, a test passes its own object.
"""
from __future__ import annotations

from PySide6.QtWidgets import QFileDialog, QMessageBox

MODEL_FILTER = "Model files (*.json);;All files (*)"


class DialogPrompts:
    """Standard dialogs parented to ``parent``."""

    def __init__(self, parent=None):
        self.parent = parent

    def error(self, title: str, text: str) -> None:
        QMessageBox.warning(self.parent, title, text)

    def info(self, title: str, text: str) -> None:
        QMessageBox.information(self.parent, title, text)

    def ask(self, title: str, text: str, choices=("yes", "no")) -> str:
        """Return one of ``choices`` ("save", "discard", "cancel", "yes", "no")."""
        buttons = {"save": QMessageBox.Save, "discard": QMessageBox.Discard, "cancel": QMessageBox.Cancel,
                   "yes": QMessageBox.Yes, "no": QMessageBox.No}
        flags = QMessageBox.NoButton
        for c in choices:
            flags |= buttons[c]
        answer = QMessageBox.question(self.parent, title, text, flags, buttons[choices[0]])
        for c in choices:
            if answer == buttons[c]:
                return c
        return choices[-1]

    def open_path(self, title: str, start: str = "") -> str:
        path, _ = QFileDialog.getOpenFileName(self.parent, title, start, MODEL_FILTER)
        return path

    def save_path(self, title: str, start: str = "") -> str:
        path, _ = QFileDialog.getSaveFileName(self.parent, title, start, MODEL_FILTER)
        if path and not path.lower().endswith(".json"):
            path += ".json"
        return path

    def image_path(self, title: str, start: str = "") -> str:
        path, _ = QFileDialog.getSaveFileName(self.parent, title, start, "PNG images (*.png)")
        if path and not path.lower().endswith(".png"):
            path += ".png"
        return path

    def file_path(self, title: str, start: str = "", filter_text: str = "All files (*)", suffix: str = "") -> str:
        """A file to write (``start``: suggested full path); ``suffix`` is added when missing."""
        path, _ = QFileDialog.getSaveFileName(self.parent, title, start, filter_text)
        if path and suffix and not path.lower().endswith(suffix):
            path += suffix
        return path

    def folder_path(self, title: str, start: str = "") -> str:
        """A folder to write into (``start``: where the dialog opens)."""
        return QFileDialog.getExistingDirectory(self.parent, title, start)
