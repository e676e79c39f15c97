"""From a validated model to the semi-discrete system M d' + K d = F(t).

``F(t) = Σ_loads P(t)·s_part + Σ_surface Q_s(t)·s_s + Σ_convection b_c·T_amb,c(t)``, where ``s_part``
spreads a part's watts over its volume, ``s_s = ∫ α Nᵢ dA / (α A)`` a surface load's absorbed watts
``Q_s = α A q''(t)`` over its faces, and ``b_c = ∫ h Nᵢ dA`` over that convection entry's faces.
Temperatures in °C (the problem is linear, so offsets are exact), SI elsewhere.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from solver.fem import assemble
from solver.fem.airnodes import build_air, coupling_matrix
from solver.mesh.contacts import contact_resistance_grid, effective_conductivity
from solver.errors import ModelError
from solver.mesh.mesher import MM, SIDE_AXIS, Mesh, build_mesh, convection_face_mask, isolated_parts
from solver.fem.probes import probe_matrix
from solver.mesh.localplanes import RegionError, prolongation
from solver.fem.radiation import build_radiation, on_free_nodes as radiation_on_free_nodes
from solver.model.profiles import Constant, ProfileFunction, make_profile, scaled


@dataclass
class PartNodes:
    """Node sets of all parts, packed for one-call reductions (np.maximum.reduceat)."""

    index: np.ndarray  # node ids, part after part
    offsets: np.ndarray  # start of each part in ``index``
    counts: np.ndarray

    def maxima(self, d: np.ndarray) -> np.ndarray:
        vals = d[self.index]
        out = np.full(len(self.counts), np.nan)
        ok = self.counts > 0
        out[ok] = np.maximum.reduceat(vals, self.offsets[ok])
        return out

    def minima(self, d: np.ndarray) -> np.ndarray:
        vals = d[self.index]
        out = np.full(len(self.counts), np.nan)
        ok = self.counts > 0
        out[ok] = np.minimum.reduceat(vals, self.offsets[ok])
        return out

    def argmax(self, d: np.ndarray, part: int) -> int:
        s = self.offsets[part]
        ids = self.index[s:s + self.counts[part]]
        return int(ids[np.argmax(d[ids])])


@dataclass
class Problem:
    model: object
    mesh: Mesh
    conductivity: sp.csr_matrix  # K_cond, W/K
    convection: sp.csr_matrix  # Σ ∫ h NᵢNⱼ dA, W/K
    capacity: sp.csr_matrix | None  # consistent M, J/K (None when lumped)
    lumped: np.ndarray  # row sums of M, J/K (always available)
    heat_shares: sp.csr_matrix  # (n_parts, N)
    heat_profiles: list  # (part index, ProfileFunction)
    conv_loads: list  # (b (N,), ProfileFunction of ambient °C)
    probes: sp.csr_matrix  # (n_probes, N)
    initial: np.ndarray  # (N,) °C
    part_nodes: PartNodes
    part_volume: np.ndarray  # m³
    warnings: list = field(default_factory=list)
    pattern: object = None  # assemble.GridPattern shared by every matrix above (None: general matrices)
    surface_loads: list = field(default_factory=list)  # (s (N,) summing to 1, ProfileFunction of absorbed W)
    air: object = None  # solver.fem.airnodes.AirNodes: unknowns after the mesh nodes (None: no air volume)
    radiation: object = None  # solver.fem.radiation.Radiation (None: linear model)
    constraint: object = None  # (P, free) of hanging nodes (solver.mesh.localplanes), None: every node free

    @property
    def n_free(self) -> int:
        """Unknowns the linear solvers factor: ``n_nodes`` less the hanging nodes."""
        return self.n_nodes if self.constraint is None else len(self.constraint[1])

    @property
    def n_mesh(self) -> int:
        """Mesh nodes (the field); ``n_nodes`` counts every unknown, air nodes included."""
        return self.mesh.n_nodes

    @property
    def n_watt_loads(self) -> int:
        """Load-basis columns whose coefficient is watts (heat loads, then surface loads)."""
        return len(self.heat_profiles) + len(self.surface_loads)

    @property
    def n_nodes(self) -> int:
        """Unknowns of the system: mesh nodes, then one per air volume."""
        return self.mesh.n_nodes + (len(self.air) if self.air is not None else 0)

    @property
    def heat_shares_t(self) -> sp.csr_matrix:
        if getattr(self, "_shares_t", None) is None:
            self._shares_t = self.heat_shares.T.tocsr()
        return self._shares_t

    def _shares_pattern(self) -> bool:
        pat = self.pattern
        return pat is not None and all(
            m is not None and m.indptr is pat.indptr and m.indices is pat.indices
            for m in (self.conductivity, self.convection) + ((self.capacity,) if self.capacity is not None else ()))

    @property
    def stiffness(self) -> sp.csr_matrix:
        """K = conduction + convection (computed once)."""
        if getattr(self, "_stiffness", None) is None:
            if self._shares_pattern():
                self._stiffness = self.pattern.matrix(self.conductivity.data + self.convection.data)
            else:
                self._stiffness = (self.conductivity + self.convection).tocsr()
        return self._stiffness

    @property
    def mass_matrix(self):
        """Capacity matrix as used by the run (consistent sparse, or lumped diagonal)."""
        if self.capacity is not None:
            return self.capacity
        return sp.diags(self.lumped).tocsr()

    def step_matrix(self, dt: float, theta: float) -> sp.csr_matrix:
        """M/Δt + θK in W/K, formed from the shared pattern's data arrays when possible."""
        if self._shares_pattern():
            data = theta * self.stiffness.data
            if self.capacity is not None:
                data += self.capacity.data / dt
            else:
                data[self.pattern.diagonal] += self.lumped / dt
            return self.pattern.matrix(data)
        return (self.mass_matrix / dt + theta * self.stiffness).tocsr()

    # ------------------------------------------------------------ loads
    def _load_basis(self):
        """Sparse (N, L) matrix whose columns are the load vectors of heat loads and convection entries."""
        if getattr(self, "_basis", None) is None:
            cols = [self.heat_shares_t[:, [p]] for p, _ in self.heat_profiles]
            cols += [sp.csr_matrix(s[:, None]) for s, _ in self.surface_loads]
            cols += [sp.csr_matrix(b[:, None]) for b, _ in self.conv_loads]
            n = self.n_nodes
            self._basis = sp.hstack(cols).tocsr() if cols else sp.csr_matrix((n, 0))
            self._conv_sum = np.array([b.sum() for b, _ in self.conv_loads])
            self._conv_b = (np.sum([b for b, _ in self.conv_loads], axis=0) if self.conv_loads
                            else np.zeros(n))
        return self._basis

    def load_coefficients(self, t: float, side: str = "right") -> np.ndarray:
        """Profile values at ``t`` (W per heat load, W absorbed per surface load, then °C per convection
        entry): F = basis @ these."""
        return np.array([prof.value(t, side) for _, prof in self.heat_profiles]
                        + [prof.value(t, side) for _, prof in self.surface_loads]
                        + [amb.value(t, side) for _, amb in self.conv_loads], dtype=float)

    def load_from_coefficients(self, c: np.ndarray) -> np.ndarray:
        return self._load_basis() @ c

    def load(self, t: float, side: str = "right") -> np.ndarray:
        """F(t) in W at every node (one-sided limit at jumps)."""
        return self.load_from_coefficients(self.load_coefficients(t, side))

    def heat_input(self, t: float, side: str = "right") -> float:
        """Total heat generation plus absorbed surface flux in W."""
        return float(sum(prof.value(t, side) for _, prof in self.heat_profiles)
                     + sum(prof.value(t, side) for _, prof in self.surface_loads))

    def convected_out(self, d: np.ndarray, t: float, side: str = "right") -> float:
        """Heat leaving through convection faces, W (Σ ∫ h (T - T_amb) dA)."""
        self._load_basis()
        amb = np.array([a.value(t, side) for _, a in self.conv_loads], dtype=float)
        return float(self._conv_b @ d - amb @ self._conv_sum) if self.conv_loads else 0.0

    def convected_out_parts(self, d: np.ndarray):
        """(Σ b_c·d in W, Σ_c b_c.sum() per entry in W/K) so callers can reuse b·d between steps."""
        self._load_basis()
        return float(self._conv_b @ d), self._conv_sum

    def breakpoints(self, t_end: float):
        out = []
        for _, prof in self.heat_profiles + self.surface_loads:
            out += prof.breakpoints(t_end)
        for _, amb in self.conv_loads:
            out += amb.breakpoints(t_end)
        if self.radiation is not None:
            out += self.radiation.breakpoints(t_end)
        return out


