"""The peak table as people read it (Qt-free): review order, merged hot spot, times in the
slider's unit, the error band beside the peak. The CSV rows themselves stay untouched.

Shared by the app's table and the design-review report, so both show the same text.
"""
from __future__ import annotations

import math

from solver.results.recorder import PEAK_COLUMNS, PeakRow, sort_for_review

from .timefmt import time_unit

COL = {c: i for i, c in enumerate(PEAK_COLUMNS)}
STATUS_WORDS = {"over": "OVER", "at-risk": "AT RISK", "ok": "ok", "unrated": "unrated"}
# text and fill colours per verdict (our own pick): red for over, amber for at risk
VERDICT_TEXT = {"over": "#b0102f", "at-risk": "#8a5300"}
VERDICT_FILL = {"over": "#fde3e7", "at-risk": "#fff0c8"}


def _num(text: str) -> float | None:
    try:
        v = float(text)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def row_to_peak(row: list[str]) -> PeakRow:
    """A peaks.csv row (strings) back as a PeakRow (only to order rows as the solver does)."""
    g = lambda c: _num(row[COL[c]])  # noqa: E731
    peak = g("peak_c")
    return PeakRow(part=row[COL["part"]], rated_c=g("rated_c"), peak_c=float("nan") if peak is None else peak,
                   peak_time_s=g("peak_time_s") or 0.0, margin_k=g("margin_k"), first_over_s=g("first_over_s"),
                   hotspot_mm=tuple(g(c) for c in ("hotspot_x_mm", "hotspot_y_mm", "hotspot_z_mm")),
                   mean_over_time_c=float("nan"), peak_error_k=g("peak_error_k"))


def review_order(rows: list[list[str]]) -> list[int]:
    """Indices of ``rows`` in review order: :func:`solver.results.recorder.sort_for_review` (over, at risk,
    ok by margin, unrated)."""
    peaks = [row_to_peak(r) for r in rows]
    ranked = sort_for_review(list(peaks))
    return [next(i for i, p in enumerate(peaks) if p is q) for q in ranked]


def columns(span_s: float) -> list[tuple[str, str]]:
    """(key, heading) of the shown columns; times in the unit the slider uses for ``span_s``."""
    unit = time_unit(span_s)[0]
    return [("part", "Part"), ("status", "Verdict"), ("rated", "Rated\n°C"), ("peak", "Peak\n°C"),
            ("margin", "Margin\nK"), ("peak_time", f"Peak at\n({unit})"), ("first_over", f"First over\n({unit})"),
            ("hotspot", "Hot spot\nx, y, z (mm)")]


def time_text(t_s: float | None, span_s: float) -> str:
    """A time in the slider's unit, rounded: 0.1 s, 0.1 min or 0.01 h."""
    if t_s is None:
        return ""
    unit, size = time_unit(span_s)
    return f"{t_s / size:.{2 if unit == 'h' else 1}f}"


def display_row(row: list[str], span_s: float) -> dict:
    """Shown text and sort key of each column of one peaks.csv row."""
    g = lambda c: _num(row[COL[c]])  # noqa: E731
    status = row[COL["status"]]
    rated, peak, err, margin = g("rated_c"), g("peak_c"), g("peak_error_k"), g("margin_k")
    peak_text = "" if peak is None else f"{peak:.1f}" + (f" ± {err:.1f}" if err is not None and err > 0 else "")
    xyz = [g(c) for c in ("hotspot_x_mm", "hotspot_y_mm", "hotspot_z_mm")]
    hot = ", ".join(f"{v:.1f}" for v in xyz) if all(v is not None for v in xyz) else ""
    t_peak, t_over = g("peak_time_s"), g("first_over_s")
    return {
        "part": (row[COL["part"]], row[COL["part"]].lower()),
        "status": (STATUS_WORDS.get(status, status), None),  # key: the review rank, set by the caller
        "rated": ("" if rated is None else f"{rated:g}", rated),
        "peak": (peak_text, peak),
        "margin": ("" if margin is None else f"{margin:+.1f}", margin),
        "peak_time": (time_text(t_peak, span_s), t_peak),
        "first_over": (time_text(t_over, span_s), t_over),
        "hotspot": (hot, tuple(xyz) if hot else None),
        "_verdict": status,
    }
