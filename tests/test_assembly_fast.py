"""The structured-grid assembly (fixed CSR pattern + bincount) against the plain element route.

The reference is the textbook P1 route: per-tetrahedron matrices from the shape-function
gradients, summed by scipy's coo→csr conversion. Both must agree to round-off on a graded,
multi-material, orthotropic, partly hollow model.
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

import solver
from solver.fem import assemble
from solver.mesh.mesher import convection_face_mask
from solver.fem.problem import material_arrays

ROUNDOFF = 1e-12


def _model(mass="consistent"):
    d = {
        "format": "thermgui-model", "version": 1, "title": "assembly check (invented)",
        "materials": {"ortho": {"conductivity": [3.0, 0.5, 7.0], "density": 1500.0, "specific_heat": 900.0}},
        "parts": [
            {"name": "tray", "material": "aluminium-6061", "origin_mm": [0, 0, 0], "size_mm": [30, 20, 2]},
            {"name": "post", "material": "copper", "origin_mm": [4, 4, 2], "size_mm": [3, 5, 6]},
            {"name": "slab", "material": "ortho", "origin_mm": [0, 0, 8], "size_mm": [30, 20, 1.5]},
            {"name": "chip", "material": "silicon", "origin_mm": [12, 7, 9.5], "size_mm": [5, 4, 0.7]},
        ],
        "heat_loads": [{"part": "chip", "profile": {"type": "constant", "value": 2.0}}],
        "convection": [{"name": "top", "part": "slab", "side": "z+", "h": 12.0},
                       {"name": "all tray", "part": "tray", "side": "exposed", "h": 5.0}],
        "mesh": {"cell_mm": 3.0, "min_layers": 2},
        "run": {"duration_s": 10, "step_s": 1, "scheme": "backward-euler", "mass": mass},
    }
    return solver.parse_model(d)


def _rel(a, b):
    diff = abs(a - b).max() if sp.issparse(a) else np.abs(a - b).max()
    scale = abs(b).max() if sp.issparse(b) else np.abs(b).max()
    return diff / scale


@pytest.mark.parametrize("mass", ["consistent", "lumped"])
def test_grid_matrices_equal_element_route(mass):
    model = _model(mass)
    problem = solver.build_problem(model)
    mesh = problem.mesh
    assert mesh.cell_part.size > (mesh.cell_part >= 0).sum()  # the model has empty cells
    vol, grads = assemble.tet_gradients(mesh.nodes, mesh.tets)
    k_el, rc_el = material_arrays(model, mesh.tet_part)
    k_ref = assemble.conductivity_matrix(mesh.nodes, mesh.tets, k_el, vol, grads)
    m_ref = assemble.capacity_matrix(mesh.nodes, mesh.tets, rc_el, vol)
    lumped_ref = assemble.lumped_capacity(mesh.nodes, mesh.tets, rc_el, vol)
    shares_ref = assemble.node_volume_shares(mesh.nodes, mesh.tets, vol, mesh.tet_part, len(model.parts))
    tris = np.vstack([mesh.boundary.tris[convection_face_mask(mesh, model, i)] for i in range(2)])
    hs = np.concatenate([np.full(convection_face_mask(mesh, model, i).sum() * 1, c.h)
                         for i, c in enumerate(model.convection)])
    conv_ref = assemble.surface_matrix(mesh.nodes, tris, hs)

    assert _rel(problem.conductivity, k_ref) < ROUNDOFF
    if mass == "consistent":
        assert _rel(problem.capacity, m_ref) < ROUNDOFF
    else:
        assert problem.capacity is None
        # the lumped pattern keeps only axis edges (+ convection faces): the 7-point stencil
        assert problem.pattern.nnz < 0.75 * m_ref.nnz
    assert _rel(problem.convection, conv_ref) < ROUNDOFF
    np.testing.assert_allclose(problem.lumped, lumped_ref, rtol=ROUNDOFF)
    assert _rel(problem.heat_shares, shares_ref) < ROUNDOFF
    # the matrices share one canonical CSR pattern (sorted columns, no duplicates)
    for m in (problem.conductivity, problem.capacity, problem.convection, problem.stiffness):
        if m is None:
            continue
        assert m.indptr is problem.pattern.indptr and m.indices is problem.pattern.indices
        check = m.copy()
        check.has_sorted_indices = False
        check.sort_indices()
        np.testing.assert_array_equal(check.indices, m.indices)
        assert m.nnz == sp.csr_matrix(m.toarray()).nnz + np.count_nonzero(m.data == 0)
    # pattern symmetric, matrices symmetric
    assert abs(problem.stiffness - problem.stiffness.T).max() < ROUNDOFF * abs(problem.stiffness).max()


def test_step_matrix_from_data_arrays():
    model = _model()
    problem = solver.build_problem(model)
    dt, theta = 0.37, 0.5
    ref = (problem.capacity / dt + theta * (problem.conductivity + problem.convection)).tocsr()
    assert _rel(problem.step_matrix(dt, theta), ref) < ROUNDOFF
    lumped = solver.build_problem(model.model_copy(update={"run": model.run.model_copy(update={"mass": "lumped"})}))
    ref_l = (sp.diags(lumped.lumped) / dt + theta * lumped.stiffness).tocsr()
    assert _rel(lumped.step_matrix(dt, theta), ref_l) < ROUNDOFF


def test_upper_triangle_and_pattern_lookup():
    problem = solver.build_problem(_model())
    pat = problem.pattern
    indptr, indices, take = pat.upper()
    up = sp.csr_matrix((problem.stiffness.data[take], indices, indptr), shape=problem.stiffness.shape)
    assert _rel(up, sp.triu(problem.stiffness).tocsr()) < ROUNDOFF
    # slot lookup agrees with the CSR layout for every stored entry
    rows = np.repeat(np.arange(pat.n), np.diff(pat.indptr))
    np.testing.assert_array_equal(pat.slots_of(rows, pat.indices.astype(np.int64)), np.arange(pat.nnz))


def test_load_and_convected_out_match_direct_sums():
    problem = solver.build_problem(_model())
    d = np.linspace(20.0, 60.0, problem.n_nodes)
    f = problem.load(3.0)
    ref = problem.heat_shares_t @ np.array([2.0 if i == 3 else 0.0 for i in range(4)])
    ref = ref + sum(25.0 * b for b, _ in problem.conv_loads)
    np.testing.assert_allclose(f, ref, rtol=1e-12, atol=1e-15)
    out = sum(b @ d - 25.0 * b.sum() for b, _ in problem.conv_loads)
    assert abs(problem.convected_out(d, 3.0) - out) < 1e-12 * abs(out)
