"""Shared test fixtures (owned by the engine; GUI fixtures live in tests/gui/conftest.py)."""
from __future__ import annotations

import copy
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "samples"


def minimal_model_dict(**overrides) -> dict:
    """A one-part model dict (a 10 mm aluminium cube) to modify in tests."""
    d = {
        "format": "thermgui-model", "version": 1, "title": "test cube",
        "parts": [{"name": "cube", "material": "aluminium-6061", "origin_mm": [0, 0, 0], "size_mm": [10, 10, 10],
                   "rated_c": 100.0}],
        "heat_loads": [{"part": "cube", "profile": {"type": "constant", "value": 1.0}}],
        "convection": [{"name": "all", "part": "cube", "side": "exposed", "h": 10.0}],
        "mesh": {"cell_mm": 5.0, "min_layers": 2},
        "run": {"duration_s": 10.0, "step_s": 1.0, "scheme": "backward-euler", "mass": "lumped",
                "output_every_s": 5.0},
    }
    d.update(copy.deepcopy(overrides))
    return d


@pytest.fixture
def minimal_model():
    return minimal_model_dict()


@pytest.fixture
def samples_dir() -> Path:
    return SAMPLES
