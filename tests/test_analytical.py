"""Whole-engine runs (model dict → parse_model → build_problem → Stepper) against analytical solutions.

Sources:
- block cooling on all faces: product of plane-wall series solutions, Incropera & DeWitt,
  Fundamentals of Heat and Mass Transfer, §5.5.1 (plane wall, exact series) and §5.8
  (multidimensional effects, product solutions); eigenvalues ζ tan ζ = Bi by scipy's brentq.
  With diagonal (orthotropic) conductivity the problem still separates, one Bi and Fo per axis.
- lumped capacitance, Incropera & DeWitt §5.1–5.2: θ/θᵢ = exp(−hA t / ρcV), valid for Bi < 0.1.
- plane wall with uniform generation, Incropera & DeWitt §3.5.1: T(x) = T∞ + q̇L/h + q̇(L² − x²)/2k
  for the half-wall 0 ≤ x ≤ L with an adiabatic (symmetry) face at x = 0.
"""
from __future__ import annotations

import functools

import numpy as np
import pytest

from modelkit import model_dict, part, plane_wall, problem_of
from solver import Stepper

T_INIT, T_AMB = 100.0, 20.0
RHO_C = 1.0e6  # J/(m³·K)
H_BLOCK = 25.0  # W/(m²·K)
SIZE_MM = (20.0, 30.0, 40.0)
CHECK_TIMES = (15.0, 30.0, 60.0, 100.0, 150.0)


@functools.lru_cache(maxsize=None)
def _block_run(cell_mm: float, k: tuple):
    """Probe history (centre, corner) of a block cooling by convection on all six faces."""
    mats = {"solid": {"conductivity": list(k) if len(set(k)) > 1 else k[0], "density": 1000.0,
                      "specific_heat": 1000.0}}
    centre = [s / 2 for s in SIZE_MM]
    d = model_dict([part("block", "solid", (0, 0, 0), SIZE_MM)], mats,
                   convection=[{"name": "all faces", "part": "block", "side": "exposed", "h": H_BLOCK}],
                   probes=[{"name": "centre", "at_mm": centre}, {"name": "corner", "at_mm": [0, 0, 0]}],
                   cell_mm=cell_mm, min_layers=1, duration_s=max(CHECK_TIMES), step_s=1.0,
                   scheme="crank-nicolson", mass="consistent", output_every_s=5.0,
                   initial_c=T_INIT, ambient_c=T_AMB)
    _, problem = problem_of(d)
    out = {}
    for ev in Stepper(problem):
        if ev.is_output:
            out[round(ev.time_s, 9)] = np.array(ev.probes)
    return out


def _block_exact(t: float, k: tuple):
    """(θ_centre, θ_corner)/θᵢ from the product of three plane-wall solutions."""
    half = np.array(SIZE_MM) * 1e-3 / 2
    centre = corner = 1.0
    for ax in range(3):
        bi = H_BLOCK * half[ax] / k[ax]
        fo = k[ax] / RHO_C * t / half[ax] ** 2
        centre *= plane_wall(0.0, fo, bi)[0]
        corner *= plane_wall(1.0, fo, bi)[0]
    return centre, corner


def _block_errors(cell_mm: float, k: tuple):
    """Largest |T − T_exact| / (T_i − T∞) at the centre and at a corner over CHECK_TIMES."""
    hist = _block_run(cell_mm, k)
    err = np.zeros(2)
    for t in CHECK_TIMES:
        exact = np.array(_block_exact(t, k))
        got = (hist[round(t, 9)] - T_AMB) / (T_INIT - T_AMB)
        err = np.maximum(err, np.abs(got - exact))
    return err


def test_series_reference_itself():
    """The series reproduces θ = 1 at Fo → 0 inside the wall and the one-term limit at large Fo."""
    assert abs(plane_wall(0.3, 1e-4, 2.0)[0] - 1.0) < 1e-6
    from modelkit import plane_wall_roots

    z = plane_wall_roots(2.0, 3)
    np.testing.assert_allclose(z * np.tan(z), 2.0, rtol=1e-12)
    c1 = 4 * np.sin(z[0]) / (2 * z[0] + np.sin(2 * z[0]))
    assert abs(plane_wall(0.0, 3.0, 2.0)[0] - c1 * np.exp(-z[0] ** 2 * 3.0)) < 1e-9


