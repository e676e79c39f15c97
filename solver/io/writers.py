"""Output files of a run: peaks.csv, history.csv and run.json (the field: :mod:`solver.io.fieldseries`)."""
from __future__ import annotations

import csv
import dataclasses
import json
from pathlib import Path

from solver.results.recorder import PEAK_COLUMNS, RunRecorder
from solver.io.fieldseries import FIELD_FILE, FIELD_NAME  # noqa: F401 (FIELD_NAME re-exported)


def write_peaks_csv(path, rows) -> None:
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(PEAK_COLUMNS)
        for r in rows:
            w.writerow(r.as_csv_row())


def history_header(model) -> list[str]:
    return (["time_s"] + [f"max:{p.name}" for p in model.parts] + [f"probe:{p.name}" for p in model.probes]
            + [f"air:{a.name}" for a in getattr(model, "air_volumes", [])])


def write_history_csv(path, recorder: RunRecorder) -> None:
    times, pmax, probes = recorder.history_arrays()
    air = recorder.air_history_array()
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(history_header(recorder.problem.model))
        for i, t in enumerate(times):
            w.writerow([f"{t:.12g}"] + [f"{v:.4f}" for v in pmax[i]] + [f"{v:.4f}" for v in probes[i]]
                       + [f"{v:.4f}" for v in air[i]])


def write_run_info(path, problem, recorder: RunRecorder, stepper, wall_s: float, accuracy: dict | None = None,
                   field_files=None, field_write_s: float | None = None) -> None:
    """run.json: what was solved, how, and the energy balance (for the record and the app)."""
    info = {
        "format": "thermgui-run", "version": 1,
        "model": problem.model.to_json_dict(),
        "mesh": {"nodes": int(problem.mesh.n_nodes), "tetrahedra": int(problem.mesh.n_tets),
                 "planes": [len(l) for l in problem.mesh.lines]},
        "solver": {"method": stepper.method, "method_requested": stepper.method_choice.requested,
                   "method_reason": stepper.method_choice.reason, "scheme": stepper.scheme,
                   "theta": stepper.theta if stepper.method == "full" else None, "steps": stepper.n_steps,
                   "factorizations": stepper.factorizations, "linear_solver": stepper.choice.method,
                   "linear_solver_reason": stepper.choice.reason, "critical_step_s": stepper.critical_step_s,
                   "radiation_iterations": getattr(stepper, "newton", None),
                   "reduced": (dataclasses.asdict(stepper.reduced_info)
                               if getattr(stepper, "reduced_info", None) is not None else None)},
        "energy": dict(recorder.energy, relative_residual=recorder.relative_energy_residual),
        "warnings": list(problem.warnings),
        "units": {"length": "mm", "temperature": "degC", "time": "s"},
        "wall_time_s": wall_s,
        "accuracy": accuracy,
        "field_write_s": field_write_s,  # wall time of the field writer thread (beside the stepping)
        "field_series": (field_files[0] if field_files else None) if field_files is not None else FIELD_FILE,
        "part_names": [p.name for p in problem.model.parts],
        "air_volumes": ([{"name": n, "volume_mm3": float(v) * 1e9, "volume_from_enclosure": bool(c),
                          "heat_capacity_j_k": float(cap), "exchange_w_k": float(ha)}
                         for n, v, c, cap, ha in zip(problem.air.names, problem.air.volume_m3,
                                                     problem.air.computed_volume, problem.air.capacity_j_k,
                                                     problem.air.ha_w_k)]
                        if getattr(problem, "air", None) is not None else []),
    }
    Path(path).write_text(json.dumps(info, indent=2, default=float) + "\n")
