"""Headless commands that answer from unit responses: ``zth`` (thermal impedance and RC networks),
``whatif`` (scaled loads and shifted ambients by superposition) and ``sweep`` (cases on Dask).

Exit status 0 on success, 2 for invalid input (nothing is written), 1 for anything else.
"""
from __future__ import annotations

import sys
import time

from solver.caution import CAUTION
from solver.errors import ModelError, SolveError




def _tolerance(text: str):
    from solver.run.cli import _tolerance as parse

    return parse(text)


def add_commands(sub) -> None:
    """Register the subcommands on an argparse subparsers object."""
    p = sub.add_parser("zth", help="thermal impedance Zth(t) of rated parts, Foster/Cauer RC networks, SPICE")
    p.add_argument("model", help="model file (JSON, format thermgui-model version 1)")
    p.add_argument("--out", required=True, help="folder for zth.csv, foster.csv, cauer.csv, zth.json, spice/")
    p.add_argument("--part", action="append", default=None,
                   help="part to report (repeatable; default: every rated part, else every heated part)")
    p.add_argument("--stages", type=int, default=None, help="Foster stages per curve (1-12; default automatic)")
    p.add_argument("--passive", action="store_true",
                   help="non-negative Foster stages only (a passive network, with a Cauer ladder for self "
                        "terms), even where the fit error exceeds 1 %%")
    p.add_argument("--quiet", action="store_true", help="no progress or summary")
    p.add_argument("--linear-solver", default="auto", choices=["auto", "direct", "multigrid"])
    w = sub.add_parser("whatif", help="scaled heat loads / shifted ambient by superposition of unit responses")
    w.add_argument("model", help="model file (JSON, format thermgui-model version 1)")
    w.add_argument("--out", required=True,
                   help="folder for peaks.csv and history.csv of the what-if case; unit responses are kept "
                        "there (unit-responses/) and reused while the model is unchanged")
    w.add_argument("--scale", action="append", default=[], metavar="LOAD=FACTOR",
                   help="scale a heat load (by its part's name, or heat_loads[i]); repeatable")
    w.add_argument("--ambient-offset", type=float, default=0.0, metavar="K",
                   help="add K kelvin to every ambient temperature (initial temperatures unchanged)")
    w.add_argument("--tolerance", type=_tolerance, default="model", metavar="K",
                   help="override mesh.tolerance_k for the meshes of the error band (as thermgui solve; "
                        "'none' = the file's mesh, with two finer meshes for the band)")
    w.add_argument("--quiet", action="store_true")
    w.add_argument("--linear-solver", default="auto", choices=["auto", "direct", "multigrid"])


    s = sub.add_parser("sweep", help="run the cases of a sweep file on Dask (LocalCluster, or --scheduler)")
    s.add_argument("sweep", help="sweep file (JSON, format thermgui-sweep version 1)")
    s.add_argument("--out", required=True, help="folder for cases.csv, worst.csv and margin.png")
    s.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="address of a running Dask scheduler (default: a LocalCluster on this machine)")
    s.add_argument("--workers", type=int, default=None, help="LocalCluster worker processes (default: up to 4)")
    s.add_argument("--tolerance", type=_tolerance, default="model", metavar="K",
                   help="override mesh.tolerance_k for every case's mesh ladder (as thermgui solve; 'none' = "
                        "the file's mesh, with two finer meshes for the band)")
    s.add_argument("--quiet", action="store_true")


COMMANDS = ("zth", "whatif", "sweep")


def run_command(args, stream=None, err=None) -> int:
    stream = stream if stream is not None else sys.stdout
    err = err if err is not None else sys.stderr
    if args.command == "zth":
        return zth_to_folder(args.model, args.out, parts=args.part, stages=args.stages, quiet=args.quiet,
                             linear_solver=args.linear_solver, stream=stream, err=err, passive=args.passive)
    if args.command == "sweep":
        from solver.answers.sweep import sweep_to_folder

        return sweep_to_folder(args.sweep, args.out, scheduler=args.scheduler, workers=args.workers,
                               quiet=args.quiet, stream=stream, err=err, tolerance_k=args.tolerance)
    from solver.answers.whatifcommand import whatif_to_folder

    return whatif_to_folder(args.model, args.out, args.scale, args.ambient_offset, quiet=args.quiet,
                            linear_solver=args.linear_solver, stream=stream, err=err, tolerance_k=args.tolerance)


