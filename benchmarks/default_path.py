"""The user's default path end to end (``thermgui solve MODEL --out DIR``, default options, fields
written) against the scikit-fem + scipy ``splu`` baseline, measured in the same run.

    python3 benchmarks/default_path.py --nodes 125000 --duration 1280 --output-every 20
    python3 benchmarks/default_path.py --nodes 1000000 --duration 3600 --output-every 60 --skip-baseline
    xvfb-run -a python3 benchmarks/default_path.py --open-app DIR      # the app opens a finished run

Model: the benchmark enclosure (scaled_model.py, invented), Crank–Nicolson steps of 1 s, the
run's method left to ``auto`` (the default), outputs every ``--output-every`` seconds. Ours is
:func:`solver.run.cli.solve_to_folder` itself, with clocks around its phases: mesh, assembly, basis or
factorization, stepping (the events), writing (the field writer's own thread, which runs beside
the stepping, and what is left to wait for at the end). The same run is repeated with
``--fields none``: the difference is what writing the fields costs the user in wall time.
Baseline: benchmarks/run.py's (scikit-fem assembly, ``splu`` with default options, one
factorization per distinct step, the same steps), no files; ``--baseline-steps N`` times N
steps and extrapolates (printed "est."). Each side runs in its own process (its own peak
memory). Not a test: nothing asserts.
"""
from __future__ import annotations

import argparse
import io
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _model_file(args, folder: Path) -> Path:
    from scaled_model import cell_for_nodes, model_dict

    cell = args.cell_mm or cell_for_nodes(args.nodes)
    d = model_dict(cell, duration_s=args.duration, step_s=1.0, scheme="crank-nicolson",
                   output_every_s=args.output_every)  # no "method": auto, the default
    path = folder / "model.json"
    path.write_text(json.dumps(d))
    return path


def run_ours(args, fields: str) -> dict:
    """solve_to_folder with clocks around its phases (the code run is the command's own)."""
    import solver.run.session as session_mod
    from solver.fem import problem as problem_mod
    from solver.run.cli import solve_to_folder
    from solver.mesh.mesher import build_mesh
    from solver.transient.stepping import Stepper

    work = Path(args.workdir)
    model_path = _model_file(args, work)
    out_dir = work / f"out-{fields}"
    shutil.rmtree(out_dir, ignore_errors=True)
    t = {}
    real_build, real_init, real_solver_for = session_mod.build_problem, Stepper.__init__, Stepper._solver_for
    real_events, real_finish = session_mod.RunSession.events, session_mod.RunSession.finish
    t.update(factor=0.0, mesh=0.0, assembly=0.0, choice=0.0, steppers=[])

    def build(model, mesh=None):  # the first level's mesh here; finer levels bring their own
        c = time.perf_counter()
        mesh = mesh if mesh is not None else build_mesh(model)
        t["mesh"] += time.perf_counter() - c
        c = time.perf_counter()
        p = problem_mod.build_problem(model, mesh)
        t["assembly"] += time.perf_counter() - c
        return p

    def init(self, *a, **k):  # method and linear-solver choice (may run PARDISO's analysis)
        c = time.perf_counter()
        real_init(self, *a, **k)
        t["choice"] += time.perf_counter() - c
        t["steppers"].append(self)

    def solver_for(self, dt, theta):
        if (dt, theta) in self._solvers:
            return real_solver_for(self, dt, theta)
        c = time.perf_counter()
        s = real_solver_for(self, dt, theta)
        t["factor"] += time.perf_counter() - c
        return s

    def events(self):
        c = time.perf_counter()
        for ev in real_events(self):
            yield ev
        t["events"] = time.perf_counter() - c
        t["session"] = self

    def finish(self):
        c = time.perf_counter()
        rows = real_finish(self)
        t["finish"] = time.perf_counter() - c
        return rows

    session_mod.build_problem = build
    Stepper.__init__, Stepper._solver_for = init, solver_for
    session_mod.RunSession.events, session_mod.RunSession.finish = events, finish
    err, out = io.StringIO(), io.StringIO()
    c, cpu = time.perf_counter(), time.process_time()
    rc = solve_to_folder(model_path, out_dir, stream=out, err=err, fields=fields,
                         tolerance_k=False if args.single_mesh else "model")
    wall, cpu = time.perf_counter() - c, time.process_time() - cpu
    if rc != 0:
        raise SystemExit(err.getvalue())
    s = t["session"]
    st = s.stepper
    info = st.reduced_info if st.method == "reduced" else None
    basis_s = sum(x.reduced_info.basis_s for x in t["steppers"]
                  if x.method == "reduced" and x.reduced_info is not None)
    basis = basis_s + t["factor"] + t["choice"]
    res = {
        "nodes": s.problem.n_nodes, "tets": s.problem.mesh.n_tets, "wall": wall, "cpu": cpu, "mesh": t["mesh"],
        "assembly": t["assembly"], "basis_or_factor": basis,
        "stepping": t["events"] - basis_s - t["factor"],
        "levels": getattr(s, "level", 0) + 1, "solves": len(t["steppers"]),
        "level_nodes": [int(x.problem.n_nodes) for x in t["steppers"]],
        "writer_thread": s._series.write_s if s._series is not None else 0.0, "finish": t["finish"],
        "method": st.method, "method_reason": st.method_choice.reason, "linear_solver": st.choice.method,
        "frames": s._series.n_frames if s._series is not None else 0, "steps": st.n_steps,
        "reduced": info.describe() if info else None,
        "peaks": [float(r.peak_c) for r in s.recorder.peak_rows()],
        "folder_mb": sum(p.stat().st_size for p in out_dir.rglob("*") if p.is_file()) / 1e6,
        "field_mb": sum(p.stat().st_size for p in out_dir.glob("field*") if p.is_file()) / 1e6,
        "peak_mb": _peak_mb(), "out_dir": str(out_dir),
    }
    return res


