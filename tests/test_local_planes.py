"""Local refinement planes (hanging nodes): solver.mesh.localplanes, solver.fem.freeview, the ladder.

Outside references:
- linear interpolation reproduces linear functions exactly, and a Galerkin solution minimizes the
  energy ½xᵀKx − Fᵀx over its space, so a subspace can never reach a lower energy than the space
  that contains it (common practice, no source);
- the exact solution of the constrained semi-discrete system PᵀMP u' + PᵀKP u = PᵀF with constant
  loads, by modal superposition with scipy's generalized symmetric eigensolver, against the
  reduced-basis run on the free unknowns;
- the analytical heated box of tests/test_accuracy.py (Carslaw & Jaeger), whose ladder now refines
  with local planes, still has its bound bracket the true error (those tests run the default).
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import solver
from modelkit import model_dict, part
from solver.fem.freeview import free_view
from solver.fem.problem import build_problem
from solver.linalg.linsolve import make_solver
from solver.mesh.localplanes import free_count, prolongation
from solver.mesh.mesher import build_mesh, plan_lines
from solver.run import session as session_mod
from solver.run.session import RunSession
from solver.transient.stepping import Stepper

MATERIALS = {"board": {"conductivity": [2.0, 2.0, 0.5], "density": 1900.0, "specific_heat": 1100.0},
             "chip": {"conductivity": 0.8, "density": 2000.0, "specific_heat": 900.0}}


def hot_spot_plate(duration_s=60.0, tolerance_k=None, method="reduced", board_mm=(40, 30, 2), chip_at=(8, 6),
                   cell_mm=2.0, min_layers=2) -> dict:
    """A board cooled underneath with a 4×4×1 mm 1.5 W part near one corner (invented)."""
    d = model_dict([part("board", "board", (0, 0, 0), board_mm, rated_c=80.0),
                    part("chip", "chip", (chip_at[0], chip_at[1], board_mm[2]), (4, 4, 1), rated_c=90.0)],
                   MATERIALS, heat_loads=[{"part": "chip", "profile": {"type": "constant", "value": 1.5}}],
                   convection=[{"name": "under", "part": "board", "side": "z-", "h": 40.0}],
                   cell_mm=cell_mm, min_layers=min_layers, duration_s=duration_s, step_s=1.0,
                   scheme="crank-nicolson", mass="lumped", ambient_c=25.0, initial_c=25.0, method=method)
    d["mesh"]["tolerance_k"] = tolerance_k
    return d


def bisected_mesh(model, regions_for):
    """The planned planes with every interval bisected; ``regions_for(a, u, v, new)`` gives axis a's
    regions (``new`` marks the bisecting planes; u, v the other two axes)."""
    lines = plan_lines(model)
    out_lines, out_regions = [], []
    for a in range(3):
        u, v = [b for b in range(3) if b != a]
        mids = 0.5 * (lines[a][:-1] + lines[a][1:])
        merged = np.sort(np.concatenate([lines[a], mids]))
        out_lines.append(merged)
        out_regions.append(regions_for(a, u, v, np.isin(merged, mids)))
    return build_mesh(model, lines_mm=out_lines, regions=out_regions), out_lines


def local_mesh(model):
    """Every interval bisected, the new planes active only within 2 mm of the part (in the two
    other axes)."""
    chip = model.parts[model.part_index("chip")]
    lo = np.asarray(chip.origin_mm) - 2.0
    hi = np.asarray(chip.origin_mm) + np.asarray(chip.size_mm) + 2.0

    def regions_for(a, u, v, new):
        regions = np.tile([-np.inf, np.inf, -np.inf, np.inf], (len(new), 1))
        regions[new] = [lo[u], hi[u], lo[v], hi[v]]
        return regions

    return bisected_mesh(model, regions_for)


def test_prolongation_interpolates_linear_fields_and_keeps_free_nodes():
    model = solver.parse_model(hot_spot_plate())
    mesh, _ = local_mesh(model)
    p, free = prolongation(mesh, mesh.regions)
    assert p.shape == (mesh.n_nodes, len(free)) and len(free) == free_count(mesh) < mesh.n_nodes
    assert np.allclose(np.asarray(p.sum(axis=1)).ravel(), 1.0)
    assert p.data.min() >= 0.0
    assert abs(p[free] - sp.eye(len(free))).max() < 1e-15
    x = mesh.nodes
    linear = 3.0 + 2.0 * x[:, 0] - 5.0 * x[:, 1] + 7.0 * x[:, 2]
    assert np.abs(p @ linear[free] - linear).max() < 1e-12


def test_constrained_solution_is_galerkin_on_its_subspace():
    """Steady state: PᵀK(Pu) = PᵀF, and its energy is no lower than the full fine grid's."""
    model = solver.parse_model(hot_spot_plate())
    mesh, lines = local_mesh(model)
    local = build_problem(model, mesh)
    fine = build_problem(model, build_mesh(model, lines_mm=lines))
    f_local = local.load(0.0)
    f_fine = fine.load(0.0)
    assert np.allclose(f_local, f_fine)  # the same grid, so the same load vector
    x_c = make_solver(local.stiffness, "direct", constraint=local.constraint).solve(f_local)
    x_f = make_solver(fine.stiffness, "direct").solve(f_fine)
    pc = local.constraint[0]
    assert np.abs(pc.T @ (local.stiffness @ x_c - f_local)).max() < 1e-9 * np.abs(f_local).max()

    def energy(k, x, f):
        return 0.5 * x @ (k @ x) - f @ x

    assert energy(fine.stiffness, x_f, f_fine) <= energy(local.stiffness, x_c, f_local) + 1e-12
    # a part's maximum over its free nodes is its maximum over every node (convex interpolation)
    view = free_view(local)
    u = x_c[local.constraint[1]]
    assert np.allclose(view.part_nodes.maxima(u), local.part_nodes.maxima(x_c))


