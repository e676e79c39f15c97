"""Does the window keep answering while a ~200 000-node model runs on the worker thread?

Runs the bundled sample refined to about 200 000 nodes (a short stretch of its operating profile),
first headless (the baseline, same RunSession and result files as the app), then in the app's
main window with the live 3D view, while a 20 ms QTimer ticks and the camera is turned every
200 ms as a user dragging the view would. Prints the largest gap between timer ticks per phase
(idle, meshing/assembly, stepping) and the solve time in the app as a ratio of the headless one.

    python3 benchmarks/gui_responsiveness.py [--nodes 200000] [--steps 30]

Needs a display (run under ``xvfb-run -a`` on a machine without one). Not a test: timings on
a shared 2-core machine are noisy; compare the ratios, not the absolute numbers.
"""
from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def refined_model(target_nodes: int, steps: int) -> dict:
    """The sample with the cell size chosen (by bisection) to give about ``target_nodes`` nodes."""
    from solver.mesh import estimate_nodes
    from solver.model import parse_model

    d = json.loads((ROOT / "samples" / "outdoor_radio_box.json").read_text())
    lo, hi = 0.5, 4.0
    for _ in range(14):
        mid = 0.5 * (lo + hi)
        d["mesh"]["cell_mm"] = round(mid, 4)
        if estimate_nodes(parse_model(d)) > target_nodes:
            lo = mid
        else:
            hi = mid
    d["mesh"]["cell_mm"] = round(hi, 4)
    step = d["run"]["step_s"]
    d["run"].update(duration_s=steps * step, output_every_s=5 * step)
    return d


def headless_seconds(model, out_dir) -> tuple[float, int]:
    from solver.session import RunSession

    s = RunSession(model, out_dir)
    last = None
    for ev in s.events():
        last = ev
    s.finish()
    return last.elapsed_s, s.problem.n_nodes


def gaps(ticks, t0, t1) -> float:
    inside = [t for t in ticks if t0 <= t <= t1]
    return max((b - a for a, b in zip(inside, inside[1:])), default=float("nan"))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nodes", type=int, default=200_000)
    ap.add_argument("--steps", type=int, default=30)
    ap.add_argument("--no-turn", action="store_true", help="do not turn the camera while it runs")
    args = ap.parse_args(argv)
    os.environ.setdefault("THERMGUI_STATE_DIR", tempfile.mkdtemp(prefix="thermgui-bench-state-"))

    from solver.model import parse_model, save_model

    work = Path(tempfile.mkdtemp(prefix="thermgui-bench-"))
    d = refined_model(args.nodes, args.steps)
    model = parse_model(d)
    path = work / "refined.json"
    save_model(model, path)

    t = time.perf_counter()
    base_s, n_nodes = headless_seconds(model, work / "headless")
    print(f"model: sample refined to cell {d['mesh']['cell_mm']} mm, {n_nodes:,} nodes, {args.steps} steps "
          f"({time.perf_counter() - t:.1f} s headless including meshing)")

    import pyvista as pv
    from PySide6.QtCore import QEventLoop, QTimer

    from thermgui.app import make_application, open_window

    pv.global_theme.multi_samples = 0
    app = make_application()
    win = open_window(path, autosave_s=0)
    for _ in range(20):
        app.processEvents()
    ticks: list[float] = []
    marks: dict[str, float] = {}
    tick = QTimer()
    tick.setInterval(20)
    tick.timeout.connect(lambda: ticks.append(time.perf_counter()))
    turn = QTimer()
    turn.setInterval(200)

    def rotate():
        win.viewport.plotter.camera.azimuth += 3
        win.viewport.plotter.interactor.update()

    turn.timeout.connect(rotate)
    tick.start()
    if not args.no_turn:
        turn.start()
    idle = QEventLoop()
    QTimer.singleShot(2000, idle.quit)
    marks["idle0"] = time.perf_counter()
    idle.exec()
    res = win.results
    marks["start"] = time.perf_counter()
    res.start_run()
    last = {}
    res.worker.prepared.connect(lambda _s: marks.setdefault("prepared", time.perf_counter()))
    res.worker.progress.connect(lambda step, n, t_s, el: last.update(elapsed=el))
    loop = QEventLoop()
    res.worker.done.connect(loop.quit)
    loop.exec()
    marks["end"] = time.perf_counter()
    for _ in range(20):
        app.processEvents()
    tick.stop()
    turn.stop()
    gui_s = last.get("elapsed", float("nan"))
    prep = marks.get("prepared", marks["end"])
    print(f"largest gap between 20 ms timer ticks: idle {1000 * gaps(ticks, marks['idle0'], marks['start']):.0f} ms, "
          f"while meshing/assembling {1000 * gaps(ticks, marks['start'], prep):.0f} ms, "
          f"while stepping {1000 * gaps(ticks, prep, marks['end']):.0f} ms")
    print(f"stepping time: headless {base_s:.1f} s, in the app with live view {gui_s:.1f} s "
          f"(ratio {gui_s / base_s:.2f}; outputs drawn: {res.store.n_frames if res.store else 0})")
    win.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
