"""Where the mesh error comes from, and finer grid planes there.

The grid is a tensor product of three sets of planes, so refining means bisecting some of the
intervals between planes along x, y or z. Which ones is decided from the computed field, by a
direction-wise flux-jump indicator (the face term of the classical residual estimator of
Babuška and Rheinboldt, 1978, split by face normal so each axis gets its own indicator):

    η²(face normal to a) = h_a · [k_a ∂T/∂x_a]² · A_face / k_a

where [·] is the jump of the normal heat flux between the two cells sharing the face (W/m²),
h_a the mean width of the two cells across the face (m), A_face the face area (m²) and k_a the
mean conductivity across the face (W/(m·K)); dividing by k_a measures the error in the energy
norm ∫ k|∇e|², which matters for orthotropic boards (k_z ≪ k_xy).
An interval along axis a collects the terms of the faces on its two planes (half each), so
an interval whose cells cannot carry the flux's variation along a scores high. Intervals are
chosen by benefit per cost (indicator per solid cell in the slab, the slab being every cell
of that interval) until half the total indicator is covered (Dörfler's bulk criterion, 1996)
or the cell count would double; neighbouring widths are then graded to a ratio of at most 2.

Only the choice of where to refine rests on the indicator; the error *bound* reported to the
user comes from the ladder of solutions (:mod:`solver.run.accuracy`). Lengths: metres on the mesh,
millimetres for planes handed back to the mesher.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from solver.mesh.gridlines import grade
from solver.mesh.localplanes import EVERYWHERE, as_boxes, global_regions, other_axes
from solver.mesh.mesher import MM, Mesh

BULK_FRACTION = 1.0  # Dörfler's θ: share of the total indicator the marked intervals must cover
MAX_GROWTH = 1.0  # marked slabs may add at most this share of the current cell count
MIN_WIDTH_MM = 1e-3  # never bisect below a micrometre
HOT_CELLS_ACROSS = 8  # cells beside a hot spot are halved until this many would span its part
TIE = 0.02  # indicators within 2 % of the last one marked are marked too


def grid_field(mesh: Mesh, field: np.ndarray) -> np.ndarray:
    """Node values on the (nx+1, ny+1, nz+1) grid, NaN where no node exists."""
    gid = mesh.grid_node_id
    out = np.full(gid.shape, np.nan)
    used = gid >= 0
    out[used] = np.asarray(field, dtype=float)[gid[used]]
    return out


def cell_conductivity(model, mesh: Mesh) -> np.ndarray:
    """Diagonal conductivity (nx, ny, nz, 3) of each cell's part, W/(m·K); NaN for empty cells."""
    table = model.material_table()
    k_part = np.array([table[p.material].conductivity for p in model.parts], dtype=float).reshape(-1, 3)
    out = np.full(mesh.cell_part.shape + (3,), np.nan)
    solid = mesh.cell_part >= 0
    out[solid] = k_part[mesh.cell_part[solid]]
    from solver.mesh.contacts import cell_grid_conductivity  # contact layers lower the normal k beside interfaces

    return cell_grid_conductivity(model, mesh, out)


def _cell_gradient(tg: np.ndarray, widths: np.ndarray, ax: int) -> np.ndarray:
    """Mean ∂T/∂x_ax over each cell from its four edges along ``ax`` (K/m)."""
    d = np.diff(tg, axis=ax)
    shape = [1, 1, 1]
    shape[ax] = -1
    d = d / widths[ax].reshape(shape)
    others = [a for a in range(3) if a != ax]
    for a in others:  # average the two edge rows in each other direction
        sl0 = [slice(None)] * 3
        sl1 = [slice(None)] * 3
        sl0[a] = slice(0, -1)
        sl1[a] = slice(1, None)
        d = 0.5 * (d[tuple(sl0)] + d[tuple(sl1)])
    return d


def _face_jumps(tg: np.ndarray, widths, k_cell: np.ndarray, ax: int) -> np.ndarray:
    """Jump of the heat flux k_a ∂T/∂x_a across every interior face normal to ``ax`` (W/m²),
    NaN where either cell is empty; shape of the cell array less one along ``ax``."""
    q = k_cell[..., ax] * _cell_gradient(tg, widths, ax)
    lo = [slice(None)] * 3
    hi = [slice(None)] * 3
    lo[ax] = slice(0, -1)
    hi[ax] = slice(1, None)
    return q[tuple(hi)] - q[tuple(lo)]