def test_reduced_run_on_free_unknowns_matches_the_exact_constrained_solution():
    """With constant loads the constrained system's solution is u∞ + Φ e^(−Λt) Φᵀ M (u₀ − u∞), from
    scipy's generalized symmetric eigensolver (K Φ = M Φ Λ, Φᵀ M Φ = I)."""
    from scipy.linalg import eigh

    model = solver.parse_model(hot_spot_plate(duration_s=40.0, board_mm=(16, 12, 1.6), chip_at=(3, 3), cell_mm=2.0,
                                              min_layers=1))
    mesh, _ = local_mesh(model)
    problem = build_problem(model, mesh)
    assert problem.n_free < 2500  # dense eigenvectors below
    st = Stepper(problem, method="reduced")
    st.tolerance_k = 0.01
    events = [ev for ev in st if ev.is_output]
    view = free_view(problem)
    m = view.capacity.toarray()
    k = view.stiffness.toarray()
    u_inf = np.linalg.solve(k, view.load(0.0))
    lam, phi = eigh(k, m)
    c0 = phi.T @ (m @ (view.initial - u_inf))
    pc = problem.constraint[0]
    worst = 0.0
    for ev in events:
        exact = u_inf + phi @ (np.exp(-lam * ev.time_s) * c0)
        worst = max(worst, float(np.abs(ev.field - pc @ exact).max()))
    print("free unknowns", problem.n_free, "of", problem.n_nodes, "worst", worst)
    assert len(events) > 3 and worst < 0.02, worst


def test_ladder_with_local_planes_solves_fewer_unknowns_for_the_same_peaks(monkeypatch):
    d = hot_spot_plate(tolerance_k=0.5)
    d["mesh"]["max_levels"] = 4
    local = RunSession(solver.parse_model(d), None)
    for _ in local.events():
        pass
    rows_local = local.finish()
    monkeypatch.setattr(session_mod, "LOCAL_PLANES", False)
    glob = RunSession(solver.parse_model(d), None)
    for _ in glob.events():
        pass
    rows_glob = glob.finish()
    assert local.problem.constraint is not None and glob.problem.constraint is None
    assert local.problem.n_free < 0.8 * local.problem.n_nodes  # the refined planes really are local
    rec = local.accuracy_record()
    assert all(lv["nodes"] <= lv["mesh_nodes"] for lv in rec["levels"])
    for a, b in zip(rows_local[:2], rows_glob[:2]):
        # both are estimates of the same converged peak: they agree within their bands
        assert abs(a.peak_c - b.peak_c) <= a.peak_error_k + b.peak_error_k, (a, b)


def test_inconsistent_regions_fall_back_to_global_planes(monkeypatch):
    import solver.mesh.localplanes as lp

    model = solver.parse_model(hot_spot_plate())
    mesh, _ = local_mesh(model)
    monkeypatch.setattr(lp, "MAX_DEPTH", 0)
    problem = build_problem(model, mesh)
    assert problem.constraint is None
    assert any("made global" in w for w in problem.warnings)


@pytest.mark.parametrize("scheme", ["backward-euler", "crank-nicolson"])
def test_full_stepping_with_local_planes_stays_in_the_constrained_space(scheme):
    d = hot_spot_plate(duration_s=10.0, method="full")
    d["run"]["scheme"] = scheme
    model = solver.parse_model(d)
    mesh, _ = local_mesh(model)
    problem = build_problem(model, mesh)
    pc, free = problem.constraint
    last = None
    for ev in Stepper(problem):
        last = ev
    assert np.abs(pc @ last.field[free] - last.field).max() < 1e-9


