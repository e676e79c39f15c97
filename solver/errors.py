"""Error types raised by the solver library.

Every problem with user input is a :class:`ModelError` that names the file (if any),
the field path (for example ``parts[3].size_mm[2]``) and the problem in plain words.
"""
from __future__ import annotations


class ModelError(ValueError):
    """Invalid model input. ``issues`` is a list of ``(field_path, message)`` pairs."""

    def __init__(self, issues, source: str | None = None):
        if isinstance(issues, tuple):
            issues = [issues]
        self.issues = [(str(p), str(m)) for p, m in issues]
        self.source = source
        super().__init__(self.describe())

    def describe(self) -> str:
        head = f"{self.source}: " if self.source else ""
        lines = [f"{head}{path}: {msg}" if path else f"{head}{msg}" for path, msg in self.issues]
        return "\n".join(lines)

    def with_source(self, source: str) -> "ModelError":
        return ModelError(self.issues, source)

    @property
    def first_path(self) -> str:
        return self.issues[0][0] if self.issues else ""


class SolveError(RuntimeError):
    """The numerical solution could not continue (non-finite values, solver failure)."""


class Cancelled(RuntimeError):
    """The run was cancelled by the caller between two steps."""
