"""Grid planes that are active only inside a box: local refinement on the box grid.

The mesh is still the tensor grid of every plane (so the tetrahedra stay conforming and every
assembly routine is unchanged), but a plane added by refinement may carry a *region*: a box in
the other two coordinates outside which its nodes are not unknowns. Such a hanging node takes
its value by linear interpolation along the plane's axis from the nearest planes that are active
there. The admissible temperatures are therefore a subspace of the fine grid's piecewise-linear
functions (continuous, since every function of it is one of the fine grid's), spanned by the
columns of a prolongation ``P`` (N × n_free): ``T = P·u``. The Galerkin system on it is
``PᵀMP u' + PᵀKP u = PᵀF``; :class:`solver.linalg.linsolve.ConstrainedSolver` solves with
``PᵀAP`` and hands back ``P·u``, so stepping, the reduced basis and every output keep working on
mesh-node vectors while the factorization only sees the free nodes. This is the constrained
(hanging-node) approximation of locally refined hexahedral grids, applied to the tensor grid's
Kuhn tetrahedra (common practice, no source; see e.g. the "hanging node constraints" of
deal.II's documentation for the hexahedral case, from memory).

Regions are stored per axis as an array (n_planes, n_boxes, 4) of boxes [u_lo, u_hi, v_lo, v_hi]
in mm, where u, v are the other two axes in increasing order: a plane is active over the union of
its boxes (unused slots are NaN), so one plane can serve several hot spots apart from each other
without being active between them. A plane active everywhere has a box of ±inf; an array
(n_planes, 4) means one box per plane. Lengths in millimetres here (the planes handed to the
mesher), metres on the mesh.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp

EVERYWHERE = np.array([-np.inf, np.inf, -np.inf, np.inf])
UNUSED = np.full(4, np.nan)  # an empty box slot: no coordinate lies in it
_EPS_MM = 1e-9
MAX_DEPTH = 64  # chains of interpolations longer than this mean the regions are inconsistent


class RegionError(ValueError):
    """The plane regions do not define a prolongation (the caller makes every plane global)."""


def other_axes(ax: int) -> tuple[int, int]:
    return tuple(a for a in range(3) if a != ax)


def global_regions(lines_mm) -> tuple:
    """Regions for planes that are all active everywhere (one box each)."""
    return tuple(np.tile(EVERYWHERE, (len(l), 1, 1)) for l in lines_mm)


def as_boxes(r) -> np.ndarray:
    """One axis's regions as (n_planes, n_boxes, 4), from either stored shape."""
    r = np.asarray(r, dtype=float)
    return r[:, None, :] if r.ndim == 2 else r


def everywhere(r) -> np.ndarray:
    """Per plane of one axis: True where one of its boxes is the whole plane."""
    b = as_boxes(r)
    return np.any((b[..., 0] == -np.inf) & (b[..., 1] == np.inf) & (b[..., 2] == -np.inf) & (b[..., 3] == np.inf),
                  axis=1)


def is_global(regions) -> bool:
    return regions is None or all(np.all(everywhere(r)) for r in regions)


def active_masks(lines_mm, regions) -> list[np.ndarray]:
    """Per axis a: boolean (nx+1, ny+1, nz+1), True where the node's plane along a is active at
    the node's other two coordinates."""
    out = []
    for a in range(3):
        u, v = other_axes(a)
        r = as_boxes(regions[a])
        cu, cv = np.asarray(lines_mm[u], dtype=float), np.asarray(lines_mm[v], dtype=float)
        act = np.zeros((r.shape[0], len(cu), len(cv)), dtype=bool)  # axes (a, u, v)
        for k in range(r.shape[1]):  # a handful of box slots; NaN slots select nothing
            in_u = (cu[None, :] >= r[:, k, 0:1] - _EPS_MM) & (cu[None, :] <= r[:, k, 1:2] + _EPS_MM)
            in_v = (cv[None, :] >= r[:, k, 2:3] - _EPS_MM) & (cv[None, :] <= r[:, k, 3:4] + _EPS_MM)
            act |= in_u[:, :, None] & in_v[:, None, :]
        out.append(np.moveaxis(act, 0, a))
    return out


