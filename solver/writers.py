"""Output files of a run: peaks.csv, history.csv, the field series (.pvd + .vtu) and run.json."""
from __future__ import annotations

import csv
import dataclasses
import json
from pathlib import Path

import numpy as np

from .mesh import MM
from .results import PEAK_COLUMNS, RunRecorder
from .vtkxml import write_pvd, write_vtu

FIELD_NAME = "temperature_c"
SERIES_NAME = "field.pvd"
FRAME_DIR = "field"


def write_peaks_csv(path, rows) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(PEAK_COLUMNS)
        for r in rows:
            w.writerow(r.as_csv_row())


def history_header(model) -> list[str]:
    return ["time_s"] + [f"max:{p.name}" for p in model.parts] + [f"probe:{p.name}" for p in model.probes]


def write_history_csv(path, recorder: RunRecorder) -> None:
    times, pmax, probes = recorder.history_arrays()
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(history_header(recorder.problem.model))
        for i, t in enumerate(times):
            w.writerow([f"{t:.12g}"] + [f"{v:.4f}" for v in pmax[i]] + [f"{v:.4f}" for v in probes[i]])


class FieldSeriesWriter:
    """Writes one .vtu per output time as it arrives, and the .pvd index at :meth:`close`."""

    def __init__(self, out_dir, problem):
        self.out_dir = Path(out_dir)
        (self.out_dir / FRAME_DIR).mkdir(parents=True, exist_ok=True)
        self.points_mm = problem.mesh.nodes / MM
        self.tets = problem.mesh.tets
        self.part_id = problem.mesh.tet_part.astype(np.int32)
        self.entries = []

    def __call__(self, time_s: float, field: np.ndarray) -> None:
        name = f"{FRAME_DIR}/t_{len(self.entries):05d}.vtu"
        write_vtu(self.out_dir / name, self.points_mm, self.tets,
                  {FIELD_NAME: np.asarray(field, dtype=np.float32)}, {"part_id": self.part_id}, time_s)
        self.entries.append((float(time_s), name))

    def close(self) -> None:
        write_pvd(self.out_dir / SERIES_NAME, self.entries)

    def written_files(self) -> list[str]:
        """Every file this writer wrote, relative to its folder (for the results manifest)."""
        return [name for _, name in self.entries] + [SERIES_NAME]


def write_run_info(path, problem, recorder: RunRecorder, stepper, wall_s: float, accuracy: dict | None = None) -> None:
    """run.json: what was solved, how, and the energy balance (for the record and the app)."""
    info = {
        "format": "thermgui-run", "version": 1,
        "model": problem.model.to_json_dict(),
        "mesh": {"nodes": int(problem.n_nodes), "tetrahedra": int(problem.mesh.n_tets),
                 "planes": [len(l) for l in problem.mesh.lines]},
        "solver": {"method": stepper.method, "scheme": stepper.scheme,
                   "theta": stepper.theta if stepper.method == "full" else None, "steps": stepper.n_steps,
                   "factorizations": stepper.factorizations, "linear_solver": stepper.choice.method,
                   "linear_solver_reason": stepper.choice.reason, "critical_step_s": stepper.critical_step_s,
                   "reduced": (dataclasses.asdict(stepper.reduced_info)
                               if getattr(stepper, "reduced_info", None) is not None else None)},
        "energy": dict(recorder.energy, relative_residual=recorder.relative_energy_residual),
        "warnings": list(problem.warnings),
        "units": {"length": "mm", "temperature": "degC", "time": "s"},
        "wall_time_s": wall_s,
        "accuracy": accuracy,
        "field_series": SERIES_NAME,
        "part_names": [p.name for p in problem.model.parts],
    }
    Path(path).write_text(json.dumps(info, indent=2, default=float) + "\n")