def material_arrays(model, tet_part: np.ndarray):
    """Per-element diagonal conductivity (E, 3) and ρc (E,)."""
    table = model.material_table()
    k = np.array([table[p.material].conductivity for p in model.parts], dtype=float)
    rc = np.array([table[p.material].volumetric_heat_capacity for p in model.parts], dtype=float)
    return k[tet_part], rc[tet_part]


def initial_field(model, mesh: Mesh, part_node_sets=None) -> np.ndarray:
    """Model-wide initial temperature, then each part's own on its nodes (later part wins)."""
    d0 = np.full(mesh.n_nodes, float(model.initial_c))
    for i, p in enumerate(model.parts):
        if p.initial_c is not None:
            ids = part_node_sets[i] if part_node_sets is not None else np.unique(mesh.tets[mesh.tet_part == i])
            d0[ids] = float(p.initial_c)
    return d0


def part_blocks(model, mesh: Mesh) -> list:
    """Each part's box as cell-index slices of the grid (the cells it can own)."""
    out = []
    for p in model.parts:
        sl = []
        for ax in range(3):
            lines_mm = mesh.lines[ax] / MM
            i0 = int(np.argmin(np.abs(lines_mm - p.origin_mm[ax])))
            i1 = int(np.argmin(np.abs(lines_mm - (p.origin_mm[ax] + p.size_mm[ax]))))
            sl.append(slice(i0, max(i1, i0)))
        out.append(tuple(sl))
    return out