def _activity(mesh, regions):
    """(plane positions mm, per-axis active masks, mask of the grid's free nodes)."""
    lines_mm = [np.asarray(l) / 1e-3 for l in mesh.lines]
    act = active_masks(lines_mm, regions)
    return lines_mm, act, (mesh.grid_node_id >= 0) & act[0] & act[1] & act[2]


def free_count(mesh) -> int:
    """Mesh nodes that are unknowns (active along all three axes), without building P."""
    if is_global(mesh.regions):
        return mesh.n_nodes
    return int(_activity(mesh, mesh.regions)[2].sum())


def _brackets(act: np.ndarray, ax: int) -> tuple[np.ndarray, np.ndarray]:
    """Index of the nearest active plane at or below / at or above each node along ``ax``."""
    n = act.shape[ax]
    shape = [1, 1, 1]
    shape[ax] = n
    idx = np.arange(n).reshape(shape)
    lo = np.maximum.accumulate(np.where(act, idx, -1), axis=ax)
    rev = np.flip(np.where(act, idx, n), axis=ax)
    hi = np.flip(np.minimum.accumulate(rev, axis=ax), axis=ax)
    return lo, hi


def prolongation(mesh, regions, extra_unknowns: int = 0):
    """(P, free): P (N + extra, n_free + extra) csr with T = P·u, and the unknown ids that stay
    free (P's rows there are the identity). None when no node hangs. ``extra_unknowns`` (air
    volumes) are appended as free unknowns. Raises RegionError when the regions are inconsistent."""
    if is_global(regions):
        return None
    gid = mesh.grid_node_id
    exists = gid >= 0
    lines_mm, act, free_mask = _activity(mesh, regions)
    hanging = exists & ~free_mask
    if not hanging.any():
        return None
    n = mesh.n_nodes
    rows, cols, vals = [], [], []
    for a in range(3):
        mine = hanging & ~act[a]  # the first axis along which a node hangs decides its interpolation
        for b in range(a):
            mine &= act[b]
        if not mine.any():
            continue
        lo, hi = _brackets(act[a], a)
        pos = np.nonzero(mine)
        i = pos[a]
        i0, i1 = lo[pos], hi[pos]
        if np.any(i0 < 0) or np.any(i1 >= act[a].shape[a]):
            raise RegionError("a hanging plane has no active plane on one side")
        x = lines_mm[a]
        w1 = (x[i] - x[i0]) / (x[i1] - x[i0])
        p0 = list(pos)
        p1 = list(pos)
        p0[a], p1[a] = i0, i1
        g = gid[pos]
        g0, g1 = gid[tuple(p0)], gid[tuple(p1)]
        if np.any(g0 < 0) or np.any(g1 < 0):
            raise RegionError("a hanging node's neighbouring plane has no node there")
        rows += [g, g]
        cols += [g0, g1]
        vals += [1.0 - w1, w1]
    free_nodes = np.sort(gid[free_mask])
    rows.append(free_nodes)
    cols.append(free_nodes)
    vals.append(np.ones(len(free_nodes)))
    total = n + int(extra_unknowns)
    if extra_unknowns:
        air = np.arange(n, total)
        rows.append(air)
        cols.append(air)
        vals.append(np.ones(len(air)))
    w = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(total, total))
    is_free = np.zeros(total, dtype=bool)
    is_free[free_nodes] = True
    is_free[n:] = True
    q = w
    for _ in range(MAX_DEPTH):
        if q[:, ~is_free].nnz == 0:
            break
        q = (w @ q).tocsr()
        q.eliminate_zeros()
    else:
        raise RegionError("the plane regions form a cycle of interpolations")
    free = np.flatnonzero(is_free)
    p = q[:, free].tocsr()
    p.sort_indices()
    return p, free
