"""The ``thermgui`` command: open the app, or solve headless.

    thermgui                      open the app on the bundled default sample
    thermgui open FILE            open a model (or a results folder) in the app
    thermgui solve MODEL --out D  run headless and write results to D
"""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from solver import __version__
from solver.cli import add_solve_arguments, solve_to_folder

SAMPLES_DIR = Path(__file__).resolve().parent.parent / "samples"
DEFAULT_SAMPLE = "outdoor_radio_box.json"


def default_sample() -> Path:
    return SAMPLES_DIR / DEFAULT_SAMPLE


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="thermgui", description="Thermal transients in electronics enclosures. "
                                     "With no command, opens the app on a bundled sample.")
    parser.add_argument("--version", action="version", version=f"thermgui {__version__}")
    sub = parser.add_subparsers(dest="command")
    p_open = sub.add_parser("open", help="open a model file or a results folder in the app")
    p_open.add_argument("path", help="model file (.json) or results folder")
    p_solve = sub.add_parser("solve", help="solve a model headless and write peaks.csv, history.csv and the field")
    add_solve_arguments(p_solve)
    return parser


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    if args.command == "solve":
        try:
            return solve_to_folder(args.model, args.out, args.quiet, args.linear_solver, method=args.method,
                                   tolerance_k=args.tolerance, force=args.force,
                                   memory_limit_gb=args.memory_limit_gb)
        except KeyboardInterrupt:
            sys.stderr.write("interrupted\n")
            return 1
        except Exception as e:  # anything unexpected: a message, not a traceback (set THERMGUI_DEBUG=1 for one)
            if os.environ.get("THERMGUI_DEBUG"):
                raise
            sys.stderr.write(f"{args.model}: internal error: {type(e).__name__}: {e}\n"
                             "(set THERMGUI_DEBUG=1 to see the traceback)\n")
            return 1
    path = Path(args.path) if args.command == "open" else default_sample()
    from .app import run_app  # Qt is imported only when a window is wanted

    return run_app(path)


if __name__ == "__main__":
    sys.exit(main())
