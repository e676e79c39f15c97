"""Sweep task wrappers for tests that run on Dask workers (importable by the worker processes)."""
from __future__ import annotations

import os
from pathlib import Path

from solver.answers.sweep import run_group


def dies_once(marker: str):
    """A task that kills its own worker process the first time it runs (``marker`` file absent)."""
    def task(model_dict, structural, combos, linear_solver="auto", tolerance_k="model"):
        m = Path(marker)
        if not m.exists():
            m.write_text(str(os.getpid()))
            os._exit(1)  # the worker process dies mid-task, as a crashed machine would
        return run_group(model_dict, structural, combos, linear_solver, tolerance_k)
    return task
