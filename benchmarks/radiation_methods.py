"""Benchmark: a radiating model's default run, reduced basis against stepping the full system.

    python3 benchmarks/radiation_methods.py                       # the bundled radio box, every default
    python3 benchmarks/radiation_methods.py --tolerance none      # the file's mesh (+ two estimate meshes)
    python3 benchmarks/radiation_methods.py --model FILE --tolerance none --skip-full

Both sides are ``thermgui solve MODEL --out DIR`` as a user types it (fields written, the mesh
ladder as the model asks), one with ``--method full`` (the baseline: chord-Newton steps of the
full system, what radiating models always did before session 8) and one with the default
``auto`` method, each in its own process, so wall time and peak memory are each its own. Prints
both, their ratio, and the largest difference between their peaks (peaks.csv) with each side's
reported error. Not a test: nothing here asserts.
"""
from __future__ import annotations

import argparse
import csv
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def solve(model: Path, out: Path, method: str | None, tolerance: str | None) -> dict:
    """Run ``thermgui solve`` in a child process; wall s, the child's peak RSS (MB), peaks by part."""
    cmd = [sys.executable, "-m", "thermgui", "solve", str(model), "--out", str(out), "--quiet"]
    if method:
        cmd += ["--method", method]
    if tolerance:
        cmd += ["--tolerance", tolerance]
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t0 = time.perf_counter()
    done = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    rss = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss  # the largest child so far (KB)
    if done.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} failed ({done.returncode}):\n{done.stderr[-2000:]}")
    with open(out / "peaks.csv", newline="") as f:
        rows = {r["part"]: r for r in csv.DictReader(f)}
    return {"wall": wall, "rss_mb": max(rss, before) / 1024.0, "rows": rows}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--model", default=str(ROOT / "samples" / "outdoor_radio_box.json"))
    ap.add_argument("--tolerance", default=None, help="passed to thermgui solve --tolerance (e.g. none)")
    ap.add_argument("--skip-full", action="store_true", help="only the default run (the baseline can take minutes)")
    args = ap.parse_args(argv)
    model = Path(args.model).resolve()
    with tempfile.TemporaryDirectory() as work:
        work = Path(work)
        print(f"model {model.name}, tolerance {args.tolerance or 'as in the file'}, load average "
              f"{os.getloadavg()[0]:.1f}")
        ours = solve(model, work / "auto", None, args.tolerance)
        print(f"default (auto method): {ours['wall']:8.1f} s  {ours['rss_mb']:8.0f} MB")
        if args.skip_full:
            return 0
        base = solve(model, work / "full", "full", args.tolerance)
        print(f"baseline (full):       {base['wall']:8.1f} s  (peak RSS of the two runs so far "
              f"{base['rss_mb']:.0f} MB)")
        print(f"baseline / default wall time: {base['wall'] / ours['wall']:.1f}x")
        print(f"{'part':24s} {'default °C':>11s} {'± K':>6s} {'full °C':>9s} {'± K':>6s} {'diff K':>7s}")
        worst = 0.0
        for name, r in ours["rows"].items():
            b = base["rows"].get(name)
            if b is None or not r["peak_c"] or not b["peak_c"]:
                continue
            diff = float(r["peak_c"]) - float(b["peak_c"])
            worst = max(worst, abs(diff))
            print(f"{name[:24]:24s} {float(r['peak_c']):11.2f} {r.get('peak_error_k') or '':>6s} "
                  f"{float(b['peak_c']):9.2f} {b.get('peak_error_k') or '':>6s} {diff:+7.3f}")
        print(f"largest peak difference: {worst:.3f} K")
    return 0


if __name__ == "__main__":
    sys.exit(main())
