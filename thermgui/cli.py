"""The ``thermgui`` command: open the app, or solve headless.

    thermgui                      open the app on the bundled default sample
    thermgui open FILE            open a model (or a results folder) in the app
    thermgui solve MODEL --out D  run headless and write results to D
    thermgui report DIR -o F.html one self-contained HTML design-review report of a finished run
    thermgui zth MODEL --out D    thermal impedance curves and RC networks (solver.answers.commands)
    thermgui whatif MODEL --out D scaled loads / shifted ambient by superposition
    thermgui sweep SWEEP --out D  sweep cases on Dask (LocalCluster or --scheduler ADDRESS)
"""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from solver import __version__
from solver.answers import commands as answers_cli
from solver.run.cli import add_solve_arguments, solve_to_folder

from .samples import DEFAULT_SAMPLE, SAMPLES_DIR, default_sample  # noqa: F401 (re-exported)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="thermgui", description="Thermal transients in electronics enclosures. "
                                     "With no command, opens the app on a bundled sample.")
    parser.add_argument("--version", action="version", version=f"thermgui {__version__}")
    sub = parser.add_subparsers(dest="command")
    p_open = sub.add_parser("open", help="open a model file or a results folder in the app")
    p_open.add_argument("path", help="model file (.json) or results folder")
    p_solve = sub.add_parser("solve", help="solve a model headless and write peaks.csv, history.csv and the field")
    add_solve_arguments(p_solve)
    p_rep = sub.add_parser("report", help="write a self-contained HTML design-review report of a finished run")
    p_rep.add_argument("results", help="results folder written by `thermgui solve` or the app")
    p_rep.add_argument("-o", "--output", help="HTML file to write (default: <folder>-report.html beside the folder)")
    p_rep.add_argument("--no-pictures", action="store_true", help="leave out the 3D pictures (no OpenGL needed)")
    answers_cli.add_commands(sub)
    return parser


def report_command(args) -> int:
    """``thermgui report``: 0 written, 2 for a folder that is not a complete results folder (nothing
    written), 1 when the file cannot be written."""
    from .report import ReportError, write_report  # Qt-free

    notices: list[str] = []
    try:
        out = write_report(args.results, args.output, pictures=not args.no_pictures, notices=notices)
    except ReportError as e:
        sys.stderr.write(f"{e}\n")
        return 2
    except OSError as e:
        sys.stderr.write(f"{args.output or args.results}: cannot write the report ({e.strerror or e})\n")
        return 1
    for n in notices:
        sys.stderr.write(f"note: {n}\n")
    print(f"report written to {out}")
    return 0


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    if args.command == "report":
        return report_command(args)
    if args.command == "solve" or args.command in answers_cli.COMMANDS:
        try:
            if args.command != "solve":
                return answers_cli.run_command(args)
            return solve_to_folder(args.model, args.out, args.quiet, args.linear_solver, method=args.method,
                                   tolerance_k=args.tolerance, fields=args.fields, force=args.force,
                                   memory_limit_gb=args.memory_limit_gb)
        except KeyboardInterrupt:
            sys.stderr.write("interrupted\n")
            return 1
        except Exception as e:  # anything unexpected: a message, not a traceback (set THERMGUI_DEBUG=1 for one)
            if os.environ.get("THERMGUI_DEBUG"):
                raise
            sys.stderr.write(f"{getattr(args, 'model', getattr(args, 'sweep', ''))}: internal error: {type(e).__name__}: {e}\n"
                             "(set THERMGUI_DEBUG=1 to see the traceback)\n")
            return 1
    path = Path(args.path) if args.command == "open" else default_sample()
    from .app import run_app  # Qt is imported only when a window is wanted

    return run_app(path)


if __name__ == "__main__":
    sys.exit(main())