@pytest.mark.parametrize("method", ["direct", "multigrid"])
def test_constrained_solvers_agree_with_a_dense_solve_of_the_galerkin_system(method):
    """Consistent capacity, a step matrix M/Δt + K: every solver method gives P (PᵀAP)⁻¹ Pᵀb as a
    dense numpy solve of the same small system does."""
    d = hot_spot_plate(board_mm=(16, 12, 1.6), chip_at=(3, 3), min_layers=1)
    d["run"]["mass"] = "consistent"
    model = solver.parse_model(d)
    mesh, _ = local_mesh(model)
    problem = build_problem(model, mesh)
    pc, free = problem.constraint
    a = problem.step_matrix(0.5, 1.0)
    b = problem.load(0.0) + problem.mass_matrix @ problem.initial / 0.5
    dense = pc @ np.linalg.solve((pc.T @ a @ pc).toarray(), pc.T @ b)
    s = make_solver(a, method, constraint=problem.constraint)
    try:
        x = s.solve(b, x0=problem.initial if s.iterative else None)
    finally:
        s.close()
    assert np.abs(x - dense).max() < 1e-6 * np.abs(dense).max()
    view = free_view(problem)  # the free view's capacity is PᵀMP of the consistent matrix
    assert abs(view.capacity - (pc.T @ problem.capacity @ pc)).max() < 1e-15


def two_spot_mesh(model):
    """Every interval bisected; the new planes active in two boxes, one around each corner of the
    board (x 0-10 and 30-40 mm), not between them."""

    def regions_for(a, u, v, new):
        boxes = np.full((len(new), 2, 4), np.nan)
        boxes[:, 0] = [-np.inf, np.inf, -np.inf, np.inf]
        if a != 0:  # new x-planes stay global; y- and z-planes get two boxes along x
            boxes[new, 0] = np.nan
            for k, (x0, x1) in enumerate(((0.0, 10.0), (30.0, 40.0))):
                boxes[new, k] = [x0, x1, -np.inf, np.inf]  # x is the first of the other two axes
        return boxes

    return bisected_mesh(model, regions_for)[0]


def test_planes_with_two_boxes_hang_between_them_and_reproduce_linear_fields():
    from solver.mesh.localplanes import active_masks

    model = solver.parse_model(hot_spot_plate())
    mesh = two_spot_mesh(model)
    lines_mm = [l / 1e-3 for l in mesh.lines]
    act = active_masks(lines_mm, mesh.regions)
    z_new = 1  # the first bisecting z-plane (between the two planned ones)
    x = lines_mm[0]
    on = act[2][:, :, z_new].any(axis=1)
    assert on[x <= 10.0].all() and on[(x >= 30.0)].all() and not on[(x > 10.5) & (x < 29.5)].any()
    p, free = prolongation(mesh, mesh.regions)
    assert len(free) < mesh.n_nodes
    xyz = mesh.nodes
    linear = 1.0 - 4.0 * xyz[:, 0] + 2.5 * xyz[:, 1] + 9.0 * xyz[:, 2]
    assert np.abs(p @ linear[free] - linear).max() < 1e-12


def test_refinement_boxes_follow_separate_hot_spots():
    """Two clusters of indicator in one slab give two boxes (scipy.ndimage connected
    components), not one box spanning the gap; too many boxes merge by least added area."""
    from solver.mesh.refinement import REGION_MARGIN_CELLS, _boxes_of, merge_boxes

    lines_u = np.arange(41, dtype=float)  # 40 cells of 1 mm
    lines_v = np.arange(31, dtype=float)
    w = np.zeros((40, 30))
    w[3:6, 4:7] = 1.0
    w[30:33, 20:24] = 2.0
    boxes = sorted(_boxes_of(w, lines_u, lines_v), key=lambda b: b[0])
    m = REGION_MARGIN_CELLS
    assert len(boxes) == 2
    assert np.allclose(boxes[0], [3 - m, 6 + m, 4 - m, 7 + m])
    assert np.allclose(boxes[1], [30 - m, 33 + m, 20 - m, 24 + m])
    three = [np.array([0, 1, 0, 1.0]), np.array([1, 2, 0, 1.0]), np.array([10, 11, 10, 11.0])]
    merged = sorted(merge_boxes(three, limit=2), key=lambda b: b[0])
    assert np.allclose(merged[0], [0, 2, 0, 1]) and np.allclose(merged[1], [10, 11, 10, 11])
    assert len(merge_boxes(three + [np.array([-np.inf, np.inf, -np.inf, np.inf])])) == 1


