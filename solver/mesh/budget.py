"""One memory estimate for a run, made from the model alone before anything big is built.

Counted, not built: grid planes along each axis (from the part faces and the cell-size limits,
a lower bound of what the mesher places, since grading only adds planes), the dense grid arrays
over the bounding box, the solid cells and nodes, the matrices and solver work per node, a direct
factor, the frames kept in memory and the step plan. Over the budget (default 70 % of the memory
available now; ``mesh.memory_limit_gb`` in the model or ``--memory-limit-gb`` on the command line)
the run is refused with a :class:`~solver.errors.ModelError` naming the field that drives the need.

Byte counts per item are rough measurements of this code base (common practice, no source):
the mesher's dense arrays (cell owner int32, node map int64, masks, labels) about 32 B per grid
point; tetrahedra and their corner tables about 300 B per solid cell; matrices, assembly scratch
and the linear solver, its factor or a reduced basis included, about 4000 B per node (the
mesher's figure since wave 1; whole runs measured 3.2 kB per node at 194k nodes, peak RSS
0.63 GB, and 2.3–3.3 kB per node at 1M nodes, benchmarks/README.md). The worst-case factor
formula of :mod:`solver.linalg.linsolve` is not added: the solver choice keeps factors within
``DIRECT_MAX_BYTES`` and the measured totals above include them.
"""
from __future__ import annotations

import contextlib
import contextvars
import math
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from solver.errors import ModelError

DENSE_BYTES_PER_GRID_POINT = 32.0
BYTES_PER_SOLID_CELL = 300.0
BYTES_PER_NODE = 4000.0
BYTES_PER_PLANNED_STEP = 200.0  # one TimeStep object in the step list
BYTES_PER_LINE = 8.0
HEATED_MIN_LAYERS = 4  # as in solver.mesh.mesher
DEFAULT_FRACTION = 0.70
MAX_OUTPUTS = 100_000  # output times one run may write (each is a field frame on disk)
SPARSE_FILL = 0.05  # solid fraction of the bounding box below which a layout counts as "far apart"

_LIMIT = contextvars.ContextVar("thermgui_memory_limit", default=None)


@contextlib.contextmanager
def memory_limit(limit_bytes: int | None):
    """Within this block, checks use ``limit_bytes`` (the command line's --memory-limit-gb)."""
    token = _LIMIT.set(limit_bytes)
    try:
        yield
    finally:
        _LIMIT.reset(token)


@dataclass
class Estimate:
    planes: tuple  # grid planes counted along x, y, z (floats: may be astronomically large)
    grid_points: float
    solid_cells: float
    nodes: float
    outputs: float
    steps: float
    parts_bytes: dict  # label -> bytes

    @property
    def total_bytes(self) -> float:
        return float(sum(self.parts_bytes.values()))


def _merge(coords: np.ndarray) -> np.ndarray:
    c = np.sort(coords)
    keep = np.concatenate([[True], np.diff(c) > 1e-7])
    return c[keep]


def _axis_counts(los, his, widths, cell_mm):
    """Cells along one axis: total, and per part (counts as floats, never overflowing)."""
    breaks = _merge(np.concatenate([los, his]))
    mids = 0.5 * (breaks[:-1] + breaks[1:])
    lim = np.full(len(mids), float(cell_mm))
    i0 = np.searchsorted(mids, los, side="right")
    i1 = np.searchsorted(mids, his, side="left")
    for a, b, w in zip(i0, i1, widths):  # a loop over parts
        lim[a:b] = np.minimum(lim[a:b], w)
    with np.errstate(over="ignore", invalid="ignore"):
        counts = np.maximum(1.0, np.ceil(np.diff(breaks) / lim - 1e-9))
    counts = np.where(np.isfinite(counts), counts, 1e300)
    cum = np.concatenate([[0.0], np.cumsum(counts)])
    return float(cum[-1]), cum[i1] - cum[i0]


def estimate(model, frames_in_memory: bool = False) -> Estimate:
    """Count what a run of ``model`` would allocate (see the module docstring)."""
    parts = model.parts
    heated = {hl.part for hl in model.heat_loads}
    cell = float(model.mesh.cell_mm)
    layers = np.array([max(model.mesh.min_layers, HEATED_MIN_LAYERS if p.name in heated else 1) for p in parts],
                      dtype=float)
    org = np.array([p.origin_mm for p in parts], dtype=float)
    size = np.array([p.size_mm for p in parts], dtype=float)
    totals, per_part = [], []
    for ax in range(3):
        widths = np.minimum(cell, size[:, ax] / layers)
        t, pp = _axis_counts(org[:, ax], org[:, ax] + size[:, ax], widths, cell)
        totals.append(t)
        per_part.append(pp)
    with np.errstate(over="ignore"):
        grid_cells = totals[0] * totals[1] * totals[2]
        grid_points = (totals[0] + 1) * (totals[1] + 1) * (totals[2] + 1)
        cells_pp = per_part[0] * per_part[1] * per_part[2]
        nodes_pp = (per_part[0] + 1) * (per_part[1] + 1) * (per_part[2] + 1)
    solid = min(grid_cells, float(np.sum(cells_pp)))
    nodes = min(grid_points, float(np.sum(nodes_pp)))
    run = model.run
    duration, step = float(run.duration_s), float(run.step_s)
    with np.errstate(over="ignore"):
        outputs = float(np.floor(np.float64(duration) / run.output_interval_s + 1e-9)) + 2.0
    marks = outputs + _breakpoint_count(model, duration)
    with np.errstate(over="ignore"):
        steps = float(np.float64(duration) / step + marks)
    with np.errstate(over="ignore"):
        parts_bytes = {
            "grid": DENSE_BYTES_PER_GRID_POINT * grid_points + BYTES_PER_LINE * sum(totals),
            "mesh": BYTES_PER_SOLID_CELL * solid,
            "matrices and solver": BYTES_PER_NODE * nodes,
            "frames": (4.0 * nodes * outputs) if frames_in_memory else 0.0,
            "steps": BYTES_PER_PLANNED_STEP * steps,
        }
    return Estimate(tuple(totals), grid_points, solid, nodes, outputs, steps, parts_bytes)


