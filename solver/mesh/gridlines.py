"""One-dimensional grid planes for the rectilinear mesher.

The planes include every part face, no cell is wider than the local limit (global cell size,
or a part's size divided by its required number of layers), and neighbouring cell widths
differ by at most a factor of two (cells next to a fine region are halved until they grade).
Lengths in millimetres.
"""
from __future__ import annotations

import math

import numpy as np

MERGE_TOL_MM = 1e-7  # faces closer than this are the same plane


def merge_breaks(coords) -> np.ndarray:
    """Sorted unique plane positions, merging values closer than MERGE_TOL_MM."""
    c = np.sort(np.asarray(coords, dtype=float))
    keep = np.concatenate([[True], np.diff(c) > MERGE_TOL_MM])
    return c[keep]


def interval_limits(breaks: np.ndarray, spans, cell_mm: float) -> np.ndarray:
    """Largest allowed cell width in each interval between breaks.

    ``spans`` is a list of (lo, hi, max_width) for each part along this axis.
    """
    lim = np.full(len(breaks) - 1, float(cell_mm))
    mids = 0.5 * (breaks[:-1] + breaks[1:])
    for lo, hi, width in spans:
        inside = (mids > lo) & (mids < hi)
        lim[inside] = np.minimum(lim[inside], width)
    return lim


def subdivide(breaks: np.ndarray, limits: np.ndarray) -> np.ndarray:
    """Uniformly subdivide each interval so no cell exceeds its limit."""
    widths = np.diff(breaks)
    counts = np.maximum(1, np.ceil(widths / limits - 1e-9).astype(np.int64))
    pieces = [np.linspace(a, b, n + 1)[:-1] for a, b, n in zip(breaks[:-1], breaks[1:], counts)]
    return np.concatenate(pieces + [breaks[-1:]])


def grade(lines: np.ndarray, max_ratio: float = 2.0) -> np.ndarray:
    """Halve cells that are more than ``max_ratio`` times wider than a neighbour, until none is."""
    lines = np.asarray(lines, dtype=float)
    for _ in range(200):
        w = np.diff(lines)
        if len(w) < 2:
            return lines
        nb = np.full_like(w, np.inf)
        nb[1:] = np.minimum(nb[1:], w[:-1])
        nb[:-1] = np.minimum(nb[:-1], w[1:])
        too_wide = w > max_ratio * nb * (1 + 1e-9)
        if not too_wide.any():
            return lines
        mids = 0.5 * (lines[:-1] + lines[1:])[too_wide]
        lines = np.sort(np.concatenate([lines, mids]))
    raise RuntimeError("grid grading did not converge")  # pragma: no cover - geometric bound


def axis_lines(spans, cell_mm: float) -> np.ndarray:
    """Grid planes along one axis for parts spanning ``(lo, hi, max_width)``."""
    breaks = merge_breaks([s[0] for s in spans] + [s[1] for s in spans])
    limits = interval_limits(breaks, spans, cell_mm)
    return grade(subdivide(breaks, limits))


def count_lines(spans, cell_mm: float) -> int:
    """Number of planes ``axis_lines`` would give (cheap; used for memory estimates)."""
    return len(axis_lines(spans, cell_mm))


def layers_needed(size_mm: float, min_layers: int, cell_mm: float) -> float:
    """Largest cell width inside a part of this size (mm)."""
    return min(cell_mm, size_mm / max(1, min_layers))


def ceil_div(a: float, b: float) -> int:
    return int(math.ceil(a / b - 1e-9))
