"""Answers from one solve, timed on the invented "rooftop edge gateway" (benchmarks/scaled_model.py).

    python3 benchmarks/answers.py periodic --nodes 20000     # direct cycle vs a long transient
    python3 benchmarks/answers.py whatif --nodes 200000      # what-if evaluation time
    python3 benchmarks/answers.py sweep --nodes 20000 --workers 1 2 4

Every figure is measured in the same run as its baseline and printed with the ratio; nothing
asserts (benchmarks are not tests).
"""
from __future__ import annotations

import argparse
import copy
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from scaled_model import cell_for_nodes, model_dict  # noqa: E402

import solver  # noqa: E402
from solver.run.session import RunSession  # noqa: E402

PERIOD = 300.0


def periodic_dict(cell_mm: float, duration: float, step: float, method: str = "reduced") -> dict:
    """The gateway with loads sharing one 300 s period: processor 12/4 W (duty 0.4), radio bursts
    4/0.5 W (duty 0.1, 60 s into the cycle), power stage and memories constant."""
    d = model_dict(cell_mm, duration_s=duration, step_s=step, scheme="crank-nicolson", method=method,
                   output_every_s=PERIOD / 10)
    if method == "reduced":
        d["run"]["tolerance_k"] = 0.01  # both runs well inside the 0.05 K being checked
    d["heat_loads"][0]["profile"] = {"type": "pulse", "high": 12.0, "low": 4.0, "period_s": PERIOD, "duty": 0.4}
    d["heat_loads"][1]["profile"] = {"type": "pulse", "high": 4.0, "low": 0.5, "period_s": PERIOD, "duty": 0.1,
                                     "start_s": 60}
    d["heat_loads"][2]["profile"] = {"type": "constant", "value": 2.0}
    return d


def last_cycle_extremes(d: dict, periodic: bool):
    m = solver.parse_model(dict(copy.deepcopy(d), run=dict(d["run"], periodic=periodic)))
    t0 = time.perf_counter()
    s = RunSession(m, tolerance_k=False)  # the file's mesh only
    hi = lo = None
    end = s.model.run.duration_s
    for ev in s.events():  # events: every step (full) or outputs, peaks and crossings (reduced)
        if ev.time_s >= end - PERIOD - 1e-9:
            hi = ev.part_max.copy() if hi is None else np.maximum(hi, ev.part_max)
            if ev.is_output:  # troughs at the same cycle phases in both runs (outputs every P/10)
                lo = ev.part_max.copy() if lo is None else np.minimum(lo, ev.part_max)
    return hi, lo, time.perf_counter() - t0, s


def bench_periodic(args) -> None:
    cell = cell_for_nodes(args.nodes)
    d = periodic_dict(cell, args.hours * 3600.0, args.step, args.method)
    hi_b, lo_b, t_b, sb = last_cycle_extremes(d, False)
    # how settled the brute force is: its second-to-last cycle
    d_short = periodic_dict(cell, args.hours * 3600.0 - PERIOD, args.step, args.method)
    hi_b2, _, _, _ = last_cycle_extremes(d_short, False)
    hi_p, lo_p, t_p, sp = last_cycle_extremes(d, True)
    print(f"gateway, {sb.problem.n_nodes:,} nodes, period {PERIOD:g} s, run.method {args.method}, "
          f"step/sampling {args.step:g} s, output every {PERIOD / 10:g} s")
    print(f"brute force {args.hours:g} h ({args.hours * 3600 / PERIOD:.0f} cycles): {t_b:.1f} s; "
          f"its last two cycles differ by up to {np.max(np.abs(hi_b - hi_b2)):.3f} K in the peaks")
    print(f"direct cycle: {t_p:.1f} s ({sp.cycle.describe()})")
    print(f"cost ratio direct / brute force = {t_p / t_b:.3f}")
    print(f"largest difference of a part's cycle peak {np.max(np.abs(hi_p - hi_b)):.4f} K, "
          f"trough (lowest part maximum at the outputs, every P/10) {np.max(np.abs(lo_p - lo_b)):.4f} K")


