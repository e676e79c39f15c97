"""Helpers for the engine verification tests: model dicts, runs, outside reference solutions.

Units as in the model file (mm, °C, W, s) unless a name says otherwise (``_m`` = metres).
"""
from __future__ import annotations

import copy
import functools

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

import solver
from solver.transient.stepping import Stepper

# A fictitious isotropic solid with round numbers (α = k/ρc = 1e-6 m²/s).
SLOW = {"conductivity": 1.0, "density": 1000.0, "specific_heat": 1000.0}


def model_dict(parts, materials=None, heat_loads=(), convection=(), probes=(), cell_mm=2.0, min_layers=1,
               duration_s=10.0, step_s=1.0, scheme="backward-euler", mass="consistent", output_every_s=None,
               ambient_c=25.0, initial_c=25.0, method=None) -> dict:
    """A model-file dict (format version 1) from pieces; ``parts`` are dicts as in the file.
    ``method="full"`` where a check is about the time integrator (``auto`` may pick the reduced basis)."""
    run = {"duration_s": duration_s, "step_s": step_s, "scheme": scheme, "mass": mass}
    if method is not None:
        run["method"] = method
    if output_every_s is not None:
        run["output_every_s"] = output_every_s
    return {
        "format": "thermgui-model", "version": 1, "title": "verification model",
        "ambient_c": ambient_c, "initial_c": initial_c,
        "materials": copy.deepcopy(materials or {}),
        "parts": copy.deepcopy(list(parts)),
        "heat_loads": copy.deepcopy(list(heat_loads)),
        "convection": copy.deepcopy(list(convection)),
        "probes": copy.deepcopy(list(probes)),
        "mesh": {"cell_mm": cell_mm, "min_layers": min_layers},
        "run": run,
    }


def part(name, material, origin, size, **extra) -> dict:
    d = {"name": name, "material": material, "origin_mm": list(map(float, origin)),
         "size_mm": list(map(float, size))}
    d.update(extra)
    return d


def problem_of(d: dict):
    """Validated model and assembled problem from a dict."""
    model = solver.parse_model(d)
    return model, solver.build_problem(model)


def run_all(problem, **stepper_kw):
    """Iterate a Stepper; returns (times (S,), fields (S, N), events list without fields)."""
    times, fields = [], []
    for ev in Stepper(problem, **stepper_kw):
        times.append(ev.time_s)
        fields.append(np.array(ev.field))
    return np.array(times), np.array(fields)


def with_run(d: dict, **run) -> dict:
    d = copy.deepcopy(d)
    d["run"].update(run)
    return d


# ---------------------------------------------------------------- outside references
@functools.lru_cache(maxsize=64)
def plane_wall_roots(bi: float, n: int) -> np.ndarray:
    """First ``n`` positive roots of ζ tan ζ = Bi (one in each ((k)π, (k+½)π)), by brentq."""
    roots = []
    for k in range(n):
        lo, hi = k * np.pi + 1e-12, k * np.pi + 0.5 * np.pi - 1e-12
        roots.append(brentq(lambda z: z * np.tan(z) - bi, lo, hi, xtol=1e-15, rtol=1e-15, maxiter=200))
    return np.array(roots)


def plane_wall(x_over_l, fo, bi, n_terms=80):
    """θ/θᵢ of a plane wall of half-thickness L cooled on both faces (Bi = hL/k, Fo = αt/L²).

    Series solution: Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, §5.5.1
    (exact solution, Cₙ = 4 sin ζₙ / (2ζₙ + sin 2ζₙ)); eigenvalues computed here by brentq.
    """
    z = plane_wall_roots(float(bi), int(n_terms))
    c = 4.0 * np.sin(z) / (2.0 * z + np.sin(2.0 * z))
    x = np.atleast_1d(np.asarray(x_over_l, dtype=float))
    return np.sum(c[None, :] * np.exp(-z[None, :] ** 2 * fo) * np.cos(np.outer(x, z)), axis=1)


