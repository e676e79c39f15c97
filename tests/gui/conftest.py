"""Shared GUI fixtures: a main window on a copy of the default sample, with scripted dialogs.

Dialogs never block: the window's ``prompts`` is a :class:`ScriptedPrompts` that records
every message and answers from a queue, and any stray QMessageBox / QFileDialog call is
recorded and answered "cancel" instead of waiting for a click.
"""
from __future__ import annotations

import gc
import shutil
from pathlib import Path

import pytest

from .guikit import ARTIFACTS, SAMPLE, ScriptedPrompts  # noqa: F401  (re-exported for tests)


@pytest.fixture(autouse=True)
def no_blocking_dialogs(monkeypatch):
    """Record any QMessageBox / QFileDialog static call instead of showing a modal dialog."""
    from PySide6.QtWidgets import QFileDialog, QMessageBox

    seen = []

    def box(kind):
        def f(parent, title, text, *a, **k):
            seen.append((kind, title, text))
            return QMessageBox.Cancel
        return f

    for kind in ("warning", "information", "critical", "question"):
        monkeypatch.setattr(QMessageBox, kind, staticmethod(box(kind)))
    monkeypatch.setattr(QFileDialog, "getOpenFileName", staticmethod(lambda *a, **k: ("", "")))
    monkeypatch.setattr(QFileDialog, "getSaveFileName", staticmethod(lambda *a, **k: ("", "")))
    monkeypatch.setattr(QFileDialog, "getExistingDirectory", staticmethod(lambda *a, **k: ""))
    return seen


@pytest.fixture
def gui_state(tmp_path, monkeypatch) -> Path:
    """A private folder for settings and recovery files (THERMGUI_STATE_DIR)."""
    d = tmp_path / "state"
    d.mkdir()
    monkeypatch.setenv("THERMGUI_STATE_DIR", str(d))
    return d


@pytest.fixture
def sample_copy(tmp_path) -> Path:
    p = tmp_path / "models" / SAMPLE.name
    p.parent.mkdir()
    shutil.copy(SAMPLE, p)
    return p


@pytest.fixture
def open_main_window(qtbot, gui_state):
    """Factory: ``open_main_window(path)`` -> a shown MainWindow with scripted prompts
    (``window.prompts``), auto_update=False, no autosave timer; closed cleanly afterwards."""
    import pyvista as pv

    from thermgui.app import open_window

    pv.global_theme.multi_samples = 0
    made = []

    def make(path=None, prompts=None, **kw):
        kw.setdefault("autosave_s", 0)
        kw.setdefault("size", (1360, 840))  # a fixed size for the tests of other things (first start: test_first_start)
        gc.collect()  # earlier tests' windows are freed here, on the main thread, not by a run's worker thread
        w = open_window(path, prompts=prompts or ScriptedPrompts(), auto_update=False, **kw)
        qtbot.addWidget(w)
        qtbot.waitExposed(w)
        made.append(w)
        return w

    yield make
    for w in made:
        w.shutdown()  # releases the render window; later closeEvent just accepts


@pytest.fixture
def main_window(open_main_window, sample_copy):
    """The main window on a fresh copy of the default sample."""
    return open_main_window(sample_copy)


@pytest.fixture
def artifacts() -> Path:
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    return ARTIFACTS