def fit_networks(result, stages=None, passive: bool = False, warn=None):
    """Foster fit of every pair of a :class:`~solver.answers.zth.ZthResult`, and the Cauer ladder of each
    self term with a non-negative fit: ``(fits, cauers)`` keyed by ``(a, j)`` (cauer None where there
    is none; ``warn(message)`` says why)."""
    from solver.answers.foster import fit_foster, foster_to_cauer

    fits, cauers = {}, {}
    for a, j, part, heated in result.pairs():
        fit = fit_foster(result.times, result.zth[a, j], stages=stages, passive=passive)
        fits[(a, j)] = fit
        cauers[(a, j)] = None
        if part == heated and not fit.signed:
            try:
                cauers[(a, j)] = foster_to_cauer(fit)
            except ValueError as e:
                if warn is not None:
                    warn(f"no Cauer ladder for {part!r}: {e}")
    return fits, cauers


def zth_to_folder(model_path, out_dir, parts=None, stages=None, quiet=False, linear_solver="auto",
                  stream=None, err=None, passive: bool = False) -> int:
    from solver.answers.foster import MAX_STAGES
    from solver.model.modelfile import load_model
    from solver.fem.problem import build_problem
    from solver.answers.zth import compute_zth
    from solver.answers.zthfiles import write_zth_outputs

    stream = stream if stream is not None else sys.stdout
    err = err if err is not None else sys.stderr
    say = (lambda m: None) if quiet else (lambda m: err.write(m + "\n"))
    t0 = time.perf_counter()
    try:
        if stages is not None and not 1 <= stages <= MAX_STAGES:
            raise ModelError(("--stages", f"must be between 1 and {MAX_STAGES} (got {stages})"))
        model = load_model(model_path)
        problem = build_problem(model)
        say(f"{model_path}: {problem.n_nodes:,} nodes; unit power steps of "
            f"{len(set(p for p, _ in problem.heat_profiles))} heated part(s)")
        result = compute_zth(problem, parts=parts, linear_solver=linear_solver, progress=lambda m: say("  " + m))
    except ModelError as e:
        err.write(e.with_source(e.source or str(model_path)).describe() + "\n")
        return 2
    except SolveError as e:
        err.write(f"{model_path}: Zth failed: {e}\n")
        return 1
    for w in problem.warnings:
        say(f"warning: {w}")
    fits, cauers = fit_networks(result, stages=stages, passive=passive, warn=lambda m: say(f"warning: {m}"))
    try:
        write_zth_outputs(out_dir, result, fits, cauers, model.title)
    except OSError as e:
        err.write(f"{out_dir}: cannot write results ({e.strerror or e})\n")
        return 1
    if not quiet:
        head = f"{'part':<20} {'heated part':<20} {'Rth K/W':>9} {'stages':>6} {'fit error':>9}  network"
        lines = [head, "-" * len(head)]
        for a, j, part, heated in result.pairs():
            f = fits[(a, j)]
            kind = "signed Foster" if f.signed else ("Foster + Cauer" if cauers[(a, j)] is not None else "Foster")
            lines.append(f"{part[:20]:<20} {heated[:20]:<20} {result.rth[a, j]:9.3f} {f.stages:6d} "
                         f"{100 * f.error:8.2f}%  {kind}")
        stream.write("\n".join(lines) + "\n")
        stream.write(f"times {result.times[0]:.3g} s to {result.times[-1]:.3g} s; reduced basis of "
                     f"{result.basis_size} vectors; results in {out_dir} ({time.perf_counter() - t0:.1f} s)\n")
        stream.write(CAUTION + "\n")
    return 0
