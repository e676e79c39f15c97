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


# ---------------------------------------------------------------- structured-grid fast path
#
# The mesher splits every box cell of a rectilinear grid into the same six Kuhn tetrahedra.
# A cell's 8×8 element matrices are therefore fixed templates scaled by the cell's sizes and
# material: K_cell = Σ_d k_d·(hx·hy·hz/h_d²)·S_d and M_cell = ρc·hx·hy·hz·T_m, with S_d and T_m
# integrated once over the unit cube. Each node couples to at most 15 stencil neighbours, so
# the CSR pattern and the CSR slot of every cell entry are computed once (:class:`GridPattern`)
# and every matrix is one np.bincount into that pattern. All matrices built on one pattern
# share ``indptr``/``indices``; sums such as M/Δt + θK are sums of ``data`` arrays.

CELL_CORNERS = np.array([[c & 1, (c >> 1) & 1, (c >> 2) & 1] for c in range(8)], dtype=np.int64)


def _cell_templates():
    """Unit-cube templates from the mesher's six tetrahedra: S (3, 8, 8), T_m (8, 8), corner shares (8,)."""
    from solver.mesh.mesher import KUHN_TETS

    stiff = np.zeros((3, 8, 8))
    mass = np.zeros((8, 8))
    vol, grads = tet_gradients(CELL_CORNERS.astype(float), KUHN_TETS)
    for t, tet in enumerate(KUHN_TETS):
        ix = np.ix_(tet, tet)
        for d in range(3):
            stiff[d][ix] += vol[t] * np.outer(grads[t, :, d], grads[t, :, d])
        mass[ix] += vol[t] * _CONSISTENT_TET
    return stiff, mass, mass.sum(axis=1)


_STIFF_T, _MASS_T, _CORNER_SHARE = _cell_templates()
# corner pairs (a, b) that share an edge of some tetrahedron (the diagonal included): 8 + 38
_PAIR_A, _PAIR_B = np.nonzero(np.abs(_MASS_T) > 0)
# the 15 stencil offsets (all components in {0, 1} or all in {0, -1}), in lexicographic order,
# which is also the order of node ids (ids follow the grid's C order)
_OFFSETS = sorted({tuple(int(v) for v in CELL_CORNERS[b] - CELL_CORNERS[a]) for a, b in zip(_PAIR_A, _PAIR_B)})
_OFFSET_CODE = np.full(27, -1, dtype=np.int64)
for _i, _o in enumerate(_OFFSETS):
    _OFFSET_CODE[(_o[0] + 1) * 9 + (_o[1] + 1) * 3 + (_o[2] + 1)] = _i
_PAIR_OFFSET = _OFFSET_CODE[((CELL_CORNERS[_PAIR_B] - CELL_CORNERS[_PAIR_A] + 1) * [9, 3, 1]).sum(axis=1)]
N_STENCIL = len(_OFFSETS)


def _shift(arr: np.ndarray, off) -> np.ndarray:
    """out[p] = arr[p + off] (zero/False where p + off leaves the array)."""
    out = np.zeros_like(arr)
    src = tuple(slice(max(o, 0), arr.shape[d] + min(o, 0)) for d, o in enumerate(off))
    dst = tuple(slice(max(-o, 0), arr.shape[d] + min(-o, 0)) for d, o in enumerate(off))
    out[dst] = arr[src]
    return out