def axis_indicators(mesh: Mesh, k_cell: np.ndarray, field: np.ndarray, dual: np.ndarray | None = None,
                    maps: bool = False):
    """Per axis, the indicator of each interval between planes.

    Without ``dual``: Σ h_a [q_a]² A / k_a over the faces on the interval's planes (W·K), the
    energy-norm indicator. With ``dual`` (the influence field of a peak, see :func:`influence_fields`):
    Σ h_a |[q_a(T)]| |[q_a(z)]| A / k_a, the product form of goal-oriented estimates
    (Becker and Rannacher 2001; Prudhomme and Oden 1999), which favours faces where an error
    would move that peak. With ``maps`` each axis gives instead the indicator of every interval
    spread over the cells of its slab, (n_intervals, n_u, n_v) with u, v the other two axes in
    increasing order (where in its slab an interval's indicator comes from).
    """
    tg = grid_field(mesh, field)
    tz = grid_field(mesh, dual) if dual is not None else None
    widths = [np.diff(l) for l in mesh.lines]
    out = []
    for ax in range(3):
        jump = _face_jumps(tg, widths, k_cell, ax)
        jump_z = _face_jumps(tz, widths, k_cell, ax) if tz is not None else jump
        lo = [slice(None)] * 3
        hi = [slice(None)] * 3
        lo[ax] = slice(0, -1)
        hi[ax] = slice(1, None)
        k_face = 0.5 * (k_cell[..., ax][tuple(hi)] + k_cell[..., ax][tuple(lo)])  # W/(m K)
        u, v = [a for a in range(3) if a != ax]
        shape_u = [1, 1, 1]
        shape_u[u] = -1
        shape_v = [1, 1, 1]
        shape_v[v] = -1
        area = widths[u].reshape(shape_u) * widths[v].reshape(shape_v)
        w = widths[ax]
        shape_a = [1, 1, 1]
        shape_a[ax] = -1
        h_face = (0.5 * (w[:-1] + w[1:])).reshape(shape_a)
        prod = np.abs(jump * jump_z)
        eta2 = np.where(np.isfinite(prod), h_face * prod * area / k_face, 0.0)
        if maps:
            faces = np.moveaxis(eta2, ax, 0)  # (n_ax - 1, n_u, n_v)
            ind = np.zeros((len(w),) + faces.shape[1:])
            ind[:-1] += 0.5 * faces
            ind[1:] += 0.5 * faces
            out.append(ind)
            continue
        per_face_plane = eta2.sum(axis=tuple(a for a in range(3) if a != ax))  # (n_ax - 1,)
        ind = np.zeros(len(w))
        ind[:-1] += 0.5 * per_face_plane
        ind[1:] += 0.5 * per_face_plane
        out.append(ind)
    return out


def influence_fields(problem, hot_nodes, tau_s: float, method: str = "direct", solver=None) -> np.ndarray:
    """Influence fields z (N, P): (M/τ + K) z = e_i for a unit heat input at each hot node.

    z tells how much a local error in the heat balance moves the temperature at that node over
    times of order τ (s); M capacity (J/K), K conduction + convection (W/K). ``solver`` is a
    factorization of that matrix already made (for example the reduced basis's, whose τ is then
    passed), which is used and left open; otherwise one is made with ``method`` (lumped M).
    z only steers where the mesh is refined, so a single-precision factorization is enough.
    """
    from solver.linalg.linsolve import make_solver

    rhs = np.zeros((problem.n_nodes, len(hot_nodes)))
    rhs[np.asarray(hot_nodes, dtype=np.int64), np.arange(len(hot_nodes))] = 1.0
    own = solver is None
    if own:
        a = (problem.stiffness + sp.diags(problem.lumped / float(tau_s))).tocsr()
        solver = make_solver(a, method, constraint=problem.constraint)
    try:
        if getattr(solver, "iterative", False):  # Krylov solvers take one right-hand side at a time
            z = np.column_stack([solver.solve(rhs[:, j]) for j in range(rhs.shape[1])])
        else:
            z = solver.solve(rhs)
    finally:
        if own:
            solver.close()
    return np.asarray(z).reshape(problem.n_nodes, len(hot_nodes))


