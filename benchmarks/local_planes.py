"""Benchmark: the accuracy ladder with local refinement planes (the default) against global planes.

    python3 benchmarks/local_planes.py                         # the relay box, every default
    python3 benchmarks/local_planes.py --model samples/compact_power_stage.json
    python3 benchmarks/local_planes.py --repeat 2              # alternate the two sides twice

Both sides are ``thermgui solve MODEL --out DIR`` with every default (fields written, the mesh
ladder to ``mesh.tolerance_k``), each in its own process; the baseline sets
``solver.run.session.LOCAL_PLANES = False`` first, so every refined plane cuts the whole box (what
the ladder did before session 9). Prints each side's wall time, its own peak RSS, the
mesh-independence record from run.json (unknowns, grid nodes, wall per level, the rated parts'
peaks and bounds), whether it converged, and the ratio of the wall times. Not a test: nothing
here asserts.
"""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

CHILD = """
import resource, sys
import solver.run.session as session
session.LOCAL_PLANES = sys.argv[1] == "local"
from thermgui.cli import main
code = main(["solve", sys.argv[2], "--out", sys.argv[3], "--quiet"])
print("MAXRSS_KB", resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
sys.exit(code or 0)
"""


def solve(model: Path, out: Path, planes: str) -> dict:
    cmd = [sys.executable, "-c", CHILD, planes, str(model), str(out)]
    t0 = time.perf_counter()
    done = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if done.returncode != 0:
        raise SystemExit(f"{planes} run failed ({done.returncode}):\n{done.stderr[-2000:]}")
    rss = [int(l.split()[1]) for l in done.stdout.splitlines() if l.startswith("MAXRSS_KB")]
    info = json.loads((out / "run.json").read_text())
    return {"wall": wall, "rss_mb": rss[-1] / 1024.0 if rss else float("nan"), "accuracy": info.get("accuracy") or {}}


def describe(name: str, r: dict) -> str:
    acc = r["accuracy"]
    goal = acc.get("goal_parts", [])
    lines = [f"{name}: {r['wall']:.1f} s wall, {r['rss_mb']:.0f} MB peak RSS; "
             f"{'converged' if acc.get('converged') else 'NOT converged'} ({acc.get('stop_reason', '')})",
             f"  {'level':>5} {'unknowns':>10} {'grid nodes':>11} {'s':>7}  " + "  ".join(f"{g[:16]:>18}" for g in goal)]
    for lv in acc.get("levels", []):
        cells = []
        for g in goal:
            pk, er = lv["peaks_c"].get(g), lv["error_k"].get(g)
            cells.append(f"{'' if pk is None else f'{pk:.2f}' + ('' if er is None else f' ± {er:.2f}'):>18}")
        lines.append(f"  {lv['level']:>5} {lv['nodes']:>10,} {lv.get('mesh_nodes', lv['nodes']):>11,} "
                     f"{lv['wall_s']:>7.1f}  " + "  ".join(cells))
    rep = acc.get("reported_error_k", {})
    lines.append("  reported bounds (K): " + ", ".join(f"{g} {rep.get(g, float('nan')):.2f}" for g in goal))
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--model", default=str(ROOT / "benchmarks" / "models" / "relay_box.json"))
    ap.add_argument("--repeat", type=int, default=1, help="alternate the two sides this many times")
    args = ap.parse_args(argv)
    model = Path(args.model).resolve()
    print(f"model {model.name}, load average {os.getloadavg()[0]:.1f}")
    walls = {"local": [], "global": []}
    with tempfile.TemporaryDirectory() as work:
        for k in range(args.repeat):
            for planes in ("local", "global"):
                r = solve(model, Path(work) / f"{planes}{k}", planes)
                walls[planes].append(r["wall"])
                print(describe(f"{planes} planes (run {k + 1})", r), flush=True)
    lo, gl = min(walls["local"]), min(walls["global"])
    print(f"wall, best of {args.repeat}: local {lo:.1f} s, global {gl:.1f} s, local / global = {lo / gl:.2f}; "
          f"load average at the end {os.getloadavg()[0]:.1f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