def side_face_mask(mesh: Mesh, model, part_index: int, side: str) -> np.ndarray:
    """Boundary triangles on a part's side (``x-`` … ``z+``, or ``exposed``), with the same meaning
    as a convection entry's side (NOTES §3): the part's own cells, on its plane, not covered."""
    bf = mesh.boundary
    mask = bf.part == part_index
    if side != "exposed":
        ax, direction = SIDE_AXIS[side]
        part = model.parts[part_index]
        coord = (part.origin_mm[ax] + (part.size_mm[ax] if direction > 0 else 0.0)) * MM
        mask &= (bf.axis == ax) & (bf.direction == direction) & (np.abs(bf.plane - coord) < 1e-9)
    return mask


def surface_load_columns(model, mesh: Mesh, warnings: list) -> list:
    """(s (N,), absorbed-watts profile) per surface load with any face; ``s`` sums to one."""
    out = []
    bf = mesh.boundary
    for sl in model.surface_loads:
        mask = side_face_mask(mesh, model, model.part_index(sl.part), sl.side)
        area = float(bf.area[mask].sum())
        if area <= 0 or sl.absorptivity <= 0:
            warnings.append(f"surface load {sl.name!r} ({sl.side} of {sl.part!r}) "
                            + ("covers no exposed face" if area <= 0 else "has absorptivity 0") + "; it has no effect")
            continue
        tris = bf.tris[mask]
        s = assemble.surface_load(mesh.nodes, tris, np.ones(len(tris)), bf.area[mask]) / area
        out.append((s, scaled(make_profile(sl.flux_w_m2), sl.absorptivity * area)))
    return out


