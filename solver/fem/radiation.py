"""Radiation from convection faces to their surroundings: exact Stefan–Boltzmann, grey, view factor 1.

A convection entry with an ``emissivity`` ε also loses q'' = ε σ (T⁴ − T_s⁴) per unit area
(Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, §1.2.3, eq. 1.7), T and T_s in
kelvin, T_s = ``surroundings_c`` (default: the entry's ambient). The face integral uses nodal
quadrature: node i of the entry's faces radiates ε σ aᵢ (Tᵢ⁴ − T_s⁴) with aᵢ = ∫ Nᵢ dA (the
shares sum to the face area exactly, and the quadrature converges with the mesh).

In a step the θ-weighted nonlinear equation is solved by a chord (simplified Newton) method:
the factored matrix holds M/Δt + θ(K + diag(4 ε σ aᵢ T̂ᵢ³)) with the slope T̂ from the last
re-linearisation, starting from the linear extrapolation of the last two steps; iterations stop
when the largest change is below ``NEWTON_TOL_K``, or when the error the observed contraction ρ
leaves after it (ρ/(1 − ρ) of the change) is below a hundredth of it. When one iteration
contracts the change by less than ``MIN_CONTRACTION`` (or the step needs more than ``MAX_CHORD``
iterations) the slope is updated at the current iterate and re-factored (a full Newton step);
slow contraction below 100·``NEWTON_TOL_K`` is round-off and does not re-factor. A step that
still does not converge in ``MAX_ITER`` iterations is cut into 2, 4, … 16 sub-steps and retried;
after that a SolveError names the face entries. See docs/physics.md.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

SIGMA = 5.670374419e-8  # W/(m² K⁴), Stefan–Boltzmann constant (CODATA 2018)
KELVIN = 273.15
NEWTON_TOL_K = 1e-7  # K, largest change of the last iteration
MAX_CHORD = 12  # chord iterations before the slope is updated
MIN_CONTRACTION = 0.3  # an iteration must shrink the change at least this much, or the slope is updated
MAX_ITER = 60  # iterations in all, per (sub-)step
MAX_CUTS = 4  # a failing step is retried as 2, 4, 8, 16 sub-steps
SLOPE_DRIFT = 0.02  # after a step, the slope is updated when it is off by more than this share


@dataclass
class Radiation:
    nodes: np.ndarray  # (M,) node ids on radiating faces (repeated per entry)
    weight: np.ndarray  # (M,) ε σ aᵢ, W/K⁴
    entry: np.ndarray  # (M,) index into ``surroundings``
    surroundings: list  # ProfileFunction of °C per radiating entry
    names: list  # convection entry names
    n: int  # unknowns of the system

    def patterns(self) -> np.ndarray:
        """(n, m) face weights εσaᵢ of each radiating entry (W/K⁴): where its heat leaves."""
        return np.column_stack([np.bincount(self.nodes[self.entry == e], weights=self.weight[self.entry == e],
                                            minlength=self.n) for e in range(len(self.names))])

    def ts4(self, t: float, side: str = "right") -> np.ndarray:
        """(T_s + 273.15)⁴ per entry at ``t``, K⁴."""
        return np.array([(s.value(t, side) + KELVIN) ** 4 for s in self.surroundings])

    def node_flow(self, d: np.ndarray, ts4: np.ndarray) -> np.ndarray:
        """(n,) W radiated out of each node."""
        tk = d[self.nodes] + KELVIN
        return np.bincount(self.nodes, weights=self.weight * (tk ** 4 - ts4[self.entry]), minlength=self.n)

    def total(self, d: np.ndarray, ts4: np.ndarray) -> float:
        """W radiated out in all."""
        tk = d[self.nodes] + KELVIN
        return float(np.dot(self.weight, tk ** 4 - ts4[self.entry]))

    def per_entry(self, d: np.ndarray, ts4: np.ndarray) -> np.ndarray:
        tk = d[self.nodes] + KELVIN
        return np.bincount(self.entry, weights=self.weight * (tk ** 4 - ts4[self.entry]),
                           minlength=len(self.names))

    def slope(self, d: np.ndarray) -> np.ndarray:
        """(n,) dq/dT = 4 ε σ aᵢ Tᵢ³ per node, W/K."""
        tk = d[self.nodes] + KELVIN
        return np.bincount(self.nodes, weights=4.0 * self.weight * tk ** 3, minlength=self.n)

    def breakpoints(self, t_end: float) -> list:
        out = []
        for s in self.surroundings:
            out += s.breakpoints(t_end)
        return out


def on_free_nodes(rad: Radiation, p, free: np.ndarray) -> Radiation:
    """``rad`` with its nodal quadrature on the free nodes of a mesh with local planes
    (:mod:`solver.mesh.localplanes`, T = P·u): each entry's weights εσaᵢ are moved from its
    nodes to the free nodes they are interpolated from, w̃ = Pᵀw, and the weights sum to the same
    εσ·area. A hanging node's temperature is a linear interpolation across one cell of a plane
    that the refinement left inactive there, so moving its weight changes the quadrature only by
    the curvature of T⁴ across that cell, which vanishes with the mesh; in exchange every step
    evaluates T⁴ only where there are unknowns (on the radio box's finest mesh a fraction of the
    surface nodes). ``p`` (N, n_free) and ``free`` (mesh ids of the unknowns) as from
    :func:`solver.mesh.localplanes.prolongation`."""
    pt = p.T.tocsr()
    nodes, weight, entry = [], [], []
    for e in range(len(rad.names)):
        mine = rad.entry == e
        w = pt @ np.bincount(rad.nodes[mine], weights=rad.weight[mine], minlength=p.shape[0])
        j = np.flatnonzero(w)
        nodes.append(free[j])
        weight.append(w[j])
        entry.append(np.full(len(j), e, dtype=rad.entry.dtype))
    return Radiation(np.concatenate(nodes), np.concatenate(weight), np.concatenate(entry), rad.surroundings,
                     rad.names, rad.n)


def build_radiation(model, mesh, conv_masks, n_unknowns: int, make_profile, default_ambient):
    """Radiation of every convection entry with an emissivity (None when there is none).
    ``default_ambient(i)`` gives entry i's ambient profile (its surroundings by default)."""
    from solver.fem import assemble

    bf = mesh.boundary
    nodes, weight, entry, surr, names = [], [], [], [], []
    for i, c in enumerate(model.convection):
        if c.emissivity is None or not conv_masks[i].any():
            continue
        mask = conv_masks[i]
        tris = bf.tris[mask]
        a = assemble.surface_load(mesh.nodes, tris, np.ones(len(tris)), bf.area[mask])  # ∫ Nᵢ dA
        nz = np.flatnonzero(a)
        nodes.append(nz)
        weight.append(float(c.emissivity) * SIGMA * a[nz])
        entry.append(np.full(len(nz), len(names)))
        surr.append(make_profile(c.surroundings_c) if c.surroundings_c is not None else default_ambient(i))
        names.append(c.name)
    if not names:
        return None
    return Radiation(np.concatenate(nodes), np.concatenate(weight), np.concatenate(entry), surr, names,
                     n_unknowns)
