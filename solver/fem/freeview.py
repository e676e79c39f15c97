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

Radiation: :func:`solver.fem.problem.build_problem` puts the nodal quadrature of a mesh with local
planes on its free nodes (:func:`solver.fem.radiation.on_free_nodes`), whose rows of P are the
identity, so the free view's loss is the same radiation renumbered to the unknowns.
"""
from __future__ import annotations

import dataclasses

import numpy as np

from solver.fem.problem import PartNodes, Problem
from solver.fem.radiation import Radiation


@dataclasses.dataclass
class FreeProblem(Problem):
    """A problem on the free unknowns (no constraint of its own, so ``n_free`` is ``n_nodes``)."""

    @property
    def n_nodes(self) -> int:
        return len(self.initial)


def free_radiation(rad: Radiation, free: np.ndarray, n_all: int) -> Radiation:
    """``rad`` renumbered to the free unknowns. Its nodes must all be free, as
    :func:`solver.fem.problem.build_problem` makes them (:func:`solver.fem.radiation.on_free_nodes`),
    so the loss of the free view is exactly Pᵀ R(P u)."""
    inv = np.full(n_all, -1, dtype=np.int64)
    inv[free] = np.arange(len(free))
    nodes = inv[rad.nodes]
    if np.any(nodes < 0):
        raise ValueError("radiating nodes that hang: put the radiation on the free nodes first (on_free_nodes)")
    return dataclasses.replace(rad, nodes=nodes, n=len(free))


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
        radiation=None if problem.radiation is None else free_radiation(problem.radiation, free, problem.n_nodes),
        constraint=None)
