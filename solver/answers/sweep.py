"""Sweeps and worst-case corners: ``thermgui sweep SWEEP.json --out DIR``, cases run on Dask.

Sweep file (JSON, our own format)::

    {"format": "thermgui-sweep", "version": 1,
     "model": "enclosure.json",                  # relative to the sweep file
     "variables": [
        {"field": "heat_loads[0].scale", "values": [0.9, 1.0, 1.1]},     # factor on that load's watts
        {"field": "ambient_offset_k", "range": [-5, 10], "steps": 4},     # K added to every ambient
        {"field": "convection[0].h", "values": [6, 10]},                  # any number in the model file
        {"field": "parts[1].size_mm[2]", "factors": [0.8, 1.2]}           # × the file's value
     ]}

Every combination of the variables' values is a case (full factorial; two values per variable
gives the corners). ``heat_loads[i].scale``, ``ambient_offset_k``, and the watts of a constant or
step load or the model's ``ambient_c`` where they amount to a scale or an offset
(:func:`superposed_form`), are superposed from unit responses (:mod:`solver.answers.whatif`); cases that
differ only in them share one solve. Any other field
is written into the model, and each distinct set of such values is one task (one solve and its
unit responses) on the Dask scheduler: a ``LocalCluster`` by default, or an existing scheduler
with ``--scheduler ADDRESS``. The scheduler reruns a task whose worker dies. Nothing is written
before every case is in: ``cases.csv`` (one row per case and part), ``worst.csv`` (each part's
worst case) and ``margin.png`` (margin against each swept variable).
"""
from __future__ import annotations

import copy
import csv
import io
import itertools
import json
import math
import os
import re
import sys
import time
from pathlib import Path

import numpy as np

from solver.errors import ModelError, SolveError

SWEEP_FORMAT = "thermgui-sweep"
SUPERPOSED_SCALE = re.compile(r"^heat_loads\[(\d+)\]\.scale$")
AMBIENT_OFFSET = "ambient_offset_k"
MAX_CASES = 10000
CONNECT_TIMEOUT_S = 8.0
CASE_COLUMNS = ["case", "part", "rated_c", "peak_c", "peak_error_k", "peak_time_s", "margin_k", "status",
                "basis_error_k"]

_PATH_TOKEN = re.compile(r"([^.\[\]]+)|\[(\d+)\]")


def _split(path: str):
    out = []
    for m in _PATH_TOKEN.finditer(path):
        out.append(int(m.group(2)) if m.group(2) is not None else m.group(1))
    return out


def _get(d, keys):
    for k in keys:
        if isinstance(k, int):
            if not isinstance(d, list) or not 0 <= k < len(d):
                raise KeyError
        elif not isinstance(d, dict) or k not in d:
            raise KeyError
        d = d[k]
    return d


def _set(d, keys, value):
    for k in keys[:-1]:
        d = d[k]
    d[keys[-1]] = value


