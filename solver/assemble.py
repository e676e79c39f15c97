"""Vectorized P1 (linear tetrahedron) finite-element matrices. SI units throughout.

All functions work on every element at once with numpy; nothing loops over elements.
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp


def tet_gradients(nodes: np.ndarray, tets: np.ndarray):
    """Volumes (E,) in m³ and shape-function gradients (E, 4, 3) in 1/m."""
    x = nodes[tets]  # (E, 4, 3)
    jac = np.transpose(x[:, 1:, :] - x[:, :1, :], (0, 2, 1))  # columns are edge vectors
    det = np.linalg.det(jac)
    inv = np.linalg.inv(jac)  # rows are gradients of barycentric coordinates 1..3
    grads = np.empty((len(tets), 4, 3))
    grads[:, 1:, :] = inv
    grads[:, 0, :] = -inv.sum(axis=1)
    return np.abs(det) / 6.0, grads


def _scatter(rows: np.ndarray, data: np.ndarray, n: int) -> sp.csr_matrix:
    """Sum element blocks (E, k, k) with node ids (E, k) into an n×n CSR matrix."""
    k = rows.shape[1]
    r = np.repeat(rows, k, axis=1).ravel()
    c = np.tile(rows, (1, k)).ravel()
    m = sp.coo_matrix((data.ravel(), (r, c)), shape=(n, n)).tocsr()
    m.sum_duplicates()
    return m


def conductivity_matrix(nodes, tets, k_diag, vol=None, grads=None) -> sp.csr_matrix:
    """∫ ∇Nᵢ·diag(k)∇Nⱼ dV with per-element diagonal conductivity ``k_diag`` (E, 3) in W/(m·K)."""
    if vol is None or grads is None:
        vol, grads = tet_gradients(nodes, tets)
    ke = np.einsum("ead,ebd,ed,e->eab", grads, grads, k_diag, vol, optimize=True)
    return _scatter(tets, ke, len(nodes))


_CONSISTENT_TET = (np.ones((4, 4)) + np.eye(4)) / 20.0


def capacity_matrix(nodes, tets, rho_c, vol=None) -> sp.csr_matrix:
    """Consistent capacity ∫ ρc NᵢNⱼ dV, ``rho_c`` (E,) in J/(m³·K)."""
    if vol is None:
        vol, _ = tet_gradients(nodes, tets)
    me = (rho_c * vol)[:, None, None] * _CONSISTENT_TET[None]
    return _scatter(tets, me, len(nodes))


def lumped_capacity(nodes, tets, rho_c, vol=None) -> np.ndarray:
    """Row-sum lumped capacity (N,) in J/K: each node gets a quarter of each element's ρcV."""
    if vol is None:
        vol, _ = tet_gradients(nodes, tets)
    return np.bincount(tets.ravel(), weights=np.repeat(rho_c * vol / 4.0, 4), minlength=len(nodes))


def node_volume_shares(nodes, tets, vol, groups, n_groups) -> sp.csr_matrix:
    """(n_groups, N) matrix of ∫ Nᵢ dV over each group's elements, divided by the group volume.

    Each row sums to one: multiplying a row by watts spreads them uniformly over the group.
    """
    group_vol = np.bincount(groups, weights=vol, minlength=n_groups)
    w = np.repeat(vol / 4.0, 4)
    rows = np.repeat(groups, 4)
    shares = sp.coo_matrix((w, (rows, tets.ravel())), shape=(n_groups, len(nodes))).tocsr()
    shares.sum_duplicates()
    scale = np.divide(1.0, group_vol, out=np.zeros_like(group_vol), where=group_vol > 0)
    return sp.diags(scale) @ shares


def triangle_areas(nodes, tris) -> np.ndarray:
    x = nodes[tris]
    return 0.5 * np.linalg.norm(np.cross(x[:, 1] - x[:, 0], x[:, 2] - x[:, 0]), axis=1)


_SURFACE_TRI = (np.ones((3, 3)) + np.eye(3)) / 12.0


def surface_matrix(nodes, tris, h, area=None) -> sp.csr_matrix:
    """Convection term ∫ h NᵢNⱼ dA over boundary triangles, ``h`` (F,) in W/(m²·K)."""
    if area is None:
        area = triangle_areas(nodes, tris)
    he = (h * area)[:, None, None] * _SURFACE_TRI[None]
    return _scatter(tris, he, len(nodes))


def surface_load(nodes, tris, h, area=None) -> np.ndarray:
    """∫ h Nᵢ dA (N,) in W/K: times the ambient temperature it is the convection load."""
    if area is None:
        area = triangle_areas(nodes, tris)
    return np.bincount(tris.ravel(), weights=np.repeat(h * area / 3.0, 3), minlength=len(nodes))
