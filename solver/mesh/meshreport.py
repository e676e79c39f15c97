"""How fine the mesh is where it matters: cells across each heated or rated part."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from solver.mesh.mesher import MM, Mesh


@dataclass
class PartResolution:
    part: str
    cells_across: tuple  # (nx, ny, nz) cells spanning the part's held volume
    finest_mm: float
    coarsest_mm: float

    def describe(self) -> str:
        nx, ny, nz = self.cells_across
        return (f"{self.part}: {nx} x {ny} x {nz} cells across, cell widths {self.finest_mm:.3g}–"
                f"{self.coarsest_mm:.3g} mm")


def part_resolution(mesh: Mesh, p: int) -> PartResolution:
    """Cells across part ``p`` along x, y, z (by the cell index ranges it holds)."""
    idx = np.nonzero(mesh.cell_part == p)
    if len(idx[0]) == 0:
        return PartResolution(mesh.part_names[p], (0, 0, 0), float("nan"), float("nan"))
    counts, widths = [], []
    for ax in range(3):
        used = np.unique(idx[ax])
        counts.append(int(len(used)))
        widths.append(np.diff(mesh.lines[ax])[used] / MM)
    w = np.concatenate(widths)
    return PartResolution(mesh.part_names[p], tuple(counts), float(w.min()), float(w.max()))


def resolution_report(model, mesh: Mesh) -> list[PartResolution]:
    """Resolution of every part that carries a heat load or a rating (the parts whose peaks matter)."""
    wanted = {hl.part for hl in model.heat_loads} | {p.name for p in model.parts if p.rated_c is not None}
    return [part_resolution(mesh, i) for i, p in enumerate(model.parts) if p.name in wanted]
