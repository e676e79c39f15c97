"""The open model: a validated :class:`solver.model.modelfile.Model`, its file path and its undo history.

Edits arrive as new model dicts (see :mod:`thermgui.edits`); :meth:`ModelDocument.edit`
validates them with :func:`solver.model.modelfile.parse_model` and refuses an invalid one with the
:class:`~solver.errors.ModelError` naming the field, leaving the model unchanged. A valid
edit becomes one undoable :class:`~thermgui.commands.ModelEdit`. The document is "dirty"
when the undo stack is away from its saved state (or after a recovered session).
"""
from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QUndoStack

from solver.errors import ModelError
from solver.model.modelfile import Model, parse_model

from .commands import ModelEdit

BLANK_MODEL = {
    "format": "thermgui-model", "version": 1, "title": "untitled enclosure",
    "ambient_c": 25.0, "initial_c": 25.0,
    "parts": [{"name": "base plate", "material": "aluminium-6061", "origin_mm": [0.0, 0.0, 0.0],
               "size_mm": [100.0, 60.0, 3.0]}],
    "convection": [{"name": "plate surface", "part": "base plate", "side": "exposed", "h": 8.0}],
    "mesh": {"cell_mm": 3.0, "min_layers": 2},
    "run": {"duration_s": 600.0, "step_s": 2.0, "scheme": "crank-nicolson", "mass": "lumped",
            "output_every_s": 20.0},
}


def blank_model() -> Model:
    """The model a "New" document starts with: one plate (a model needs at least one part)."""
    return parse_model(BLANK_MODEL)


class ModelDocument(QObject):
    """Model + path + undo stack. Signals: ``changed`` after every model change,
    ``selectRequested(kind, index)`` to show the item an edit/undo touched (index -1: none),
    ``replaced`` after new/open/recover (after ``changed``), ``pathChanged``, ``dirtyChanged(bool)``."""

    changed = Signal()
    replaced = Signal()
    selectRequested = Signal(str, int)
    pathChanged = Signal()
    dirtyChanged = Signal(bool)

    def __init__(self, model: Model | None = None, path: Path | None = None, parent=None):
        super().__init__(parent)
        self.model: Model = model if model is not None else blank_model()
        self.path: Path | None = Path(path) if path else None
        self.undo_stack = QUndoStack(self)
        self._recovered = False
        self.template_name: str | None = None  # a bundled sample opened as an unsaved copy
        self.undo_stack.cleanChanged.connect(self._clean_changed)

    # ------------------------------------------------------------ state
    def _clean_changed(self, clean: bool) -> None:
        try:
            self.dirtyChanged.emit(self._recovered or not clean)
        except RuntimeError:  # the stack is being destroyed with the window
            pass

    @property
    def dirty(self) -> bool:
        return self._recovered or not self.undo_stack.isClean()

    def model_dict(self) -> dict:
        """A fresh JSON-ready copy of the model (mm, W, °C)."""
        return self.model.to_json_dict()

    @property
    def display_name(self) -> str:
        if self.path:
            return self.path.name
        return f"{self.template_name} (sample copy)" if self.template_name else "untitled"

    # ------------------------------------------------------------ editing
    @staticmethod
    def path_text(path: tuple) -> str:
        """A model-dict path as the model check names it: ("parts", 3, "size_mm", 2) -> parts[3].size_mm[2]."""
        out = ""
        for k in path:
            out += f"[{k}]" if isinstance(k, int) else (f".{k}" if out else str(k))
        return out

    def edit(self, new_dict: dict, text: str, select=None, select_before=None) -> Model:
        """Validate ``new_dict`` and push it as one undoable step; raise ModelError if invalid."""
        model = parse_model(new_dict)
        if model.to_json_dict() == self.model.to_json_dict():
            return self.model  # nothing changed: no empty undo step
        self.undo_stack.push(ModelEdit(self, self.model, model, text, select, select_before))
        return model

    def try_edit(self, new_dict: dict, text: str, report, select=None, select_before=None,
                 labels: dict | None = None) -> bool:
        """Like :meth:`edit`, but an invalid edit is reported through ``report(message)`` and refused.
        ``labels`` maps field paths (``parts[3].size_mm[2]``) to what the form calls them
        (``Size z``), so the message names the field the user typed into."""
        try:
            self.edit(new_dict, text, select, select_before)
            return True
        except ModelError as e:
            lines = [f"{(labels or {}).get(p, p)}: {m}" if p else m for p, m in e.issues]
            report(f"{text} refused, the model is unchanged.\n\n" + "\n".join(lines))
            self.changed.emit()  # let forms show the unchanged values again
            return False

    def _install(self, model: Model, select) -> None:
        self.model = model
        self.changed.emit()
        if select is not None:
            self.selectRequested.emit(select[0], select[1])

    # ------------------------------------------------------------ whole-document changes
    def reset(self, model: Model, path: Path | None, recovered: bool = False,
              template_name: str | None = None) -> None:
        """Start over with another model (new/open/recover): clears the undo history.
        ``template_name``: the model is an unsaved copy of that bundled sample."""
        self.undo_stack.clear()
        self.model = model
        self.path = Path(path) if path else None
        self.template_name = template_name if not path else None
        self._recovered = recovered
        self.undo_stack.setClean()
        self.pathChanged.emit()
        self.changed.emit()
        self.replaced.emit()
        self.dirtyChanged.emit(self.dirty)

    def mark_saved(self, path: Path) -> None:
        self.path = Path(path)
        self.template_name = None
        self._recovered = False
        self.undo_stack.setClean()
        self.pathChanged.emit()
        self.dirtyChanged.emit(False)
