"""Structured tetrahedral mesher for models built from axis-aligned boxes.

A rectilinear grid whose planes include every part face is filled cell by cell (a later part
wins where boxes overlap); empty cells are dropped; each hexahedral cell is split into six
tetrahedra along its main diagonal (the same split in every cell, so the mesh is conforming).
Coordinates in metres inside; see :func:`build_mesh`.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from solver.mesh.budget import check_budget
from solver.errors import ModelError
from solver.mesh.gridlines import axis_lines, layers_needed
from solver.mesh.localplanes import is_global
from solver.resources import available_memory_bytes  # noqa: F401 (re-exported)

MM = 1e-3
HEATED_MIN_LAYERS = 4  # heated parts get at least this many cells across (see DEVELOPERS.md)
BYTES_PER_NODE_ESTIMATE = 4000  # matrices, assembly scratch and an iterative solver, measured roughly

# Six tetrahedra of a unit cube, corners numbered i + 2j + 4k (Kuhn split along 000-111).
_PATHS = [(0, 1, 2), (0, 2, 1), (1, 0, 2), (1, 2, 0), (2, 0, 1), (2, 1, 0)]


def _kuhn_tets() -> np.ndarray:
    tets = []
    for order in _PATHS:
        v = [0, 0, 0]
        corners = [0]
        for ax in order:
            v[ax] = 1
            corners.append(v[0] + 2 * v[1] + 4 * v[2])
        tets.append(corners)
    tets = np.array(tets, dtype=np.int64)
    # odd permutations give negatively oriented tets: swap two corners so every tet has the
    # positive orientation VTK expects (0, 1, 2 counter-clockwise seen from 3)
    corner_xyz = np.array([[c & 1, (c >> 1) & 1, (c >> 2) & 1] for c in range(8)], dtype=float)
    x = corner_xyz[tets]
    negative = np.linalg.det(x[:, 1:] - x[:, :1]) < 0
    tets[negative] = tets[negative][:, [0, 1, 3, 2]]
    return tets


KUHN_TETS = _kuhn_tets()
SIDE_AXIS = {"x-": (0, -1), "x+": (0, 1), "y-": (1, -1), "y+": (1, 1), "z-": (2, -1), "z+": (2, 1)}


@dataclass
class BoundaryFaces:
    """Boundary triangles of the meshed solid (two per exposed cell face)."""

    tris: np.ndarray  # (F, 3) node ids
    part: np.ndarray  # (F,) owning part of the adjacent cell
    axis: np.ndarray  # (F,) 0, 1, 2
    direction: np.ndarray  # (F,) -1 or +1 (outward normal)
    plane: np.ndarray  # (F,) plane coordinate, m
    area: np.ndarray  # (F,) m²


@dataclass
class Mesh:
    lines: tuple  # three arrays of plane coordinates, m
    cell_part: np.ndarray  # (nx, ny, nz) owning part per cell, -1 for empty
    nodes: np.ndarray  # (N, 3) m
    grid_node_id: np.ndarray  # (nx+1, ny+1, nz+1) node id or -1
    tets: np.ndarray  # (E, 4)
    tet_part: np.ndarray  # (E,)
    boundary: BoundaryFaces
    part_names: list
    overlaps: list = field(default_factory=list)  # (later part, earlier part, volume m³)
    warnings: list = field(default_factory=list)
    regions: tuple | None = None  # per axis (planes, 4) mm boxes where each plane is active (solver.mesh.localplanes)

    @property
    def n_nodes(self) -> int:
        return len(self.nodes)

    @property
    def n_tets(self) -> int:
        return len(self.tets)

    def part_volume(self) -> np.ndarray:
        """Volume held by each part after overlaps, m³."""
        dx, dy, dz = (np.diff(l) for l in self.lines)
        vol = dx[:, None, None] * dy[None, :, None] * dz[None, None, :]
        owners = self.cell_part.ravel()
        ok = owners >= 0
        return np.bincount(owners[ok], weights=vol.ravel()[ok], minlength=len(self.part_names))

    def part_cell_widths(self, p: int):
        """(min, max) cell width in mm along x, y, z inside part ``p``."""
        out = []
        idx = np.nonzero(self.cell_part == p)
        for ax in range(3):
            if len(idx[ax]) == 0:
                out.append((np.nan, np.nan))
                continue
            w = np.diff(self.lines[ax])[np.unique(idx[ax])] / MM
            out.append((float(w.min()), float(w.max())))
        return out


def _part_spans(model, heated: set):
    """Per axis: (lo, hi, max cell width) in mm for every part."""
    spans = ([], [], [])
    for p in model.parts:
        layers = max(model.mesh.min_layers, HEATED_MIN_LAYERS if p.name in heated else 1)
        for ax in range(3):
            lo = p.origin_mm[ax]
            size = p.size_mm[ax]
            spans[ax].append((lo, lo + size, layers_needed(size, layers, model.mesh.cell_mm)))
    return spans


def _index_of(lines_mm: np.ndarray, value: float) -> int:
    return int(np.argmin(np.abs(lines_mm - value)))


def plan_lines(model):
    """Grid planes in mm along x, y, z for a model."""
    heated = {hl.part for hl in model.heat_loads}
    spans = _part_spans(model, heated)
    return tuple(axis_lines(spans[ax], model.mesh.cell_mm) for ax in range(3))


def estimate_nodes(model, lines_mm=None) -> int:
    """Upper estimate of the node count without allocating the grid."""
    lines_mm = lines_mm or plan_lines(model)
    total = 0
    for p in model.parts:
        n = 1
        for ax in range(3):
            i0 = _index_of(lines_mm[ax], p.origin_mm[ax])
            i1 = _index_of(lines_mm[ax], p.origin_mm[ax] + p.size_mm[ax])
            n *= (i1 - i0 + 1)
        total += n
    grid_total = np.prod([float(len(l)) for l in lines_mm])
    return int(min(total, grid_total))


def build_mesh(model, memory_limit_bytes: int | None = None, lines_mm=None, regions=None) -> Mesh:
    """Mesh a validated model on its planned planes, or on ``lines_mm`` (three arrays of plane
    positions in mm that include every part face, e.g. from :mod:`solver.mesh.refinement`), with
    optional ``regions`` where each plane is active (:mod:`solver.mesh.localplanes`; None: all
    planes everywhere). Raises ModelError for a mesh that would not fit in memory."""
    if memory_limit_bytes is None and lines_mm is None:
        check_budget(model)  # counted from the model before any plane is placed (solver/mesh/budget.py)
    lines_mm = plan_lines(model) if lines_mm is None else tuple(np.asarray(l, dtype=float) for l in lines_mm)
    est_nodes = estimate_nodes(model, lines_mm)
    est_bytes = est_nodes * BYTES_PER_NODE_ESTIMATE
    limit = memory_limit_bytes if memory_limit_bytes is not None else int(0.8 * available_memory_bytes())
    if est_bytes > limit:
        raise ModelError(("mesh.cell_mm",
                          f"the mesh would need about {est_nodes:,} nodes and {est_bytes / 1e9:.1f} GB of memory, "
                          f"more than the {limit / 1e9:.1f} GB available; use a larger cell size or fewer "
                          f"layers (grid {len(lines_mm[0])} x {len(lines_mm[1])} x {len(lines_mm[2])} planes)"))
    nx, ny, nz = (len(l) - 1 for l in lines_mm)
    cell_part = np.full((nx, ny, nz), -1, dtype=np.int32)
    dx, dy, dz = (np.diff(l) * MM for l in lines_mm)
    overlaps = []
    warnings = []
    for pi, p in enumerate(model.parts):
        sl = tuple(slice(_index_of(lines_mm[ax], p.origin_mm[ax]),
                         _index_of(lines_mm[ax], p.origin_mm[ax] + p.size_mm[ax])) for ax in range(3))
        block = cell_part[sl]
        taken = block >= 0
        if taken.any():
            vol = (dx[sl[0]][:, None, None] * dy[sl[1]][None, :, None] * dz[sl[2]][None, None, :])
            per_owner = np.bincount(block[taken], weights=vol[taken], minlength=len(model.parts))
            for q in np.nonzero(per_owner)[0]:
                overlaps.append((pi, int(q), float(per_owner[q])))
        block[...] = pi
    names = [p.name for p in model.parts]

    active = cell_part >= 0
    node_used = np.zeros((nx + 1, ny + 1, nz + 1), dtype=bool)
    for a in (0, 1):
        for b in (0, 1):
            for c in (0, 1):
                node_used[a:a + nx, b:b + ny, c:c + nz] |= active
    grid_node_id = np.full(node_used.shape, -1, dtype=np.int64)
    n_nodes = int(node_used.sum())
    grid_node_id[node_used] = np.arange(n_nodes)
    gi, gj, gk = np.nonzero(node_used)
    lx, ly, lz = (np.asarray(l) * MM for l in lines_mm)
    nodes = np.column_stack([lx[gi], ly[gj], lz[gk]])

    ci, cj, ck = np.nonzero(active)
    corners = np.empty((len(ci), 8), dtype=np.int64)
    for c in range(8):
        a, b, cc = c & 1, (c >> 1) & 1, (c >> 2) & 1
        corners[:, c] = grid_node_id[ci + a, cj + b, ck + cc]
    tets = corners[:, KUHN_TETS].reshape(-1, 4)
    tet_part = np.repeat(cell_part[ci, cj, ck], 6)

    boundary = _boundary_faces(cell_part, grid_node_id, (lx, ly, lz))

    for later, earlier, vol in overlaps:
        warnings.append(f"part {names[later]!r} overlaps {names[earlier]!r} by {vol / MM**3:.3g} mm³ "
                        f"(the later part, {names[later]!r}, takes that volume)")
    return Mesh((lx, ly, lz), cell_part, nodes, grid_node_id, tets, tet_part, boundary, names, overlaps, warnings,
                None if is_global(regions) else tuple(np.asarray(r, dtype=float) for r in regions))


def _boundary_faces(cell_part, grid_node_id, lines_m) -> BoundaryFaces:
    nx, ny, nz = cell_part.shape
    padded = np.full((nx + 2, ny + 2, nz + 2), -1, dtype=np.int32)
    padded[1:-1, 1:-1, 1:-1] = cell_part
    tris, parts, axes, dirs, planes, areas = [], [], [], [], [], []
    for ax in range(3):
        for direction in (-1, 1):
            shift = [0, 0, 0]
            shift[ax] = direction
            nb = padded[1 + shift[0]:1 + shift[0] + nx, 1 + shift[1]:1 + shift[1] + ny, 1 + shift[2]:1 + shift[2] + nz]
            exposed = (cell_part >= 0) & (nb < 0)
            ci = np.array(np.nonzero(exposed))  # (3, F)
            if ci.shape[1] == 0:
                continue
            base = ci.copy()
            if direction == 1:
                base[ax] += 1
            u, v = [a for a in range(3) if a != ax]
            # quad corners: (0,0), (1,0), (0,1), (1,1) in the face's (u, v) directions
            quad = []
            for du, dv in ((0, 0), (1, 0), (0, 1), (1, 1)):
                idx = base.copy()
                idx[u] += du
                idx[v] += dv
                quad.append(grid_node_id[idx[0], idx[1], idx[2]])
            q00, q10, q01, q11 = quad
            # split along the min-max diagonal, as the Kuhn tets do
            tris.append(np.column_stack([q00, q10, q11]))
            tris.append(np.column_stack([q00, q11, q01]))
            owner = cell_part[ci[0], ci[1], ci[2]]
            wu = np.diff(lines_m[u])[ci[u]]
            wv = np.diff(lines_m[v])[ci[v]]
            plane = lines_m[ax][base[ax]]
            for _ in range(2):
                parts.append(owner)
                axes.append(np.full(len(owner), ax))
                dirs.append(np.full(len(owner), direction))
                planes.append(plane)
                areas.append(0.5 * wu * wv)
    if not tris:
        empty = np.zeros(0)
        return BoundaryFaces(np.zeros((0, 3), dtype=np.int64), empty.astype(int), empty.astype(int),
                             empty.astype(int), empty, empty)
    return BoundaryFaces(np.vstack(tris), np.concatenate(parts), np.concatenate(axes),
                         np.concatenate(dirs), np.concatenate(planes), np.concatenate(areas))


def convection_face_mask(mesh: Mesh, model, conv_index: int) -> np.ndarray:
    """Boolean mask over boundary triangles that a convection entry covers."""
    c = model.convection[conv_index]
    p = model.part_index(c.part)
    bf = mesh.boundary
    mask = bf.part == p
    if c.side != "exposed":
        ax, direction = SIDE_AXIS[c.side]
        part = model.parts[p]
        coord = (part.origin_mm[ax] + (part.size_mm[ax] if direction > 0 else 0.0)) * MM
        mask &= (bf.axis == ax) & (bf.direction == direction) & (np.abs(bf.plane - coord) < 1e-9)
    return mask


def isolated_parts(mesh: Mesh, convected_parts: set) -> list:
    """Names of parts in solid pieces that touch no convection face (heat cannot leave them)."""
    labels, n = ndimage.label(mesh.cell_part >= 0, structure=np.ones((3, 3, 3), dtype=bool))
    if n == 0:
        return []
    touched = np.zeros(n + 1, dtype=bool)
    for p in convected_parts:
        touched[np.unique(labels[mesh.cell_part == p])] = True
    cold = ~touched[labels] & (labels > 0)
    return [mesh.part_names[p] for p in np.unique(mesh.cell_part[cold])]
