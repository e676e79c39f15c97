"""Reading a finished run back from its folder (peaks.csv, history.csv, run.json and the field:
field.vtkhdf, or field.pvd + field/*.vtu from runs written before it; none after ``--fields none``)."""
from __future__ import annotations

import csv
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ModelError
from .fieldseries import FieldSeries, has_fields, open_field_series


@dataclass
class FinishedRun:
    folder: Path
    info: dict  # run.json
    times: np.ndarray  # output times of the field frames, s
    series: FieldSeries | None  # the field frames (None: the run wrote no fields)
    peaks: list  # peaks.csv rows as dicts (strings, as written)
    history_header: list
    history: np.ndarray  # (T, columns) floats
    _geometry: dict | None = field(default=None, repr=False)

    @property
    def model_dict(self) -> dict:
        return self.info.get("model", {})

    @property
    def has_fields(self) -> bool:
        return self.series is not None and len(self.series) > 0

    def geometry(self) -> dict:
        """points_mm (N, 3), tets (E, 4), part_id (E,) of the field's mesh."""
        if self._geometry is None:
            self._geometry = self.series.geometry()
        return self._geometry

    def field(self, i: int) -> np.ndarray:
        """Temperature (N,) in °C at output ``i``."""
        return self.series.field(i)


def is_run_folder(path) -> bool:
    p = Path(path)
    return p.is_dir() and (p / "run.json").is_file() and (has_fields(p) or (p / "peaks.csv").is_file())


def load_run(folder) -> FinishedRun:
    """Open a results folder written by ``thermgui solve`` or the app; ModelError if it is not one."""
    folder = Path(folder)
    if not is_run_folder(folder):
        raise ModelError(("", "not a results folder (run.json, peaks.csv and the field file are missing)"),
                         str(folder))
    try:
        info = json.loads((folder / "run.json").read_text())
        series = open_field_series(folder)
        with open(folder / "peaks.csv", newline="") as fh:
            peaks = list(csv.DictReader(fh))
        with open(folder / "history.csv", newline="") as fh:
            rows = list(csv.reader(fh))
    except (OSError, ValueError, KeyError, json.JSONDecodeError) as e:
        raise ModelError(("", f"results folder is incomplete or damaged ({e})"), str(folder)) from None
    header, body = rows[0], rows[1:]
    history = np.array([[float(v) for v in r] for r in body]) if body else np.zeros((0, len(header)))
    times = series.times if series is not None else np.zeros(0)
    return FinishedRun(folder, info, times, series, peaks, header, history)
