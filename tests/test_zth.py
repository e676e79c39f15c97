"""Zth(t) curves, Foster fits, Cauer conversion, SPICE export (solver.answers.zth, solver.answers.foster, zthfiles)."""
from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
import sympy
from scipy.signal import lsim

import solver
from solver.answers.commands import zth_to_folder
from solver.answers.foster import CauerLadder, FosterFit, fit_foster, foster_to_cauer
from solver.answers.zth import compute_zth
from tests import modelkit as mk
from tests.spicenet import state_space


def two_chips(**run) -> dict:
    """Invented scenario: two packages on an aluminium plate, each rated, cooled from below."""
    d = mk.chip_on_plate(**run)
    d["parts"].append({"name": "chip2", "material": "mould-compound", "origin_mm": [3, 3, 3],
                       "size_mm": [6, 6, 2], "rated_c": 60.0})
    d["heat_loads"].append({"part": "chip2", "profile": {"type": "constant", "value": 0.5}})
    d["ambient_c"] = d["initial_c"] = 0.0
    return d


def rel_error(fit_values, z):
    return float(np.max(np.abs(fit_values - z) / np.maximum(np.abs(z), 0.01 * z[-1])))


# ----------------------------------------------------------------- analytical cases
def test_lumped_body_matches_lumped_capacitance_solution():
    """A block of a very conductive solid (Bi = hL/k ~ 1e-6) cooled on every face: Zth(t) = R(1 −
    e^{−t/τ}) with R = 1/(hA), τ = ρcV/(hA) (lumped capacitance; Incropera & DeWitt, Fundamentals of
    Heat and Mass Transfer, 6th ed., §5.1)."""
    mat = {"conductivity": 1.0e4, "density": 2000.0, "specific_heat": 900.0}
    d = mk.model_dict([mk.part("block", "fast", (0, 0, 0), (20, 10, 5), rated_c=80.0)], materials={"fast": mat},
                      heat_loads=[{"part": "block", "profile": {"type": "constant", "value": 1.0}}],
                      convection=[{"name": "all", "part": "block", "side": "exposed", "h": 12.0}],
                      cell_mm=2.5, mass="lumped")
    model, prob = mk.problem_of(d)
    area = 2 * (20 * 10 + 20 * 5 + 10 * 5) * 1e-6
    vol = 20 * 10 * 5 * 1e-9
    r_ref, tau_ref = 1.0 / (12.0 * area), 2000.0 * 900.0 * vol / (12.0 * area)
    res = compute_zth(prob)
    ref = r_ref * -np.expm1(-res.times / tau_ref)
    assert res.times[-1] / res.times[0] >= 1e4 * (1 - 1e-12)  # four decades (to round-off)
    assert res.times[0] < 0.01 * tau_ref and res.times[-1] > 5 * tau_ref
    assert rel_error(res.zth[0, 0], ref) < 1e-4
    fit = fit_foster(res.times, res.zth[0, 0])
    assert fit.stages == 1 and not fit.signed
    assert fit.r[0] == pytest.approx(r_ref, rel=1e-3)
    assert fit.c[0] == pytest.approx(tau_ref / r_ref, rel=1e-3)


def slab_reference(x_m, t, length, k, rho_c, h, q_vol, n_terms=60):
    """Plane wall 0 ≤ x ≤ L, adiabatic at 0, convection h at L, uniform heating q''' from t = 0
    out of equilibrium: θ = θ_ss(x) − Σ cₙ cos(ζₙ x/L) e^{−ζₙ² α t/L²}, ζ tan ζ = Bi (separation of
    variables; Carslaw & Jaeger, Conduction of Heat in Solids, 2nd ed., ch. 3, from memory for the
    section). cₙ = ∫θ_ss cos / ∫cos² by Gauss–Legendre quadrature."""
    alpha = k / rho_c
    zeta = mk.plane_wall_roots(h * length / k, n_terms)
    xg, wg = np.polynomial.legendre.leggauss(200)
    xs = 0.5 * length * (xg + 1.0)
    ws = 0.5 * length * wg
    ss = lambda x: q_vol * (length ** 2 - x ** 2) / (2 * k) + q_vol * length / h  # noqa: E731
    out = np.full(len(t), ss(x_m))
    for z in zeta:
        phi = np.cos(z * xs / length)
        c = (ws * ss(xs) * phi).sum() / (ws * phi * phi).sum()
        out -= c * math.cos(z * x_m / length) * np.exp(-z * z * alpha * t / length ** 2)
    return out


