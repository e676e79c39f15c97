"""Where the bundled sample models are, and which one the app opens first."""
from __future__ import annotations

from pathlib import Path

SAMPLES_DIR = Path(__file__).resolve().parent.parent / "samples"
DEFAULT_SAMPLE = "outdoor_radio_box.json"


def default_sample() -> Path:
    return SAMPLES_DIR / DEFAULT_SAMPLE
