"""Accuracy benchmark: the default run (refinement to mesh.tolerance_k) against reference ladders.

For each model it runs, in one process, one after the other:

1. the file's mesh as given, no estimate (what the first wave reported);
2. the default run (mesh.tolerance_k from the file, default 1 K): nodes, wall time, peaks ± bound;
3. a reference: a ladder started from a finer mesh (``--reference-split S``: cell_mm / S and
   min_layers x S, default 2, so its meshes are not the default run's) driven to a tighter
   tolerance (``--reference-tolerance``, default 0.25 K) with a large node budget, until it
   converges or stops on memory;
4. optionally the uniform ladder (every interval split R ways along x, y and z, same reduced
   method), the plain route a user would take by hand (``--uniform 1,2,3``).

Both ladders' finest three levels are also extrapolated (Richardson extrapolation with the observed
order, Celik et al. 2008, eqs. 3-6; the same clipped order the bound uses): two estimates of the
converged peak from different mesh families. It prints, per rated part, each route's peak and
its distance to the reference's extrapolated peak, and the wall times as ratios to the uniform
route measured in the same run. Nothing asserts; see benchmarks/README.md for recorded results. Usage:

    python3 benchmarks/accuracy.py                         # relay box and the three samples
    python3 benchmarks/accuracy.py --models relay --uniform 1,2,3
"""
from __future__ import annotations

import argparse
import gc
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import solver.mesh.mesher as mesh_module  # noqa: E402
from solver.model.modelfile import load_model  # noqa: E402
from solver.run.accuracy import observed_order  # noqa: E402
from solver.run.session import RunSession  # noqa: E402

MODELS = {
    "relay": ROOT / "benchmarks" / "models" / "relay_box.json",
    "radio": ROOT / "samples" / "outdoor_radio_box.json",
    "power": ROOT / "samples" / "compact_power_stage.json",
    "handheld": ROOT / "samples" / "handheld_tracker.json",
}


def _run(model, **kw):
    """Run a session; returns it, its peak rows by part and the wall time. The caller drops the
    session before the next run (a finished session still holds its finest mesh and problem, and
    the next ladder's memory check would count that as taken)."""
    t0 = time.perf_counter()
    s = RunSession(model, None, keep_fields=False, **kw)
    for _ in s.events():
        pass
    rows = s.finish()
    return s, {r.part: r for r in rows}, time.perf_counter() - t0


def extrapolated(ladder) -> np.ndarray:
    """Richardson-extrapolated peaks per part from a ladder's finest three levels (°C; NaN with
    fewer levels or oscillating changes): phi1 + e21 / (r21^p - 1), p the observed order."""
    if len(ladder.peaks) < 3:
        return np.full(len(ladder.peaks[-1]), np.nan)
    phi3, phi2, phi1 = (np.asarray(x, dtype=float) for x in ladder.peaks[-3:])
    h = [float(n) ** (-1.0 / 3.0) for n in ladder.nodes[-3:]]
    r21, r32 = h[1] / h[2], h[0] / h[1]
    out = np.full(len(phi1), np.nan)
    for i in range(len(phi1)):
        e21, e32 = phi1[i] - phi2[i], phi2[i] - phi3[i]
        if np.isfinite(e21) and np.isfinite(e32) and e21 * e32 > 0:
            p = observed_order(float(e21), float(e32), r21, r32)
            out[i] = phi1[i] + e21 / (r21**p - 1.0)
    return out


def _levels(s, rated):
    names = [p.name for p in s.model.parts]
    return [{"unknowns": u, "grid_nodes": n, "peaks": {p: float(pk[names.index(p)]) for p in rated}}
            for u, n, pk in zip(s.ladder.unknowns, s.ladder.nodes, s.ladder.peaks)]


def _extrapolated(s, rated):
    names = [p.name for p in s.model.parts]
    ext = extrapolated(s.ladder)
    return {p: float(ext[names.index(p)]) for p in rated}


def _split(lines, r):
    if r == 1:
        return lines
    pieces = [np.linspace(a, b, r + 1)[:-1] for a, b in zip(lines[:-1], lines[1:])]
    return np.concatenate(pieces + [lines[-1:]])