def test_slab_zth_matches_series_solution():
    """1D slab (10 mm, k = 1 W/(m K), ρc = 1e6 J/(m³ K), h = 50 W/(m² K), Bi = 0.5) heated in its
    volume, insulated except one face: the part maximum sits on the insulated face."""
    length_mm, side = 10.0, 1.0
    d = mk.model_dict([mk.part("slab", "slow", (0, 0, 0), (length_mm, side, side), rated_c=100.0)],
                      materials={"slow": mk.SLOW},
                      heat_loads=[{"part": "slab", "profile": {"type": "constant", "value": 1.0}}],
                      convection=[{"name": "face", "part": "slab", "side": "x+", "h": 50.0}],
                      cell_mm=0.25, min_layers=1, mass="consistent")
    _, prob = mk.problem_of(d)
    res = compute_zth(prob)
    vol = length_mm * side * side * 1e-9
    ref = slab_reference(0.0, res.times, length_mm * 1e-3, 1.0, 1e6, 50.0, 1.0 / vol)
    assert res.rth[0, 0] == pytest.approx(ref[-1], rel=2e-3)
    assert rel_error(res.zth[0, 0], ref) < 0.01


# ----------------------------------------------------------------- fits and networks
@pytest.fixture(scope="module")
def chips_zth():
    _, prob = mk.problem_of(two_chips())
    return prob, compute_zth(prob)


def test_foster_fit_within_one_percent_over_four_decades(chips_zth):
    prob, res = chips_zth
    assert res.parts == ["plate", "chip", "chip2"] and res.heated == ["chip", "chip2"]
    assert res.times[-1] / res.times[0] >= 1e4 * (1 - 1e-12)  # four decades (to round-off)
    for a, j, part, heated in res.pairs():
        z = res.zth[a, j]
        fit = fit_foster(res.times, z)
        assert rel_error(fit.step(res.times), z) < 0.01, (part, heated, fit.stages)
        assert fit.r.sum() == pytest.approx(res.rth[a, j], rel=0.01)  # DC resistance
        assert np.all(fit.tau > 0)


def test_foster_to_cauer_equal_impedance_and_against_sympy():
    """Cauer ladder from the Lanczos route against (1) equal Z(s) at real and complex s and (2) a
    continued-fraction expansion of the same rational Z(s) done exactly by sympy (Euclid's
    algorithm on the numerator and denominator polynomials)."""
    fit = FosterFit(np.array([0.3, 1.2, 2.5, 4.0]), np.array([0.01, 0.4, 9.0, 300.0]), 0.0)
    cauer = foster_to_cauer(fit)
    s = np.array([1e-5, 1e-3, 0.1, 10.0, 1e3, 0.2 + 3.0j, 1e-2 - 0.5j])
    assert np.allclose(cauer.impedance(s), fit.impedance(s), rtol=1e-9, atol=0)
    assert cauer.r.sum() == pytest.approx(fit.r.sum(), rel=1e-12)
    # sympy: Y = 1/Z = s·C1 + 1/(R1 + 1/(s·C2 + …)), exact rationals
    sv = sympy.symbols("s")
    z = sum(sympy.Rational(str(r)) / (1 + sv * sympy.Rational(str(t))) for r, t in zip(fit.r, fit.tau))
    num, den = sympy.fraction(sympy.together(z))
    y_num, y_den = sympy.Poly(den, sv), sympy.Poly(num, sv)
    cs, rs = [], []
    for _ in range(len(fit.r)):
        c = y_num.LC() / y_den.LC()  # Y ≈ s·C at s → ∞
        cs.append(float(c))
        rem = y_num - sympy.Poly(c * sv, sv) * y_den  # Y − sC = rem / y_den
        if rem.is_zero:
            break
        # Z' = y_den / rem = R + ...; R = ratio of leading coefficients (same degree)
        r = y_den.LC() / rem.LC()
        rs.append(float(r))
        rem2 = y_den - sympy.Poly(r, sv) * rem
        y_num, y_den = rem, rem2
        if rem2.is_zero:
            break
    assert np.allclose(cauer.c, cs, rtol=1e-8)
    assert np.allclose(cauer.r, rs, rtol=1e-8)


def test_ladder_impedance_of_known_two_stage_network():
    """A hand-derived two-node ladder: C1 = 1, R1 = 1, C2 = 1, R2 = 1 gives
    Z(s) = (s + 2)/(s² + 3s + 1) (by hand, nodal analysis)."""
    lad = CauerLadder(np.array([1.0, 1.0]), np.array([1.0, 1.0]))
    s = np.array([0.3, 2.0, 1.0 + 1.0j])
    assert np.allclose(lad.impedance(s), (s + 2) / (s * s + 3 * s + 1))