class GridPattern:
    """CSR pattern of the P1 matrices of a structured mesh (node ids follow the grid's C order).

    The conduction matrix of the Kuhn split is a 7-point stencil (only axis edges couple), so
    the pattern holds the axis edges of the meshed cells, the edges of the convection triangles
    (``extra_pairs``), and every cell edge (15-point stencil) only when ``full`` is asked for
    (consistent capacity). ``slot(offset)`` gives the CSR position of (node, node + offset).
    """

    def __init__(self, mesh, full: bool = False, surface_tris=None):
        active = mesh.cell_part >= 0
        gid = mesh.grid_node_id
        self.grid_shape = gid.shape
        self.n = n = int(mesh.n_nodes)
        self.full = full
        ci, cj, ck = np.nonzero(active)
        self.cell_index = (ci, cj, ck)
        self.cell_part = mesh.cell_part[ci, cj, ck]
        self.used_flat = np.flatnonzero(gid.ravel() >= 0)  # grid position of each node id
        self._gid = gid
        pad = np.zeros(tuple(x + 2 for x in active.shape), dtype=bool)
        pad[1:-1, 1:-1, 1:-1] = active
        present = np.zeros((N_STENCIL, n), dtype=bool)
        for o in _OFFSETS:
            if o == (0, 0, 0) or min(o) < 0:
                continue
            if not full and sum(o) != 1:
                continue
            # edge (p, p + o) exists if a meshed cell holds both ends (cells c with c_d = p_d where
            # o_d = 1 and c_d in {p_d - 1, p_d} where o_d = 0)
            choices = [(0,) if od else (-1, 0) for od in o]
            edge = np.zeros(gid.shape, dtype=bool)
            for s0 in choices[0]:
                for s1 in choices[1]:
                    for s2 in choices[2]:
                        edge |= pad[1 + s0:1 + s0 + gid.shape[0], 1 + s1:1 + s1 + gid.shape[1],
                                    1 + s2:1 + s2 + gid.shape[2]]
            present[_OFFSETS.index(o)] = edge.ravel()[self.used_flat]
            back = _shift(edge, tuple(-v for v in o))  # edge (q - o, q) seen from q
            present[_OFFSETS.index(tuple(-v for v in o))] = back.ravel()[self.used_flat]
        present[_OFFSETS.index((0, 0, 0))] = True
        self._ijk = np.column_stack(np.unravel_index(self.used_flat, gid.shape)).astype(np.int64)
        if surface_tris is not None and len(surface_tris):
            codes, rows = self._triangle_codes(surface_tris)
            present[codes, rows] = True  # every ordered pair, so the pattern stays symmetric
        counts = np.count_nonzero(present, axis=0)
        self.nnz = int(counts.sum())
        itype = np.int32 if self.nnz < 2**31 - 1 else np.int64  # what scipy keeps without copying
        self.indptr = np.zeros(n + 1, dtype=itype)
        np.cumsum(counts, out=self.indptr[1:])
        # slot of (row, offset): rows' start plus the number of present offsets before it
        pos = np.full((N_STENCIL, n), -1, dtype=np.int64)
        run = self.indptr[:-1].astype(np.int64)
        for i in range(N_STENCIL):
            np.copyto(pos[i], run, where=present[i])
            run += present[i]
        self._slot_table = pos  # (15, N)
        self.indices = np.empty(self.nnz, dtype=itype)
        strides = np.array([gid.shape[1] * gid.shape[2], gid.shape[2], 1])
        gflat = gid.ravel()
        for i, o in enumerate(_OFFSETS):
            rows = np.flatnonzero(present[i])
            self.indices[pos[i, rows]] = gflat[self.used_flat[rows] + int(np.dot(o, strides))]
        self.diagonal = pos[_OFFSETS.index((0, 0, 0))].copy()
        self._cell_slots = None
        self._corners = None
        self._upper = None

    def _offset_codes(self, rows, cols):
        ri, ci = self._ijk[rows], self._ijk[cols]
        d = (ci[:, 0] - ri[:, 0]) * 9 + (ci[:, 1] - ri[:, 1]) * 3 + (ci[:, 2] - ri[:, 2]) + 13
        if len(d) and (d.min() < 0 or d.max() > 26):
            raise ValueError("node pair outside the stencil")
        o = _OFFSET_CODE[d]
        if (o < 0).any():
            raise ValueError("node pair outside the stencil")
        return o

    def _triangle_codes(self, tris: np.ndarray):
        """Offset codes and rows (T·9,) of every ordered node pair (a, b) of each triangle."""
        key = self._ijk[tris] @ np.array([9, 3, 1])  # (T, 3)
        a, b = np.meshgrid(np.arange(3), np.arange(3), indexing="ij")
        a, b = a.ravel(), b.ravel()
        d = (key[:, b] - key[:, a] + 13).ravel()
        if len(d) and (d.min() < 0 or d.max() > 26):
            raise ValueError("triangle outside the stencil")
        o = _OFFSET_CODE[d]
        if (o < 0).any():
            raise ValueError("triangle outside the stencil")
        return o, tris[:, a].ravel()

    def triangle_slots(self, tris: np.ndarray) -> np.ndarray:
        """(T, 9) CSR slots of the ordered node pairs (a, b), a, b = 0..2 of each triangle."""
        codes, rows = self._triangle_codes(tris)
        out = self._slot_table[codes, rows]
        if (out < 0).any():
            raise ValueError("triangle edge not in the pattern")
        return out.reshape(len(tris), 9)

    def slot(self, offset) -> np.ndarray:
        """(N,) CSR slot of (i, i + offset) for every node i, −1 where the pair is not stored."""
        return self._slot_table[_OFFSETS.index(tuple(offset))]

    def slots_of(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """CSR slots of arbitrary (row, col) node pairs that lie in the pattern."""
        out = self._slot_table[self._offset_codes(rows, cols), rows]
        if (out < 0).any():
            raise ValueError("node pair not in the pattern")
        return out

    @property
    def corners(self) -> np.ndarray:
        """(C, 8) node ids of the meshed cells' corners."""
        if self._corners is None:
            ci, cj, ck = self.cell_index
            corners = np.empty((len(ci), 8), dtype=np.int64)
            for c in range(8):
                a, b, cc = CELL_CORNERS[c]
                corners[:, c] = self._gid[ci + a, cj + b, ck + cc]
            self._corners = corners
        return self._corners

    @property
    def cell_slots(self) -> np.ndarray:
        """(C, 46) slot of each corner pair (:data:`_PAIR_A`, :data:`_PAIR_B`); needs ``full``."""
        if self._cell_slots is None:
            if not self.full:
                raise ValueError("cell slots need a full (15-point) pattern")
            self._cell_slots = self._slot_table[_PAIR_OFFSET[None, :], self.corners[:, _PAIR_A]]
        return self._cell_slots

    # ------------------------------------------------------------ building data arrays
    def scatter(self, values: np.ndarray) -> np.ndarray:
        """Sum per-cell pair values (C, 46) into a CSR ``data`` array (nnz,)."""
        return np.bincount(self.cell_slots.ravel(), weights=values.ravel(), minlength=self.nnz)

    def node_values(self, grid_array: np.ndarray) -> np.ndarray:
        """Values of a node-grid array (grid_shape) at the nodes, in node-id order."""
        return grid_array.ravel()[self.used_flat]

    def matrix(self, data: np.ndarray) -> sp.csr_matrix:
        """A CSR matrix on this pattern (shares ``indptr``/``indices``; no copy of ``data``)."""
        m = sp.csr_matrix((data, self.indices, self.indptr), shape=(self.n, self.n), copy=False)
        if m.indptr is not self.indptr or m.indices is not self.indices:  # pragma: no cover - scipy changed
            m.indptr, m.indices = self.indptr, self.indices
        m.has_sorted_indices = True
        m.has_canonical_format = True
        return m

    def upper(self):
        """(indptr, indices, take) of the upper triangle (j ≥ i): ``data[take]`` are its values."""
        if self._upper is None:
            rows = np.repeat(np.arange(self.n, dtype=np.int64), np.diff(self.indptr))
            keep = self.indices >= rows
            take = np.flatnonzero(keep)
            indptr = np.zeros(self.n + 1, dtype=self.indptr.dtype)
            np.cumsum(np.bincount(rows[keep], minlength=self.n), out=indptr[1:])
            self._upper = (indptr, self.indices[take], take)
        return self._upper


def cell_sizes(mesh, pattern: GridPattern):
    """Cell edge lengths (C, 3) in m of the meshed cells, in pattern order."""
    ci, cj, ck = pattern.cell_index
    dx, dy, dz = (np.diff(l) for l in mesh.lines)
    return np.column_stack([dx[ci], dy[cj], dz[ck]])


def _cell_grid(pattern: GridPattern, values: np.ndarray) -> np.ndarray:
    """Per-cell values (C,) on the full cell grid (zero in empty cells)."""
    shape = tuple(x - 1 for x in pattern.grid_shape)
    out = np.zeros(shape)
    out[pattern.cell_index] = values
    return out


def grid_conductivity_data(pattern: GridPattern, h: np.ndarray, k_cell: np.ndarray) -> np.ndarray:
    """``data`` of ∫ ∇Nᵢ·diag(k)∇Nⱼ dV; ``h`` (C, 3) m, ``k_cell`` (C, 3) W/(m·K).

    On the Kuhn split only axis edges couple: each cell gives its four edges along axis d the
    conductance w_d·s with w_d = k_d·hx·hy·hz/h_d² and s from the unit-cube template (1/3 on the
    two edges on the split diagonal's ends, 1/6 on the other two).
    """
    vol = h.prod(axis=1)
    data = np.zeros(pattern.nnz)
    diag = np.zeros(pattern.grid_shape)
    for d in range(3):
        w = _cell_grid(pattern, k_cell[:, d] * vol / (h[:, d] * h[:, d]))
        # conductance of the edge from node p to p + e_d, on the node grid
        g = np.zeros(pattern.grid_shape)
        u, v = [x for x in range(3) if x != d]
        for cu in (0, 1):
            for cv in (0, 1):
                a = int(cu * (1 << u) + cv * (1 << v))  # cell corner at the edge's start
                coef = -_STIFF_T[d][a, a + (1 << d)]
                sl = [slice(None)] * 3
                sl[d] = slice(0, w.shape[d])
                sl[u] = slice(cu, cu + w.shape[u])
                sl[v] = slice(cv, cv + w.shape[v])
                g[tuple(sl)] += coef * w
        e = [0, 0, 0]
        e[d] = 1
        fwd = pattern.slot(tuple(e))
        back = pattern.slot(tuple(-x for x in e))
        g_nodes = pattern.node_values(g)
        g_back = pattern.node_values(_shift(g, tuple(-x for x in e)))
        ok = fwd >= 0
        data[fwd[ok]] = -g_nodes[ok]
        ok = back >= 0
        data[back[ok]] = -g_back[ok]
        diag += g
        diag += _shift(g, tuple(-x for x in e))
    data[pattern.diagonal] = pattern.node_values(diag)
    return data


def grid_capacity_data(pattern: GridPattern, h: np.ndarray, rho_c: np.ndarray) -> np.ndarray:
    """``data`` of the consistent capacity ∫ ρc NᵢNⱼ dV, ``rho_c`` (C,) J/(m³·K)."""
    w = rho_c * h.prod(axis=1)
    return pattern.scatter(w[:, None] * _MASS_T[_PAIR_A, _PAIR_B][None, :])


def grid_lumped_capacity(pattern: GridPattern, h: np.ndarray, rho_c: np.ndarray) -> np.ndarray:
    """Row-sum lumped capacity (N,) in J/K."""
    w = _cell_grid(pattern, rho_c * h.prod(axis=1))
    acc = np.zeros(pattern.grid_shape)
    for c in range(8):
        a, b, cc = CELL_CORNERS[c]
        acc[a:a + w.shape[0], b:b + w.shape[1], cc:cc + w.shape[2]] += _CORNER_SHARE[c] * w
    return pattern.node_values(acc)


def grid_volume_shares(pattern: GridPattern, h: np.ndarray, n_groups: int, blocks=None) -> sp.csr_matrix:
    """(n_groups, N) ∫ Nᵢ dV over each part's cells divided by the part volume (rows sum to one).

    ``blocks`` (optional) gives each part's cell-index box (three slices) to limit the work to
    it; without it every part scans the whole grid.
    """
    vol = h.prod(axis=1)
    group_vol = np.bincount(pattern.cell_part, weights=vol, minlength=n_groups)
    vol_grid = _cell_grid(pattern, vol)
    part_grid = np.full(vol_grid.shape, -1, dtype=np.int64)
    part_grid[pattern.cell_index] = pattern.cell_part
    full = tuple(slice(0, n) for n in vol_grid.shape)
    indptr, indices, data = [0], [], []
    for g in range(n_groups):
        sl = blocks[g] if blocks is not None else full
        if group_vol[g] <= 0:
            indptr.append(indptr[-1])
            continue
        w = np.where(part_grid[sl] == g, vol_grid[sl], 0.0) / group_vol[g]
        acc = np.zeros(tuple(x + 1 for x in w.shape))
        for c in range(8):
            a, b, cc = CELL_CORNERS[c]
            acc[a:a + w.shape[0], b:b + w.shape[1], cc:cc + w.shape[2]] += _CORNER_SHARE[c] * w
        node_sl = tuple(slice(x.start, x.stop + 1) for x in sl)
        nz = acc > 0
        ids = pattern._gid[node_sl][nz]  # C order in the block = increasing node id
        indices.append(ids)
        data.append(acc[nz])
        indptr.append(indptr[-1] + len(ids))
    idx = np.concatenate(indices) if indices else np.zeros(0, dtype=np.int64)
    val = np.concatenate(data) if data else np.zeros(0)
    return sp.csr_matrix((val, idx, np.array(indptr)), shape=(n_groups, pattern.n))


def grid_surface_data(pattern: GridPattern, tris: np.ndarray, h: np.ndarray, area: np.ndarray) -> np.ndarray:
    """``data`` of ∫ h NᵢNⱼ dA over boundary triangles (the pattern must hold their edges)."""
    slots = pattern.triangle_slots(tris)
    vals = (h * area)[:, None] * _SURFACE_TRI.ravel()[None, :]
    return np.bincount(slots.ravel(), weights=vals.ravel(), minlength=pattern.nnz)
