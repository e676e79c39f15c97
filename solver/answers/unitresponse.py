"""Unit responses of the linear model from one reduced basis (the engine behind Zth, cycles, what-if).

The model M d' + K d = F(t) is linear, so every answer about loads and ambients is a superposition
of responses to unit patterns. :func:`build_basis` grows a capacity-orthonormal rational Krylov
basis V (VᵀMV = I) from the given load patterns with a few shifts spread between the slowest and
the fastest time scale of interest (one factorization per shift, shared by every pattern), and
:class:`ModalBasis` diagonalizes the projected system VᵀKV = Φ Λ Φᵀ. In modal coordinates each
mode obeys z' = −λ z + g(t) and is integrated exactly (:mod:`solver.transient.modal`).

A unit power step applied at t = 0 from rest gives, at node n,
``θₙ(t) = Σᵢ (VΦ)ₙᵢ gᵢ (1 − e^{−λᵢ t}) / λᵢ`` (K per W): a sum of exponentials (a Foster form at
each node). Temperatures are rises above ambient here (ambient and initial offsets are zero).
"""
from __future__ import annotations

import math

import numpy as np

from solver.errors import ModelError
from solver.transient.krylov import KrylovBasis, mass_times
from solver.linalg.linsolve import choose_method, make_solver

MAX_COLUMNS = 240
MAX_BASIS_BYTES = 1.0e9


def diffusion_times(problem) -> tuple[float, float]:
    """(fastest, slowest) time scale in s: the quickest conduction time across a heated part's
    thinnest side (ρc·t²/(π²k)) and the whole body's lumped cooling time (ΣC / Σ h·A)."""
    model = problem.model
    table = model.material_table()
    conv = sum(float(b.sum()) for b, _ in problem.conv_loads)
    slow = float(problem.lumped.sum()) / conv if conv > 0 else float("inf")
    fast = []
    for part_index, _ in problem.heat_profiles:
        p = model.parts[part_index]
        mat = table[p.material]
        k = float(np.max(np.atleast_1d(mat.conductivity)))
        t = min(p.size_mm) * 1e-3
        fast.append(mat.volumetric_heat_capacity * t * t / (math.pi ** 2 * k))
    fast_t = min(fast) if fast else slow * 1e-4
    return max(min(fast_t, slow * 1e-2), 1e-9), slow


def _solver_for(problem, shift: float, method: str):
    upper = problem.pattern.upper() if problem.pattern is not None and problem._shares_pattern() else None
    return make_solver(problem.step_matrix(1.0 / shift, 1.0), method, upper=upper, refine=False,
                       constraint=problem.constraint)


class _Columns(KrylovBasis):
    """The capacity-orthonormal column store of :class:`~solver.transient.krylov.KrylovBasis` without its
    own factorization (the shifts' solvers live in :class:`MultiShiftBasis`)."""

    def __init__(self, problem, max_columns: int):  # noqa: D107 - deliberately skips the parent's
        self.problem = problem
        self.shift = float("nan")
        self.cancel = None
        self.solves = 0
        self.solver = None
        self._store = np.zeros((problem.n_nodes, max_columns), order="F")
        self.size = 0
        self.block_sizes: list[int] = []
        self._next_rhs = np.zeros((problem.n_nodes, 0))
        self._append(np.ones((problem.n_nodes, 1)))