def read_sweep(path):
    """(model dict, model path, variables [(field, values)]) or a ModelError naming the field."""
    path = Path(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except OSError as e:
        raise ModelError(("", f"cannot read the sweep file ({e.strerror or e})"), str(path))
    except json.JSONDecodeError as e:
        raise ModelError(("", f"not valid JSON: {e.msg} at line {e.lineno}"), str(path))
    if not isinstance(doc, dict):
        raise ModelError(("", "the sweep file must hold a JSON object"), str(path))
    issues = []
    for k in doc:
        if k not in ("format", "version", "model", "variables", "title"):
            issues.append((k, "unknown key"))
    if doc.get("format") != SWEEP_FORMAT:
        issues.append(("format", f"must be \"{SWEEP_FORMAT}\""))
    if doc.get("version") != 1:
        issues.append(("version", "must be 1"))
    if not isinstance(doc.get("model"), str):
        issues.append(("model", "must name the model file (a path relative to the sweep file)"))
    if issues:
        raise ModelError(issues, str(path))
    model_path = (path.parent / doc["model"]).resolve()
    try:
        model_dict = json.loads(model_path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as e:
        raise ModelError(("model", f"cannot read the model file {model_path} ({e})"), str(path))
    variables = doc.get("variables")
    if not isinstance(variables, list) or not variables:
        raise ModelError(("variables", "must be a non-empty list"), str(path))
    out = []
    for i, var in enumerate(variables):
        where = f"variables[{i}]"
        if not isinstance(var, dict):
            issues.append((where, "must be an object with field and values, range or factors"))
            continue
        extra = set(var) - {"field", "values", "range", "steps", "factors"}
        for k in sorted(extra):
            issues.append((f"{where}.{k}", "unknown key"))
        field = var.get("field")
        if not isinstance(field, str):
            issues.append((f"{where}.field", "must be a field path such as \"convection[0].h\""))
            continue
        base = None
        if SUPERPOSED_SCALE.match(field):
            j = int(SUPERPOSED_SCALE.match(field).group(1))
            if j >= len(model_dict.get("heat_loads", [])):
                issues.append((f"{where}.field", f"{field!r}: the model has no heat_loads[{j}]"))
                continue
            base = 1.0
        elif field == AMBIENT_OFFSET:
            base = 0.0
        else:
            try:
                base = _get(model_dict, _split(field))
            except KeyError:
                issues.append((f"{where}.field", f"{field!r} names no field of the model file"))
                continue
            if isinstance(base, bool) or not isinstance(base, (int, float)):
                issues.append((f"{where}.field", f"{field!r} is not a number in the model file"))
                continue
        kinds = [k for k in ("values", "range", "factors") if k in var]
        if len(kinds) != 1:
            issues.append((where, "give exactly one of values, range (with steps) or factors"))
            continue
        kind = kinds[0]
        raw = var[kind]
        if not isinstance(raw, list) or not raw or not all(
                isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in raw):
            issues.append((f"{where}.{kind}", "must be a non-empty list of finite numbers"))
            continue
        if kind == "range":
            steps = var.get("steps", 2)
            if len(raw) != 2 or not isinstance(steps, int) or steps < 1 or (steps == 1 and raw[0] != raw[1]):
                issues.append((f"{where}.range", "must be [low, high] with steps ≥ 2 (or steps 1 and low = high)"))
                continue
            if raw[1] < raw[0]:
                issues.append((f"{where}.range", f"empty range: high ({raw[1]:g}) is below low ({raw[0]:g})"))
                continue
            vals = list(np.linspace(raw[0], raw[1], steps))
        elif kind == "factors":
            vals = [base * f for f in raw]
        else:
            vals = list(raw)
        out.append((field, [float(v) for v in vals]))
    if issues:
        raise ModelError(issues, str(path))
    n = int(np.prod([len(v) for _, v in out]))
    if n > MAX_CASES:
        raise ModelError(("variables", f"{n:,} cases; at most {MAX_CASES:,}"), str(path))
    return model_dict, model_path, out


def make_cases(variables):
    """List of dicts field -> value, the full factorial, in a fixed order."""
    fields = [f for f, _ in variables]
    return [dict(zip(fields, combo)) for combo in itertools.product(*[v for _, v in variables])]


_PROFILE_VALUE = re.compile(r"^heat_loads\[(\d+)\]\.profile\.value$")


def superposed_form(model_dict: dict, field: str, value: float):
    """("scale", load index, factor) or ("offset", None, K) when the variation can be superposed
    from unit responses, else None (the value is written into the model and solved).

    Superposed: ``heat_loads[i].scale``; ``ambient_offset_k``; ``heat_loads[i].profile.value`` of a
    constant or step load whose file value is not 0 (a factor value/file value); ``ambient_c`` when
    no convection entry has its own ambient (an offset from the file's value)."""
    m = SUPERPOSED_SCALE.match(field)
    if m:
        return ("scale", int(m.group(1)), float(value))
    if field == AMBIENT_OFFSET:
        return ("offset", None, float(value))
    m = _PROFILE_VALUE.match(field)
    if m:
        prof = model_dict["heat_loads"][int(m.group(1))]["profile"]
        base = prof.get("value")
        if prof.get("type") in ("constant", "step") and isinstance(base, (int, float)) and base != 0:
            return ("scale", int(m.group(1)), float(value) / float(base))
    if field == "ambient_c" and all(c.get("ambient_c") is None for c in model_dict.get("convection", [])):
        return ("offset", None, float(value) - float(model_dict.get("ambient_c", 25.0)))
    return None


def split_case(model_dict: dict, case: dict):
    """(structural ((field, value), ...), superposed {"scales": {i: factor}, "offset": K})."""
    structural, scales, offset = [], {}, 0.0
    for field, value in case.items():
        form = superposed_form(model_dict, field, value)
        if form is None:
            structural.append((field, value))
        elif form[0] == "scale":
            scales[form[1]] = scales.get(form[1], 1.0) * form[2]
        else:
            offset += form[2]
    return tuple(structural), {"scales": scales, "offset": offset}


def group_cases(cases, model_dict: dict):
    """[(structural values tuple, [case indices])] in first-appearance order."""
    groups: dict = {}
    for i, c in enumerate(cases):
        groups.setdefault(split_case(model_dict, c)[0], []).append(i)
    return list(groups.items())


def run_group(model_dict: dict, structural, combos, linear_solver: str = "auto", tolerance_k="model"):
    """One task: the model with ``structural`` values written in, its mesh ladder as ``thermgui
    solve`` runs it (``tolerance_k``: "model" = the file's ``mesh.tolerance_k``, a number, or None =
    the file's mesh with two finer ones for the band), unit responses on the band's meshes, then
    every superposed combination, each peak with its band (:mod:`solver.answers.whatifband`).
    Returns [(rows as dicts, basis error K)] per combo."""
    from solver.model.modelfile import parse_model
    from solver.answers.whatifband import band_levels_for, evaluate_with_band, rows_with_band

    d = copy.deepcopy(model_dict)
    for field, value in structural:
        _set(d, _split(field), value)
    if tolerance_k != "model":
        d.setdefault("mesh", {})["tolerance_k"] = tolerance_k
    model = parse_model(d)
    _, levels, _ = band_levels_for(model, linear_solver)
    out = []
    for combo in combos:
        scales = np.ones(len(model.heat_loads))
        for i, factor in combo["scales"].items():
            scales[i] = factor
        rec, bound = evaluate_with_band(levels, scales, combo["offset"])
        rows = rows_with_band(rec, bound)
        out.append(([{"part": r.part, "rated_c": r.rated_c, "peak_c": r.peak_c, "peak_error_k": r.peak_error_k,
                      "peak_time_s": r.peak_time_s, "margin_k": r.margin_k, "status": r.status} for r in rows],
                    float(levels.basis_change_k)))
    return out


def _validate_structural(model_dict, cases, source):
    """Every distinct structural case must be a valid model: ModelError naming case and field."""
    from solver.model.modelfile import parse_model

    for key, idx in group_cases(cases, model_dict):
        d = copy.deepcopy(model_dict)
        for field, value in key:
            _set(d, _split(field), value)
        try:
            parse_model(d)
        except ModelError as e:
            vals = ", ".join(f"{f} = {v:g}" for f, v in key)
            raise ModelError([(p, f"{m} (in case {idx[0]}: {vals})") for p, m in e.issues], source)


def run_sweep(model_dict, cases, client=None, progress=None, task=None, tolerance_k="model"):
    """Results per case [(rows, basis error)], computed on ``client`` (a dask.distributed Client) or
    serially in this process when ``client`` is None. ``task`` replaces :func:`run_group` (tests);
    ``tolerance_k`` is handed to it (see :func:`run_group`)."""
    task = task or run_group
    groups = group_cases(cases, model_dict)
    sup = [split_case(model_dict, c)[1] for c in cases]
    results = [None] * len(cases)
    done = 0
    if client is None:
        for key, idx in groups:
            for i, res in zip(idx, task(model_dict, key, [sup[i] for i in idx], tolerance_k=tolerance_k)):
                results[i] = res
            done += len(idx)
            if progress:
                progress(done, len(cases))
        return results
    from distributed import as_completed

    futures = {}
    for gi, (key, idx) in enumerate(groups):
        fut = client.submit(task, model_dict, key, [sup[i] for i in idx], tolerance_k=tolerance_k, pure=False,
                            key=f"sweep-group-{gi}-{os.getpid()}-{time.time_ns()}")
        futures[fut] = idx
    for fut in as_completed(list(futures)):
        idx = futures[fut]
        for i, res in zip(idx, fut.result()):
            results[i] = res
        done += len(idx)
        if progress:
            progress(done, len(cases))
    return results


def _num(v, fmt="{:.3f}"):
    return "" if v is None or (isinstance(v, float) and not math.isfinite(v)) else fmt.format(v)


def write_outputs(out_dir, variables, cases, results) -> None:
    """cases.csv, worst.csv and margin.png, each written whole then moved into place."""
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    fields = [f for f, _ in variables]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["case"] + fields + CASE_COLUMNS[1:])
    flat = []
    for ci, (case, (rows, err)) in enumerate(zip(cases, results)):
        for r in rows:
            flat.append((ci, case, r, err))
            w.writerow([ci] + [f"{case[f]:.6g}" for f in fields] +
                       [r["part"], _num(r["rated_c"], "{:.12g}"), _num(r["peak_c"]), _num(r.get("peak_error_k")),
                        _num(r["peak_time_s"], "{:.12g}"), _num(r["margin_k"]), r["status"], _num(err, "{:.2g}")])
    _replace(out / "cases.csv", buf.getvalue())
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["part", "worst_case", "peak_c", "peak_error_k", "margin_k", "status"] + fields)
    parts = list(dict.fromkeys(r["part"] for _, _, r, _ in flat))
    for part in parts:
        mine = [x for x in flat if x[2]["part"] == part]
        rated = [x for x in mine if x[2]["margin_k"] is not None]
        ci, case, r, _ = (min(rated, key=lambda x: x[2]["margin_k"]) if rated
                          else max(mine, key=lambda x: x[2]["peak_c"]))
        w.writerow([part, ci, _num(r["peak_c"]), _num(r.get("peak_error_k")), _num(r["margin_k"]), r["status"]]
                   + [f"{case[f]:.6g}" for f in fields])
    _replace(out / "worst.csv", buf.getvalue())
    _plot(out / "margin.png", variables, flat)


