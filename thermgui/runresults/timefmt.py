"""Times for people: seconds shown as s, min or h depending on the span of the run (Qt-free)."""
from __future__ import annotations

import math


def time_unit(span_s: float) -> tuple[str, float]:
    """Unit name and its length in seconds suited to a run lasting ``span_s`` seconds."""
    span_s = abs(float(span_s))
    if span_s >= 3 * 3600:
        return "h", 3600.0
    if span_s >= 180:
        return "min", 60.0
    return "s", 1.0


def format_time(t_s: float, span_s: float | None = None) -> str:
    """``t_s`` seconds in the unit that suits ``span_s`` (default: t itself), e.g. '12.5 min'."""
    if t_s is None or not math.isfinite(t_s):
        return "–"
    unit, size = time_unit(t_s if span_s is None else span_s)
    if abs(t_s) < size and t_s != 0:  # e.g. 40 s into a 5 h run: '40 s', not '0.01 h'
        unit, size = time_unit(t_s)
        unit, size = ("s", 1.0) if abs(t_s) < 60 else ("min", 60.0) if unit == "s" else (unit, size)
    v = t_s / size
    digits = 0 if unit == "s" and abs(v - round(v)) < 1e-9 else (1 if unit == "s" else 2)
    text = f"{v:.{digits}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return f"{text} {unit}"


def format_duration(seconds: float) -> str:
    """A remaining or elapsed wall time, e.g. '45 s', '3 min 20 s', '1 h 05 min'."""
    if seconds is None or not math.isfinite(seconds) or seconds < 0:
        return "–"
    s = int(round(seconds))
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s // 3600} h {(s % 3600) // 60:02d} min"
