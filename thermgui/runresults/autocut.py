"""Choosing a first cut that shows the hottest part when it is hidden inside the model (Qt-free).

Lengths in mm. The hot spot of each part comes from the peak table (``hotspot_x/y/z_mm``); a hot
spot on the outer bounding box of the mesh is visible from outside, one strictly inside it may be
hidden (e.g. a board in a closed housing), and then a cut across z just above the hot part shows it.
"""
from __future__ import annotations

import math

import numpy as np

from solver.results.recorder import PEAK_COLUMNS

MARGIN_MM = 1.0  # the cut plane lies this far above the top of the hot part


def hottest_spot(peak_rows) -> tuple[str, tuple[float, float, float]] | None:
    """Name and hot spot (mm) of the part with the highest peak in ``peak_rows`` (peaks.csv rows
    as strings); None when no row has a finite peak and hot spot."""
    k_peak = PEAK_COLUMNS.index("peak_c")
    k_xyz = [PEAK_COLUMNS.index(f"hotspot_{a}_mm") for a in "xyz"]
    best = None
    for row in peak_rows or []:
        try:
            peak = float(row[k_peak])
            xyz = tuple(float(row[k]) for k in k_xyz)
        except (ValueError, IndexError, TypeError):
            continue
        if not all(math.isfinite(v) for v in (peak, *xyz)):
            continue
        if best is None or peak > best[0]:
            best = (peak, str(row[0]), xyz)
    return None if best is None else (best[1], best[2])


def on_outer_box(point_mm, points_mm, tol_mm: float = 1e-6) -> bool:
    """True when ``point_mm`` lies on (or outside) the bounding box of the mesh nodes ``points_mm``."""
    pts = np.asarray(points_mm, dtype=float)
    p = np.asarray(point_mm, dtype=float)
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    return bool(np.any(p <= lo + tol_mm) or np.any(p >= hi - tol_mm))


def revealing_cut_z(point_mm, points_mm, part_bounds_mm=None, margin_mm: float = MARGIN_MM,
                    min_fraction: float = 0.05):
    """Cut across z that shows a hot spot hidden inside the model: ``(fraction, z_mm)`` where
    ``fraction`` (0..1, rounded up to whole per cent) of the z extent is kept and ``z_mm`` is the
    plane height; None when the point is on the outer bounding box (already visible from outside).

    The plane lies ``margin_mm`` above the top of the hot part (``part_bounds_mm`` =
    (x0, x1, y0, y1, z0, z1) of the part holding the point), or of the point itself without bounds;
    if that is at or beyond the top of the model, the plane goes through the point instead.
    ``min_fraction`` is the smallest share the view's slider offers."""
    if on_outer_box(point_mm, points_mm):
        return None
    z = np.asarray(points_mm, dtype=float)[:, 2]
    lo, hi = float(z.min()), float(z.max())
    pz = float(point_mm[2])
    top = max(pz, float(part_bounds_mm[5])) if part_bounds_mm is not None else pz
    plane = top + margin_mm
    if plane >= hi:
        plane = pz
    fraction = math.ceil(round(100.0 * (plane - lo) / (hi - lo), 9)) / 100.0
    fraction = min(max(fraction, min_fraction), 1.0)
    return fraction, lo + fraction * (hi - lo)


def likely_hot_spot(model) -> tuple[str, tuple[float, float, float]] | None:
    """Before any result: the heated part with the highest power density (largest level of its
    profile over its box volume, W/mm³) and the centre of its top face (mm) - where the first hot
    spot will be. ``model`` is a validated :class:`solver.model.modelfile.Model`; None without heat loads."""
    from solver.model.modelfile import profile_levels

    best = None
    for hl in model.heat_loads:
        try:
            p = model.parts[model.part_index(hl.part)]
        except (KeyError, ValueError):
            continue
        volume = float(np.prod(p.size_mm))
        density = max(profile_levels(hl.profile)) / volume if volume > 0 else 0.0
        if density > 0 and (best is None or density > best[0]):
            o, sz = p.origin_mm, p.size_mm
            top = (float(o[0] + sz[0] / 2), float(o[1] + sz[1] / 2), float(o[2] + sz[2]))
            best = (density, p.name, top)
    return None if best is None else (best[1], best[2])


def box_visible(bounds_mm, points_mm, tol_mm: float = 1e-6) -> bool:
    """True when a part's box (x0, x1, y0, y1, z0, z1) touches the bounding box of the mesh nodes,
    so some face of it is seen from outside without a cut."""
    pts = np.asarray(points_mm, dtype=float)
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    b = np.asarray(bounds_mm, dtype=float).reshape(3, 2)
    return bool(np.any(b[:, 0] <= lo + tol_mm) or np.any(b[:, 1] >= hi - tol_mm))
