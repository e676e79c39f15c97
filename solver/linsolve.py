"""Linear solvers for the symmetric positive-definite step matrix ``M/Δt + θK`` (W/K).

:func:`choose_method` picks a method and says why:

* ``pardiso`` – sparse Cholesky (LDLᵀ) by Intel MKL PARDISO through ``pypardiso``, on the upper
  triangle in symmetric positive-definite mode, while the estimated factor fits comfortably in
  memory. pypardiso installs from PyPI as a wheel on Linux, Windows and macOS (Intel) and
  brings MKL (an optimized BLAS) with it; scikit-sparse/CHOLMOD needs SuiteSparse to build.
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

from .errors import SolveError

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
DIRECT_MAX_BYTES = 2.5e9  # above this, factorization takes minutes on two cores
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
    from .mesh import available_memory_bytes

    return available_memory_bytes()


def choose_method(n: int, requested: str = "auto", adaptive: bool = False,
                  available_bytes: int | None = None) -> SolverChoice:
    """Method name and a one-line reason for a problem of ``n`` nodes."""
    if requested not in ("auto", "direct", "multigrid", "pardiso", "superlu"):
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
    if requested == "pardiso" and not pardiso:
        return SolverChoice("superlu", "PARDISO requested but pypardiso is not installed: SuperLU")
    if requested in ("pardiso", "superlu"):
        return SolverChoice(requested, "requested")
    avail = available_bytes if available_bytes is not None else _available_memory()
    est = estimated_factor_bytes(n)
    fits = est <= min(DIRECT_MEMORY_SHARE * avail, DIRECT_MAX_BYTES)
    size = f"{n:,} nodes, factor about {est / 1e9:.2g} GB of {avail / 1e9:.3g} GB available"
    if fits and not (adaptive and n > ADAPTIVE_DIRECT_NODE_LIMIT):
        if pardiso:
            return SolverChoice("pardiso", f"{size}: sparse Cholesky (PARDISO) fits comfortably and is "
                                           "fastest per step")
        if not amg:
            return SolverChoice("superlu", f"{size}: neither pypardiso nor pyamg is installed: SuperLU")
        return SolverChoice("multigrid", f"{size}: pypardiso is not installed; multigrid CG instead")
    if amg:
        why = ("adaptive steps need one factorization per step size, too slow at this size"
               if fits else "a factorization would not fit comfortably")
        return SolverChoice("multigrid", f"{size}: {why}; multigrid CG keeps memory linear in the node count")
    if pardiso:
        return SolverChoice("pardiso", f"{size}: pyamg is not installed; sparse Cholesky (PARDISO) anyway")
    return SolverChoice("superlu", f"{size}: neither pyamg nor pypardiso is installed: SuperLU as a last resort")


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


class PardisoCholesky:
    """MKL PARDISO, real symmetric positive definite (mtype 2), on the upper triangle in CSR.

    ``upper`` is (indptr, indices, take) from :meth:`solver.assemble.GridPattern.upper`; without
    it the upper triangle is extracted with scipy.
    """

    name = "direct (PARDISO sparse Cholesky)"
    iterative = False

    def __init__(self, a: sp.csr_matrix, upper=None):
        _point_pypardiso_at_mkl()
        import pypardiso

        if upper is not None:
            indptr, indices, take = upper
            u = sp.csr_matrix((a.data[take], indices, indptr), shape=a.shape)
        else:
            u = sp.triu(a, format="csr")
        u.sort_indices()
        self.u = u
        self.ps = _new_pardiso(pypardiso)
        self.ps.size_limit_storage = 0  # keep a hash, not a copy, of the matrix
        try:
            self.ps.factorize(u)
        except Exception as e:  # PyPardisoError: not positive definite, out of memory, ...
            raise SolveError(f"PARDISO could not factor the step matrix ({e})") from None
        # PARDISO's defaults refine every solve twice (iparm(8) = 2), which triples the cost of a
        # solve; a Cholesky factorization is backward stable and the residual without refinement is
        # at round-off (measured 2e-12 relative at 200k nodes), so refine only if pivots were
        # perturbed (iparm(8) = 0: PARDISO's own rule for that case).
        self.ps.set_iparm(8, 0)
        self.iterations = 0

    def solve(self, b, x0=None):
        """x for one right-hand side (N,) or several (N, k) at once."""
        self.ps.set_phase(33)
        b = np.asarray(b, dtype=float)
        # PARDISO reads several right-hand sides column after column (Fortran order)
        b = np.ascontiguousarray(b) if b.ndim == 1 else np.asfortranarray(b)
        return self.ps._call_pardiso(self.u, b)

    def factor_bytes(self) -> int:
        """Memory PARDISO reports for the factor (permanent + factorization), bytes."""
        return 1024 * int(max(self.ps.get_iparm(15), 0) + max(self.ps.get_iparm(16), 0))

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


def make_solver(a: sp.spmatrix, method: str, upper=None):
    """A solver object for matrix ``a`` by method name (see :func:`choose_method`)."""
    if method in ("pardiso",):
        return PardisoCholesky(a, upper)
    if method in ("direct", "superlu"):
        return SuperLUSolver(a)
    if method == "multigrid":
        return MultigridCGSolver(a)
    raise ValueError(f"unknown linear solver {method!r}")