def test_radiating_reduced_run_on_free_unknowns_bounds_its_error_against_a_stiff_ode_solver():
    """Radiation with local planes: the reduced run (built and stepped on the free unknowns, the
    loss on the free nodes) against scipy's Radau integrator (stiff, error-controlled, rtol 1e-7) on
    the constrained Galerkin system C u' = PᵀF − PᵀKP u − Pᵀ R(P u). As for the global grid
    (tests/test_radiation.py), the run's own errors (basis estimate + step-halving time error)
    must bracket its distance from that reference at each part's peak."""
    from scipy.integrate import solve_ivp

    d = hot_spot_plate(duration_s=120.0, board_mm=(10, 8, 1.6), chip_at=(3, 3), min_layers=1)
    d["convection"][0]["emissivity"] = 0.9
    d["convection"].append({"name": "top", "part": "chip", "side": "z+", "h": 5.0, "emissivity": 0.85,
                            "surroundings_c": 10.0})
    d["heat_loads"][0]["profile"] = {"type": "constant", "value": 0.3}
    model = solver.parse_model(d)
    mesh, _ = local_mesh(model)
    problem = build_problem(model, mesh)
    assert problem.radiation is not None and problem.constraint is not None
    st = Stepper(problem, method="reduced")
    events = list(st)
    assert st.method == "reduced" and "radiation" in st.scheme and problem.n_free < 2500
    peak = np.max([ev.part_max for ev in events], axis=0)
    view = free_view(problem)
    c_inv = np.linalg.inv(view.capacity.toarray())
    a = c_inv @ view.stiffness.toarray()
    g = c_inv @ view.load(0.0)
    rad = view.radiation
    ts4 = rad.ts4(0.0)

    def rhs(_t, u):
        return g - a @ u - c_inv @ rad.node_flow(u, ts4)

    def jac(_t, u):
        return -a - c_inv * rad.slope(u)[None, :]  # C⁻¹ diag(slope): the loss sits on free nodes

    ref = solve_ivp(rhs, (0.0, 120.0), view.initial, method="Radau", jac=jac, rtol=1e-7, atol=1e-7,
                    t_eval=np.linspace(0.0, 120.0, 241))
    assert ref.success
    ref_peak = np.max([view.part_nodes.maxima(col) for col in ref.y.T], axis=0)
    err = np.abs(peak - ref_peak)
    bound = np.asarray(st.reduced_info.time_error_k) + st.reduced_info.error_estimate_k
    print("free", problem.n_free, "of", problem.n_nodes, "rise", peak.max() - 25.0, "err", err, "bound", bound)
    assert peak.max() - 25.0 > 20.0  # a real transient, radiating a share of the heat
    assert np.all(err <= bound), (err, bound)


def test_radiation_quadrature_moves_to_the_free_nodes_and_keeps_each_faces_area():
    """With local planes the grey-body loss is evaluated on the free nodes only (weights Pᵀw):
    each entry's weights still sum to εσ·(its area) (the area of the faces, from the box sizes),
    a uniform temperature radiates exactly what the fine-grid quadrature gives, and a smooth
    field within a small fraction of it (common practice, no source: moving nodal weights to the
    interpolation's nodes is a coarser nodal quadrature of the same integral)."""
    from solver.fem.radiation import SIGMA

    d = hot_spot_plate(board_mm=(12, 10, 1.6), chip_at=(3, 3), min_layers=1)
    d["convection"][0]["emissivity"] = 0.9
    model = solver.parse_model(d)
    mesh, lines = local_mesh(model)
    local = build_problem(model, mesh)
    fine = build_problem(model, build_mesh(model, lines_mm=lines))
    pc, free = local.constraint
    assert np.isin(local.radiation.nodes, free).all()
    assert len(np.unique(local.radiation.nodes)) < len(np.unique(fine.radiation.nodes))
    area = 12e-3 * 10e-3  # the board's underside, m²
    assert abs(local.radiation.weight.sum() - 0.9 * SIGMA * area) < 1e-12 * SIGMA * area
    ts4 = fine.radiation.ts4(0.0)
    uniform = np.full(fine.n_nodes, 80.0)
    assert abs(local.radiation.total(uniform, ts4) - fine.radiation.total(uniform, ts4)) < 1e-12
    x = mesh.nodes
    smooth = 60.0 + 2000.0 * x[:, 0] + 1500.0 * x[:, 1]  # 60-90 °C across the board
    a, b = local.radiation.total(smooth, ts4), fine.radiation.total(smooth, ts4)
    assert abs(a - b) < 1e-3 * abs(b), (a, b)
