"""Helpers shared by the GUI tests: paths and a scripted stand-in for the app's dialogs."""
from __future__ import annotations

from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
SAMPLE = ROOT / "samples" / "outdoor_radio_box.json"
ARTIFACTS = ROOT / "tests" / "_artifacts"


class ScriptedPrompts:
    """Stands in for thermgui.prompts.DialogPrompts: records messages, answers from queues."""

    def __init__(self):
        self.messages: list[tuple[str, str, str]] = []  # (kind, title, text)
        self.answers: list[str] = []  # for ask(); empty -> the last choice (cancel / no)
        self.paths: list[str] = []  # for open_path / save_path / image_path; empty -> ""

    def error(self, title, text):
        self.messages.append(("error", title, text))

    def info(self, title, text):
        self.messages.append(("info", title, text))

    def ask(self, title, text, choices=("yes", "no")):
        self.messages.append(("ask", title, text))
        return self.answers.pop(0) if self.answers else choices[-1]

    def _path(self, title, start=""):
        self.messages.append(("path", title, start))
        return self.paths.pop(0) if self.paths else ""

    open_path = save_path = image_path = folder_path = _path

    def file_path(self, title, start="", filter_text="", suffix=""):
        return self._path(title, start)

    def errors(self) -> list[str]:
        return [t for k, _, t in self.messages if k == "error"]