def run_baseline(args) -> dict:
    from run import run_baseline as base
    from scaled_model import cell_for_nodes

    ns = argparse.Namespace(size=None, cell_mm=args.cell_mm or cell_for_nodes(args.nodes), duration=args.duration,
                            first_step=1.0, scheme="crank-nicolson", fixed=True, method="full", tolerance=None,
                            baseline_step=1.0, baseline_steps=args.baseline_steps)
    return base(ns)


def open_in_app(folder: Path) -> dict:
    """Seconds for the app to show a finished run's first frame: in an open window (the Open
    results… menu: reading, surface, first draw), and in a new window opened on the folder as
    ``thermgui open DIR`` does (plus the imports, timed from the shell's clock ``BENCH_T0``)."""
    t_start = float(os.environ.get("BENCH_T0", time.time()))
    os.environ.setdefault("THERMGUI_STATE_DIR", tempfile.mkdtemp(prefix="thermgui-bench-state-"))
    import pyvista as pv

    from thermgui.app import make_application, open_window

    pv.global_theme.multi_samples = 0
    app = make_application()
    res = {"imports": time.time() - t_start}

    def drawn(w):
        app.processEvents()
        w.results.view.plotter.render()
        app.processEvents()

    win = open_window(None, autosave_s=0)
    drawn(win)
    c = time.perf_counter()
    run = win.open_results(folder)
    res["open_results"] = time.perf_counter() - c
    drawn(win)
    res["open_results_to_frame"] = time.perf_counter() - c
    res["frames"] = win.results.store.n_frames if run is not None else 0
    res["status"] = "" if run is not None else win.results.status.message.text()
    win.close()
    c = time.perf_counter()
    win = open_window(folder, autosave_s=0)  # what `thermgui open DIR` does after its imports
    drawn(win)
    res["new_window_to_frame"] = time.perf_counter() - c
    win.close()
    res["peak_mb"] = _peak_mb()
    return res


