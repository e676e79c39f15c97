"""Engine errors as readable text, and the model item a field path points at (Qt-free)."""
from __future__ import annotations

import re

from solver.errors import Cancelled, ModelError, SolveError

# Item groups of the model file, as used for ``(kind, index)`` by the item tree.
ITEM_KINDS = ("parts", "heat_loads", "convection", "surface_loads", "contacts", "air_volumes", "probes")
STUDY_KEYS = ("run", "mesh", "ambient_c", "initial_c", "title")
_ITEM = re.compile(r"^(" + "|".join(ITEM_KINDS) + r")\[(\d+)\]")


def item_for_path(path: str) -> tuple[str, int] | None:
    """``'parts[3].size_mm[2]'`` → ``('parts', 3)``; ``'run.step_s'`` → ``('study', 0)``; else None."""
    m = _ITEM.match(path or "")
    if m:
        return m.group(1), int(m.group(2))
    head = re.split(r"[.\[]", path or "", maxsplit=1)[0]
    if head in STUDY_KEYS:
        return "study", 0
    return None


def describe_error(err: BaseException) -> tuple[str, str]:
    """(headline, details) for an error raised while preparing or running a study."""
    if isinstance(err, ModelError):
        lines = [f"{p}: {m}" if p and p != "--out" else m for p, m in err.issues]  # --out: the folder is named
        return "The model cannot be run as it is.", "\n".join(lines)
    if isinstance(err, Cancelled):
        return "Run stopped.", str(err)
    if isinstance(err, SolveError):
        return "The solution could not continue.", str(err)
    if isinstance(err, MemoryError):
        return "Not enough memory for this mesh.", "Choose a larger cell size (mesh.cell_mm) or fewer layers."
    if isinstance(err, OSError):
        return "The results could not be written.", f"{getattr(err, 'filename', '') or ''} {err.strerror or err}".strip()
    return "The run failed unexpectedly.", f"{type(err).__name__}: {err}"
