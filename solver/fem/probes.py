"""Sensor points: find the tetrahedron that holds a point and its interpolation weights."""
from __future__ import annotations

import itertools

import numpy as np
import scipy.sparse as sp

from solver.mesh.mesher import KUHN_TETS, Mesh


def _barycentric(verts: np.ndarray, point: np.ndarray) -> np.ndarray:
    jac = (verts[1:] - verts[0]).T
    lam = np.linalg.solve(jac, point - verts[0])
    return np.concatenate([[1.0 - lam.sum()], lam])


def locate(mesh: Mesh, point_m) -> tuple | None:
    """(node ids (4,), weights (4,)) of the element holding ``point_m`` (m), or None if outside."""
    p = np.asarray(point_m, dtype=float)
    candidates = []
    for ax in range(3):
        lines = mesh.lines[ax]
        tol = 1e-9 * max(1.0, abs(lines[-1] - lines[0]))
        if p[ax] < lines[0] - tol or p[ax] > lines[-1] + tol:
            return None
        i = int(np.clip(np.searchsorted(lines, p[ax]) - 1, 0, len(lines) - 2))
        opts = {i}
        for j in (i - 1, i + 1):  # a point on a plane may belong to the cell on either side
            if 0 <= j < len(lines) - 1 and lines[j] - tol <= p[ax] <= lines[j + 1] + tol:
                opts.add(j)
        candidates.append(sorted(opts))
    for ci, cj, ck in itertools.product(*candidates):
        if mesh.cell_part[ci, cj, ck] < 0:
            continue
        corners = np.array([mesh.grid_node_id[ci + (c & 1), cj + ((c >> 1) & 1), ck + ((c >> 2) & 1)]
                            for c in range(8)])
        for tet in KUHN_TETS:
            ids = corners[tet]
            w = _barycentric(mesh.nodes[ids], p)
            if (w >= -1e-9).all():
                w = np.clip(w, 0.0, None)
                return ids, w / w.sum()
    return None


def probe_matrix(mesh: Mesh, points_m) -> tuple[sp.csr_matrix, list]:
    """(n_probes, N) interpolation matrix and the indices of points outside the solid."""
    rows, cols, vals, missing = [], [], [], []
    for k, pt in enumerate(points_m):
        hit = locate(mesh, pt)
        if hit is None:
            missing.append(k)
            continue
        ids, w = hit
        rows += [k] * 4
        cols += list(ids)
        vals += list(w)
    mat = sp.csr_matrix((vals, (rows, cols)), shape=(len(points_m), mesh.n_nodes))
    return mat, missing
