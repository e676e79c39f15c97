"""P1 matrices of the engine against scikit-fem on the same tetrahedra.

Outside reference: scikit-fem (``MeshTet``, ``ElementTetP1``, ``Basis``, ``FacetBasis``),
assembling the same bilinear forms with its own quadrature. Differences must be round-off.
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

skfem = pytest.importorskip("skfem")
from skfem import Basis, BilinearForm, ElementTetP1, FacetBasis, LinearForm, MeshTet, asm  # noqa: E402
from skfem.helpers import dot  # noqa: E402

from solver.fem import assemble  # noqa: E402
from solver.mesh.mesher import MM, build_mesh  # noqa: E402
from solver.fem.problem import material_arrays  # noqa: E402

from modelkit import model_dict, part, problem_of  # noqa: E402

ROUNDOFF = 1e-12


def _multi_part_dict(mass="consistent"):
    """Three materials (one orthotropic), an overlap, a gap (empty cells) and several convection entries."""
    materials = {
        "ortho": {"conductivity": [3.0, 0.5, 12.0], "density": 1900.0, "specific_heat": 1100.0},
        "soft": {"conductivity": 0.2, "density": 1200.0, "specific_heat": 1500.0},
    }
    parts = [
        part("plate", "aluminium-6061", (0, 0, 0), (30, 20, 3)),
        part("board", "ortho", (4, 3, 3), (20, 14, 1.6)),
        part("chip", "soft", (10, 6, 4.6), (6, 5, 1.2)),
        part("block", "copper", (24, 12, 2), (6, 8, 4)),  # overlaps the plate (later part wins)
    ]
    conv = [
        {"name": "bottom", "part": "plate", "side": "z-", "h": 15.0},
        {"name": "top", "part": "plate", "side": "z+", "h": 7.0},
        {"name": "chip", "part": "chip", "side": "exposed", "h": 30.0, "ambient_c": 40.0},
        {"name": "block x", "part": "block", "side": "x+", "h": 55.0},
    ]
    return model_dict(parts, materials, convection=conv, cell_mm=3.0, min_layers=2, mass=mass,
                      heat_loads=[{"part": "chip", "profile": {"type": "constant", "value": 1.0}}])


@pytest.fixture(scope="module")
def case():
    model, problem = problem_of(_multi_part_dict())
    mesh = problem.mesh
    sk = MeshTet(np.ascontiguousarray(mesh.nodes.T), np.ascontiguousarray(mesh.tets.T))
    return model, problem, sk


def _rel(a, b) -> float:
    a = a.toarray() if sp.issparse(a) else np.asarray(a)
    b = b.toarray() if sp.issparse(b) else np.asarray(b)
    return float(np.linalg.norm(a - b) / np.linalg.norm(b))


def _elementwise(basis, values):
    """Per-element constants as an (elements, quadrature points) array for skfem forms."""
    return np.repeat(np.asarray(values, dtype=float)[:, None], basis.X.shape[1], axis=1)


def test_mesh_is_conforming_and_oriented(case):
    """Every interior triangle is shared by exactly two tets, boundary ones by one; volumes > 0."""
    model, problem, sk = case
    mesh = problem.mesh
    faces = np.sort(mesh.tets[:, [[0, 1, 2], [0, 1, 3], [0, 2, 3], [1, 2, 3]]].reshape(-1, 3), axis=1)
    _, counts = np.unique(faces, axis=0, return_counts=True)
    assert set(np.unique(counts)) <= {1, 2}
    # faces used once are exactly the boundary triangles reported by the mesher
    once = {tuple(f) for f, c in zip(*np.unique(faces, axis=0, return_counts=True)) if c == 1}
    ours = {tuple(f) for f in np.sort(mesh.boundary.tris, axis=1)}
    assert once == ours
    # scikit-fem finds the same boundary
    sk_bnd = {tuple(f) for f in np.sort(sk.facets[:, sk.boundary_facets()].T, axis=1)}
    assert sk_bnd == ours
    # signed volumes: positive (VTK's tetra convention: 0,1,2 counter-clockwise seen from 3)
    x = mesh.nodes[mesh.tets]
    signed = np.linalg.det(np.stack([x[:, 1] - x[:, 0], x[:, 2] - x[:, 0], x[:, 3] - x[:, 0]], axis=1)) / 6.0
    assert signed.min() > 0
    # tets fill exactly the volume the parts hold after overlaps (box arithmetic)
    boxes = sum(np.prod(p.size_mm) for p in model.parts) * MM**3
    overlap = 6 * 8 * 1 * MM**3  # block ∩ plate: x 24..30, y 12..20, z 2..3
    assert abs(signed.sum() - (boxes - overlap)) < 1e-12 * boxes
    np.testing.assert_allclose(mesh.part_volume().sum(), boxes - overlap, rtol=1e-12)


def test_conductivity_matches_skfem(case):
    model, problem, sk = case
    basis = Basis(sk, ElementTetP1())
    k_el, _ = material_arrays(model, problem.mesh.tet_part)
    assert len(np.unique(k_el, axis=0)) == 4  # four materials incl. one orthotropic

    @BilinearForm
    def cond(u, v, w):
        g, h = u.grad, v.grad
        return w.kx * g[0] * h[0] + w.ky * g[1] * h[1] + w.kz * g[2] * h[2]

    ref = asm(cond, basis, kx=_elementwise(basis, k_el[:, 0]), ky=_elementwise(basis, k_el[:, 1]),
              kz=_elementwise(basis, k_el[:, 2]))
    assert _rel(problem.conductivity, ref) < ROUNDOFF
    # isotropic sanity of the form itself: with k = 1 it is the Laplacian
    lap = asm(BilinearForm(lambda u, v, w: dot(u.grad, v.grad)), basis)
    ones = np.ones((len(k_el), 3))
    assert _rel(assemble.conductivity_matrix(problem.mesh.nodes, problem.mesh.tets, ones), lap) < ROUNDOFF


def test_capacity_consistent_and_lumped_match_skfem(case):
    model, problem, sk = case
    basis = Basis(sk, ElementTetP1())
    _, rc_el = material_arrays(model, problem.mesh.tet_part)

    @BilinearForm
    def mass(u, v, w):
        return w.rc * u * v

    ref = asm(mass, basis, rc=_elementwise(basis, rc_el))
    assert problem.capacity is not None
    assert _rel(problem.capacity, ref) < ROUNDOFF
    ref_lumped = np.asarray(ref.sum(axis=1)).ravel()
    assert _rel(problem.lumped, ref_lumped) < ROUNDOFF
    # and mass_matrix of a lumped run is that diagonal
    _, lumped_problem = problem_of(_multi_part_dict(mass="lumped"))
    assert lumped_problem.capacity is None
    assert _rel(lumped_problem.mass_matrix, sp.diags(ref_lumped)) < ROUNDOFF


def _facet_ids(sk, tris):
    """scikit-fem facet index of each of our boundary triangles."""
    lookup = {tuple(f): i for i, f in enumerate(np.sort(sk.facets.T, axis=1))}
    return np.array([lookup[tuple(t)] for t in np.sort(tris, axis=1)])


def test_convection_matrix_and_load_match_skfem(case):
    model, problem, sk = case
    from solver.mesh.mesher import convection_face_mask

    bf = problem.mesh.boundary
    h_face = np.zeros(len(bf.tris))
    amb_face = np.zeros(len(bf.tris))
    for i, c in enumerate(model.convection):
        mask = convection_face_mask(problem.mesh, model, i)
        assert mask.any()
        h_face[mask] += c.h
        amb_face[mask] += c.h * (c.ambient_c.value if c.ambient_c is not None else model.ambient_c)
    sel = h_face > 0
    ids = _facet_ids(sk, bf.tris[sel])
    fb = FacetBasis(sk, ElementTetP1(), facets=ids)
    nq = fb.X.shape[-1]

    @BilinearForm
    def robin(u, v, w):
        return w.h * u * v

    @LinearForm
    def robin_load(v, w):
        return w.ha * v

    per_q = lambda vals: np.repeat(vals[:, None], nq, axis=1)  # noqa: E731
    ref = asm(robin, fb, h=per_q(h_face[sel]))
    assert _rel(problem.convection, ref) < ROUNDOFF
    ref_f = asm(robin_load, fb, ha=per_q(amb_face[sel]))
    ours_f = sum(b * amb.value(0.0) for b, amb in problem.conv_loads)
    assert _rel(ours_f, ref_f) < ROUNDOFF
    # areas the mesher reports are the true triangle areas
    np.testing.assert_allclose(bf.area, assemble.triangle_areas(problem.mesh.nodes, bf.tris), rtol=1e-12)


def test_heat_load_vector_matches_skfem(case):
    """∫ q Nᵢ dV with q = P/V_part on the chip's tets (uniform volumetric source)."""
    model, problem, sk = case
    chip = model.part_index("chip")
    tets = np.nonzero(problem.mesh.tet_part == chip)[0]
    basis = Basis(sk, ElementTetP1(), elements=tets)
    vol = np.prod(model.parts[chip].size_mm) * MM**3
    ref = asm(LinearForm(lambda v, w: v / vol), basis)
    conv_part = sum(b * amb.value(0.0) for b, amb in problem.conv_loads)
    assert _rel(problem.load(0.0) - conv_part, ref) < ROUNDOFF


def test_mesh_built_directly_matches_problem(case):
    """build_mesh on the parsed model reproduces the problem's mesh (no hidden state)."""
    model, problem, _ = case
    mesh = build_mesh(model)
    np.testing.assert_array_equal(mesh.tets, problem.mesh.tets)
    np.testing.assert_array_equal(mesh.nodes, problem.mesh.nodes)
