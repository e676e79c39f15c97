"""The semi-discrete system on the free unknowns of a mesh with local planes.

With hanging nodes (:mod:`solver.mesh.localplanes`) every admissible field is ``T = P·u``, so the
Galerkin system is ``PᵀMP u' + PᵀKP u = PᵀF``. :func:`free_view` gives that system as a
:class:`~solver.fem.problem.Problem` of ``n_free`` unknowns (capacity PᵀMP, a sparse matrix even
when M is lumped; loads, heat shares and probes multiplied by P; each part's node set restricted
to its free nodes), so code that works on a problem's matrices (the reduced basis) runs on the
small system; fields go back to the mesh with ``P @ u``.

A hanging node's value is a convex combination of free nodes of the same parts (its interpolation
stays inside one cell of the unrefined grid), so a part's maximum over its free nodes is its
maximum over all its nodes.

Radiation stays where it is computed, at the mesh's radiating nodes: :class:`FreeRadiation`
reads their temperatures as rows of ``P·u`` and hands the heat back through ``Pᵀ``, which is the
Galerkin form ``Pᵀ R(P u)`` of the nodal-quadrature loss. Its slope (for a shift matrix) is
lumped to ``Pᵀ s``, the row sums of ``Pᵀ diag(s) P``. (:func:`solver.fem.problem.build_problem`
already puts the quadrature on free nodes, whose rows of P are the identity, so for its problems
the rows are a selection and the lumped slope is exact.)
"""
from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from solver.fem.problem import PartNodes, Problem
from solver.fem.radiation import KELVIN, Radiation


@dataclasses.dataclass
class FreeProblem(Problem):
    """A problem on the free unknowns (no constraint of its own, so ``n_free`` is ``n_nodes``)."""

    @property
    def n_nodes(self) -> int:
        return len(self.initial)


@dataclasses.dataclass
class FreeRadiation(Radiation):
    """Radiation of the mesh's nodes seen from the free unknowns: ``rows`` (M, n_free) = P[nodes]
    gives each radiating entry node's temperature, and ``pt`` (n_free, N) = Pᵀ sums mesh-node
    heat flows onto the unknowns. ``n`` is the number of free unknowns, ``n_mesh`` the mesh's."""

    rows: sp.csr_matrix = None
    pt: sp.csr_matrix = None
    n_mesh: int = 0

    def _tk(self, d: np.ndarray) -> np.ndarray:
        return self.rows @ d + KELVIN

    def basis_rows(self, v: np.ndarray) -> np.ndarray:
        return np.asarray(self.rows @ v)

    def patterns(self) -> np.ndarray:
        mesh = np.column_stack([np.bincount(self.nodes[self.entry == e], weights=self.weight[self.entry == e],
                                            minlength=self.n_mesh) for e in range(len(self.names))])
        return np.asarray(self.pt @ mesh)

    def node_flow(self, d: np.ndarray, ts4: np.ndarray) -> np.ndarray:
        flow = np.bincount(self.nodes, weights=self.weight * (self._tk(d) ** 4 - ts4[self.entry]),
                           minlength=self.n_mesh)
        return self.pt @ flow

    def total(self, d: np.ndarray, ts4: np.ndarray) -> float:
        return float(np.dot(self.weight, self._tk(d) ** 4 - ts4[self.entry]))

    def per_entry(self, d: np.ndarray, ts4: np.ndarray) -> np.ndarray:
        return np.bincount(self.entry, weights=self.weight * (self._tk(d) ** 4 - ts4[self.entry]),
                           minlength=len(self.names))

    def slope(self, d: np.ndarray) -> np.ndarray:
        """(n_free,) Pᵀ s, the row sums of Pᵀ diag(4εσaᵢTᵢ³) P, W/K."""
        s = np.bincount(self.nodes, weights=4.0 * self.weight * self._tk(d) ** 3, minlength=self.n_mesh)
        return self.pt @ s


def free_radiation(rad: Radiation, p: sp.csr_matrix, pt: sp.csr_matrix) -> FreeRadiation:
    """``rad`` (on mesh nodes, plus any air unknowns) seen from the free unknowns of ``p``."""
    return FreeRadiation(nodes=rad.nodes, weight=rad.weight, entry=rad.entry, surroundings=rad.surroundings,
                         names=rad.names, n=p.shape[1], rows=p[rad.nodes].tocsr(), pt=pt, n_mesh=p.shape[0])


def restricted_part_nodes(pn: PartNodes, free: np.ndarray, n_all: int) -> PartNodes:
    """Each part's node set, free nodes only, in free-unknown numbering."""
    inv = np.full(n_all, -1, dtype=np.int64)
    inv[free] = np.arange(len(free))
    mapped = inv[pn.index]
    keep = mapped >= 0
    part_of = np.repeat(np.arange(len(pn.counts)), pn.counts)
    counts = np.bincount(part_of[keep], minlength=len(pn.counts)).astype(np.int64)
    offsets = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)
    return PartNodes(mapped[keep], offsets, counts)


def free_view(problem) -> FreeProblem:
    """The system of ``problem`` on its free unknowns (``problem.constraint`` must be set)."""
    if problem.constraint is None:
        raise ValueError("free_view needs a problem with a constraint")
    p, free = problem.constraint
    pt = p.T.tocsr()
    d0 = np.asarray(problem.initial, dtype=float)
    if not np.allclose(p @ d0[free], d0, rtol=0.0, atol=1e-9):
        raise ValueError("the initial field is not one of the constrained fields (make the planes global)")

    def galerkin(m):
        return (pt @ m @ p).tocsr()

    capacity = galerkin(problem.mass_matrix)
    lumped = np.asarray(capacity.sum(axis=1)).ravel()
    return FreeProblem(
        model=problem.model, mesh=problem.mesh,
        conductivity=galerkin(problem.conductivity), convection=galerkin(problem.convection),
        capacity=capacity, lumped=lumped,
        heat_shares=(problem.heat_shares @ p).tocsr(), heat_profiles=problem.heat_profiles,
        conv_loads=[(pt @ b, amb) for b, amb in problem.conv_loads],
        probes=(problem.probes @ p).tocsr(), initial=d0[free],
        part_nodes=restricted_part_nodes(problem.part_nodes, free, problem.n_nodes),
        part_volume=problem.part_volume, warnings=problem.warnings, pattern=None,
        surface_loads=[(pt @ s, prof) for s, prof in problem.surface_loads], air=problem.air,
        radiation=None if problem.radiation is None else free_radiation(problem.radiation, p, pt),
        constraint=None)