@pytest.mark.parametrize("k", [(1.0, 1.0, 1.0), (1.0, 2.0, 4.0)], ids=["isotropic", "orthotropic"])
def test_block_cooling_matches_product_solution(k):
    """Within 1 % of θᵢ on a 2.5 mm mesh, and the error falls clearly when the mesh is refined."""
    coarse = _block_errors(5.0, k)
    fine = _block_errors(2.5, k)
    assert fine.max() < 0.01, f"centre/corner error {fine} of the initial difference"
    # P1 in space: about h² (ratio 4); demand at least 2.5 on both points
    assert np.all(coarse / fine > 2.5), f"errors {coarse} (5 mm) vs {fine} (2.5 mm)"
    # the field has actually cooled substantially (the check is not at a trivial state)
    hist = _block_run(2.5, k)
    assert (hist[150.0][0] - T_AMB) / (T_INIT - T_AMB) < 0.6


def test_lumped_capacitance_limit():
    """Aluminium cube, Bi ≈ 2e-4: every node follows exp(−hAt/ρcV) within 0.2 % of θᵢ."""
    side = 20.0
    d = model_dict([part("cube", "aluminium-6061", (0, 0, 0), (side,) * 3)],
                   convection=[{"name": "all", "part": "cube", "side": "exposed", "h": 10.0}],
                   cell_mm=5.0, duration_s=1600.0, step_s=10.0, scheme="crank-nicolson", mass="consistent",
                   output_every_s=100.0, initial_c=T_INIT, ambient_c=T_AMB)
    model, problem = problem_of(d)
    mat = model.material_table()["aluminium-6061"]
    a = side * 1e-3
    bi = 10.0 * (a / 6) / mat.conductivity[0]
    assert bi < 0.1
    tau = mat.volumetric_heat_capacity * a**3 / (10.0 * 6 * a**2)
    worst = 0.0
    for ev in Stepper(problem):
        exact = T_AMB + (T_INIT - T_AMB) * np.exp(-ev.time_s / tau)
        worst = max(worst, float(np.abs(ev.field - exact).max()) / (T_INIT - T_AMB))
    assert worst < 2e-3
    assert ev.time_s == 1600.0 and float(ev.field.mean()) < T_AMB + 0.2 * (T_INIT - T_AMB)


def test_heat_generating_wall_reaches_parabolic_profile():
    """Half-wall 10 mm thick, adiabatic at x = 0 and on the sides, convection at x = L."""
    L_m, h, k, watts = 0.010, 100.0, 1.0, 0.36
    size = (10.0, 6.0, 6.0)
    q = watts / np.prod(np.array(size) * 1e-3)  # W/m³
    mats = {"solid": {"conductivity": k, "density": 1000.0, "specific_heat": 1000.0}}
    d = model_dict([part("wall", "solid", (0, 0, 0), size)], mats,
                   heat_loads=[{"part": "wall", "profile": {"type": "constant", "value": watts}}],
                   convection=[{"name": "hot face", "part": "wall", "side": "x+", "h": h}],
                   cell_mm=1.0, duration_s=4000.0, step_s=100.0, scheme="backward-euler", mass="lumped",
                   output_every_s=1000.0, initial_c=T_AMB, ambient_c=T_AMB)
    _, problem = problem_of(d)
    fields = [np.array(ev.field) for ev in Stepper(problem) if ev.is_output]
    x = problem.mesh.nodes[:, 0]
    exact = T_AMB + q * L_m / h + q * (L_m**2 - x**2) / (2 * k)
    rise = exact.max() - T_AMB  # 150 K
    assert rise == pytest.approx(150.0)
    assert np.abs(fields[-1] - exact).max() < 0.005 * rise
    # steady: the last two outputs (1000 s apart) agree
    assert np.abs(fields[-1] - fields[-2]).max() < 1e-4 * rise
    # it started far from the profile (uniform ambient), so the run did the work
    assert np.abs(fields[0] - exact).max() > 0.9 * rise
