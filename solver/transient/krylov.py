"""A capacity-orthonormal Krylov basis for the responses of M d' + K d = F(t).

For loads F(t) = B c(t) with a handful of columns, the temperature stays close to the rational
Krylov subspace (shift s, A = K + s·M, in W/K)::

    span{ 1, d₀, A⁻¹R, (A⁻¹M) A⁻¹R, (A⁻¹M)² A⁻¹R, … }

where the columns of R are the load patterns (one per heat load, one per group of convection
entries sharing an ambient profile, and M·d₀ when the initial field is not uniform). The
Laplace transform of the response is (K + sM)⁻¹(B ĉ(s) + M d₀), and each block matches one more
term of its expansion around the shift (moment matching; see e.g. Antoulas, "Approximation of
Large-Scale Dynamical Systems", SIAM 2005, ch. 11). One factorization of A serves every block.

The uniform field 1 is always in the basis, so the projected system keeps the global heat
balance exactly (1ᵀK = Σ convection loads, 1ᵀM = lumped capacity).
"""
from __future__ import annotations

from typing import Callable

import numpy as np

from solver.errors import Cancelled
from solver.linalg.linsolve import make_solver

DEFLATION_TOL = 1e-10  # a new direction whose norm falls below this share of the block's largest is dropped


def load_patterns(problem) -> np.ndarray:
    """(N, m) right-hand sides that start the Krylov sequence: one per heat load (W per W), one
    per group of convection entries sharing an ambient profile (W/K), and M·d₀ when the initial
    field is not uniform. (Summing all constant loads into one column saves solves per block but
    was seen to need more blocks for the same error on the benchmark enclosure, so it is not done.)"""
    n = problem.n_nodes
    cols = [problem.heat_shares_t[:, [part]].toarray().ravel() for part, _ in problem.heat_profiles]
    cols += [np.asarray(s, dtype=float) for s, _ in problem.surface_loads]
    groups: list[tuple[object, np.ndarray]] = []
    for b, amb in problem.conv_loads:
        for i, (prof, acc) in enumerate(groups):
            if prof == amb:
                groups[i] = (prof, acc + b)
                break
        else:
            groups.append((amb, np.asarray(b, dtype=float).copy()))
    cols += [acc for _, acc in groups]
    d0 = problem.initial
    if np.ptp(d0) > 0.0:
        cols.append(mass_times(problem, d0))
    return np.column_stack(cols) if cols else np.zeros((n, 0))


def add_diagonal(problem, a, diagonal: np.ndarray):
    """``a`` + diag(``diagonal``) for a matrix made by ``problem.step_matrix`` (kept on the grid's
    shared pattern when the problem's matrices share it)."""
    if problem._shares_pattern():
        data = a.data.copy()
        data[problem.pattern.diagonal] += diagonal
        return problem.pattern.matrix(data)
    import scipy.sparse as sp

    return (a + sp.diags(diagonal)).tocsr()


def mass_times(problem, x: np.ndarray) -> np.ndarray:
    """M·x for a vector (N,) or block (N, k): lumped diagonal or consistent sparse."""
    if problem.capacity is not None:
        return problem.capacity @ x
    return problem.lumped * x if x.ndim == 1 else problem.lumped[:, None] * x


