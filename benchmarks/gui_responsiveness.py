"""Does the window keep answering while a ~200 000-node model runs on the worker thread?

Runs the bundled sample refined to about 200 000 nodes (a short stretch of its operating profile),
headless (the baseline, same RunSession and result files as the app) before and after, and in the app's
main window with the live 3D view, while a 20 ms QTimer ticks and the camera is turned every
200 ms as a user dragging the view would. Prints the largest gap between timer ticks per phase
(idle, meshing/assembly, stepping), the stepping time (first step event to last, so meshing and
building the display are left out on both sides) in the app as a ratio of the headless one, and
how many 3D renders the run caused and how much wall time they took (VTK render-window events).

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
    from solver.mesh.mesher import estimate_nodes
    from solver.model.modelfile import parse_model

    d = json.loads((ROOT / "samples" / "outdoor_radio_box.json").read_text())
    def nodes(cell):
        d["mesh"]["cell_mm"] = round(cell, 4)
        return estimate_nodes(parse_model(d))

    lo, hi = 0.5, 4.0  # node count falls in steps as the cell grows: take the nearer side
    for _ in range(14):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if nodes(mid) > target_nodes else (lo, mid)
    best = min((lo, hi), key=lambda c: abs(nodes(c) - target_nodes))
    d["mesh"]["cell_mm"] = round(best, 4)
    step = d["run"]["step_s"]
    d["run"].update(duration_s=steps * step, output_every_s=5 * step)
    return d


def headless_seconds(model, out_dir) -> tuple[float, int]:
    """Wall time (s) from the first step event (after meshing, assembly and, in the app, building
    the display) to the last one: the stepping phase that the live view could slow down."""
    from solver.run.session import RunSession

    s = RunSession(model, out_dir)
    first = last = None
    for ev in s.events():
        first = ev.elapsed_s if first is None else first
        last = ev
    s.finish()
    return last.elapsed_s - first, s.problem.n_nodes


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

    from solver.model.modelfile import parse_model, save_model

    work = Path(tempfile.mkdtemp(prefix="thermgui-bench-"))
    d = refined_model(args.nodes, args.steps)
    model = parse_model(d)
    path = work / "refined.json"
    save_model(model, path)

    t = time.perf_counter()
    base_s, n_nodes = headless_seconds(model, work / "headless")
    print(f"model: sample refined to cell {d['mesh']['cell_mm']} mm, {n_nodes:,} nodes, {args.steps} steps "
          f"({time.perf_counter() - t:.1f} s headless including meshing; stepping {base_s:.1f} s)")

    import pyvista as pv

    from thermgui.app import make_application, open_window

    pv.global_theme.multi_samples = 0
    app = make_application()
    slow = watch_slots()
    win = open_window(path, autosave_s=0)
    for _ in range(20):
        app.processEvents()
    results = {}
    for turning in ([False, True] if not args.no_turn else [False]):
        slow.clear()
        results[turning] = run_in_app(app, win, turning)
        label = "turning the view every 200 ms" if turning else "view left alone"
        r = results[turning]
        print(f"in the app, {label}: largest gap between 20 ms timer ticks: idle {1000 * r['idle']:.0f} ms, "
              f"while meshing/assembling {1000 * r['prep']:.0f} ms, while stepping {1000 * r['step']:.0f} ms; "
              f"stepping {r['solve']:.1f} s = {r['solve'] / base_s:.2f} x headless ({base_s:.1f} s); "
              f"live redraws paced every {r['pace']:.2f} s")
        print(f"   3D renders from Run to the end of the run: {r['renders']}, {r['render_s']:.1f} s in all "
              f"({100 * r['render_s'] / r['wall']:.0f} % of the {r['wall']:.1f} s wall time)")
        top = sorted(slow, key=lambda x: -x[1])[:4]
        print("   longest main-thread handlers: " + ", ".join(f"{n} {1000 * t:.0f} ms" for n, t in top))
    win.close()
    again, _ = headless_seconds(model, work / "headless2")
    print(f"headless stepping again after the app runs: {again:.1f} s (before: {base_s:.1f} s); ratios against "
          f"their mean {0.5 * (base_s + again):.1f} s: " + ", ".join(
              f"{'turning' if k else 'left alone'} {r['solve'] / (0.5 * (base_s + again)):.2f}"
              for k, r in results.items()))
    return 0


def watch_slots() -> list:
    """Time the results controller's handlers on the main thread (name, seconds)."""
    import functools

    from thermgui.runresults import controller as C

    seen: list = []
    for name in ("_on_prepared", "_on_output", "_on_preview", "_live_refresh", "show_index", "_on_succeeded"):
        orig = getattr(C.ResultsController, name)

        def wrap(orig=orig, name=name):
            @functools.wraps(orig)
            def f(self, *a, **k):
                t = time.perf_counter()
                try:
                    return orig(self, *a, **k)
                finally:
                    seen.append((name, time.perf_counter() - t))
            return f
        setattr(C.ResultsController, name, wrap())
    return seen


