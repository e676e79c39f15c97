"""Linear solvers for the symmetric positive-definite step matrix ``M/Δt + θK`` (W/K).

:func:`choose_method` picks a method and says why:

* ``pardiso`` – sparse Cholesky (LDLᵀ) by Intel MKL PARDISO through ``pypardiso``, on the upper
  triangle in symmetric positive-definite mode, while the factor fits comfortably in memory.
  pypardiso installs from PyPI as a wheel on Linux, Windows and macOS (Intel) and brings MKL
  (an optimized BLAS) with it; scikit-sparse/CHOLMOD needs SuiteSparse to build.
* ``pardiso-single`` – the same in single precision (half the memory and factorization time),
  each solution refined in double against the step matrix, for factors too large to keep in
  double precision comfortably. Near that limit, PARDISO's analysis of the real sparsity pattern
  (a third of a factorization's time) replaces the worst-case size estimate.
* ``multigrid`` – conjugate gradients preconditioned by classical (Ruge–Stüben) algebraic
  multigrid from pyamg: memory linear in the node count, warm-started from the previous step.
* ``superlu`` – scipy's SuperLU with a symmetric fill-reducing ordering, the last resort when
  neither package is installed.

Every solver has ``solve(b, x0=None)``, ``close()`` and ``iterative`` (True when ``x0`` is used as
the starting guess and right-hand sides are taken one at a time).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from solver.errors import SolveError

CG_RTOL = 1e-10  # relative to ‖b‖; b holds M·d/Δt, so this is far below a milli-kelvin
CG_MAXITER = 500
# One forward Gauss–Seidel sweep before and one backward sweep after each coarse correction: the
# V-cycle stays a symmetric preconditioner (as CG needs) at half the cost of pyamg's default
# symmetric sweeps on both sides.
SMOOTHER = (("gauss_seidel", {"sweep": "forward"}), ("gauss_seidel", {"sweep": "backward"}))
# Memory of a nested-dissection Cholesky factor on these 3D grids, measured roughly: about
# 10 GB at 1 000 000 nodes, growing like n^(4/3) (issue 5's measurements, PARDISO and CHOLMOD).
FACTOR_BYTES_AT_1M = 10e9
DIRECT_MEMORY_SHARE = 0.25  # "fits comfortably": at most this share of the available memory
# All factors of a run together, as stored (single precision counts half): above this, multigrid.
# Was 2 GB; at 1.47M nodes (a 4.2 GB double factor) that chose multigrid for a reduced basis of
# 55 vectors, one CG solve each: 476 s for that mesh level against 15 s for the 604k level before
# it (benchmarks/README.md, session 5). A factor is also bounded by DIRECT_MEMORY_SHARE of the
# memory available; 1M-node runs are unaffected (their single-precision factor is about 1.1 GB).
DIRECT_MAX_BYTES = 4.0e9
# Above this (double precision, all factors of a run), factor in single precision and refine in
# double: half the memory and factorization time for an extra solve or two per step. Chosen so
# that a 1M-node enclosure (2.2 GB in double, measured) stays within 3 GB in all.
DOUBLE_FACTOR_MAX_BYTES = 1.5e9
REFINE_CORRECTION_K = 1e-6  # refinement stops once a correction is this small (K, for step solves)
MAX_REFINEMENTS = 6
# A single-precision factorization (about 20 s at 1M nodes, against 6 s for a multigrid set-up)
# repays itself after about 18 steps (0.45 s against 1.2 s per step, measured): fewer, multigrid
SINGLE_MIN_STEPS = 20
ANALYSIS_MAX_NODES = 4_000_000  # beyond this even the analysis takes long; multigrid
ADAPTIVE_DIRECT_NODE_LIMIT = 60_000  # adaptive runs factor one matrix per step size


@dataclass
class SolverChoice:
    method: str
    reason: str


def estimated_factor_bytes(n: int) -> float:
    """Rough memory of a sparse Cholesky factor of a 3D grid matrix with ``n`` unknowns, bytes."""
    return FACTOR_BYTES_AT_1M * (n / 1e6) ** (4.0 / 3.0)


def _point_pypardiso_at_mkl() -> None:
    """pypardiso walks the whole installation tree for MKL's runtime library on import and on every
    solver construction (over a second here) unless PYPARDISO_MKL_RT names it, which is its
    documented override. The MKL wheel puts the library in ``<prefix>/lib`` (Linux, macOS) or
    ``<prefix>/Library/bin`` (Windows): look there first, leave the full search to pypardiso."""
    import glob
    import os
    import site
    import sys

    if "PYPARDISO_MKL_RT" in os.environ:
        return
    for base in (sys.prefix, site.USER_BASE or ""):
        for pattern in ("lib/libmkl_rt.so*", "lib/libmkl_rt*.dylib", "Library/bin/mkl_rt*.dll"):
            hits = sorted(glob.glob(os.path.join(base, pattern)), key=len)
            if hits:
                os.environ["PYPARDISO_MKL_RT"] = hits[0]
                return


def have_pardiso() -> bool:
    _point_pypardiso_at_mkl()
    try:
        import pypardiso  # noqa: F401
    except Exception:  # ImportError, or MKL's runtime library not found
        return False
    return True


def have_pyamg() -> bool:
    try:
        import pyamg  # noqa: F401
    except ImportError:
        return False
    return True


def _available_memory() -> int:
    from solver.resources import available_memory_bytes

    return available_memory_bytes()


def choose_method(n: int, requested: str = "auto", adaptive: bool = False,
                  available_bytes: int | None = None, factor_bytes: float | None = None,
                  matrices: int = 1, steps: int | None = None,
                  factor_source: str = "measured by PARDISO's analysis") -> SolverChoice:
    """Method name and a one-line reason for a problem of ``n`` nodes.

    ``factor_bytes``: the double-precision factor of one step matrix as PARDISO's analysis
    measured it (:func:`pardiso_factor_bytes`); without it a worst-case estimate from ``n``.
    ``matrices``: how many step matrices the run keeps factored at once (e.g. 2 for
    Crank–Nicolson with backward-Euler start-up steps). ``steps``: solves the run will make (None:
    unknown or many); a single-precision factorization is only worth it for enough of them."""
    if requested not in ("auto", "direct", "multigrid", "pardiso", "pardiso-single", "superlu"):
        raise ValueError(f"unknown linear solver {requested!r}")
    pardiso, amg = have_pardiso(), have_pyamg()
    if requested == "direct":
        if pardiso:
            return SolverChoice("pardiso", "requested a direct solver: sparse Cholesky (PARDISO)")
        return SolverChoice("superlu", "requested a direct solver; pypardiso is not installed: SuperLU")
    if requested == "multigrid":
        if amg:
            return SolverChoice("multigrid", "requested")
        return SolverChoice("superlu", "multigrid requested but pyamg is not installed: SuperLU")
    if requested in ("pardiso", "pardiso-single") and not pardiso:
        return SolverChoice("superlu", "PARDISO requested but pypardiso is not installed: SuperLU")
    if requested in ("pardiso", "pardiso-single", "superlu"):
        return SolverChoice(requested, "requested")
    avail = available_bytes if available_bytes is not None else _available_memory()
    est = float(factor_bytes) if factor_bytes is not None else estimated_factor_bytes(n)
    total = est * max(1, matrices)
    budget = min(DIRECT_MEMORY_SHARE * avail, DIRECT_MAX_BYTES)
    how = factor_source if factor_bytes is not None else "estimated"
    count = f"{matrices} step matrices, " if matrices > 1 else ""
    size = f"{n:,} nodes, {count}factor {how} {total / 1e9:.2g} GB of {avail / 1e9:.3g} GB available"
    if adaptive and n > ADAPTIVE_DIRECT_NODE_LIMIT:
        fits = False
        why = "adaptive steps need one factorization per step size, too slow at this size"
    else:
        fits = total <= budget or (pardiso and total / 2 <= budget)
        why = "a factorization would not fit comfortably"
    if fits:
        if pardiso and total <= min(budget, DOUBLE_FACTOR_MAX_BYTES):
            return SolverChoice("pardiso", f"{size}: sparse Cholesky (PARDISO) fits comfortably and is "
                                           "fastest per step")
        few = steps is not None and steps < SINGLE_MIN_STEPS * max(1, matrices)
        if pardiso and few and amg:
            return SolverChoice("multigrid", f"{size}: only {steps} steps, too few to repay a factorization "
                                             "this large; multigrid CG")
        if pardiso:
            return SolverChoice("pardiso-single", f"{size}: sparse Cholesky (PARDISO) in single precision "
                                                  "(half the memory), refined in double")
        if not amg:
            return SolverChoice("superlu", f"{size}: neither pypardiso nor pyamg is installed: SuperLU")
        return SolverChoice("multigrid", f"{size}: pypardiso is not installed; multigrid CG instead")
    if amg:
        return SolverChoice("multigrid", f"{size}: {why}; multigrid CG keeps memory linear in the node count")
    if pardiso:
        return SolverChoice("pardiso", f"{size}: pyamg is not installed; sparse Cholesky (PARDISO) anyway")
    return SolverChoice("superlu", f"{size}: neither pyamg nor pypardiso is installed: SuperLU as a last resort")


def needs_analysis(n: int, requested: str = "auto", adaptive: bool = False, matrices: int = 1,
                   available_bytes: int | None = None) -> bool:
    """True when the worst-case estimate alone would not pick PARDISO in double precision, so a
    PARDISO analysis of the real pattern (:func:`pardiso_factor_bytes`) may change the choice."""
    if requested != "auto" or (adaptive and n > ADAPTIVE_DIRECT_NODE_LIMIT) or n > ANALYSIS_MAX_NODES:
        return False
    if not have_pardiso():
        return False
    return choose_method(n, requested, adaptive, available_bytes, matrices=matrices).method != "pardiso"


class DiagonalSolver:
    """A diagonal matrix (lumped capacity with an explicit step)."""

    name = "diagonal"
    iterative = False

    def __init__(self, diag: np.ndarray):
        self.inv = 1.0 / diag
        self.iterations = 0

    def solve(self, b, x0=None):
        return self.inv * b

    def close(self):
        pass


class SuperLUSolver:
    """scipy SuperLU with a symmetric fill-reducing ordering; factored once, reused every step."""

    name = "direct (SuperLU)"
    iterative = False

    def __init__(self, a: sp.spmatrix):
        self.lu = spla.splu(sp.csc_matrix(a), permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0,
                            options={"SymmetricMode": True})
        self.iterations = 0

    def solve(self, b, x0=None):
        return self.lu.solve(b)

    def close(self):
        self.lu = None


DirectSolver = SuperLUSolver  # the earlier name


def _new_pardiso(pypardiso):
    """A PyPardisoSolver in SPD mode. pypardiso searches the disk for MKL on every construction
    unless PYPARDISO_MKL_RT names it (its documented override): remember the first hit."""
    import os

    ps = pypardiso.PyPardisoSolver(mtype=2)
    name = getattr(ps.libmkl, "_name", None)
    if name and "PYPARDISO_MKL_RT" not in os.environ and os.path.exists(name):
        os.environ["PYPARDISO_MKL_RT"] = name
    return ps


def _pardiso_handle(pypardiso, single: bool):
    """A PyPardisoSolver in SPD mode with PARDISO's own defaults for that type (``pardisoinit``),
    except: no iterative refinement inside PARDISO, and ``single`` precision if asked.

    PARDISO's defaults refine every solve twice (iparm(8) = 2), which triples its cost; a Cholesky
    factorization is backward stable and the residual without refinement is at round-off
    (measured 2e-12 relative at 200k nodes). Single precision (iparm(28) = 1) halves the factor's
    memory and time; :class:`PardisoCholesky` then refines in double itself."""
    import ctypes

    ps = _new_pardiso(pypardiso)
    init = ps.libmkl.pardisoinit
    init.restype = None
    init.argtypes = [ctypes.POINTER(ps._pt_type[0]), ctypes.POINTER(ctypes.c_int32), ctypes.POINTER(ctypes.c_int32)]
    init(ps.pt.ctypes.data_as(ctypes.POINTER(ps._pt_type[0])), ctypes.byref(ctypes.c_int32(ps.mtype)),
         ps.iparm.ctypes.data_as(ctypes.POINTER(ctypes.c_int32)))
    ps.iparm[7] = 0  # iparm(8): refine only if pivots were perturbed (never, for SPD)
    ps.iparm[27] = 1 if single else 0  # iparm(28): precision of the factor and the solves
    ps.size_limit_storage = 0  # pypardiso keeps a hash, not a copy, of the matrix
    return ps


def _upper(a: sp.csr_matrix, upper, dtype) -> sp.csr_matrix:
    if upper is not None:
        indptr, indices, take = upper
        u = sp.csr_matrix((a.data[take].astype(dtype), indices, indptr), shape=a.shape)
    else:
        u = sp.triu(a, format="csr").astype(dtype)
    u.sort_indices()
    return u


FILL_EXPONENT = 4.0 / 3.0  # factor size ~ N^(4/3) under nested dissection on 3D grids (George 1973, from memory)
FILL_SAFETY = 1.25  # margin on a factor size scaled from a smaller mesh of the same model


def measured_double_factor_bytes(solver) -> int | None:
    """The double-precision factor size (bytes) of a PARDISO factorization already made, or None
    for other solvers. A single-precision factor reports half the bytes, so it is doubled."""
    if isinstance(solver, ConstrainedSolver):
        solver = solver.inner
    if not isinstance(solver, PardisoCholesky) or solver.ps is None:
        return None
    return solver.factor_bytes() * (2 if solver.single else 1)


def scaled_factor_bytes(measured_bytes: float, measured_nodes: int, nodes: int) -> float:
    """A factor size (bytes) for ``nodes`` predicted from one measured on ``measured_nodes`` nodes of
    a similar mesh (the previous mesh level), with the N^(4/3) growth and a 25 % margin."""
    return FILL_SAFETY * float(measured_bytes) * (nodes / max(1, measured_nodes)) ** FILL_EXPONENT


def pardiso_factor_bytes(a: sp.csr_matrix, upper=None) -> int:
    """Memory of PARDISO's double-precision Cholesky factor of ``a`` (permanent + factor, bytes),
    from its analysis phase (ordering and symbolic factorization: about 0.3 of the factorization's
    time). Only the sparsity pattern matters, so one analysis serves every step size."""
    _point_pypardiso_at_mkl()
    import pypardiso

    ps = _pardiso_handle(pypardiso, single=False)
    u = _upper(a, upper, np.float64)
    try:
        ps.set_phase(11)
        ps._call_pardiso(u, np.zeros((u.shape[0], 1)))
        return 1024 * int(max(ps.iparm[15], 0) + max(ps.iparm[16], 0))
    except Exception as e:  # PyPardisoError
        raise SolveError(f"PARDISO could not analyse the step matrix ({e})") from None
    finally:
        ps.free_memory(everything=True)


class PardisoCholesky:
    """MKL PARDISO, real symmetric positive definite (mtype 2), on the upper triangle in CSR.

    ``upper`` is (indptr, indices, take) from :meth:`solver.fem.assemble.GridPattern.upper`; without
    it the upper triangle is extracted with scipy. ``precision="single"`` factors in single
    precision (half the memory and time) and refines each solution in double against ``a``
    until the relative residual is below ``rtol`` or the last correction is below
    ``correction_tol`` (in the solution's units: K for time steps); ``refine=False`` skips the
    refinement (for Krylov basis directions, where an exact solve is not needed).
    """

    iterative = False

    def __init__(self, a: sp.csr_matrix, upper=None, precision: str = "double", rtol: float = CG_RTOL,
                 correction_tol: float = REFINE_CORRECTION_K, refine: bool = True):
        _point_pypardiso_at_mkl()
        import pypardiso

        if precision not in ("double", "single"):
            raise ValueError(f"unknown precision {precision!r}")
        self.single = precision == "single"
        self.name = ("direct (PARDISO sparse Cholesky, single precision refined in double)" if self.single
                     else "direct (PARDISO sparse Cholesky)")
        self.dtype = np.float32 if self.single else np.float64
        self.u = _upper(a, upper, self.dtype)
        self.a = sp.csr_matrix(a) if self.single else None
        self.rtol, self.correction_tol, self.refine = rtol, correction_tol, refine
        self.ps = _pardiso_handle(pypardiso, self.single)
        try:
            self.ps.set_phase(12)
            self.ps._call_pardiso(self.u, np.zeros((self.u.shape[0], 1), dtype=self.dtype))
        except Exception as e:  # PyPardisoError: not positive definite, out of memory, ...
            raise SolveError(f"PARDISO could not factor the step matrix ({e})") from None
        self.iterations = 0  # refinement steps of the last solve

    def _solve(self, b: np.ndarray) -> np.ndarray:
        self.ps.set_phase(33)
        b = np.asarray(b, dtype=self.dtype)
        # PARDISO reads several right-hand sides column after column (Fortran order)
        b = np.ascontiguousarray(b) if b.ndim == 1 else np.asfortranarray(b)
        return self.ps._call_pardiso(self.u, b).astype(np.float64, copy=False).reshape(b.shape)

    def solve(self, b, x0=None):
        """x for one right-hand side (N,) or several (N, k) at once."""
        b = np.asarray(b, dtype=np.float64)
        x = self._solve(b)
        self.iterations = 0
        if not (self.single and self.refine):
            return x
        bnorm = np.linalg.norm(b, axis=0)
        r = b - self.a @ x
        rnorm = np.linalg.norm(r, axis=0)
        while not np.all(rnorm <= self.rtol * bnorm):
            if self.iterations >= MAX_REFINEMENTS:
                return self._conjugate_gradients(b, x)
            dx = self._solve(r)
            x += dx
            self.iterations += 1
            r = b - self.a @ x
            new = np.linalg.norm(r, axis=0)
            # contraction of this refinement; what is left of the error is about that times the correction
            rho = float(np.max(new / np.maximum(rnorm, np.finfo(float).tiny)))
            if rho > 0.5:  # too inexact a factor for plain refinement: let CG use it instead
                return self._conjugate_gradients(b, x)
            if rho * float(np.abs(dx).max()) <= self.correction_tol:
                break
            rnorm = new
        return x

    def _conjugate_gradients(self, b: np.ndarray, x: np.ndarray) -> np.ndarray:
        """CG on the double matrix preconditioned by the single-precision factor (symmetric
        positive definite, so CG converges however inexact the factor), from ``x``."""
        n = self.a.shape[0]
        pre = spla.LinearOperator((n, n), matvec=self._solve, dtype=np.float64)
        cols = [b] if b.ndim == 1 else [b[:, j] for j in range(b.shape[1])]
        starts = [x] if x.ndim == 1 else [x[:, j] for j in range(x.shape[1])]
        out = []
        for bj, xj in zip(cols, starts):
            count = [0]
            xj, info = spla.cg(self.a, bj, x0=xj, rtol=self.rtol, M=pre, maxiter=CG_MAXITER,
                               callback=lambda _: count.__setitem__(0, count[0] + 1))
            self.iterations += count[0]
            if info != 0:
                raise SolveError(f"conjugate gradients on the single-precision factorization did not converge in "
                                 f"{count[0]} iterations")
            out.append(xj)
        return out[0] if b.ndim == 1 else np.column_stack(out)

    def factor_bytes(self) -> int:
        """Memory PARDISO reports for the factor (permanent + factorization), bytes."""
        return 1024 * int(max(self.ps.get_iparm(16), 0) + max(self.ps.get_iparm(17), 0))

    def close(self):
        if self.ps is not None:
            try:
                self.ps.free_memory(everything=True)
            except Exception:  # pragma: no cover - already released
                pass
            self.ps = None

    def __del__(self):
        self.close()


class MultigridCGSolver:
    """Conjugate gradients preconditioned by one classical (Ruge–Stüben) AMG V-cycle (pyamg).

    ``x0`` (for example the previous temperature) starts the iteration.
    """

    name = "multigrid-preconditioned CG (pyamg)"
    iterative = True

    def __init__(self, a: sp.spmatrix, rtol: float = CG_RTOL):
        import pyamg

        self.a = sp.csr_matrix(a)
        # The hierarchy in single precision: a preconditioner only has to be roughly right, and
        # the V-cycle is bound by memory traffic, which halves. CG itself stays in double.
        self.ml = pyamg.ruge_stuben_solver(self.a.astype(np.float32), presmoother=SMOOTHER[0],
                                           postsmoother=SMOOTHER[1])
        ml = self.ml
        n = self.a.shape[0]

        def v_cycle(r):
            return ml.solve(np.asarray(r, dtype=np.float32), maxiter=1, cycle="V", tol=1e-30).astype(np.float64)

        self.precond = spla.LinearOperator((n, n), matvec=v_cycle, dtype=np.float64)
        self.rtol = rtol
        self.iterations = 0
        self.total_iterations = 0

    def solve(self, b, x0=None, atol: float = 0.0, a=None):
        """Solve ``a x = b`` (default: the matrix the hierarchy was built for) to ‖r‖ ≤ max(rtol‖b‖, atol).

        Another matrix ``a`` close to the original (a nearby step size) reuses this preconditioner.
        """
        count = [0]

        def cb(_):
            count[0] += 1

        mat = self.a if a is None else a
        x, info = spla.cg(mat, b, x0=x0, rtol=self.rtol, atol=atol, M=self.precond, maxiter=CG_MAXITER,
                          callback=cb)
        self.iterations = count[0]
        self.total_iterations += count[0]
        if info != 0:
            raise SolveError(f"conjugate gradients did not converge in {count[0]} iterations")
        return x

    def close(self):
        self.ml = None


class ConstrainedSolver:
    """Solves ``a x = b`` within the span of a prolongation P (hanging-node constraints, see
    :mod:`solver.mesh.localplanes`): x = P (PᵀaP)⁻¹ Pᵀb, the Galerkin solution on that subspace.
    Vectors in and out have the mesh's length; only PᵀaP (free unknowns) is factored."""

    def __init__(self, a: sp.spmatrix | None, method: str, constraint, refine: bool = True, inner=None):
        self.p, self.free = constraint
        self.pt = self.p.T.tocsr()
        if inner is None:
            inner = make_solver((self.pt @ sp.csr_matrix(a) @ self.p).tocsr(), method, refine=refine)
        self.inner = inner
        self.iterative = self.inner.iterative
        self.name = self.inner.name + f" on {len(self.free):,} free unknowns"

    @classmethod
    def around(cls, inner, constraint) -> "ConstrainedSolver":
        """Wrap a solver already made for PᵀAP (it is closed with this one)."""
        return cls(None, "", constraint, inner=inner)

    def solve(self, b, x0=None):
        b = np.asarray(b, dtype=np.float64)
        xr = self.inner.solve(self.pt @ b, None if x0 is None else np.asarray(x0)[self.free])
        return self.p @ xr

    def close(self):
        self.inner.close()


def make_solver(a: sp.spmatrix, method: str, upper=None, refine: bool = True, constraint=None):
    """A solver object for matrix ``a`` by method name (see :func:`choose_method`); with a
    ``constraint`` (P, free) from :func:`solver.mesh.localplanes.prolongation`, a
    :class:`ConstrainedSolver` on the free unknowns."""
    if constraint is not None:
        return ConstrainedSolver(a, method, constraint, refine=refine)
    if method == "pardiso":
        return PardisoCholesky(a, upper)
    if method == "pardiso-single":
        return PardisoCholesky(a, upper, precision="single", refine=refine)
    if method in ("direct", "superlu"):
        return SuperLUSolver(a)
    if method == "multigrid":
        return MultigridCGSolver(a)
    raise ValueError(f"unknown linear solver {method!r}")