class KrylovBasis:
    """Columns V (N, r) with Vᵀ M V = I, grown one block at a time by :meth:`grow`.

    ``shift`` s in 1/s; ``method`` a linear-solver name of :func:`solver.linalg.linsolve.make_solver`;
    at most ``max_columns`` columns are kept (storage is allocated once).
    """

    def __init__(self, problem, shift: float, method: str = "pardiso",
                 cancel: Callable[[], bool] | None = None, max_columns: int = 256,
                 extra_diagonal: np.ndarray | None = None, extra_patterns: np.ndarray | None = None):
        """``extra_diagonal`` (N,) W/K is added to K + s·M (a linearised radiation slope), and the
        columns of ``extra_patterns`` (N, m) start the sequence beside the load patterns."""
        self.problem = problem
        self.shift = float(shift)
        self.cancel = cancel
        self.solves = 0
        if self.cancel is not None and self.cancel():
            raise Cancelled("cancelled while building the reduced basis")
        upper = problem.pattern.upper() if problem.pattern is not None and problem._shares_pattern() else None
        # K + s·M; basis directions need no refinement of a single-precision factorization's solves
        # (the projection is exact on whatever the basis spans; the error check judges the result)
        a = problem.step_matrix(1.0 / self.shift, 1.0)
        if extra_diagonal is not None:
            a = add_diagonal(problem, a, extra_diagonal)  # on the same pattern: ``upper`` still holds
        self.solver = make_solver(a, method, upper=upper, refine=False, constraint=problem.constraint)
        n = problem.n_nodes
        start = [np.ones(n)]
        if np.ptp(problem.initial) > 0.0:
            start.append(problem.initial.astype(float))
        self._next_rhs = load_patterns(problem)
        if extra_patterns is not None and extra_patterns.shape[1]:
            self._next_rhs = np.column_stack([self._next_rhs, extra_patterns])
        self._store = np.zeros((n, max_columns), order="F")  # V[:, :r] stays contiguous for BLAS
        self.size = 0
        self.block_sizes: list[int] = []
        self._append(np.column_stack(start))

    @property
    def full(self) -> bool:
        """True when the preallocated storage has no room left."""
        return self.size >= self._store.shape[1]

    @property
    def V(self) -> np.ndarray:
        """The basis so far, (N, r): a view of preallocated storage."""
        return self._store[:, :self.size]

    def _append(self, w: np.ndarray) -> int:
        """Capacity-orthonormalize ``w`` against V and itself, dropping dependent directions."""
        mass = lambda x: mass_times(self.problem, x)  # noqa: E731
        scale = float(np.max(np.einsum("ij,ij->j", w, mass(w)), initial=0.0))
        # block classical Gram–Schmidt twice, normalizing within the block after each pass (the
        # normalization can magnify what one pass leaves along V; the second pass removes it)
        if self.size:
            w = w - self.V @ (self.V.T @ mass(w))
        vals, vecs = np.linalg.eigh(_sym(w.T @ mass(w)))
        keep = vals > DEFLATION_TOL ** 2 * scale
        w = w @ (vecs[:, keep] / np.sqrt(vals[keep]))
        if self.size and w.shape[1]:
            w = w - self.V @ (self.V.T @ mass(w))
            vals, vecs = np.linalg.eigh(_sym(w.T @ mass(w)))
            w = w @ (vecs / np.sqrt(vals))
        k = min(w.shape[1], self._store.shape[1] - self.size)
        self._store[:, self.size:self.size + k] = w[:, :k]
        self.size += k
        self.block_sizes.append(k)
        return k

    def _solve(self, rhs: np.ndarray) -> np.ndarray:
        """A⁻¹·rhs (N, k) with the shift factorization (an iterative solver one column at a time)."""
        solver = self.solver
        self.solves += rhs.shape[1]
        if solver.iterative:
            return np.column_stack([solver.solve(rhs[:, j]) for j in range(rhs.shape[1])])
        return solver.solve(rhs).reshape(rhs.shape)

    def grow(self) -> int:
        """Add one block (one solve per column); returns the number of new columns."""
        rhs = self._next_rhs
        if rhs.shape[1] == 0 or self.full:
            self.block_sizes.append(0)
            return 0
        if self.cancel is not None and self.cancel():
            raise Cancelled("cancelled while building the reduced basis")
        w = self._solve(rhs)
        start = self.size
        added = self._append(w)
        self._next_rhs = mass_times(self.problem, self.V[:, start:start + added])
        return added

    def enrich(self, rhs: np.ndarray) -> int:
        """Add the responses A⁻¹·rhs (N, k) to the last block (they do not start new Krylov
        directions); returns the number of new columns."""
        if rhs.shape[1] == 0 or self.full or not self.block_sizes:
            return 0
        w = self._solve(rhs)
        last = self.block_sizes.pop()
        added = self._append(w)
        self.block_sizes[-1] = last + added
        return added

    def release(self) -> None:
        """Free the basis storage (after the caller has copied what it keeps)."""
        self._store = np.zeros((self._store.shape[0], 0), order="F")
        self.size = 0

    def close(self) -> None:
        if self.solver is not None:
            self.solver.close()
            self.solver = None


def _sym(g: np.ndarray) -> np.ndarray:
    return 0.5 * (g + g.T)