def _replace(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".part")
    tmp.write_text(text, encoding="utf-8")
    tmp.replace(path)


def _plot(path: Path, variables, flat) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rated_parts = list(dict.fromkeys(r["part"] for _, _, r, _ in flat if r["margin_k"] is not None))
    n = len(variables)
    fig, axes = plt.subplots(1, n, figsize=(4.2 * n, 3.4), squeeze=False)
    for ax, (field, _) in zip(axes[0], variables):
        for part in rated_parts:
            xs = [case[field] for _, case, r, _ in flat if r["part"] == part]
            ys = [r["margin_k"] for _, _, r, _ in flat if r["part"] == part]
            ax.plot(xs, ys, "o", ms=4, alpha=0.7, label=part)
        ax.axhline(0.0, color="0.3", lw=0.8)
        ax.set_xlabel(field)
        ax.set_ylabel("margin to rating, K")
        ax.grid(alpha=0.3)
    if rated_parts:
        axes[0][0].legend(fontsize=7)
    fig.suptitle("Sweep: margin against each variable (engineering estimates)", fontsize=9)
    fig.tight_layout()
    tmp = path.with_name(path.name + ".part.png")
    fig.savefig(tmp, dpi=110)
    plt.close(fig)
    tmp.replace(path)


def connect(scheduler: str | None, workers: int | None):
    """(client, cluster or None): an existing scheduler, or a LocalCluster on this machine."""
    from distributed import Client, LocalCluster

    if scheduler:
        return Client(scheduler, timeout=CONNECT_TIMEOUT_S), None
    n = workers or max(1, min(4, os.cpu_count() or 1))
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0")
    return Client(cluster), cluster


