"""The design-review report: one self-contained HTML file from a finished results folder (Qt-free).

``write_report(folder, out)`` checks that ``folder`` holds a complete run, then writes one HTML
file that carries everything inline (styles, and pictures as base64 PNG): the cautions, the peak
table in review order with verdicts and error bands, the chart of part maxima, 3D pictures at the
hottest moment of each part over or at risk (when an OpenGL context can be had), the model
(parts, materials with their sources, heat-load profiles as small plots, convection faces), the
mesh with its accuracy record when run.json has one, and the energy balance. It prints to PDF
page by page (A4, no table or picture split across pages).

Used by ``thermgui report RESULTS_DIR -o FILE.html`` and by the app's *File ▸ Export Report…*.
Temperatures in °C, lengths in mm, times in the unit the app's slider uses for the run.
"""
from __future__ import annotations

import base64
import datetime as _dt
import io
import math
import os
import tempfile
from pathlib import Path

import numpy as np

from solver import __version__
from solver.errors import ModelError
from solver.io.runfolder import FinishedRun, is_run_folder, load_run
from solver.io.runstore import cut_short_runs
from solver.io.fieldseries import FIELD_FILE, LEGACY_SERIES

from .runresults.peakview import STATUS_WORDS, VERDICT_FILL, VERDICT_TEXT, columns, display_row, review_order
from .runresults.timefmt import format_time, time_unit

CAUTION = ("Results are engineering estimates from a conduction model with assumed convection coefficients. "
           "Confirm them by measurement on real hardware, and defer to the applicable safety standards, codes "
           "and licensed practice before relying on them.")
REQUIRED = ("run.json", "peaks.csv", "history.csv")
LINE_COLOURS = ["#1f5fa8", "#c4512b", "#2c8a4b", "#8a3fa0", "#b08900", "#2a8f9e", "#7a4b2a", "#5c6770"]


class ReportError(Exception):
    """A folder the report cannot be made from (the message names the folder and the problem)."""


# ------------------------------------------------------------------ checks
def check_results_folder(folder) -> FinishedRun:
    """The finished run in ``folder``; ReportError unless it is a complete results folder.

    Incomplete (the run was cut short): frames were written but not the files a finished run
    ends with, or the last output lies before the model's duration."""
    folder = Path(folder)
    missing = [n for n in REQUIRED if not (folder / n).is_file()]
    started = ((folder / "field").is_dir() or (folder / FIELD_FILE).exists() or (folder / LEGACY_SERIES).exists()
               or any((folder / n).exists() for n in REQUIRED))
    if not folder.is_dir():
        if cut_short_runs(folder):  # a first run cut short leaves only its staging folder beside the name
            try:
                load_run(folder)
            except ModelError as e:
                raise ReportError(e.describe()) from None  # "incomplete: … cut short" (or still running)
        kind = "a file" if folder.exists() else "no such folder"
        raise ReportError(f"{folder}: not a results folder ({kind})")
    if missing and started:
        raise ReportError(f"{folder}: incomplete results folder (the run was cut short: {', '.join(missing)} "
                          "missing); run the model to the end, then make the report")
    if missing or not is_run_folder(folder):
        raise ReportError(f"{folder}: not a results folder (run.json, peaks.csv and history.csv "
                          "are missing)")
    try:
        run = load_run(folder)
    except ModelError as e:
        raise ReportError(e.describe()) from None  # names the folder
    if run.info.get("complete") is False:
        raise ReportError(f"{folder}: incomplete results folder (run.json says the run was cut short)")
    duration = float(run.model_dict.get("run", {}).get("duration_s", 0.0) or 0.0)
    if not len(run.times) or not run.peaks or (duration > 0 and run.times[-1] < duration * (1 - 1e-9) - 1e-9):
        last = format_time(float(run.times[-1]), duration) if len(run.times) else "no output"
        raise ReportError(f"{folder}: incomplete results folder (the run was cut short: last output at {last} "
                          f"of {format_time(duration, duration)})")
    return run


