"""Still air inside a sealed box as one lumped node per ``air_volumes`` entry.

Each air volume is one unknown T_air appended after the mesh nodes. It exchanges heat with the
inside faces it lists, each with its own h (W/(m²·K)):

    C_air dT_air/dt = Σ_faces ∫ h (T − T_air) dA,     C_air = ρ c V,

and the faces take the opposite heat, so the augmented system stays linear and symmetric:
K gains ∫ h NᵢNⱼ dA on the faces, −∫ h Nᵢ dA between node i and the air node, Σ h·A on the air
node's diagonal; M gains C_air. V is the given ``volume_mm3`` or the empty space (no part's
cells) that the ``enclosed_by`` parts close off (6-connected cells not reaching the grid's
outside). With ``enclosed_by`` a face entry covers only faces toward that enclosed space, so
``"exposed"`` of a housing means its inside. No air flow, no stratification: one temperature.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy import ndimage

from solver.fem import assemble
from solver.mesh.mesher import MM


@dataclass
class AirNodes:
    names: list
    index: np.ndarray  # unknown ids (after the mesh nodes)
    volume_m3: np.ndarray
    capacity_j_k: np.ndarray  # ρ c V, J/K
    ha_w_k: np.ndarray  # Σ h·A over each node's faces, W/K
    area_m2: np.ndarray
    rated_c: list  # °C or None
    computed_volume: list  # bool: volume from the enclosed space (False: given)

    def __len__(self) -> int:
        return len(self.names)


def enclosed_region(mesh, part_ids) -> np.ndarray:
    """(nx, ny, nz) bool: cells not held by ``part_ids`` that cannot reach outside the grid
    through face-connected cells not held by them."""
    walls = np.isin(mesh.cell_part, list(part_ids))
    free = np.pad(~walls, 1, constant_values=True)
    labels, _ = ndimage.label(free)
    outside = np.unique(np.concatenate([labels[0].ravel(), labels[-1].ravel(), labels[:, 0].ravel(),
                                        labels[:, -1].ravel(), labels[:, :, 0].ravel(), labels[:, :, -1].ravel()]))
    inside = (labels > 0) & ~np.isin(labels, outside)
    return inside[1:-1, 1:-1, 1:-1]


def _face_neighbour_cells(mesh, mask: np.ndarray):
    """Grid index (3, F) of the cell across each masked boundary triangle, and whether it is in the grid."""
    bf = mesh.boundary
    cen = mesh.nodes[bf.tris[mask]].mean(axis=1)
    ax, direction = bf.axis[mask], bf.direction[mask]
    idx = np.empty((3, len(cen)), dtype=np.int64)
    for a in range(3):
        idx[a] = np.searchsorted(mesh.lines[a], cen[:, a], side="right") - 1
    rows = np.arange(len(cen))
    plane = bf.plane[mask]
    for a in range(3):  # on the face's own axis the centroid lies on a plane: the neighbour is beyond it
        sel = ax == a
        if not sel.any():
            continue
        pos = np.searchsorted(mesh.lines[a], plane[sel] - 1e-12, side="left")  # index of the plane
        idx[a, rows[sel]] = np.where(direction[sel] > 0, pos, pos - 1)
    shape = mesh.cell_part.shape
    inside = np.all((idx >= 0) & (idx < np.array(shape)[:, None]), axis=0)
    return idx, inside


def build_air(model, mesh, side_face_mask, warnings: list):
    """Air nodes and their coupling: (AirNodes or None, [(tris, h, area, j)], issues, mask of the
    boundary triangles that exchange with air)."""
    if not model.air_volumes:
        return None, [], [], None
    issues, couplings = [], []
    face_mask = np.zeros(len(mesh.boundary.tris), dtype=bool)
    n_m = mesh.n_nodes
    names, vols, caps, has, areas, rated, computed = [], [], [], [], [], [], []
    dx, dy, dz = (np.diff(l) for l in mesh.lines)
    cell_vol = dx[:, None, None] * dy[None, :, None] * dz[None, None, :]
    bf = mesh.boundary
    for j, av in enumerate(model.air_volumes):
        region = None
        if av.enclosed_by:
            region = enclosed_region(mesh, [model.part_index(n) for n in av.enclosed_by])
            empty = region & (mesh.cell_part < 0)
            if not empty.any():
                issues.append((f"air_volumes[{j}].enclosed_by",
                               f"the parts {', '.join(repr(n) for n in av.enclosed_by)} do not enclose any empty "
                               "space (the air must be closed off on every side, through faces, by these parts)"))
                continue
            volume = float(cell_vol[empty].sum())
        if av.volume_mm3 is not None:
            volume = float(av.volume_mm3) * MM ** 3
        ha, area = 0.0, 0.0
        for k, f in enumerate(av.faces):
            mask = side_face_mask(mesh, model, model.part_index(f.part), f.side)
            if region is not None and mask.any():
                idx, ok = _face_neighbour_cells(mesh, mask)
                toward = np.zeros(ok.shape, dtype=bool)
                toward[ok] = region[idx[0, ok], idx[1, ok], idx[2, ok]]
                sub = np.flatnonzero(mask)
                mask = np.zeros_like(mask)
                mask[sub[toward]] = True
            if not mask.any():
                warnings.append(f"air volume {av.name!r}: the {f.side} side of {f.part!r} has no exposed face"
                                + (" toward the enclosed air" if region is not None else "") + "; it has no effect")
                continue
            face_mask |= mask
            tris = bf.tris[mask]
            a = bf.area[mask]
            couplings.append((tris, np.full(len(tris), float(f.h)), a, len(names)))
            ha += float(f.h) * float(a.sum())
            area += float(a.sum())
        if area <= 0:
            issues.append((f"air_volumes[{j}].faces", "no listed face exchanges heat with this air (none is "
                                                      "exposed" + (" toward the enclosed air)" if region is not None
                                                                   else ")")))
            continue
        names.append(av.name)
        vols.append(volume)
        caps.append(float(av.density) * float(av.specific_heat) * volume)
        has.append(ha)
        areas.append(area)
        rated.append(av.rated_c)
        computed.append(av.volume_mm3 is None)
    if issues:
        return None, [], issues, None
    air = AirNodes(names, n_m + np.arange(len(names)), np.array(vols), np.array(caps), np.array(has),
                   np.array(areas), rated, computed)
    return air, couplings, [], face_mask


def coupling_matrix(mesh, air: AirNodes, couplings) -> sp.csr_matrix:
    """The air exchange's part of K on the augmented unknowns (N + n_air square), W/K."""
    n_m = mesh.n_nodes
    n = n_m + len(air)
    blocks = []
    for tris, h, area, j in couplings:
        h_mat = assemble.surface_matrix(mesh.nodes, tris, h, area).tocoo()
        b = assemble.surface_load(mesh.nodes, tris, h, area)
        nz = np.flatnonzero(b)
        rows = np.concatenate([h_mat.row, nz, np.full(len(nz), n_m + j), [n_m + j]])
        cols = np.concatenate([h_mat.col, np.full(len(nz), n_m + j), nz, [n_m + j]])
        vals = np.concatenate([h_mat.data, -b[nz], -b[nz], [float((h * area).sum())]])
        blocks.append((rows, cols, vals))
    if not blocks:
        return sp.csr_matrix((n, n))
    rows, cols, vals = (np.concatenate(x) for x in zip(*blocks))
    return sp.csr_matrix((vals, (rows, cols)), shape=(n, n))
