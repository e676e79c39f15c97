"""Reading a finished run back from its folder (peaks.csv, history.csv, run.json, field.pvd)."""
from __future__ import annotations

import csv
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ModelError
from .vtkxml import read_pvd, read_vtu
from .writers import FIELD_NAME, SERIES_NAME


@dataclass
class FinishedRun:
    folder: Path
    info: dict  # run.json
    times: np.ndarray  # output times, s
    frame_files: list  # .vtu path per output time
    peaks: list  # peaks.csv rows as dicts (strings, as written)
    history_header: list
    history: np.ndarray  # (T, columns) floats
    _geometry: dict | None = field(default=None, repr=False)

    @property
    def model_dict(self) -> dict:
        return self.info.get("model", {})

    def geometry(self) -> dict:
        """points_mm (N, 3), tets (E, 4), part_id (E,) from the first frame."""
        if self._geometry is None:
            g = read_vtu(self.frame_files[0])
            self._geometry = {"points_mm": g["points"], "tets": g["tets"], "part_id": g["cell_data"].get("part_id")}
        return self._geometry

    def field(self, i: int) -> np.ndarray:
        """Temperature (N,) in °C at output ``i``."""
        return read_vtu(self.frame_files[i])["point_data"][FIELD_NAME]


def is_run_folder(path) -> bool:
    p = Path(path)
    return p.is_dir() and (p / "run.json").is_file() and (p / SERIES_NAME).is_file()


def load_run(folder) -> FinishedRun:
    """Open a results folder written by ``thermgui solve`` or the app; ModelError if it is not one."""
    folder = Path(folder)
    if not is_run_folder(folder):
        raise ModelError(("", "not a results folder (run.json and field.pvd are missing)"), str(folder))
    try:
        info = json.loads((folder / "run.json").read_text())
        series = read_pvd(folder / SERIES_NAME)
        with open(folder / "peaks.csv", newline="") as fh:
            peaks = list(csv.DictReader(fh))
        with open(folder / "history.csv", newline="") as fh:
            rows = list(csv.reader(fh))
    except (OSError, ValueError, json.JSONDecodeError) as e:
        raise ModelError(("", f"results folder is incomplete or damaged ({e})"), str(folder)) from None
    header, body = rows[0], rows[1:]
    history = np.array([[float(v) for v in r] for r in body]) if body else np.zeros((0, len(header)))
    times = np.array([t for t, _ in series])
    return FinishedRun(folder, info, times, [f for _, f in series], peaks, header, history)