def sweep_to_folder(sweep_path, out_dir, scheduler=None, workers=None, quiet=False, stream=None, err=None,
                    serial: bool = False, tolerance_k="model") -> int:
    stream = stream if stream is not None else sys.stdout
    err = err if err is not None else sys.stderr
    t0 = time.perf_counter()
    try:
        if workers is not None and workers < 1:
            raise ModelError(("--workers", f"must be at least 1 (got {workers})"))
        model_dict, model_path, variables = read_sweep(sweep_path)
        from solver.model.modelfile import parse_model
        from solver.answers.whatif import check_whatif

        try:
            check_whatif(parse_model(model_dict))  # cases are superposed: linear, no settled cycle
        except ModelError as e:
            raise e.with_source(str(model_path))
        cases = make_cases(variables)
        _validate_structural(model_dict, cases, str(sweep_path))
    except ModelError as e:
        err.write(e.with_source(e.source or str(sweep_path)).describe() + "\n")
        return 2
    groups = group_cases(cases, model_dict)
    say = (lambda m: None) if quiet else (lambda m: err.write(m + "\n"))
    say(f"{sweep_path}: {len(cases)} cases, {len(groups)} solve(s) (each a mesh ladder as thermgui solve runs "
        "it, with unit responses on the meshes of its error band; the rest superposed from them)")
    client = cluster = None
    try:
        if not serial:
            try:
                client, cluster = connect(scheduler, workers)
            except (OSError, TimeoutError) as e:
                err.write(f"--scheduler: cannot reach the Dask scheduler {scheduler!r} within "
                          f"{CONNECT_TIMEOUT_S:g} s ({type(e).__name__}: {e}); nothing was written\n")
                return 1
        bar = _Bar(err, enabled=not quiet)
        results = run_sweep(model_dict, cases, client, progress=bar.update, tolerance_k=tolerance_k)
        bar.finish()
    except (SolveError, ModelError) as e:
        err.write(f"{sweep_path}: sweep stopped: {e}; nothing was written\n")
        return 1
    except Exception as e:  # e.g. distributed.KilledWorker: a task that killed every worker it was given
        if type(e).__name__ != "KilledWorker":
            raise
        err.write(f"{sweep_path}: sweep stopped: a case's task killed each worker it ran on ({e}); "
                  "nothing was written\n")
        return 1
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    try:
        write_outputs(out_dir, variables, cases, results)
    except OSError as e:
        err.write(f"{out_dir}: cannot write results ({e.strerror or e})\n")
        return 1
    if not quiet:
        with open(Path(out_dir) / "worst.csv") as f:
            stream.write("worst case per part:\n" + f.read())
        stream.write(f"{len(cases)} cases in {time.perf_counter() - t0:.1f} s; results in {out_dir}\n")
        from solver.caution import CAUTION

        stream.write(CAUTION + "\n")
    return 0


class _Bar:
    def __init__(self, stream, enabled=True, width=30):
        self.stream, self.enabled, self.width = stream, enabled, width

    def update(self, done, total):
        if not self.enabled:
            return
        filled = int(round(self.width * done / max(total, 1)))
        self.stream.write(f"\r[{'#' * filled}{'.' * (self.width - filled)}] {done}/{total} cases")
        self.stream.flush()

    def finish(self):
        if self.enabled:
            self.stream.write("\n")