def slab_cells(mesh: Mesh) -> list[np.ndarray]:
    """Per axis, the number of solid cells in each interval's slab (the cost of bisecting it)."""
    solid = mesh.cell_part >= 0
    return [solid.sum(axis=tuple(a for a in range(3) if a != ax)) for ax in range(3)]


def mark_intervals(indicators, costs, bulk: float = BULK_FRACTION, growth: float = MAX_GROWTH,
                   widths_mm=None) -> list[np.ndarray]:
    """Boolean masks of the intervals to bisect: highest indicator per cost first, until the
    marked share of the indicator reaches ``bulk`` or the marked cells reach ``growth`` times
    the cell count. Intervals tied with the last one taken (within TIE) are taken too, so a
    symmetric field is refined symmetrically."""
    axes = np.concatenate([np.full(len(i), a) for a, i in enumerate(indicators)])
    index = np.concatenate([np.arange(len(i)) for i in indicators])
    value = np.concatenate(indicators)
    cost = np.concatenate(costs).astype(float)
    ok = (cost > 0) & (value > 0)
    if widths_mm is not None:
        ok &= np.concatenate(widths_mm) > 2 * MIN_WIDTH_MM
    masks = [np.zeros(len(i), dtype=bool) for i in indicators]
    total = value[ok].sum()
    if total <= 0:
        return masks
    ratio = np.where(ok, value / np.where(cost > 0, cost, 1.0), 0.0)
    order = np.flatnonzero(ok)[np.argsort(-ratio[ok], kind="stable")]
    cum_value = np.cumsum(value[order])
    cum_cost = np.cumsum(cost[order])
    budget = growth * cost.sum() / 3.0  # each cell is counted once per axis
    n_bulk = int(np.searchsorted(cum_value, bulk * total)) + 1
    n_cost = max(1, int(np.searchsorted(cum_cost, budget, side="right")))
    n = min(n_bulk, n_cost, len(order))
    cutoff = ratio[order[n - 1]]
    take = np.flatnonzero(ok & (ratio >= (1.0 - TIE) * cutoff))
    for t in take:
        masks[axes[t]][index[t]] = True
    return masks