# ------------------------------------------------------------------ pictures
def _png(fig) -> str:
    """A matplotlib Figure as a data: URI (Agg canvas; no pyplot, no GUI backend)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def history_chart(run: FinishedRun, rows: list[dict], span_s: float) -> str:
    """Part maxima against time (rated parts; every part if none is rated), ratings as dashed lines
    (one label per distinct rating), over and at-risk parts drawn heavier, the error band shaded."""
    from matplotlib.figure import Figure

    names = list(run.info.get("part_names") or [])
    by = {r["part"]: r for r in rows}
    rated = [n for n in names if _f(by.get(n, {}).get("rated_c")) is not None]
    shown = rated or names
    unit, size = time_unit(span_s)
    t = np.asarray(run.times if not len(run.history) else run.history[:, 0], float) / size
    fig = Figure(figsize=(8.0, 3.6))
    ax = fig.add_subplot(1, 1, 1)
    ratings: dict[float, list] = {}
    for k, n in enumerate(shown):
        col = f"max:{n}"
        if col not in run.history_header:
            continue
        y = run.history[:, run.history_header.index(col)]
        verdict = by.get(n, {}).get("status", "")
        heavy = verdict in ("over", "at-risk")
        colour = LINE_COLOURS[k % len(LINE_COLOURS)]
        ax.plot(t, y, color=colour, lw=2.6 if heavy else 1.3, label=n + (f" ({STATUS_WORDS[verdict]})" if heavy else ""),
                zorder=3 if heavy else 2)
        err = _f(by.get(n, {}).get("peak_error_k"))
        if err:
            ax.fill_between(t, y - err, y + err, color=colour, alpha=0.15, lw=0)
        r = _f(by.get(n, {}).get("rated_c"))
        if r is not None:
            ratings.setdefault(r, []).append(n)
    for r, parts in sorted(ratings.items()):
        ax.axhline(r, color="#555555", ls="--", lw=1.0)
        ax.annotate(f"rating {r:g} °C: {', '.join(parts)}", (0.01, r), xycoords=("axes fraction", "data"),
                    xytext=(0, 2), textcoords="offset points", fontsize=7.5, color="#333333")
    ax.set_xlim(0, max(span_s / size, 1e-9))
    ax.set_xlabel(f"time ({unit})")
    ax.set_ylabel("part maximum (°C)")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7.5, loc="lower right", ncol=2 if len(shown) > 4 else 1)
    fig.tight_layout()
    return _png(fig)


def profile_plot(profile, duration_s: float, unit_label: str) -> str:
    """A small plot of a heat-load (W) or ambient (°C) profile over the run."""
    from matplotlib.figure import Figure

    from solver.model.profiles import make_profile

    f = make_profile(profile)
    unit, size = time_unit(duration_s)
    ts = np.linspace(0.0, duration_s, 1200)
    bps = [b.time_s if hasattr(b, "time_s") else b[0] for b in f.breakpoints(duration_s)]
    ts = np.unique(np.concatenate([ts, bps, np.nextafter(np.asarray(bps, float), -np.inf)])) if bps else ts
    fig = Figure(figsize=(2.6, 0.9))
    ax = fig.add_subplot(1, 1, 1)
    ax.plot(ts / size, [f.value(x) for x in ts], color="#1f5fa8", lw=1.2)
    ax.set_xlim(0, duration_s / size)
    ax.tick_params(labelsize=6, length=2)
    ax.set_xlabel(unit, fontsize=6, labelpad=0)
    ax.set_ylabel(unit_label, fontsize=6, labelpad=1)
    fig.subplots_adjust(left=0.2, right=0.97, top=0.93, bottom=0.33)
    return _png(fig)


def hot_pictures(run: FinishedRun, rows: list[dict], span_s: float, limit: int = 6) -> tuple[list[dict], str]:
    """3D pictures (off-screen pyvista) at the hottest moment of each part over or at risk:
    ([{part, verdict, caption, png}], note). An empty list with a note when no OpenGL context
    can be had; the report is complete without them."""
    todo = [r for r in rows if r.get("status") in ("over", "at-risk")][:limit]
    if not todo:
        return [], ""
    if os.environ.get("THERMGUI_REPORT_NO_3D"):
        return [], "3D pictures were left out (THERMGUI_REPORT_NO_3D is set)."
    try:
        if not os.environ.get("DISPLAY") and not os.environ.get("VTK_DEFAULT_OPENGL_WINDOW"):
            os.environ["VTK_DEFAULT_OPENGL_WINDOW"] = "vtkEGLRenderWindow"  # no X: EGL (see NOTES.md §6)
        import pyvista as pv

        geo = run.geometry()
        pts, tets = np.asarray(geo["points_mm"], float), np.asarray(geo["tets"], np.int64)
        cells = np.hstack([np.full((len(tets), 1), 4, np.int64), tets]).ravel()
        grid = pv.UnstructuredGrid(cells, np.full(len(tets), pv.CellType.TETRA, np.uint8), pts)
        parts = {p["name"]: p for p in run.model_dict.get("parts", [])}
        fields = {}
        out = []
        lo = min(float(np.min(run.history[:, 1:])) if run.history.size else 0.0, float(run.model_dict.get("ambient_c", 25.0)))
        for r in todo:
            t_peak = _f(r.get("peak_time_s")) or 0.0
            i = int(np.argmin(np.abs(np.asarray(run.times) - t_peak)))
            if i not in fields:
                fields[i] = np.asarray(run.field(i), float)
            field = fields[i]
            g = grid.copy(deep=False)
            g.point_data["T"] = field
            hi = float(field.max())
            plotter = pv.Plotter(off_screen=True, window_size=(760, 480))
            try:
                plotter.set_background("white")
                p = parts.get(r["part"])
                # cut across z just above the part so a part inside the enclosure shows
                zcut = p["origin_mm"][2] + p["size_mm"][2] if p else None
                shown = g.clip(normal="z", origin=(0, 0, zcut + 1e-6), invert=True) if zcut is not None and zcut < pts[:, 2].max() - 1e-6 else g
                plotter.add_mesh(shown, scalars="T", cmap="inferno", clim=(lo, max(hi, lo + 1e-3)), show_edges=False,
                                 scalar_bar_args={"title": "°C", "color": "#1d2733", "vertical": True, "fmt": "%.0f"})
                if p:
                    o, s = p["origin_mm"], p["size_mm"]
                    box = pv.Box(bounds=(o[0], o[0] + s[0], o[1], o[1] + s[1], o[2], o[2] + s[2]))
                    plotter.add_mesh(box.extract_feature_edges(), color=VERDICT_TEXT[r["status"]], line_width=5)
                plotter.view_isometric()
                plotter.reset_camera()
                img = plotter.screenshot(return_img=True)
            finally:
                plotter.close()
            from matplotlib.figure import Figure

            fig = Figure(figsize=(img.shape[1] / 110, img.shape[0] / 110))
            ax = fig.add_axes((0, 0, 1, 1))
            ax.imshow(img)
            ax.axis("off")
            cut = " (cut across z at the part's top)" if shown is not g else ""
            out.append({"part": r["part"], "verdict": STATUS_WORDS[r["status"]],
                        "caption": f"{r['part']} at t = {format_time(float(run.times[i]), span_s)}, its hottest "
                                   f"output: maximum {_f(r.get('peak_c')):.1f} °C, rated {r.get('rated_c')} °C{cut}",
                        "png": _png(fig)})
        return out, ""
    except Exception as e:  # no OpenGL here, or a VTK build without off-screen support
        return [], f"3D pictures could not be drawn on this machine ({type(e).__name__}: {e})."


# ------------------------------------------------------------------ content
def _f(v):
    try:
        x = float(v)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _material_rows(model: dict) -> list[dict]:
    from solver.model.materials import BUILTIN_MATERIALS

    own = model.get("materials", {}) or {}
    used = sorted({p["material"] for p in model.get("parts", [])})
    out = []
    for name in used:
        if name in own:
            m = own[name]
            k = m["conductivity"]
            out.append({"name": name, "k": _k_text(k), "rho": f"{m['density']:g}", "cp": f"{m['specific_heat']:g}",
                        "source": "given in the model file"})
        elif name in BUILTIN_MATERIALS:
            m = BUILTIN_MATERIALS[name]
            k = m.conductivity[0] if m.isotropic else list(m.conductivity)
            out.append({"name": name, "k": _k_text(k), "rho": f"{m.density:g}", "cp": f"{m.specific_heat:g}",
                        "source": m.source or "built-in library"})
        else:
            out.append({"name": name, "k": "?", "rho": "?", "cp": "?", "source": "unknown"})
    return out


def _k_text(k) -> str:
    return ", ".join(f"{v:g}" for v in k) if isinstance(k, (list, tuple)) else f"{k:g}"


def _accuracy_rows(acc) -> tuple[list[str], list[list[str]], list[tuple[str, str]]]:
    """The mesh-independence record from run.json (any shape): table head, rows, and key/value pairs."""
    def cell(v):
        if isinstance(v, float):
            return f"{v:.4g}"
        if isinstance(v, (list, tuple)):
            return ", ".join(cell(x) for x in v)
        if isinstance(v, dict):
            return "; ".join(f"{k}: {cell(x)}" for k, x in v.items())
        return "" if v is None else str(v)

    head, rows, pairs = [], [], []
    if isinstance(acc, dict):
        table_key = "levels" if isinstance(acc.get("levels"), list) and acc["levels"] else None
        for k, v in acc.items():
            if isinstance(v, list) and v and all(isinstance(x, dict) for x in v) and not head and \
                    (table_key is None or k == table_key):
                head = list(dict.fromkeys(key for x in v for key in x))
                rows = [[cell(x.get(h)) for h in head] for x in v]
            else:
                pairs.append((str(k), cell(v)))
    elif isinstance(acc, list) and acc and all(isinstance(x, dict) for x in acc):
        head = list(dict.fromkeys(key for x in acc for key in x))
        rows = [[cell(x.get(h)) for h in head] for x in acc]
    elif acc is not None:
        pairs.append(("record", cell(acc)))
    return head, rows, pairs


def report_context(run: FinishedRun, pictures: bool = True) -> dict:
    model = run.model_dict
    duration = float(model.get("run", {}).get("duration_s", run.times[-1] if len(run.times) else 0.0))
    csv_rows = [[r.get(c, "") for c in _peak_columns()] for r in run.peaks]
    order = review_order(csv_rows)
    cols = columns(duration)
    table = []
    for i in order:
        shown = display_row(csv_rows[i], duration)
        verdict = shown["_verdict"]
        table.append({"verdict": verdict, "cells": [shown[k][0] for k, _ in cols]})
    rows_by = [run.peaks[i] for i in order]
    n_over = sum(1 for r in run.peaks if r.get("status") == "over")
    n_risk = sum(1 for r in run.peaks if r.get("status") == "at-risk")
    n_rated = sum(1 for r in run.peaks if _f(r.get("rated_c")) is not None)
    if n_over or n_risk:
        verdict = ", ".join(b for b in (f"{n_over} part(s) over their rating" if n_over else "",
                                        f"{n_risk} at risk (the rating lies within the error band)" if n_risk else "") if b)
    else:
        verdict = f"no rated part reached its rating ({n_rated} rated part(s))"
    pics, pic_note = hot_pictures(run, rows_by, duration) if pictures else ([], "3D pictures were not asked for.")
    mesh = run.info.get("mesh", {})
    solver_info = run.info.get("solver", {})
    energy = run.info.get("energy", {})
    loads = []
    try:
        from solver.model.modelfile import parse_model

        parsed = parse_model(model, str(run.folder / "run.json"))
    except ModelError:
        parsed = None
    if parsed is not None:
        from .edits import profile_summary

        for h, raw in zip(parsed.heat_loads, model.get("heat_loads", [])):
            loads.append({"part": h.part, "summary": profile_summary(raw["profile"], "W"),
                          "png": profile_plot(h.profile, duration, "W")})
    faces = []
    for c in model.get("convection", []):
        amb = c.get("ambient_c")
        faces.append({"name": c["name"], "part": c["part"], "side": c["side"], "h": f"{c['h']:g}",
                      "ambient": (f"{amb:g}" if isinstance(amb, (int, float)) else
                                  "table" if amb is not None else f"{model.get('ambient_c', 25.0):g}"),
                      "extra": ", ".join(f"{k} {c[k]}" for k in ("emissivity", "surroundings_c") if k in c)})
    acc = run.info.get("accuracy")
    acc_head, acc_rows, acc_pairs = _accuracy_rows(acc)
    acc_text = ""
    if isinstance(acc, dict) and acc.get("levels"):
        try:  # the solver's own table, as `thermgui solve` prints it
            from solver.run.accuracy import format_record

            acc_text = format_record(acc)
        except Exception:  # an older or newer record shape: the generic table below still shows it
            acc_text = ""
        if acc_text:
            acc_head, acc_rows = [], []
            acc_pairs = [(k, v) for k, v in acc_pairs if k not in ("levels", "time_error_k")]
    acc_pairs = [(k.replace("_", " "), v) for k, v in acc_pairs if v != ""]
    e_in, e_out, e_st = (float(energy.get(k, 0.0) or 0.0) for k in ("in_j", "out_j", "stored_j"))
    return {
        "name": run.folder.resolve().name, "title": model.get("title", ""), "folder": str(run.folder.resolve()),
        "made": _dt.datetime.now().strftime("%Y-%m-%d %H:%M"), "version": __version__,
        "caution": CAUTION, "warnings": list(run.info.get("warnings") or []),
        "notice": getattr(run, "notice", None),  # e.g. a folder written before manifests
        "verdict": verdict, "n_over": n_over, "n_risk": n_risk,
        "columns": [h.replace("\n", " ") for _, h in cols], "table": table,
        "fill": VERDICT_FILL, "text": VERDICT_TEXT,
        "chart": history_chart(run, run.peaks, duration), "pictures": pics, "picture_note": pic_note,
        "duration": format_time(duration, duration), "ambient": f"{model.get('ambient_c', 25.0):g}",
        "initial": f"{model.get('initial_c', 25.0):g}", "run": model.get("run", {}),
        "parts": [{"name": p["name"], "material": p["material"],
                   "origin": ", ".join(f"{v:g}" for v in p["origin_mm"]),
                   "size": " × ".join(f"{v:g}" for v in p["size_mm"]),
                   "rated": "" if p.get("rated_c") is None else f"{p['rated_c']:g}"} for p in model.get("parts", [])],
        "materials": _material_rows(model), "loads": loads, "faces": faces,
        "mesh": {"cell_mm": model.get("mesh", {}).get("cell_mm"), "nodes": mesh.get("nodes"),
                 "tets": mesh.get("tetrahedra"), "planes": mesh.get("planes")},
        "solver": solver_info, "accuracy": run.info.get("accuracy") is not None,
        "acc_head": acc_head, "acc_rows": acc_rows, "acc_pairs": acc_pairs, "acc_text": acc_text,
        "energy": {"in": f"{e_in / 1000:.3g}", "out": f"{e_out / 1000:.3g}", "stored": f"{e_st / 1000:.3g}",
                   "residual": f"{float(energy.get('relative_residual', 0.0) or 0.0):.1e}",
                   "closure": f"{abs(e_in - e_out - e_st) / max(abs(e_in), 1e-30):.1e}"},
        "outputs": len(run.times),
    }


def _peak_columns():
    from solver.results.recorder import PEAK_COLUMNS

    return PEAK_COLUMNS


def render_report(run: FinishedRun, pictures: bool = True) -> str:
    """The report's HTML text."""
    import jinja2

    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(Path(__file__).parent / "templates")),
                             autoescape=jinja2.select_autoescape(["html"]), trim_blocks=True, lstrip_blocks=True)
    return env.get_template("report.html").render(**report_context(run, pictures))


def write_report(folder, out=None, pictures: bool = True, notices: list | None = None) -> Path:
    """Check ``folder``, render, and write the report to ``out`` (default: ``<folder>-report.html``
    beside the folder) through a temporary file, so a failure leaves nothing behind. The folder's
    notice (e.g. written before manifests) is shown in the report and appended to ``notices``."""
    run = check_results_folder(folder)
    if run.notice and notices is not None:
        notices.append(run.notice)
    out = Path(out) if out else Path(folder).resolve().with_name(Path(folder).resolve().name + "-report.html")
    html = render_report(run, pictures)
    out.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".~" + out.name, dir=str(out.parent))
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(html)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # an ordinary file, not mkstemp's private one
        os.replace(tmp, out)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return out