def _breakpoint_count(model, duration: float) -> float:
    n = 0.0
    profiles = [hl.profile for hl in model.heat_loads] + [c.ambient_c for c in model.convection]
    for p in profiles:
        if p is None:
            continue
        if p.type == "table":
            n += len(p.points)
        elif p.type == "step":
            n += 1
        elif p.type == "pulse":
            n += 2.0 * max(0.0, duration - p.start_s) / p.period_s + 1
    return n


def available_memory_bytes() -> int:
    from solver.resources import available_memory_bytes as avail

    return avail()


def budget_bytes(model, limit_bytes: int | None = None) -> tuple[float, str]:
    """(bytes, where the figure comes from)."""
    if limit_bytes is None:
        limit_bytes = _LIMIT.get()
    if limit_bytes is not None:
        return float(limit_bytes), "the limit given on the command line"
    gb = getattr(model.mesh, "memory_limit_gb", None)
    if gb is not None:
        return float(gb) * 1e9, "mesh.memory_limit_gb"
    avail = available_memory_bytes()
    return DEFAULT_FRACTION * avail, f"70 % of the {avail / 1e9:.1f} GB available now"


def _gb(b: float) -> str:
    if not math.isfinite(b) or b > 1e18:
        return "far more than any computer has (over 1e9 GB)"
    if b >= 1e8:
        return f"{b / 1e9:,.1f} GB"
    return f"{b / 1e6:,.0f} MB" if b >= 1e6 else f"{b / 1e3:,.0f} kB"


def _count(x: float) -> str:
    return f"{int(x):,}" if x < 1e15 else f"{x:.1e}"


def _farthest_part(model) -> int:
    """Index of the part whose removal shrinks the bounding box of the others the most."""
    org = np.array([p.origin_mm for p in model.parts], dtype=float)
    hi = org + np.array([p.size_mm for p in model.parts], dtype=float)
    if len(org) < 2:
        return 0
    centre = np.median(0.5 * (org + hi), axis=0)
    gap = np.maximum(org - centre, 0) + np.maximum(centre - hi, 0)
    return int(np.argmax(np.linalg.norm(gap, axis=1)))


def check_budget(model, limit_bytes: int | None = None, keep_fields: bool = False,
                 out_dir=None) -> Estimate:
    """Refuse (ModelError) a run whose estimate is over the budget; otherwise return the estimate."""
    est = estimate(model, frames_in_memory=keep_fields)
    if est.outputs > MAX_OUTPUTS:
        raise ModelError(("run.output_every_s",
                          f"{_count(est.outputs)} output times (every {model.run.output_interval_s:g} s over "
                          f"{model.run.duration_s:g} s), more than {MAX_OUTPUTS:,}; each writes a field frame; "
                          "choose a longer output interval"))
    limit, source = budget_bytes(model, limit_bytes)
    need = est.total_bytes
    if not (need > limit):
        _check_disk(est, out_dir)
        return est
    pb = est.parts_bytes
    driver = max(pb, key=lambda k: pb[k])
    breakdown = ", ".join(f"{k} {_gb(v)}" for k, v in pb.items() if v >= 0.01 * need)
    tail = (f"; the run would need about {_gb(need)} ({breakdown}), more than the budget of {_gb(limit)} "
            f"({source}; set mesh.memory_limit_gb or --memory-limit-gb to change it)")
    grid_words = f"{_count(est.planes[0])} x {_count(est.planes[1])} x {_count(est.planes[2])} cells"
    fill = est.solid_cells / est.grid_points if est.grid_points > 0 else 1.0
    if driver == "grid" and fill < SPARSE_FILL and len(model.parts) > 1:
        i = _farthest_part(model)
        p = model.parts[i]
        raise ModelError((f"parts[{i}].origin_mm",
                          f"the parts are far apart: they fill {100 * fill:.2g} % of their bounding box, and the "
                          f"mesher lays one grid over the whole box ({grid_words}), empty space included; "
                          f"part {p.name!r} is the farthest from the rest; move it closer, or model the "
                          f"distant groups as separate models" + tail))
    if driver == "frames":
        raise ModelError(("run.output_every_s", f"{_count(est.outputs)} output frames of {_count(est.nodes)} nodes "
                                                "are kept in memory; choose a longer output interval" + tail))
    if driver == "steps":
        raise ModelError(("run.step_s", f"about {_count(est.steps)} time steps are planned; choose a longer "
                                        "step" + tail))
    raise ModelError(("mesh.cell_mm", f"the mesh would need about {_count(est.nodes)} nodes "
                                      f"({grid_words} in the grid); use a larger cell size or fewer layers" + tail))


def _check_disk(est: Estimate, out_dir) -> None:
    """Refuse frames that clearly cannot fit on the results folder's file system."""
    if out_dir is None:
        return
    d = Path(out_dir)
    while not d.exists() and d != d.parent:
        d = d.parent
    try:
        free = shutil.disk_usage(d).free
    except OSError:
        return
    need = est.outputs * 4.0 * est.nodes + BYTES_PER_SOLID_CELL * est.solid_cells
    if need > free:
        raise ModelError(("run.output_every_s",
                          f"{_count(est.outputs)} field frames of {_count(est.nodes)} nodes need at least "
                          f"{_gb(need)} on disk, and {d} has {_gb(free)} free; choose a longer output interval "
                          "or another folder"))