def reference_ivp(problem, t_eval, breaks=(), method="BDF", rtol=1e-10, atol=1e-10):
    """solve_ivp of the same semi-discrete system M d' + K d = F(t), i.e. d' = M⁻¹(F(t) − K d).

    The integration restarts at each profile breakpoint in ``breaks`` so that the forcing
    inside each piece is smooth; F is taken from ``problem.load`` (one-sided at the piece
    ends). Only sparse operations are used (no threaded dense BLAS), so it stays quick on a
    busy machine; the Jacobian −M⁻¹K is passed as a sparse matrix.
    """
    k = problem.stiffness.tocsc()
    if problem.capacity is None:  # lumped: M is diagonal
        minv = sp.diags(1.0 / problem.lumped)
        apply_minv = lambda v: minv @ v  # noqa: E731
        jac = -(minv @ k).tocsc()
    else:
        lu = spla.splu(problem.capacity.tocsc())
        apply_minv = lu.solve
        jac = sp.csc_matrix(-lu.solve(k.toarray()))
    t_eval = np.asarray(t_eval, dtype=float)
    t_end = float(t_eval[-1])
    cuts = sorted({0.0, t_end, *[float(b) for b in breaks if 0.0 < b < t_end]})
    out = np.empty((len(t_eval), problem.n_nodes))
    d = problem.initial.astype(float).copy()
    out[t_eval <= 0.0] = d
    for a, b in zip(cuts[:-1], cuts[1:]):
        mid = 0.5 * (a + b)

        def rhs(t, y, a=a, b=b):
            tt = min(max(t, a), b)  # the load strictly inside the piece, one-sided at its ends
            return apply_minv(problem.load(tt, "right" if tt < mid else "left") - k @ y)

        sel = (t_eval > a) & (t_eval <= b)
        ts = np.unique(np.append(t_eval[sel], b))
        sol = solve_ivp(rhs, (a, b), d, method=method, t_eval=ts, rtol=rtol, atol=atol, jac=jac)
        if not sol.success:  # pragma: no cover - reference failure
            raise RuntimeError(sol.message)
        out[sel] = sol.y[:, np.searchsorted(ts, t_eval[sel])].T
        d = sol.y[:, -1]
    return out


def dense_pencil(problem):
    """(K, M) as dense arrays."""
    m = problem.mass_matrix
    return problem.stiffness.toarray(), (m.toarray() if sp.issparse(m) else np.asarray(m))


def chip_on_plate(**run) -> dict:
    """Invented scenario: a 1.5 W package on an aluminium plate cooled from below, rated 40 °C (it goes over)."""
    r = {"duration_s": 60.0, "step_s": 2.0, "scheme": "backward-euler", "mass": "lumped", "output_every_s": 10.0}
    r.update(run)
    return {
        "format": "thermgui-model", "version": 1, "title": "chip on plate (test scenario)",
        "ambient_c": 25.0, "initial_c": 25.0,
        "parts": [
            {"name": "plate", "material": "aluminium-6061", "origin_mm": [0, 0, 0], "size_mm": [40, 30, 3],
             "rated_c": 100.0},
            {"name": "chip", "material": "mould-compound", "origin_mm": [15, 10, 3], "size_mm": [10, 10, 2],
             "rated_c": 40.0},
            {"name": "foot", "material": "aluminium-6061", "origin_mm": [0, 0, -4], "size_mm": [6, 6, 4]},
        ],
        "heat_loads": [{"part": "chip", "profile": {"type": "constant", "value": 1.5}}],
        "convection": [{"name": "underside", "part": "plate", "side": "z-", "h": 10.0},
                       {"name": "top", "part": "plate", "side": "z+", "h": 6.0}],
        "mesh": {"cell_mm": 3.0, "min_layers": 2},
        "run": r,
    }