def bench_whatif(args) -> None:
    from solver.linalg.linsolve import choose_method
    from solver.answers.whatif import compute_unit_responses, evaluate

    cell = cell_for_nodes(args.nodes)
    m = solver.parse_model(model_dict(cell, duration_s=args.duration, step_s=1.0, scheme="crank-nicolson",
                                      method="reduced"))
    t0 = time.perf_counter()
    p = solver.build_problem(m)
    t_build = time.perf_counter() - t0
    method = choose_method(p.n_nodes, "auto").method
    t0 = time.perf_counter()
    ur = compute_unit_responses(p, "pardiso" if method == "pardiso-single" else method)
    t_units = time.perf_counter() - t0
    t0 = time.perf_counter()
    s = RunSession(m, tolerance_k=False)  # the file's mesh only
    for _ in s.events():
        pass
    t_run = time.perf_counter() - t0
    times = []
    for scales, off in ((np.ones(5), 0.0), (np.array([1.2, 1, 1, 1, 1]), 5.0), (np.array([0.8, 1.5, 1, 1, 1]), -3.0)):
        t0 = time.perf_counter()
        rec = evaluate(p, ur, scales, off)
        rec.peak_rows()
        times.append(time.perf_counter() - t0)
    print(f"gateway, {p.n_nodes:,} nodes, {args.duration:g} s, basis {ur.v.shape[1]} vectors, {len(ur.times):,} samples")
    print(f"assembly {t_build:.1f} s; unit responses {t_units:.1f} s; one reduced run of the model {t_run:.1f} s")
    print("what-if evaluations: " + ", ".join(f"{t:.2f} s" for t in times)
          + f"; ratio to the reduced run {np.median(times) / t_run:.3f}")


def bench_sweep(args) -> None:
    from solver.answers.sweep import sweep_to_folder

    cell = cell_for_nodes(args.nodes)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        (tmp / "m.json").write_text(json.dumps(model_dict(cell, duration_s=args.duration, step_s=1.0,
                                                          scheme="crank-nicolson", method="reduced")))
        (tmp / "s.json").write_text(json.dumps({"format": "thermgui-sweep", "version": 1, "model": "m.json",
                                                "variables": [{"field": "convection[0].h",
                                                               "range": [5, 12], "steps": args.cases},
                                                              {"field": "ambient_offset_k", "values": [0, 10]}]}))
        t0 = time.perf_counter()
        sweep_to_folder(tmp / "s.json", tmp / "serial", serial=True, quiet=True)
        serial = time.perf_counter() - t0
        print(f"gateway, about {args.nodes:,} nodes, {args.cases} solves x 2 superposed ambients; "
              f"{os.cpu_count()} cores")
        print(f"serial in this process: {serial:.1f} s")
        for w in args.workers:
            t0 = time.perf_counter()
            sweep_to_folder(tmp / "s.json", tmp / f"w{w}", workers=w, quiet=True)
            t = time.perf_counter() - t0
            same = (tmp / "serial" / "cases.csv").read_bytes() == (tmp / f"w{w}" / "cases.csv").read_bytes()
            print(f"LocalCluster {w} worker(s): {t:.1f} s (serial / this = {serial / t:.2f}); "
                  f"cases.csv identical to serial: {same}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    sub = ap.add_subparsers(dest="what", required=True)
    a = sub.add_parser("periodic")
    a.add_argument("--nodes", type=int, default=20000)
    a.add_argument("--hours", type=float, default=8.0)
    a.add_argument("--step", type=float, default=2.0)
    a.add_argument("--method", default="reduced", choices=["reduced", "full"],
                   help="run.method of both the long transient and the cycle")
    b = sub.add_parser("whatif")
    b.add_argument("--nodes", type=int, default=200000)
    b.add_argument("--duration", type=float, default=3600.0)
    c = sub.add_parser("sweep")
    c.add_argument("--nodes", type=int, default=20000)
    c.add_argument("--duration", type=float, default=1800.0)
    c.add_argument("--cases", type=int, default=8)
    c.add_argument("--workers", type=int, nargs="+", default=[1, 2, 4])
    args = ap.parse_args(argv)
    {"periodic": bench_periodic, "whatif": bench_whatif, "sweep": bench_sweep}[args.what](args)
    return 0


if __name__ == "__main__":
    sys.exit(main())
