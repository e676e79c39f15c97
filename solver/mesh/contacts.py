"""Thermal contact resistance between touching parts, as a resistive layer in the adjacent cells.

A contact adds R (K·m²/W) in series across the faces where two parts' cells meet. The mesh keeps
one node per grid point (no doubled interface nodes): each of the two cells beside an interface
face takes R/2 in its conductivity normal to the face,

    k_eff = h / (h/k + R/2)        (h: the cell's width normal to the face, m),

so the cell's normal conductance k_eff·A/h is exactly its own conduction in series with half the
contact. For heat flowing across the interface in one direction this reproduces the series
network exactly at the nodes away from the interface (P1 elements with cellwise constant k are
nodally exact in 1D at steady state); the temperature jump is spread over the two cells beside
the face instead of sitting on the face (the shared node shows the middle of the jump).
Tangential conduction and heat capacity are unchanged. Why not doubled nodes: the structured
grid's fixed stencil (solver/assemble.GridPattern), the refinement indicators and the field
files all rely on one node per grid point; the layer form keeps all of them. The transient cost
of the smeared jump is measured in tests/test_contacts.py and docs/physics.md.
SI units inside; the model gives R in K·m²/W (or a conductance in W/(m²·K)).
"""
from __future__ import annotations

import numpy as np

from solver.mesh.mesher import MM, SIDE_AXIS


def contact_resistance_grid(model, mesh):
    """(nx, ny, nz, 3) contact resistance added to each cell along each axis (K·m²/W), the
    interface area of each contact (m²), and issues ``(field path, message)`` for contacts whose
    parts share no face."""
    shape = mesh.cell_part.shape
    r = np.zeros(shape + (3,))
    areas, issues = [], []
    cp = mesh.cell_part
    widths = [np.diff(l) for l in mesh.lines]
    for i, ct in enumerate(model.contacts):
        a, b = (model.part_index(n) for n in ct.parts)
        half = 0.5 * ct.resistance
        area = 0.0
        for ax in range(3):
            lo = [slice(None)] * 3
            hi = [slice(None)] * 3
            lo[ax] = slice(0, shape[ax] - 1)
            hi[ax] = slice(1, shape[ax])
            c_lo, c_hi = cp[tuple(lo)], cp[tuple(hi)]
            if ct.side is None:
                face = ((c_lo == a) & (c_hi == b)) | ((c_lo == b) & (c_hi == a))
            else:
                s_ax, direction = SIDE_AXIS[ct.side]
                if s_ax != ax:
                    continue
                p = model.parts[a]
                coord = (p.origin_mm[ax] + (p.size_mm[ax] if direction > 0 else 0.0)) * MM
                plane = np.abs(mesh.lines[ax][1:-1] - coord) < 1e-9  # interior plane between lo and hi
                sel = [None, None, None]
                sel[ax] = slice(None)
                face = (((c_lo == a) & (c_hi == b)) if direction > 0 else ((c_lo == b) & (c_hi == a)))
                face &= plane[tuple(sel)]
            if not face.any():
                continue
            u, v = [x for x in range(3) if x != ax]
            su = [None, None, None]
            su[u] = slice(None)
            sv = [None, None, None]
            sv[v] = slice(None)
            fa = widths[u][tuple(su)] * widths[v][tuple(sv)] * np.ones(face.shape)
            area += float(fa[face].sum())
            r[tuple(lo) + (ax,)] += np.where(face, half, 0.0)
            r[tuple(hi) + (ax,)] += np.where(face, half, 0.0)
        areas.append(area)
        if area <= 0:
            where = f" on the {ct.side} side of {ct.parts[0]!r}" if ct.side else ""
            issues.append((f"contacts[{i}].parts", f"parts {ct.parts[0]!r} and {ct.parts[1]!r} do not touch{where} "
                                                   "(no shared face in the mesh), so there is no interface for "
                                                   "this contact"))
    return r, areas, issues


def effective_conductivity(k: np.ndarray, h: np.ndarray, r: np.ndarray) -> np.ndarray:
    """k_eff = h / (h/k + r) per cell and axis (W/(m·K)); k, h (m), r (K·m²/W) of equal shapes."""
    out = np.array(k, dtype=float, copy=True)
    m = r > 0
    out[m] = h[m] / (h[m] / k[m] + r[m])
    return out


def cell_grid_conductivity(model, mesh, k_grid: np.ndarray) -> np.ndarray:
    """The (nx, ny, nz, 3) cell conductivity with the contacts' layers applied (NaN cells stay NaN)."""
    if not getattr(model, "contacts", None):
        return k_grid
    r, _, _ = contact_resistance_grid(model, mesh)
    widths = [np.diff(l) for l in mesh.lines]
    h = np.stack(np.broadcast_arrays(widths[0][:, None, None], widths[1][None, :, None],
                                     widths[2][None, None, :]), axis=-1)
    solid = ~np.isnan(k_grid[..., 0])
    out = k_grid.copy()
    out[solid] = effective_conductivity(k_grid[solid], h[solid], r[solid])
    return out