def fem_step_response(model_dict, heated: str, observed: list, duration, step):
    """Part maxima (K) of the full system stepped by Crank–Nicolson (Rannacher start) with 1 W
    constant in ``heated`` only, from 0 °C at 0 °C ambient."""
    d = dict(model_dict)
    d["heat_loads"] = [{"part": heated, "profile": {"type": "constant", "value": 1.0}}]
    d = mk.with_run(d, duration_s=duration, step_s=step, scheme="crank-nicolson", output_every_s=step)
    model, prob = mk.problem_of(d)
    names = [p.name for p in model.parts]
    t, zs = [], []
    for ev in solver.Stepper(prob):
        t.append(ev.time_s)
        zs.append([ev.part_max[names.index(o)] for o in observed])
    return np.array(t), np.array(zs)


def test_cli_files_and_netlist_reproduce_the_fem_step_response(tmp_path, chips_zth):
    """The SPICE subcircuits, read back by an independent netlist reader (tests/spicenet.py) and
    simulated with scipy.signal.lsim, reproduce the full finite-element step response (stepped,
    not reduced) within 1 %, for self and cross terms."""
    d = two_chips()
    path = tmp_path / "model.json"
    path.write_text(json.dumps(d))
    out = tmp_path / "zth"
    assert zth_to_folder(path, out, quiet=True) == 0
    with open(out / "zth.csv") as f:
        head = next(csv.reader(f))
    assert head[0] == "time_s" and "zth:chip:chip" in head and "zth:plate:chip2" in head
    with open(out / "foster.csv") as f:
        rows = list(csv.DictReader(f))
    assert list(rows[0].keys()) == ["part", "heated_part", "stage", "r_k_w", "c_j_k"]
    doc = json.loads((out / "zth.json").read_text())
    assert {p["part"] for p in doc["pairs"]} == {"plate", "chip", "chip2"}
    assert (out / "cauer.csv").exists()
    duration, step = 1200.0, 0.5
    for heated in ("chip", "chip2"):
        t_fem, z_fem = fem_step_response(d, heated, ["chip", "chip2"], duration, step)
        keep = t_fem >= 2.0  # a few steps in, where the stepping error is far below 1 %
        t_fem, z_fem = t_fem[keep], z_fem[keep]
        grid = np.arange(0.0, duration + step / 2, step)  # lsim wants equal steps
        on = np.searchsorted(grid, t_fem - 1e-9)
        assert np.allclose(grid[on], t_fem)
        for k, part in enumerate(["chip", "chip2"]):
            text = (out / "spice" / f"{part}.sub").read_text()
            pins = {"RISE": "rise", "CHIP_IN": "in1", "CHIP_OUT": "0", "CHIP2_IN": "in2", "CHIP2_OUT": "0"}
            a, b, c, dd = state_space(text, pins, ["in1", "in2"], "rise")
            u = np.zeros((len(grid), 2))
            u[:, 0 if heated == "chip" else 1] = 1.0
            _, y, _ = lsim((a, b, c, dd), u, grid)
            z = z_fem[:, k]
            err = np.max(np.abs(y[on] - z) / np.maximum(z, 0.01 * z[-1]))
            assert err < 0.01, (part, heated, err)


def test_cli_bad_input_exit_2(tmp_path, capsys):
    d = two_chips()
    path = tmp_path / "model.json"
    path.write_text(json.dumps(d))
    assert zth_to_folder(path, tmp_path / "a", parts=["nothing"], quiet=True) == 2
    assert "--part" in capsys.readouterr().err
    assert zth_to_folder(path, tmp_path / "b", stages=0, quiet=True) == 2
    assert "--stages" in capsys.readouterr().err
    d2 = dict(d, convection=[])
    path.write_text(json.dumps(d2))
    assert zth_to_folder(path, tmp_path / "c", quiet=True) == 2
    assert "convection" in capsys.readouterr().err
    assert not (tmp_path / "a").exists() and not (tmp_path / "c").exists()


def test_passive_option_gives_non_negative_ladders_and_cauer(tmp_path):
    """--passive: every stage non-negative, and every self term gets a Cauer ladder with the
    same DC resistance (Σ R, the steady value's fit)."""
    path = tmp_path / "model.json"
    path.write_text(json.dumps(two_chips()))
    out = tmp_path / "zth"
    assert zth_to_folder(path, out, quiet=True, passive=True) == 0
    doc = json.loads((out / "zth.json").read_text())
    for p in doc["pairs"]:
        assert not p["foster"]["signed"] and min(p["foster"]["r_k_w"]) > 0 and min(p["foster"]["c_j_k"]) > 0
        if p["part"] == p["heated_part"]:
            assert p["cauer"] is not None
            assert sum(p["cauer"]["r_k_w"]) == pytest.approx(sum(p["foster"]["r_k_w"]), rel=1e-9)
        else:
            assert p["cauer"] is None
