"""How long the app's what-if takes to answer a change, at about 200 000 nodes.

The invented "rooftop edge gateway" (benchmarks/scaled_model.py), one hour, is solved once headless
(a reduced run of the file's mesh: the baseline, measured here), its results folder is opened in the
app's main window, the what-if panel is handed that run's problem, and the run's unit responses are
built as the app builds them (``solver.answers.whatif.prepare_unit_responses``, timed). Then factors and the
ambient offset are typed into the panel's boxes and the time from the change to the answer shown
(peak table and chart updated, through the worker thread) is measured for each, with the share spent on
the window's thread (table and chart). Printed as seconds and as ratios to the baseline run.

    xvfb-run -a python3 benchmarks/whatif_app.py [--nodes 200000] [--changes 5]

Not a test: timings on a shared 2-core machine are noisy; nothing asserts.
"""
from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from scaled_model import cell_for_nodes, model_dict  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--nodes", type=int, default=200000)
    ap.add_argument("--duration", type=float, default=3600.0)
    ap.add_argument("--changes", type=int, default=5)
    args = ap.parse_args(argv)

    import pyvista as pv
    from PySide6.QtCore import QObject
    from PySide6.QtWidgets import QApplication

    import solver
    from solver.run.session import RunSession
    from solver.answers.whatif import prepare_unit_responses
    from thermgui.app import make_application, open_window

    pv.global_theme.multi_samples = 0
    d = model_dict(cell_for_nodes(args.nodes), duration_s=args.duration, step_s=1.0, scheme="crank-nicolson",
                   method="reduced")
    d["mesh"]["tolerance_k"] = None
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        path = tmp / "gateway.json"
        path.write_text(json.dumps(d))
        folder = tmp / "gateway.results"
        model = solver.parse_model(d)
        t0 = time.perf_counter()
        session = RunSession(model, folder, tolerance_k=False)  # the baseline: one reduced run, file's mesh
        for _ in session.events():
            pass
        session.finish()
        t_run = time.perf_counter() - t0
        problem = session.problem

        import os

        os.environ["THERMGUI_STATE_DIR"] = str(tmp / "state")  # fresh settings, no recovery offer
        app = make_application()
        win = open_window(None, autosave_s=0, size=(1366, 768))
        win.show()
        app.processEvents()
        res = win.results
        assert res.open_results(folder) is not None
        wi = res.whatif
        wi.action.trigger()
        app.processEvents()
        wi.run_finished(problem)  # the problem of the run whose folder was opened
        wi.stop()
        wi.wait()
        t0 = time.perf_counter()
        wi.units = prepare_unit_responses(problem)
        t_units = time.perf_counter() - t0
        wi._on_prepared(wi.units)

        gui_s = []
        orig = wi._on_answer

        class Timed(QObject):  # a receiver on the window's thread, so the answer arrives queued there
            def on_answer(self, result):
                t = time.perf_counter()
                orig(result)
                QApplication.processEvents()  # the table and chart repaint
                gui_s.append(time.perf_counter() - t)

        timed = Timed()
        wi._on_answer = timed.on_answer
        wi._eval = None
        changes = [(0, 1.2, 0.0), (None, None, 5.0), (1, 1.5, 5.0), (0, 0.8, -3.0), (2, 1.1, -3.0),
                   (None, None, 10.0), (3, 0.5, 10.0)][:args.changes]
        times = []
        for box, factor, offset in changes:
            before = wi.answer
            t0 = time.perf_counter()
            if box is not None:
                wi.panel.factors[box].setValue(factor)
            else:
                wi.panel.offset.setValue(offset)
            while wi.answer is before or wi._eval is not None and wi._eval.running:
                QApplication.processEvents()
                time.sleep(0.002)
            QApplication.processEvents()
            times.append(time.perf_counter() - t0)
        print(f"gateway, {problem.n_nodes:,} nodes, {args.duration:g} s, basis {wi.units.v.shape[1]} vectors, "
              f"{len(wi.units.times):,} samples; window 1366 x 768")
        print(f"baseline: one reduced run of the model (file's mesh) {t_run:.1f} s; "
              f"unit responses once per run {t_units:.1f} s ({t_units / t_run:.2f} of the run)")
        print("change -> answer shown: " + ", ".join(f"{t:.2f} s" for t in times)
              + f"; median {statistics.median(times):.2f} s = {statistics.median(times) / t_run:.3f} of the run")
        print("of which on the window's thread (table, chart, repaint): "
              + ", ".join(f"{t * 1000:.0f} ms" for t in gui_s))
        win.shutdown()
        win.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