def _child(args, part: str, extra=()) -> dict | None:
    cmd = [sys.executable, __file__, "--part", part, "--nodes", str(args.nodes), "--duration", str(args.duration),
           "--output-every", str(args.output_every), "--baseline-steps", str(args.baseline_steps),
           "--workdir", args.workdir, *extra] + (["--single-mesh"] if args.single_mesh else [])
    if args.cell_mm:
        cmd += ["--cell-mm", str(args.cell_mm)]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    for line in proc.stdout.splitlines():
        if line.startswith("RESULT "):
            return json.loads(line[7:])
    sys.stderr.write(f"{part} failed (exit {proc.returncode}):\n{proc.stderr[-3000:]}\n")
    return None


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--nodes", type=int, default=125_000)
    ap.add_argument("--cell-mm", type=float, default=None)
    ap.add_argument("--duration", type=float, default=1280.0)
    ap.add_argument("--output-every", type=float, default=20.0)
    ap.add_argument("--baseline-steps", type=int, default=0, help="time only this many baseline steps")
    ap.add_argument("--skip-baseline", action="store_true")
    ap.add_argument("--single-mesh", action="store_true",
                    help="solve the given mesh only (no mesh-accuracy ladder: RunSession tolerance_k=False)")
    ap.add_argument("--skip-none", action="store_true", help="do not repeat the run with --fields none")
    ap.add_argument("--keep", action="store_true", help="keep the results folders (for --open-app)")
    ap.add_argument("--workdir", default=None)
    ap.add_argument("--open-app", metavar="DIR", help="time the app opening this finished run")
    ap.add_argument("--part", choices=["all", "none", "baseline"], help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.open_app:
        r = open_in_app(Path(args.open_app))
        print(f"app, {r['frames']} frames: in an open window, open_results {r['open_results']:.2f} s, first frame "
              f"drawn after {r['open_results_to_frame']:.2f} s; a new window opened on the folder (`thermgui open "
              f"DIR` after its imports) to its first frame {r['new_window_to_frame']:.2f} s; imports "
              f"{r['imports']:.2f} s; peak memory {r['peak_mb']:.0f} MB {r['status']}")
        return 0
    if args.part:
        res = run_baseline(args) if args.part == "baseline" else run_ours(args, args.part)
        print("RESULT " + json.dumps(res))
        return 0
    made = args.workdir is None
    args.workdir = args.workdir or tempfile.mkdtemp(prefix="thermgui-default-")
    print(f"machine: {os.cpu_count()} cores; load average {os.getloadavg()[0]:.1f} at start "
          "(shared machine: wall times include waiting for the CPU)")
    ours = _child(args, "all")
    if ours is None:
        return 1
    bare = None if args.skip_none else _child(args, "none")
    base = None if args.skip_baseline else _child(args, "baseline")
    print(f"\nmodel: {ours['nodes']:,} nodes, {ours['tets']:,} tetrahedra; {args.duration:g} s, Crank–Nicolson 1 s, "
          f"outputs every {args.output_every:g} s ({ours['frames']} frames)")
    print(f"ours: method {ours['method']} ({ours['method_reason']}); linear solver {ours['linear_solver']}")
    print(f"      {len(ours['level_nodes'])} solves (mesh levels and checks) on "
          f"{', '.join(f'{n:,}' for n in ours['level_nodes'])} nodes; the last is the one reported")
    if ours["reduced"]:
        print(f"      {ours['reduced']}")
    print(f"\n{'seconds (wall)':<40} {'ours':>9} {'baseline':>10} {'base/ours':>10}")

    def row(label, o, b=None, fmt="{:9.2f}"):
        ratio = f"{b / o:9.1f}x" if (o and b) else ""
        print(f"{label:<40} {fmt.format(o) if o is not None else '-':>9} "
              f"{fmt.format(b) if b is not None else '-':>10} {ratio:>10}")

    est = " (est.)" if base and base.get("estimated") else ""
    row("mesh", ours["mesh"], base and base["mesh"]["wall"])
    row("assembly", ours["assembly"], base and base["assembly"]["wall"])
    row("basis or factorization", ours["basis_or_factor"], base and base["setup"]["wall"])
    row("stepping" + est, ours["stepping"], base and base["run"]["wall"] - base["setup"]["wall"])
    row("writing: writer thread (beside stepping)", ours["writer_thread"])
    row("writing: close + csv + json at the end", ours["finish"])
    row("whole run (end to end)" + est, ours["wall"], base and base["answer"]["wall"])
    row("whole run, CPU s (all threads)" + est, ours["cpu"], base and base["answer"]["cpu"])
    print(f"{'peak memory, MB':<40} {ours['peak_mb']:9.0f} {base['peak_mb'] if base else 0:10.0f}")
    print(f"results folder {ours['folder_mb']:.0f} MB, of which field file {ours['field_mb']:.0f} MB")
    if bare:
        share = (ours["wall"] - bare["wall"]) / ours["wall"]
        print(f"same run with --fields none: {bare['wall']:.2f} s end to end; fields cost {share * 100:.1f} % of "
              f"the wall time ({ours['wall'] - bare['wall']:+.2f} s); writer thread busy "
              f"{100 * ours['writer_thread'] / ours['wall']:.1f} % of the wall time")
    if base:
        print(f"baseline: {base['steps_full']} steps, {base['factorizations_full']} factorizations"
              + (f", timed over {base['timed_steps']} steps and extrapolated" if base["estimated"] else ""))
        if base.get("peaks"):
            import numpy as np

            print(f"largest peak difference ours vs baseline: "
                  f"{np.nanmax(np.abs(np.array(ours['peaks']) - np.array(base['peaks']))):.3f} K")
        print(f"whole run: ours {base['answer']['wall'] / ours['wall']:.1f}x faster than the baseline")
    print("peaks (°C): " + ", ".join(f"{v:.2f}" for v in ours["peaks"]))
    if args.keep:
        print(f"results kept in {ours['out_dir']}")
    elif made:
        shutil.rmtree(args.workdir, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