def uniform(path, r, method):
    original = mesh_module.plan_lines
    mesh_module.plan_lines = lambda m: tuple(_split(l, r) for l in original(m))
    try:
        model = load_model(path)
        model.run.method = method
        return _run(model, tolerance_k=False)
    finally:
        mesh_module.plan_lines = original


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--models", default="relay,radio,power,handheld")
    ap.add_argument("--reference-tolerance", type=float, default=0.25)
    ap.add_argument("--reference-max-nodes", type=int, default=6_000_000)
    ap.add_argument("--reference-time-limit", type=float, default=600.0,
                    help="mesh.time_limit_s of the reference ladder, s (default 600; 0 = none)")
    ap.add_argument("--reference-split", type=float, default=2.0,
                    help="the reference ladder starts at cell_mm / S and min_layers x S (default 2)")
    ap.add_argument("--uniform", default="", help="comma-separated split factors, e.g. 1,2,3")
    ap.add_argument("--method", default="reduced", help="run.method for every route (default reduced)")
    ap.add_argument("--json", default=None, help="write the numbers to this file")
    args = ap.parse_args(argv)
    report = {}
    for name in args.models.split(","):
        path = MODELS[name]
        rated = [p.name for p in load_model(path).parts if p.rated_c is not None]
        out = {"rated": rated}

        m = load_model(path)
        m.run.method = args.method
        s, rows, wall = _run(m, tolerance_k=False)
        out["file_mesh"] = {"nodes": s.problem.n_nodes, "wall_s": wall, "peaks": {p: rows[p].peak_c for p in rated}}
        del s, rows
        gc.collect()

        m = load_model(path)
        m.run.method = args.method
        s, rows, wall = _run(m)
        out["default"] = {"nodes": s.problem.n_nodes, "wall_s": wall, "levels": len(s.ladder.levels),
                          "converged": s.ladder.converged, "stop": s.ladder.stop_reason,
                          "peaks": {p: rows[p].peak_c for p in rated},
                          "bound": {p: rows[p].peak_error_k for p in rated},
                          "status": {p: rows[p].status for p in rated},
                          "ladder": _levels(s, rated), "extrapolated": _extrapolated(s, rated)}
        del s, rows
        gc.collect()

        m = load_model(path)
        m.run.method = args.method
        m.mesh.max_nodes = args.reference_max_nodes
        m.mesh.max_levels = 12
        m.mesh.time_limit_s = args.reference_time_limit or None
        m.mesh.cell_mm = float(m.mesh.cell_mm) / args.reference_split
        m.mesh.min_layers = int(round(m.mesh.min_layers * args.reference_split))
        s, rows, wall = _run(m, tolerance_k=args.reference_tolerance)
        out["reference"] = {"nodes": s.problem.n_nodes, "wall_s": wall, "converged": s.ladder.converged,
                            "stop": s.ladder.stop_reason,
                            "peaks": {p: rows[p].peak_c for p in rated},
                            "bound": {p: rows[p].peak_error_k for p in rated},
                            "ladder": _levels(s, rated), "extrapolated": _extrapolated(s, rated)}
        del s, rows
        gc.collect()

        out["uniform"] = []
        for r in [int(x) for x in args.uniform.split(",") if x]:
            s, rows, wall = uniform(path, r, args.method)
            out["uniform"].append({"split": r, "nodes": s.problem.n_nodes, "wall_s": wall,
                                   "peaks": {p: rows[p].peak_c for p in rated}})
        report[name] = out
        print_model(name, out)
    if args.json:
        Path(args.json).write_text(json.dumps(report, indent=2, default=float))
    return 0


def print_model(name, out):
    refd = out["reference"]
    ref = {p: (v if np.isfinite(v) else refd["peaks"][p]) for p, v in refd["extrapolated"].items()}
    print(f"\n## {name}: reference ladder to {refd['nodes']:,} grid nodes ({refd['wall_s']:.0f} s; "
          f"{'converged' if refd['converged'] else 'stopped: ' + refd['stop']}), finest bounds "
          f"{', '.join(f'{p} ± {b:.2f}' for p, b in refd['bound'].items())}")
    print("reference value = the reference ladder's extrapolated peak: "
          + ", ".join(f"{p} {v:.2f}" for p, v in ref.items()))
    for label, d in (("default", out["default"]), ("reference", refd)):
        print(f"{label} ladder (unknowns / grid nodes: peaks): " + "; ".join(
            f"{lv['unknowns']:,}/{lv['grid_nodes']:,}: " + ", ".join(f"{v:.2f}" for v in lv["peaks"].values())
            for lv in d["ladder"]))
    print("| route | nodes | wall s | " + " | ".join(f"{p} (off by)" for p in out["rated"]) + " |")
    print("|---|---|---|" + "---|" * len(out["rated"]))

    def row(label, d, extra=None):
        cells = []
        for p in out["rated"]:
            v = d["peaks"][p]
            txt = f"{v:.2f} ({v - ref[p]:+.2f})"
            if extra and extra.get(p) is not None:
                txt = f"{v:.2f} ± {extra[p]:.2f} ({v - ref[p]:+.2f})"
            cells.append(txt)
        print(f"| {label} | {d['nodes']:,} | {d['wall_s']:.1f} | " + " | ".join(cells) + " |")

    row("file mesh as given", out["file_mesh"])
    row(f"default ({out['default']['levels']} levels, {'converged' if out['default']['converged'] else 'stopped'})",
        out["default"], out["default"]["bound"])
    for u in out["uniform"]:
        row(f"uniform split {u['split']}", u)
    row("default ladder, extrapolated", {"nodes": out["default"]["nodes"], "wall_s": out["default"]["wall_s"],
                                         "peaks": out["default"]["extrapolated"]})
    row("reference ladder, finest", refd, refd["bound"])
    if out["uniform"]:
        base = out["uniform"][-1]["wall_s"]
        print(f"default / finest uniform wall time: {out['default']['wall_s'] / base:.2f}")
    print("statuses (default): " + ", ".join(f"{p} {s}" for p, s in out["default"]["status"].items()))


if __name__ == "__main__":
    raise SystemExit(main())
