"""Undo commands: every change to the model is one :class:`ModelEdit` on the document's QUndoStack.

A command holds the validated model before and after the edit (models are small, so whole
snapshots keep undo exact and simple) and the item to select after redo and after undo.
"""
from __future__ import annotations

from PySide6.QtGui import QUndoCommand

Selection = tuple  # (kind, index) or None


class ModelEdit(QUndoCommand):
    """Replace the document's model by ``after``; undo restores ``before``."""

    def __init__(self, document, before, after, text: str,
                 select_after: Selection | None = None, select_before: Selection | None = None):
        super().__init__(text)
        self._doc = document
        self.before = before
        self.after = after
        self.select_after = select_after
        self.select_before = select_before

    def redo(self):
        self._doc._install(self.after, self.select_after)

    def undo(self):
        self._doc._install(self.before, self.select_before)
