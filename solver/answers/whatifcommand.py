"""``thermgui whatif``: the model's mesh ladder, unit responses on its band's meshes, and the what-if's
peaks.csv and history.csv with every peak's error band (docs/one-solve-answers.md, section 3)."""
from __future__ import annotations

import math
import sys
import time
from pathlib import Path

from solver.errors import ModelError, SolveError
from solver.answers.whatif import check_whatif, model_digest, parse_scales
from solver.answers.whatifband import (LEVELS_CACHE, band_levels_for, evaluate_with_band, load_levels,
                                       rows_with_band, save_levels)


def whatif_to_folder(model_path, out_dir, scale_specs, ambient_offset=0.0, quiet=False, linear_solver="auto",
                     stream=None, err=None, tolerance_k="model") -> int:
    """``thermgui whatif``: the what-if's peaks.csv and history.csv, each peak with its error band.

    The model's mesh ladder runs first, as ``thermgui solve`` would run it (``tolerance_k``:
    "model" = the file's ``mesh.tolerance_k``, a number of kelvin, or None = the file's mesh with
    two finer ones for the band), no files written; the unit responses are then built on the meshes
    the run's bound came from and the what-if is evaluated on each, so its peaks carry the same kind
    of bound as a run's (:mod:`solver.answers.whatifband`). Unit responses and planes are stored in
    ``out_dir/unit-responses/`` and reused while the model (and tolerance) is unchanged."""
    from solver.caution import CAUTION
    from solver.run.cli import format_summary
    from solver.model.modelfile import load_model
    from solver.io.writers import write_history_csv, write_peaks_csv

    stream = stream if stream is not None else sys.stdout
    err = err if err is not None else sys.stderr
    say = (lambda m: None) if quiet else (lambda m: err.write(m + "\n"))
    t0 = time.perf_counter()
    try:
        if not math.isfinite(ambient_offset):
            raise ModelError(("--ambient-offset", "must be a finite number of kelvin"))
        model = load_model(model_path)
        check_whatif(model)
        scales = parse_scales(model, scale_specs)
        if tolerance_k != "model":
            if tolerance_k is not None and not (isinstance(tolerance_k, (int, float)) and math.isfinite(tolerance_k)
                                                and tolerance_k > 0):
                raise ModelError(("--tolerance", "must be a positive number of kelvin or none"))
            model.mesh.tolerance_k = tolerance_k
    except ModelError as e:
        err.write(e.with_source(e.source or str(model_path)).describe() + "\n")
        return 2
    out = Path(out_dir)
    digest = model_digest(model)
    cache = out / LEVELS_CACHE
    note = None
    try:
        levels = load_levels(cache, digest, model) if cache.exists() else None
        if levels is None:
            band, levels, note = band_levels_for(model, linear_solver, say)
            save_levels(cache, digest, band, levels)
        else:
            say(f"{model_path}: reusing stored unit responses in {cache}")
        t_eval = time.perf_counter()
        rec, bound = evaluate_with_band(levels, scales, ambient_offset)
        rows = rows_with_band(rec, bound)
        t_eval = time.perf_counter() - t_eval
        out.mkdir(parents=True, exist_ok=True)
        for name, writer in (("peaks.csv", lambda p: write_peaks_csv(p, rows)),
                             ("history.csv", lambda p: write_history_csv(p, rec))):
            tmp = out / (name + ".part")
            writer(tmp)
            tmp.replace(out / name)
    except ModelError as e:  # e.g. a mesh level refused before allocation (memory)
        err.write(e.with_source(e.source or str(model_path)).describe() + "\n")
        return 2
    except SolveError as e:
        err.write(f"{model_path}: what-if failed: {e}\n")
        return 1
    except OSError as e:
        err.write(f"{out_dir}: cannot write results ({e.strerror or e})\n")
        return 1
    problem = levels.problem
    for w in problem.warnings:
        say(f"warning: {w}")
    if note:
        say(f"warning: {note}")
    if not quiet:
        ur = levels.units[levels.reported]
        desc = ", ".join(f"{hl.part} ×{s:g}" for hl, s in zip(model.heat_loads, scales) if s != 1.0) or "loads as in the file"
        stream.write(f"what-if: {desc}; ambient {ambient_offset:+g} K\n")
        stream.write(format_summary(rows) + "\n")
        meshes = (f"on {len(levels.units)} meshes ({', '.join(f'{n:,}' for n in levels.nodes)} grid nodes; "
                  f"peaks from the {levels.problem.n_nodes:,}-node mesh)" if len(levels.units) > 1 else
                  "on the file's mesh only: no mesh error band")
        stream.write(f"evaluated in {t_eval:.2f} s from unit responses {meshes} (basis {ur.v.shape[1]} vectors, "
                     f"last change {levels.basis_change_k:.2g} K); results in {out_dir} "
                     f"({time.perf_counter() - t0:.1f} s)\n")
        stream.write(CAUTION + "\n")
    return 0