class MultiShiftBasis:
    """Rational Krylov basis from load patterns ``rhs`` (N, m) with several shifts (1/s).

    Each :meth:`grow_round` adds one block per shift: (K + sᵢM)⁻¹ applied to the patterns at first,
    then to M times that shift's newest directions. The uniform field 1 starts the basis."""

    def __init__(self, problem, rhs: np.ndarray, shifts, linear_solver: str = "auto",
                 max_columns: int | None = None):
        self.problem = problem
        n = problem.n_nodes
        cap = int(min(MAX_COLUMNS, MAX_BASIS_BYTES // (8 * n)))
        self.max_columns = int(max_columns or cap)
        self.shifts = [float(s) for s in shifts]
        method = choose_method(problem.n_free, linear_solver, matrices=len(self.shifts)).method
        if method == "pardiso-single":
            method = "pardiso"
        self.method = method
        self._kb = _Columns(problem, self.max_columns)
        self.solvers = [_solver_for(problem, s, method) for s in self.shifts]
        self._rhs = [np.asarray(rhs, dtype=float) for _ in self.shifts]
        self.rounds = 0

    @property
    def V(self) -> np.ndarray:
        return self._kb.V

    @property
    def size(self) -> int:
        return self._kb.size

    @property
    def full(self) -> bool:
        return self._kb.full

    def grow_round(self) -> int:
        """One block per shift; returns the number of columns added."""
        added = 0
        for i, solver in enumerate(self.solvers):
            rhs = self._rhs[i]
            if rhs.shape[1] == 0 or self.full:
                continue
            if solver.iterative:
                w = np.column_stack([solver.solve(rhs[:, j]) for j in range(rhs.shape[1])])
            else:
                w = np.asarray(solver.solve(rhs)).reshape(rhs.shape)
            start = self.size
            k = self._kb._append(w)
            added += k
            self._rhs[i] = mass_times(self.problem, self.V[:, start:start + k])
        self.rounds += 1
        return added

    def close(self) -> None:
        for s in self.solvers:
            s.close()
        self.solvers = []


class ModalBasis:
    """Projection of the model onto V, diagonalized: λ (r,) in 1/s, W = VΦ rows on demand."""

    def __init__(self, problem, v: np.ndarray):
        self.problem = problem
        self.v = v
        kr = v.T @ (problem.stiffness @ v)
        lam, phi = np.linalg.eigh(0.5 * (kr + kr.T))
        self.lam = np.maximum(lam, 0.0)
        self.phi = phi

    @property
    def r(self) -> int:
        return self.v.shape[1]

    def modal_loads(self, b: np.ndarray) -> np.ndarray:
        """g = Φᵀ Vᵀ b for load patterns b (N, m) -> (r, m)."""
        return self.phi.T @ (self.v.T @ b)

    def rows(self, nodes: np.ndarray) -> np.ndarray:
        """(VΦ)[nodes] (n, r)."""
        return self.v[nodes] @ self.phi

    def initial_coordinates(self, d0: np.ndarray) -> np.ndarray:
        """z₀ = Φᵀ Vᵀ M d₀."""
        return self.phi.T @ (self.v.T @ mass_times(self.problem, d0))


def step_factor(lam: np.ndarray, times: np.ndarray) -> np.ndarray:
    """(1 − e^{−λt})/λ (r, T), in s, with the limit t at λ = 0."""
    lt = np.outer(lam, times)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = -np.expm1(-lt) / lam[:, None]
    small = lam[:, None] * np.ones_like(lt) <= 0
    return np.where(small, np.broadcast_to(times, lt.shape), f)


def heat_patterns(problem, parts: list[int]) -> np.ndarray:
    """(N, m): node loads of 1 W spread over each listed part (W per W)."""
    return np.column_stack([problem.heat_shares_t[:, [p]].toarray().ravel() for p in parts])


def require_linear(model) -> None:
    """Superposition holds only for a linear model: refuse radiation (emissivity) when present."""
    issues = []
    for i, c in enumerate(getattr(model, "convection", [])):
        eps = getattr(c, "emissivity", None)
        if eps is not None and float(eps) > 0:
            issues.append((f"convection[{i}].emissivity", "radiation makes the model nonlinear, so unit "
                                                          "responses cannot be superposed; remove it for this answer"))
    if getattr(model, "air_volumes", None):
        issues.append(("air_volumes", "air volumes (lumped air nodes) are not supported by this answer yet; "
                                      "remove air_volumes for it, or run the model with `thermgui solve`"))
    if issues:
        raise ModelError(issues)