def bisect_lines(lines_mm: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Planes with the marked intervals halved, then graded (neighbour ratio at most 2)."""
    lines_mm = np.asarray(lines_mm, dtype=float)
    mids = 0.5 * (lines_mm[:-1] + lines_mm[1:])[mask]
    return grade(np.sort(np.concatenate([lines_mm, mids])))


def _part_extent_mm(mesh: Mesh, part: int, ax: int) -> float:
    """Extent of the cells a part holds along ``ax`` (mm)."""
    idx = np.nonzero((mesh.cell_part == part).any(axis=tuple(a for a in range(3) if a != ax)))[0]
    if not len(idx):
        return np.inf
    return float(mesh.lines[ax][idx[-1] + 1] - mesh.lines[ax][idx[0]]) / MM


def _plan(model, mesh: Mesh, fields, duals, hot_nodes, hot_parts, bulk, growth, maps: bool):
    """Marked intervals per axis, the summed indicators (per interval, or spread over each slab
    with ``maps``) and, per axis, the forced (hot-spot) intervals with the part that forced them."""
    k_cell = cell_conductivity(model, mesh)
    total = None
    duals = duals if duals is not None else [None] * len(fields)
    for f, z in zip(fields, duals):
        for ind in [axis_indicators(mesh, k_cell, f, maps=maps)] + (
                [axis_indicators(mesh, k_cell, f, z, maps=maps)] if z is not None else []):
            tot = sum(float(i.sum()) for i in ind)
            if tot > 0:
                total = [i / tot for i in ind] if total is None else [t + i / tot for t, i in zip(total, ind)]
    if total is None:
        total = [np.zeros((len(l) - 1,) + ((len(mesh.lines[u]) - 1, len(mesh.lines[v]) - 1) if maps else ()))
                 for l, (u, v) in zip(mesh.lines, (other_axes(a) for a in range(3)))]
    per_interval = [t.sum(axis=(1, 2)) if maps else t for t in total]
    widths_mm = [np.diff(l) / MM for l in mesh.lines]
    masks = mark_intervals(per_interval, slab_cells(mesh), bulk, growth, widths_mm)
    forced = [dict() for _ in range(3)]
    for node, part in zip(hot_nodes, hot_parts if hot_parts is not None else [None] * len(hot_nodes)):
        gi = np.argwhere(mesh.grid_node_id == int(node))
        if not len(gi):
            continue
        for a in range(3):
            i = int(gi[0, a])
            extent = _part_extent_mm(mesh, part, a) if part is not None else np.inf
            for j in (i - 1, i):  # the intervals below and above the node's plane
                if (0 <= j < len(masks[a]) and widths_mm[a][j] > 2 * MIN_WIDTH_MM
                        and widths_mm[a][j] > extent / HOT_CELLS_ACROSS):
                    masks[a][j] = True
                    forced[a].setdefault(j, []).append(part)
    return masks, total, forced


def refined_lines(model, mesh: Mesh, fields, duals=None, hot_nodes=(), hot_parts=None,
                  bulk: float = BULK_FRACTION, growth: float = MAX_GROWTH):
    """New planes (mm, per axis) refined where the indicators of ``fields`` are largest.

    ``fields`` is a list of node temperature arrays (°C), for example each rated part's field
    at its peak time, and ``duals`` the matching influence fields (or None). For each field the
    energy-norm indicator and, with a dual, the goal-oriented one are each normalized to a total
    of 1 and summed, so every peak has an equal say and no region is starved (a goal-oriented
    indicator alone can stall on a coarse mesh that misses the peak's location). The intervals
    on both sides of each node in ``hot_nodes`` are always bisected: the peak must be resolved
    where it is, until they are narrower than 1/HOT_CELLS_ACROSS of that part's extent
    (``hot_parts`` gives the part of each hot node).
    """
    masks, _, _ = _plan(model, mesh, fields, duals, hot_nodes, hot_parts, bulk, growth, maps=False)
    return tuple(bisect_lines(mesh.lines[a] / MM, masks[a]) for a in range(3)), masks


REGION_COVER = 0.95  # a new plane is active over the cells holding this share of its interval's indicator ...
REGION_MARGIN_CELLS = 2  # ... widened by this many cells on every side
MAX_BOXES = 8  # boxes per plane: separate hot spots (parts, standoffs) each get their own


def _box_area(b: np.ndarray) -> float:
    return float((b[1] - b[0]) * (b[3] - b[2]))


def _hull(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    return np.array([min(a[0], b[0]), max(a[1], b[1]), min(a[2], b[2]), max(a[3], b[3])])


def merge_boxes(boxes: list, limit: int = MAX_BOXES) -> list:
    """At most ``limit`` boxes covering ``boxes``: a box of the whole plane replaces all, and
    while there are too many, the pair whose enclosing box adds the least area is merged."""
    boxes = [np.asarray(b, dtype=float) for b in boxes]
    if any(np.all(np.isinf(b)) for b in boxes):
        return [EVERYWHERE]
    while len(boxes) > limit:
        best = None
        for i in range(len(boxes)):
            for j in range(i + 1, len(boxes)):
                extra = _box_area(_hull(boxes[i], boxes[j])) - _box_area(boxes[i]) - _box_area(boxes[j])
                if best is None or extra < best[0]:
                    best = (extra, i, j)
        _, i, j = best
        boxes[i] = _hull(boxes[i], boxes[j])
        del boxes[j]
    return boxes


def _boxes_of(weights: np.ndarray, lines_u_mm: np.ndarray, lines_v_mm: np.ndarray) -> list:
    """Boxes [u_lo, u_hi, v_lo, v_hi] (mm) around the cells holding REGION_COVER of ``weights``
    (n_u, n_v), widened by REGION_MARGIN_CELLS: one per cluster of such cells (8-connected after
    the widening, scipy.ndimage.label), at most MAX_BOXES; empty when the weights are all zero."""
    from scipy import ndimage

    tot = float(weights.sum())
    if tot <= 0:
        return []
    flat = weights.ravel()
    order = np.argsort(-flat, kind="stable")
    n = int(np.searchsorted(np.cumsum(flat[order]), REGION_COVER * tot)) + 1
    marked = np.zeros(weights.shape, dtype=bool)
    marked.flat[order[:n]] = True
    m = REGION_MARGIN_CELLS
    grown = ndimage.binary_dilation(marked, structure=np.ones((2 * m + 1, 2 * m + 1), dtype=bool))
    labels, _ = ndimage.label(grown, structure=np.ones((3, 3), dtype=bool))
    boxes = [np.array([lines_u_mm[su.start], lines_u_mm[su.stop], lines_v_mm[sv.start], lines_v_mm[sv.stop]])
             for su, sv in ndimage.find_objects(labels)]
    return merge_boxes(boxes)


def _part_box(model, part: int, ax: int) -> np.ndarray:
    """A part's extent in the two axes other than ``ax``, widened by half its size (mm)."""
    p = model.parts[part]
    u, v = other_axes(ax)
    out = []
    for b in (u, v):
        lo, size = p.origin_mm[b], p.size_mm[b]
        out += [lo - 0.5 * size, lo + 1.5 * size]
    return np.array(out)


def _stored_boxes(region: np.ndarray) -> list:
    """A plane's boxes (n_boxes, 4) as a list, unused (NaN) slots left out."""
    return [b for b in region if not np.any(np.isnan(b))]


def _pack(per_plane: list) -> np.ndarray:
    """Lists of boxes per plane as a (n_planes, n_boxes, 4) array, NaN-padded."""
    width = max(1, max(len(b) for b in per_plane))
    out = np.full((len(per_plane), width, 4), np.nan)
    for i, boxes in enumerate(per_plane):
        for k, b in enumerate(boxes):
            out[i, k] = b
    return out


def refined_planes(model, mesh: Mesh, fields, duals=None, hot_nodes=(), hot_parts=None,
                   bulk: float = BULK_FRACTION, growth: float = MAX_GROWTH):
    """Like :func:`refined_lines`, with local planes: (lines_mm, regions), where each new plane is
    active only over the part of its slab where its interval's indicator comes from
    (:mod:`solver.mesh.localplanes`), and planes of earlier levels keep their regions. Planes
    added by grading take the regions of the new planes beside them."""
    masks, maps, forced = _plan(model, mesh, fields, duals, hot_nodes, hot_parts, bulk, growth, maps=True)
    old_regions = mesh.regions if mesh.regions is not None else global_regions(mesh.lines)
    lines_out, regions_out = [], []
    for a in range(3):
        u, v = other_axes(a)
        lu, lv = mesh.lines[u] / MM, mesh.lines[v] / MM
        lines = mesh.lines[a] / MM
        marked = np.flatnonzero(masks[a])
        mids = 0.5 * (lines[marked] + lines[marked + 1])
        new_boxes = []
        for j in marked:
            boxes = _boxes_of(maps[a][j], lu, lv)
            for part in forced[a].get(int(j), []):
                boxes.append(_part_box(model, part, a) if part is not None else EVERYWHERE)
            new_boxes.append(merge_boxes(boxes) if boxes else [EVERYWHERE])
        merged = np.concatenate([lines, mids])
        merged_boxes = [_stored_boxes(r) for r in as_boxes(old_regions[a])] + new_boxes
        order = np.argsort(merged, kind="stable")
        merged = merged[order]
        merged_boxes = [merged_boxes[i] for i in order]
        graded = grade(merged)
        region = [[EVERYWHERE] for _ in range(len(graded))]
        pos = np.searchsorted(graded, merged - 1e-9)
        for p, boxes in zip(pos, merged_boxes):
            region[p] = boxes
        extra = np.setdiff1d(np.arange(len(graded)), pos)
        if len(extra):
            mid_pos = np.sort(np.searchsorted(graded, mids - 1e-9)) if len(mids) else np.zeros(0, dtype=int)
            for e in extra:  # a grading plane serves the new planes beside it
                below = mid_pos[mid_pos < e]
                above = mid_pos[mid_pos > e]
                boxes = []
                for nb in ([below[-1]] if len(below) else []) + ([above[0]] if len(above) else []):
                    boxes += region[nb]
                region[e] = merge_boxes(boxes) if boxes else [EVERYWHERE]
        lines_out.append(graded)
        regions_out.append(_pack(region))
    return tuple(lines_out), tuple(regions_out)