def build_problem(model, mesh: Mesh | None = None) -> Problem:
    """Mesh (unless given) and assemble everything the stepper needs.

    The matrices are assembled on the structured grid's fixed CSR pattern
    (:class:`solver.fem.assemble.GridPattern`); all of them share it.
    """
    mesh = mesh or build_mesh(model)
    warnings = list(mesh.warnings)
    n_parts = len(model.parts)
    conv_masks = [convection_face_mask(mesh, model, i) for i in range(len(model.convection))]
    conv_tri_all = (mesh.boundary.tris[np.logical_or.reduce(conv_masks)] if conv_masks
                    else np.zeros((0, 3), dtype=np.int64))
    pattern = assemble.GridPattern(mesh, full=model.run.mass == "consistent", surface_tris=conv_tri_all)
    h_cell = assemble.cell_sizes(mesh, pattern)
    k_cell, rc_cell = material_arrays(model, pattern.cell_part)
    issues = []
    contact_area = []
    if model.contacts:
        r_grid, contact_area, contact_issues = contact_resistance_grid(model, mesh)
        issues += contact_issues
        k_cell = effective_conductivity(k_cell, h_cell, r_grid[pattern.cell_index])
    kc = pattern.matrix(assemble.grid_conductivity_data(pattern, h_cell, k_cell))
    lumped = assemble.grid_lumped_capacity(pattern, h_cell, rc_cell)
    capacity = None
    if model.run.mass == "consistent":
        capacity = pattern.matrix(assemble.grid_capacity_data(pattern, h_cell, rc_cell))

    part_vol = np.bincount(pattern.cell_part, weights=h_cell.prod(axis=1), minlength=n_parts)
    for i, p in enumerate(model.parts):
        if part_vol[i] <= 0:
            warnings.append(f"part {p.name!r} is entirely covered by later parts and holds no volume")

    shares = assemble.grid_volume_shares(pattern, h_cell, n_parts, part_blocks(model, mesh))
    heat_profiles = []
    for i, hl in enumerate(model.heat_loads):
        pi = model.part_index(hl.part)
        if part_vol[pi] <= 0:
            issues.append((f"heat_loads[{i}].part", f"part {hl.part!r} holds no volume (covered by later parts), "
                                                    "so it cannot take a heat load"))
        heat_profiles.append((pi, make_profile(hl.profile)))
    for i, p in enumerate(model.parts):
        if part_vol[i] <= 0 and p.rated_c is not None:  # its row would read "ok" with no peak at all
            issues.append((f"parts[{i}].rated_c", f"part {p.name!r} holds no volume (covered by later parts), "
                                                  "so its rating cannot be checked; remove the overlap or the rating"))

    conv_loads = []
    conv_tris, conv_h = [], []
    convected_parts = set()
    bf = mesh.boundary
    for i, c in enumerate(model.convection):
        mask = conv_masks[i]
        if not mask.any():
            warnings.append(f"convection {c.name!r} ({c.side} of {c.part!r}) covers no exposed face; it has no effect")
            continue
        convected_parts.add(model.part_index(c.part))
        tris = bf.tris[mask]
        h = np.full(len(tris), float(c.h))
        conv_tris.append(tris)
        conv_h.append(h)
        amb = make_profile(c.ambient_c) if c.ambient_c is not None else Constant(float(model.ambient_c))
        conv_loads.append((assemble.surface_load(mesh.nodes, tris, h, bf.area[mask]), amb))
    n = mesh.n_nodes
    if conv_tris:
        tris = np.vstack(conv_tris)
        conv = pattern.matrix(assemble.grid_surface_data(pattern, tris, np.concatenate(conv_h),
                                                         assemble.triangle_areas(mesh.nodes, tris)))
    else:
        conv = pattern.matrix(np.zeros(pattern.nnz))
        warnings.append("no convection face: heat cannot leave the model, temperatures can only rise")
    if conv_tris:
        cold = isolated_parts(mesh, convected_parts)
        if cold:
            warnings.append("no path to any convection face from: " + ", ".join(repr(c) for c in cold)
                            + " (their temperature can only rise)")

    surface = surface_load_columns(model, mesh, warnings)
    air, couplings, air_issues, air_mask = build_air(model, mesh, side_face_mask, warnings)
    issues += air_issues
    if air is not None and conv_masks and (air_mask & np.logical_or.reduce(conv_masks)).any():
        warnings.append("some faces exchange heat with an air volume and also convect to an ambient "
                        "(check the convection entries' sides: \"exposed\" includes the inside of a cover)")

    points = [np.asarray(pr.at_mm, dtype=float) * MM for pr in model.probes]
    pmat, missing = probe_matrix(mesh, points)
    for k in missing:
        issues.append((f"probes[{k}].at_mm", "point is not inside any part (no meshed solid there)"))
    if issues:
        raise ModelError(issues)

    # packed node sets per part
    ids_per_part = [shares.indices[shares.indptr[i]:shares.indptr[i + 1]].astype(np.int64) for i in range(n_parts)]
    counts = np.array([len(x) for x in ids_per_part], dtype=np.int64)
    offsets = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
    index = np.concatenate(ids_per_part) if n_parts else np.zeros(0, dtype=np.int64)
    initial = initial_field(model, mesh, ids_per_part)
    if air is not None:  # append the air unknowns (the matrices leave the grid pattern)
        n_a = len(air)

        def pad(m):
            return sp.block_diag((m, sp.csr_matrix((n_a, n_a))), format="csr")

        def pad_cols(m):
            return sp.hstack([m, sp.csr_matrix((m.shape[0], n_a))], format="csr")

        kc = pad(kc)
        conv = (pad(conv) + coupling_matrix(mesh, air, couplings)).tocsr()
        if capacity is not None:
            capacity = (pad(capacity) + sp.diags(np.concatenate([np.zeros(n), air.capacity_j_k]))).tocsr()
        lumped = np.concatenate([lumped, air.capacity_j_k])
        shares, pmat = pad_cols(shares), pad_cols(pmat)
        zeros = np.zeros(n_a)
        conv_loads = [(np.concatenate([b, zeros]), amb) for b, amb in conv_loads]
        surface = [(np.concatenate([s, zeros]), prof) for s, prof in surface]
        initial = np.concatenate([initial, [float(model.initial_c if av.initial_c is None else av.initial_c)
                                            for av in model.air_volumes]])
    n_all = n + (len(air) if air is not None else 0)

    def ambient_of(i):
        c = model.convection[i]
        return make_profile(c.ambient_c) if c.ambient_c is not None else Constant(float(model.ambient_c))

    radiation = build_radiation(model, mesh, conv_masks, n_all, make_profile, ambient_of)
    constraint = None
    if getattr(mesh, "regions", None) is not None:
        try:
            constraint = prolongation(mesh, mesh.regions, n_all - n)
        except RegionError as e:  # every node stays free: the fine grid itself, correct but larger
            warnings.append(f"local refinement planes made global ({e})")
    if constraint is not None and radiation is not None:
        radiation = radiation_on_free_nodes(radiation, *constraint)
    return Problem(model, mesh, kc, conv, capacity, lumped, shares, heat_profiles, conv_loads, pmat,
                   initial, PartNodes(index, offsets, counts), part_vol, warnings, pattern, surface, air, radiation,
                   constraint)
