"""Benchmark: thermgui's engine against a plain baseline, measured in the same run.

    python3 benchmarks/run.py --size 200k            # about 200 000 nodes
    python3 benchmarks/run.py --size 1m --baseline-steps 3
    python3 benchmarks/run.py --size 50k --duration 600 --tolerance 0.1

Ours: structured assembly (solver.fem.problem.build_problem), automatic linear solver, adaptive
TR-BDF2 steps with the given temperature tolerance. Baseline: the same model assembled with
scikit-fem (P1 conduction and capacity, lumped by row sums, convection on the same faces) and
stepped with scipy ``splu`` (default options) at a fixed Crank–Nicolson step of ``--baseline-step``
seconds; with ``--baseline-steps N`` only N steps are timed and the full run is extrapolated
(marked "est."). Each side runs in its own process so its peak memory is its own. Prints wall
and CPU seconds: on a shared machine wall time includes waiting for the CPU.
Benchmarks are not tests: nothing here asserts.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

SIZES = {"20k": 20_000, "50k": 50_000, "100k": 100_000, "200k": 200_000, "500k": 500_000, "1m": 1_000_000}


def _clock():
    return time.perf_counter(), time.process_time()


def _since(c0):
    w, c = _clock()
    return {"wall": w - c0[0], "cpu": c - c0[1]}


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _model(args):
    from scaled_model import cell_for_nodes, model_dict
    from solver.model.modelfile import parse_model

    cell = args.cell_mm or cell_for_nodes(SIZES[args.size])
    run = {"duration_s": args.duration, "step_s": args.first_step, "output_every_s": 60.0,
           "scheme": args.scheme, "method": "full" if args.fixed else args.method}
    if args.tolerance and not args.fixed:
        run["tolerance_k"] = args.tolerance
    return parse_model(model_dict(cell, **run)), cell


def _timed_mesh(args):
    """The scaled model and its mesh, with the cell size, meshing time and node count in ``out``."""
    from solver.mesh.mesher import build_mesh

    model, cell = _model(args)
    out = {"cell_mm": cell}
    c = _clock()
    mesh = build_mesh(model)
    out["mesh"] = _since(c)
    out["nodes"] = mesh.n_nodes
    return model, mesh, out


def matvec_seconds(a, repeat: int = 20) -> float:
    x = np.random.default_rng(1).random(a.shape[0])
    a @ x
    t = time.perf_counter()
    for _ in range(repeat):
        a @ x
    return (time.perf_counter() - t) / repeat


# ---------------------------------------------------------------- ours
def run_ours(args) -> dict:
    from solver.fem.problem import build_problem
    from solver.results.recorder import RunRecorder
    from solver.transient.stepping import Stepper

    model, mesh, out = _timed_mesh(args)
    c = _clock()
    problem = build_problem(model, mesh)
    out["assembly"] = _since(c)
    c_run = _clock()  # choosing the solver may run PARDISO's analysis: part of set-up and run
    stepper = Stepper(problem, linear_solver=args.solver, method="full" if args.fixed else args.method)
    out["solver"] = [stepper.choice.method, stepper.choice.reason]
    setup = dict(_since(c_run))
    inner = stepper._solver_for

    def timed(dt, theta):  # time factorizations / multigrid set-ups
        key = (round(dt, 12), theta)
        if key in stepper._solvers:
            return inner(dt, theta)
        c1 = _clock()
        s = inner(dt, theta)
        d = _since(c1)
        setup["wall"] += d["wall"]
        setup["cpu"] += d["cpu"]
        return s

    stepper._solver_for = timed
    recorder = RunRecorder(problem, keep_fields=False)
    c = c_run
    for ev in stepper:
        recorder.add(ev)
        if args.max_steps and ev.step >= args.max_steps:
            break
    run = _since(c)
    out["run"] = run
    out["setup"] = setup
    out["steps"] = stepper.n_steps if not args.max_steps else min(args.max_steps, stepper.n_steps)
    out["solves"] = stepper.solves
    out["rejected"] = stepper.rejected_steps
    out["factorizations"] = stepper.factorizations
    info = stepper.reduced_info
    if info is not None and stepper.method == "reduced":  # set-up = factorization; "step" = one solve
        setup["wall"] += info.factor_s
        out["reduced"] = info.describe()
        out["steps"] = info.samples
        out["step"] = {"wall": (info.basis_s - info.factor_s) / max(1, stepper.solves), "cpu": float("nan")}
    else:
        out["step"] = {k: (run[k] - setup[k]) / max(1, out["steps"]) for k in run}
    out["answer"] = {k: out["mesh"][k] + out["assembly"][k] + run[k] for k in run}
    out["peaks"] = [float(r.peak_c) for r in recorder.peak_rows()]
    out["matvec_s"] = matvec_seconds(problem.step_matrix(1.0, 1.0))
    out["energy_residual"] = recorder.relative_energy_residual
    out["peak_mb"] = _peak_mb()
    return out


# ---------------------------------------------------------------- baseline
def skfem_matrices(problem):
    """Conduction K, lumped capacity and convection matrix assembled with scikit-fem."""
    import scipy.sparse as sp
    from skfem import Basis, BilinearForm, ElementTetP1, FacetBasis, MeshTet
    from skfem.helpers import dot

    from solver.mesh.mesher import convection_face_mask
    from solver.fem.problem import material_arrays

    mesh, model = problem.mesh, problem.model
    m = MeshTet(mesh.nodes.T.copy(), mesh.tets.T.copy())
    basis = Basis(m, ElementTetP1())
    k_el, rc_el = material_arrays(model, mesh.tet_part)

    @BilinearForm
    def conduction(u, v, w):
        return w.kx * u.grad[0] * v.grad[0] + w.ky * u.grad[1] * v.grad[1] + w.kz * u.grad[2] * v.grad[2]

    @BilinearForm
    def capacity(u, v, w):
        return w.rc * u * v

    nq = basis.X.shape[1]
    k = conduction.assemble(basis, kx=np.repeat(k_el[:, [0]], nq, 1), ky=np.repeat(k_el[:, [1]], nq, 1),
                            kz=np.repeat(k_el[:, [2]], nq, 1))
    cap = capacity.assemble(basis, rc=np.repeat(rc_el[:, None], nq, 1))
    lumped = np.asarray(cap.sum(axis=1)).ravel()
    # convection faces: find scikit-fem's facet index of each convection triangle
    keys_fem = np.sort(m.facets, axis=0)
    n = mesh.n_nodes
    code_fem = (keys_fem[0].astype(np.int64) * n + keys_fem[1]) * n + keys_fem[2]
    order = np.argsort(code_fem)
    conv = sp.csr_matrix((n, n))
    for i, c in enumerate(model.convection):
        tris = np.sort(mesh.boundary.tris[convection_face_mask(mesh, model, i)], axis=1)
        if len(tris) == 0:
            continue
        code = (tris[:, 0] * n + tris[:, 1]) * n + tris[:, 2]
        idx = order[np.searchsorted(code_fem, code, sorter=order)]
        fb = FacetBasis(m, ElementTetP1(), facets=np.unique(idx))

        @BilinearForm
        def film(u, v, w):
            return c.h * u * v

        conv = conv + film.assemble(fb)
    return k.tocsr(), lumped, conv.tocsr()


def run_baseline(args) -> dict:
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    from solver.fem.problem import build_problem
    from solver.transient.timegrid import output_times, plan_steps

    model, mesh, out = _timed_mesh(args)
    problem = build_problem(model, mesh)  # only for the load vectors and part node sets
    c = _clock()
    k, lumped, conv = skfem_matrices(problem)
    out["assembly"] = _since(c)
    stiff = (k + conv).tocsr()
    h = args.baseline_step
    steps = plan_steps(args.duration, h, 0.5, problem.breakpoints(args.duration),
                       output_times(args.duration, 60.0), True)
    out["steps_full"] = len(steps)
    mats = {}
    c = _clock()
    setup = {"wall": 0.0, "cpu": 0.0}
    d = problem.initial.copy()
    peak = problem.part_nodes.maxima(d)
    n_timed = len(steps) if not args.baseline_steps else min(args.baseline_steps, len(steps))
    for st in steps[:n_timed]:
        key = (round(st.dt, 12), st.theta)
        if key not in mats:
            c1 = _clock()
            a = (sp.diags(lumped / st.dt) + st.theta * stiff).tocsc()
            mats[key] = spla.splu(a)  # scipy defaults (COLAMD ordering)
            dd = _since(c1)
            setup["wall"] += dd["wall"]
            setup["cpu"] += dd["cpu"]
        rhs = lumped * d / st.dt - (1 - st.theta) * (stiff @ d) + st.theta * problem.load(st.t1, "left") \
            + (1 - st.theta) * problem.load(st.t0, "right")
        d = mats[key].solve(rhs)
        peak = np.maximum(peak, problem.part_nodes.maxima(d))
    run = _since(c)
    per_step = {kk: (run[kk] - setup[kk]) / max(1, n_timed) for kk in run}
    out["timed_steps"] = n_timed
    out["estimated"] = n_timed < len(steps)
    out["setup"] = setup
    out["step"] = per_step
    # a full run needs one factorization per distinct (Δt, θ): count them in the plan
    n_fact = len({(round(s.dt, 12), s.theta) for s in steps})
    per_fact = {kk: setup[kk] / max(1, len(mats)) for kk in setup}
    out["factorizations_full"] = n_fact
    out["run"] = {kk: per_fact[kk] * n_fact + per_step[kk] * len(steps) for kk in run}
    out["answer"] = {kk: out["mesh"][kk] + out["assembly"][kk] + out["run"][kk] for kk in run}
    out["peaks"] = [float(v) for v in peak] if not out["estimated"] else None
    out["peak_mb"] = _peak_mb()
    return out


# ---------------------------------------------------------------- report
def _row(label, ours, base, key="wall", fmt="{:9.2f}"):
    o = ours if isinstance(ours, (int, float)) else (ours or {}).get(key)
    b = base if isinstance(base, (int, float)) else (base or {}).get(key)
    ratio = f"{o / b:8.3f}" if (o is not None and b) else "       -"
    fo = fmt.format(o) if o is not None else "        -"
    fb = fmt.format(b) if b is not None else "        -"
    return f"{label:<34} {fo:>11} {fb:>11} {ratio:>9}"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--size", default="200k", choices=sorted(SIZES))
    ap.add_argument("--cell-mm", type=float, default=None, help="override the cell size")
    ap.add_argument("--duration", type=float, default=3600.0, help="profile length, s (default one hour)")
    ap.add_argument("--tolerance", type=float, default=0.1, help="our temperature tolerance, K")
    ap.add_argument("--method", default="reduced", choices=["reduced", "full"],
                    help="ours: reduced basis (default) or stepping the full system")
    ap.add_argument("--first-step", type=float, default=0.5,
                    help="ours: sampling interval (reduced) or first / restart step (full, adaptive), s")
    ap.add_argument("--fixed", action="store_true",
                    help="ours: fixed steps of --first-step on the full system (no error control)")
    ap.add_argument("--scheme", default="crank-nicolson", choices=["crank-nicolson", "backward-euler"],
                    help="ours, with --fixed: the time-stepping scheme")
    ap.add_argument("--reference", help="JSON list of converged peaks (°C) to compare ours with")
    ap.add_argument("--save-peaks", help="write our peaks to this JSON file")
    ap.add_argument("--solver", default="auto", help="our linear solver (auto, direct, multigrid)")
    ap.add_argument("--max-steps", type=int, default=0, help="stop our run after this many steps")
    ap.add_argument("--baseline-step", type=float, default=0.5, help="baseline fixed CN step, s")
    ap.add_argument("--baseline-steps", type=int, default=0, help="time only this many baseline steps")
    ap.add_argument("--skip-baseline", action="store_true")
    ap.add_argument("--part", choices=["ours", "baseline"], help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.part:
        res = run_ours(args) if args.part == "ours" else run_baseline(args)
        print("RESULT " + json.dumps(res))
        return 0

    def child(part):
        cmd = [sys.executable, __file__, "--part", part] + [a for a in (argv or sys.argv[1:])]
        proc = subprocess.run(cmd, capture_output=True, text=True)
        for line in proc.stdout.splitlines():
            if line.startswith("RESULT "):
                return json.loads(line[7:])
        sys.stderr.write(f"{part} failed (exit {proc.returncode}):\n{proc.stderr[-3000:]}\n")
        return None

    print(f"machine: {os.cpu_count()} cores; {os.uname().sysname} {os.uname().release}; "
          f"load average {os.getloadavg()[0]:.1f} at start (shared machine: wall times include waiting)")
    ours = child("ours")
    base = None if args.skip_baseline else child("baseline")
    if ours is None:
        return 1
    print(f"\nmodel: {ours['nodes']:,} nodes (cell {ours['cell_mm']} mm), {args.duration:g} s pulsed profile")
    how = (f"fixed {args.scheme} steps of {args.first_step:g} s" if args.fixed else
           "reduced basis, exact in time" if args.method == "reduced" else "adaptive TR-BDF2")
    tol = "" if args.fixed else f", tolerance {args.tolerance} K"
    print(f"ours: {how}{tol}, solver {ours['solver'][0]} ({ours['solver'][1]})")
    if ours.get("reduced"):
        print(f"      {ours['reduced']}; {ours['steps']} samples, {ours['solves']} solves; "
              f"'per step' below = per basis solve")
    else:
        print(f"      {ours['steps']} steps, {ours['solves']} solves, {ours['rejected']} rejected, "
              f"{ours['factorizations']} factorizations/set-ups")
    print(f"      energy residual {ours['energy_residual']:.1e}")
    if base:
        est = " (est. from %d timed steps)" % base["timed_steps"] if base["estimated"] else ""
        print(f"baseline: scikit-fem assembly, scipy splu (defaults), Crank–Nicolson step {args.baseline_step} s, "
              f"{base['steps_full']} steps, {base['factorizations_full']} factorizations{est}")
    print(f"\n{'seconds (wall unless noted)':<34} {'ours':>11} {'baseline':>11} {'ours/base':>9}")
    for label, key in [("mesh", "mesh"), ("assembly", "assembly"), ("set-up (factor/precond.)", "setup"),
                       ("per step", "step"), ("run (all steps)", "run"), ("time to answer", "answer")]:
        print(_row(label, ours.get(key), (base or {}).get(key), fmt="{:9.3f}" if key == "step" else "{:9.2f}"))
        if key in ("assembly", "answer"):
            print(_row(f"  {label}, CPU s", ours.get(key), (base or {}).get(key), key="cpu"))
    print(_row("peak memory, MB", ours["peak_mb"], (base or {}).get("peak_mb"), fmt="{:9.0f}"))
    print(f"one sparse mat-vec (step matrix): {1e3 * ours['matvec_s']:.2f} ms; "
          f"per step / mat-vec = {ours['step']['wall'] / ours['matvec_s']:.0f}")
    if base and base.get("peaks"):
        diff = np.abs(np.array(ours["peaks"]) - np.array(base["peaks"]))
        print(f"largest peak difference ours vs baseline: {np.nanmax(diff):.3f} K")
    if args.reference:
        ref = np.array(json.loads(Path(args.reference).read_text()))
        print(f"largest peak difference ours vs reference ({args.reference}): "
              f"{np.nanmax(np.abs(np.array(ours['peaks']) - ref)):.4f} K")
    if args.save_peaks:
        Path(args.save_peaks).write_text(json.dumps(ours["peaks"]))
    print("peaks (°C): " + ", ".join(f"{v:.2f}" for v in ours["peaks"]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