def thread_cpu() -> dict:
    """CPU seconds per thread name of this process (Linux /proc; empty elsewhere)."""
    out: dict = {}
    tick = os.sysconf("SC_CLK_TCK") if hasattr(os, "sysconf") else 100
    for task in Path("/proc/self/task").glob("*") if Path("/proc/self/task").exists() else []:
        try:
            name = (task / "comm").read_text().strip()
            fields = (task / "stat").read_text().rsplit(")", 1)[1].split()
            out[name] = out.get(name, 0.0) + (int(fields[11]) + int(fields[12])) / tick
        except (OSError, IndexError, ValueError):
            continue
    return out


def run_in_app(app, win, turning: bool) -> dict:
    from PySide6.QtCore import QEventLoop, QTimer

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
    renders: list[float] = []
    rw = win.viewport.plotter.render_window
    began = {}
    stacks = os.environ.get("GUI_BENCH_STACKS")  # set to 1 to print where each render came from

    def on_start(*_):
        began.update(t=time.perf_counter())
        if stacks and "start" in marks:
            import traceback

            frames = [f"{Path(f.filename).name}:{f.lineno} {f.name}" for f in traceback.extract_stack()[:-1]
                      if "thermgui" in f.filename or "pyvista" in f.filename]
            print(f"render at +{began['t'] - marks['start']:.2f} s: " + " <- ".join(reversed(frames[-10:])))

    obs = [rw.AddObserver("StartEvent", on_start),
           rw.AddObserver("EndEvent", lambda *_: renders.append(time.perf_counter() - began["t"]))]

    tick.start()
    if turning:
        turn.start()
    idle = QEventLoop()
    QTimer.singleShot(2000, idle.quit)
    marks["idle0"] = time.perf_counter()
    cpu_idle = thread_cpu()
    idle.exec()
    print("   CPU seconds per thread over 2 s idle: "
          + str({k: round(v - cpu_idle.get(k, 0.0), 2) for k, v in thread_cpu().items()
                 if v - cpu_idle.get(k, 0.0) > 0.02}))
    res = win.results
    if os.environ.get("GUI_BENCH_NO_PROGRESS"):  # experiment: no progress-bar repaints at all
        res.status.progress = lambda *a: None
    if os.environ.get("GUI_BENCH_LIVE_DUTY"):  # experiment: another share of time for live redraws
        import thermgui.runresults.controller as ctl

        ctl.LIVE_DUTY = float(os.environ["GUI_BENCH_LIVE_DUTY"])
        ctl.LIVE_LONGEST_MS = 60000
    marks["start"] = time.perf_counter()
    res.start_run()
    last = {}
    cpu0 = {}
    res.worker.prepared.connect(lambda *_: (marks.setdefault("prepared", time.perf_counter()),
                                            cpu0.update(thread_cpu())))
    res.worker.progress.connect(lambda step, n, t_s, el: last.update({"elapsed" if step else "first": el}))
    loop = QEventLoop()
    res.worker.done.connect(loop.quit)
    loop.exec()
    marks["end"] = time.perf_counter()
    cpu1 = thread_cpu()
    by_thread = {k: round(v - cpu0.get(k, 0.0), 2) for k, v in cpu1.items() if v - cpu0.get(k, 0.0) > 0.05}
    print(f"   CPU seconds per thread while stepping: {by_thread}")
    n_run, t_run = len(renders), sum(renders)
    for _ in range(20):
        app.processEvents()
    tick.stop()
    turn.stop()
    for o in obs:
        rw.RemoveObserver(o)
    prep = marks.get("prepared", marks["end"])
    return {"idle": gaps(ticks, marks["idle0"], marks["start"]), "prep": gaps(ticks, marks["start"], prep),
            "step": gaps(ticks, prep, marks["end"]),
            "solve": last.get("elapsed", float("nan")) - last.get("first", float("nan")),
            "pace": res._redraw.interval() / 1000.0, "renders": n_run, "render_s": t_run,
            "wall": marks["end"] - marks["start"]}


if __name__ == "__main__":
    sys.exit(main())
