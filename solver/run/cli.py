"""Headless solve: ``thermgui solve MODEL.json --out DIR`` (also ``python -m solver``).

Exit status 0 on success, 2 for invalid input (nothing is written), 1 for anything else.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from solver.run.accuracy import format_record
from solver.caution import CAUTION
from solver.errors import Cancelled, ModelError, SolveError
from solver.io.fieldseries import FieldWriteError
from solver.model.modelfile import load_model
from solver.results.recorder import sort_for_review
from solver.run.session import RunSession




class ProgressBar:
    """A one-line text progress bar on a stream, redrawn at most ten times a second."""

    def __init__(self, stream=None, width: int = 30, enabled: bool = True):
        self.stream = stream if stream is not None else sys.stderr
        self.width, self.enabled = width, enabled
        self._last = 0.0
        self._tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self._last_decile = -1
        self._level = 0

    def update(self, ev, force: bool = False) -> None:
        if not self.enabled:
            return
        if getattr(ev, "level", 0) != self._level:  # a new mesh level starts its own bar
            self._level = ev.level
            self._last_decile = -1
        frac = ev.fraction
        if not self._tty:  # a log file: one line per tenth of the run
            decile = int(frac * 10 + 1e-9)
            if decile == self._last_decile:
                return
            self._last_decile = decile
        now = time.perf_counter()
        if self._tty and not force and now - self._last < 0.1:
            return
        self._last = now
        filled = int(round(frac * self.width))
        eta = ev.elapsed_s * (1 - frac) / frac if frac > 0 else float("nan")
        hot = float(ev.part_max.max()) if len(ev.part_max) else float("nan")
        lead, tail = ("\r", "") if self._tty else ("", "\n")
        self.stream.write(f"{lead}mesh {self._level} [{'#' * filled}{'.' * (self.width - filled)}] {100 * frac:5.1f}%  "
                          f"t = {ev.time_s:9.2f} s  hottest {hot:7.2f} °C  left ~{eta:5.0f} s {tail}")
        self.stream.flush()

    def finish(self) -> None:
        if self.enabled and self._tty:
            self.stream.write("\n")
            self.stream.flush()


def solve_to_folder(model_path, out_dir, quiet: bool = False, linear_solver: str = "auto",
                    stream=None, err=None, method: str | None = None, tolerance_k="model",
                    fields: str = "all", force: bool = False, memory_limit_gb: float | None = None) -> int:
    """Run a model file and write results; returns the exit status (streams default to stdout/stderr)."""
    stream = stream if stream is not None else sys.stdout
    err = err if err is not None else sys.stderr
    t0 = time.perf_counter()
    try:
        model = load_model(model_path)
        if memory_limit_gb is not None and not (0 < memory_limit_gb < 1e6):
            raise ModelError(("--memory-limit-gb", f"must be a positive number of GB (got {memory_limit_gb:g})"))
        session = RunSession(model, out_dir, linear_solver=linear_solver, method=method, tolerance_k=tolerance_k,
                             fields=fields, force=force,
                             memory_limit_bytes=None if memory_limit_gb is None else int(memory_limit_gb * 1e9))
    except ModelError as e:
        err.write(e.with_source(e.source or str(model_path)).describe() + "\n")
        return 2
    say = (lambda msg: None) if quiet else (lambda msg: err.write(msg + "\n"))
    say(f"{model_path}: {session.describe()}")
    say(f"  memory estimate before meshing: about {session.memory_estimate.total_bytes / 1e9:.2g} GB")
    for line in session.resolution():
        say(f"  mesh in {line}")
    for w in session.warnings:
        say(f"warning: {w}")
    bar = ProgressBar(err, enabled=not quiet)
    level = 0
    try:
        for ev in session.events():
            if ev.level != level:
                level = ev.level
                bar.finish()
                say(f"{model_path}: {session.describe()}")
            bar.update(ev, force=ev.step == ev.n_steps)
    except (SolveError, Cancelled) as e:
        bar.finish()
        err.write(f"{model_path}: run stopped: {e}\n")
        return 1
    except OSError as e:
        bar.finish()
        err.write(_write_error(out_dir, e))
        return 1
    bar.finish()
    try:
        rows = session.finish()
    except OSError as e:
        err.write(_write_error(out_dir, e))
        return 1
    for w in session.accuracy_warnings():
        err.write(f"warning: {w}\n")
    if not quiet:
        stream.write(format_summary(rows) + "\n")
        record = session.accuracy_record()
        if record:
            stream.write(format_record(record) + "\n")
        st = session.stepper
        stream.write(f"method: {st.method} ({st.method_choice.reason})\n")
        if getattr(session, "cycle", None) is not None:
            stream.write(session.cycle.describe() + "\n")
        if st.reduced_info is not None and st.method == "reduced":
            stream.write(st.reduced_info.describe() + "\n")
        fw = session.written_files()
        stream.write(f"fields: {', '.join(fw) if fw else 'none written (--fields none)'}\n")
        stream.write(f"energy balance: largest step residual {session.recorder.relative_energy_residual:.1e} of "
                     f"the largest heat flow; results in {out_dir} ({time.perf_counter() - t0:.1f} s)\n")
        stream.write(CAUTION + "\n")
    return 0


def _write_error(out_dir, e: OSError) -> str:
    """One line naming the folder (a FieldWriteError from the writer thread names it already); the
    run wrote into its staging folder, so the results folder is as it was before the run."""
    what = f"{e}" if isinstance(e, FieldWriteError) else f"{out_dir}: cannot write results ({e.strerror or e})"
    return what + "; the folder was left as it was\n"


def format_summary(rows) -> str:
    """Plain-text table, parts over their rating first."""
    head = (f"{'part':<24} {'rated °C':>9} {'peak °C':>9} {'± K':>6} {'at s':>9} {'margin K':>9} "
            f"{'over at s':>10}  status")
    lines = [head, "-" * len(head)]
    for r in sort_for_review(rows):
        def f(v, w, fmt):
            return f"{'' if v is None else fmt.format(v):>{w}}"
        lines.append(f"{r.part[:24]:<24} {f(r.rated_c, 9, '{:.1f}')} {f(r.peak_c, 9, '{:.2f}')} "
                     f"{f(r.peak_error_k, 6, '{:.2f}')} "
                     f"{f(r.peak_time_s, 9, '{:.1f}')} {f(r.margin_k, 9, '{:+.2f}')} {f(r.first_over_s, 10, '{:.1f}')}"
                     f"  {r.status.upper() if r.status in ('over', 'at-risk') else r.status}")
    return "\n".join(lines)


def add_solve_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("model", help="model file (JSON, format thermgui-model version 1)")
    p.add_argument("--out", required=True, help="folder for peaks.csv, history.csv, run.json and the field series")
    p.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    p.add_argument("--fields", choices=["all", "none"], default="all",
                   help="write the temperature field at output times (field.vtkhdf; default all), or none "
                        "(peaks.csv, history.csv and run.json are written either way)")
    p.add_argument("--linear-solver", default="auto", choices=["auto", "direct", "multigrid"],
                   help="linear solver for implicit steps (default: chosen by size)")
    p.add_argument("--tolerance", type=_tolerance, default="model", metavar="K",
                   help="override mesh.tolerance_k: refine until each rated peak's estimated error is below K "
                        "kelvin, or 'none' to keep the file's mesh (its error is still estimated)")
    p.add_argument("--force", action="store_true",
                   help="write into a folder that holds other files (they are kept, never deleted)")
    p.add_argument("--memory-limit-gb", type=float, default=None, metavar="GB",
                   help="refuse a run whose estimated memory exceeds this (default: 70%% of available memory)")
    p.add_argument("--method", choices=["auto", "full", "reduced"], default=None,
                   help="override run.method: auto (by predicted cost; the default), step the full system, "
                        "or a reduced basis within run.tolerance_k")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m solver", description="Solve an enclosure model headless.")
    add_solve_arguments(parser)
    args = parser.parse_args(argv)
    return solve_to_folder(args.model, args.out, args.quiet, args.linear_solver, method=args.method,
                           tolerance_k=args.tolerance, fields=args.fields, force=args.force,
                           memory_limit_gb=args.memory_limit_gb)


def _tolerance(text: str):
    """--tolerance value: a positive number of kelvin, or none/null ("model": the file's own)."""
    if text == "model":
        return text
    if text.strip().lower() in ("none", "null"):
        return None
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--tolerance must be a positive number of kelvin or 'none' (got {text!r})")
    if not (v > 0 and v < float("inf")):
        raise argparse.ArgumentTypeError(f"--tolerance must be a positive number of kelvin or 'none' (got {text!r})")
    return v
