"""What-if by superposition: scaled heat loads and a shifted ambient from stored unit responses.

The model is linear, so its response is the sum of the responses to each piece of its input,
each computed once in one reduced basis V (capacity-orthonormal, :mod:`solver.transient.krylov`) and
integrated exactly in time (:mod:`solver.transient.modal`) on the run's sample grid:

    T(t) = T_init(t) + Σⱼ sⱼ·T_load j(t) + T_ambients(t) + ΔT·T_shift(t)

``T_init``: the initial field decaying with no load and 0 °C ambient; ``T_load j``: heat load j as
its profile says, from 0 °C; ``T_ambients``: every ambient as the file says; ``T_shift``: every
ambient raised by 1 K from t = 0 (initial temperatures unchanged). ``sⱼ`` and ``ΔT`` are the
what-if's scale factors and ambient offset. The basis grows (blocks of one factorization) until
two successive bases agree within 0.01 K on every part's maximum of every component at every
sample, and on every node at a spread of samples.

Peaks, first crossings and history are then evaluated on candidate nodes (:func:`evaluate`) and
written as ``peaks.csv`` and ``history.csv``. Radiation (emissivity) makes the model nonlinear; it is refused.
"""
from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from solver.errors import ModelError
from solver.transient.krylov import KrylovBasis, mass_times
from solver.transient.modal import ModalSystem
from solver.transient.reduced import SampleGrid, candidate_part_maxima, event_indices, hottest_nodes
from solver.answers.unitresponse import require_linear

TOL_K = 0.01
MIN_BLOCKS = 4
MAX_BLOCKS = 20
CACHE_NAME = "unit-responses.npz"
CACHE_VERSION = 1


def model_digest(model) -> str:
    return hashlib.sha256(json.dumps(model.model_dump(mode="json"), sort_keys=True).encode()).hexdigest()


@dataclass
class UnitResponses:
    v: np.ndarray  # (N, r) basis
    q_init: np.ndarray  # (r, S) coordinates at the samples
    q_loads: np.ndarray  # (L, r, S) one per heat load
    q_amb: np.ndarray  # (r, S)
    q_shift: np.ndarray  # (r, S)
    times: np.ndarray  # (S,)
    is_output: np.ndarray  # (S,) bool
    change_k: float = float("nan")

    def coordinates(self, scales, ambient_offset: float = 0.0) -> np.ndarray:
        s = np.asarray(scales, dtype=float)
        if len(s) < self.q_loads.shape[0]:  # surface loads follow the heat loads and are not scaled
            s = np.concatenate([s, np.ones(self.q_loads.shape[0] - len(s))])
        q = self.q_init + self.q_amb + float(ambient_offset) * self.q_shift
        if len(s):
            q = q + np.tensordot(s, self.q_loads, axes=1)
        return q

    def save(self, path: Path, digest: str) -> None:
        tmp = path.with_name(path.name + ".part.npz")
        np.savez(tmp, version=CACHE_VERSION, digest=digest, v=self.v, q_init=self.q_init, q_loads=self.q_loads,
                 q_amb=self.q_amb, q_shift=self.q_shift, times=self.times, is_output=self.is_output,
                 change_k=self.change_k)
        tmp.replace(path)

    @classmethod
    def load(cls, path: Path, digest: str):
        """The stored responses, or None when missing, unreadable or for another model."""
        try:
            with np.load(path) as f:
                if int(f["version"]) != CACHE_VERSION or str(f["digest"]) != digest:
                    return None
                return cls(f["v"], f["q_init"], f["q_loads"], f["q_amb"], f["q_shift"], f["times"],
                           f["is_output"].astype(bool), float(f["change_k"]))
        except (OSError, KeyError, ValueError):
            return None


def _coords(modal: ModalSystem, grid: SampleGrid, c0, c1, z0=None) -> np.ndarray:
    if z0 is not None:
        modal.z0 = z0
    else:
        modal.z0 = np.zeros(len(modal.lam))
    z, _ = modal.propagate(grid.t0, grid.t1, c0, c1)
    return modal.coordinates(z)


def _components(problem, modal: ModalSystem, grid: SampleGrid, v: np.ndarray, n_heat: int):
    """Coordinates (r, S) of every component: initial field, each heat load, ambients, unit shift."""
    q_init = _coords(modal, grid, 0 * grid.c0, 0 * grid.c1,
                     modal.phi.T @ (v.T @ mass_times(problem, problem.initial.astype(float))))
    q_loads = []
    for j in range(n_heat):
        m0, m1 = np.zeros_like(grid.c0), np.zeros_like(grid.c1)
        m0[:, j], m1[:, j] = grid.c0[:, j], grid.c1[:, j]
        q_loads.append(_coords(modal, grid, m0, m1))
    a0, a1 = grid.c0.copy(), grid.c1.copy()
    a0[:, :n_heat] = 0.0
    a1[:, :n_heat] = 0.0
    q_amb = _coords(modal, grid, a0, a1)
    u0 = np.zeros_like(grid.c0)
    u0[:, n_heat:] = 1.0
    q_shift = _coords(modal, grid, u0, u0)
    return UnitResponses(v, q_init, np.array(q_loads).reshape(n_heat, v.shape[1], -1), q_amb, q_shift,
                         grid.times, grid.is_output)


def check_whatif(model) -> None:
    """ModelError naming the field where a what-if by superposition does not hold: radiation
    (:func:`solver.answers.unitresponse.require_linear`, and whatever nonlinearity it refuses), and a
    settled cycle (``run.periodic``: its start state depends on the loads, so it cannot be kept)."""
    require_linear(model)
    if getattr(model.run, "periodic", False):
        raise ModelError(("run.periodic", "a settled cycle starts from a state that depends on the loads, so "
                                          "scaled loads cannot be superposed on it; set it to false for a what-if"))


def prepare_unit_responses(problem, linear_solver: str = "auto", progress=None, cancel=None) -> UnitResponses:
    """:func:`compute_unit_responses` with the linear solver the run would choose for this size
    (``auto``: PARDISO in double precision while it fits, else multigrid). ``cancel()`` → True
    stops before the next basis block (:class:`~solver.errors.Cancelled`)."""
    from solver.linalg.linsolve import choose_method

    check_whatif(problem.model)
    method = choose_method(problem.n_free, linear_solver).method
    return compute_unit_responses(problem, "pardiso" if method == "pardiso-single" else method,
                                  progress=progress, cancel=cancel)


def compute_unit_responses(problem, method: str = "pardiso", tol_k: float = TOL_K, progress=None,
                           cancel=None) -> UnitResponses:
    """Grow a basis from the model's load patterns and integrate every component (module doc).

    Each check compares two successive bases on every component at every sample on watched
    nodes (each component's hottest nodes, found over all nodes at the outputs and 60 spread
    samples); once within ``tol_k`` the watched nodes are found again on the new basis and the
    comparison is confirmed on every node at those samples."""
    from solver.transient.reduced import ProjectedRun

    require_linear(problem.model)
    run = problem.model.run
    grid = SampleGrid(problem)
    n_heat = problem.n_watt_loads  # heat loads, then surface loads (kept at scale 1 by evaluate)
    n_s = len(grid.times)
    coarse = np.unique(np.concatenate([np.flatnonzero(grid.is_output),
                                       np.linspace(0, n_s - 1, min(n_s, 60)).round().astype(int)]))
    shift = 1.0 / math.sqrt(float(run.step_s) * float(run.duration_s))
    basis = KrylovBasis(problem, shift, method=method, cancel=cancel,
                        max_columns=int(min(256, 1.5e9 // (8 * problem.n_nodes))))
    proj = ProjectedRun(problem, basis, grid)
    prev, out, watched = None, None, None
    try:
        for block in range(1, MAX_BLOCKS + 1):
            added = basis.grow()
            if added:
                proj.update()
            if block < MIN_BLOCKS and added:
                continue
            r = basis.size
            modal = ModalSystem(proj._kr[:r, :r], proj._br[:r], np.zeros(r))
            cur = _components(problem, modal, grid, basis.V, n_heat)
            if watched is None:
                watched = _watch(problem, cur, coarse)
            if prev is not None:
                cur.change_k = _change(cur, prev, watched)
                if cur.change_k <= tol_k:  # confirm: fresh watched nodes, and every node at the coarse samples
                    watched = _watch(problem, cur, coarse)
                    cur.change_k = max(_change(cur, prev, watched), _change(cur, prev, None, coarse))
                if progress is not None:
                    progress(f"basis {r} vectors: change {cur.change_k:.2g} K")
            out = cur
            if (prev is not None and cur.change_k <= tol_k) or added == 0 or basis.full:
                break
            prev = cur
    finally:
        basis.close()
    if not (out.change_k <= tol_k):
        problem.warnings.append(f"the unit responses changed by {out.change_k:.2g} K in the last basis block "
                                f"(target {tol_k:g} K)")
    out.v = out.v.copy()
    return out


def _each(ur: UnitResponses):
    yield ur.q_init
    yield ur.q_amb
    yield ur.q_shift
    yield from ur.q_loads


def _watch(problem, ur: UnitResponses, coarse) -> np.ndarray:
    return np.unique(np.concatenate([hottest_nodes(problem, ur.v, q, coarse) for q in _each(ur)]))


def _change(big: UnitResponses, small: UnitResponses, nodes, coarse=None) -> float:
    """Largest difference of any component between two bases, K: on ``nodes`` at every sample, or
    (``nodes`` None) on every node at the ``coarse`` samples."""
    r_s = small.v.shape[1]
    worst = 0.0
    for qb, qs in zip(_each(big), _each(small)):
        dq = qb.copy()
        dq[:r_s] -= qs
        if nodes is not None:
            worst = max(worst, float(np.abs(big.v[nodes] @ dq).max()) if len(nodes) else 0.0)
        else:
            worst = max(worst, float(np.abs(big.v @ dq[:, coarse]).max()))
    return worst


@dataclass
class _Event:
    step: int
    n_steps: int
    time_s: float
    dt: float
    field: np.ndarray
    part_max: np.ndarray
    part_mean: np.ndarray
    probes: np.ndarray
    is_output: bool
    heat_in_w: float = 0.0
    convected_out_w: float = 0.0
    stored_w: float = 0.0
    energy_residual_w: float = 0.0
    elapsed_s: float = 0.0


def _hottest(problem, ur: UnitResponses, q: np.ndarray, index: np.ndarray) -> np.ndarray:
    """Node ids that are some part's maximum at one of the samples ``index`` (as
    :func:`solver.transient.reduced.hottest_nodes`), with each part's rows of the basis gathered once per
    unit responses and kept in single precision (a what-if is evaluated many times on the same
    basis). The search is in float32 (twice as fast; a node within about 1e-5 K of the hottest may
    be chosen instead); the values at the chosen nodes are then computed in double precision."""
    key = (id(problem), ur.v.shape)
    cached = getattr(ur, "_part_rows", None)
    if cached is None or cached[0] != key:
        pn = problem.part_nodes
        rows = []
        for o, c in zip(pn.offsets, pn.counts):
            if c:
                ids = pn.index[o:o + c]
                rows.append((ids, np.ascontiguousarray(ur.v[ids].T, dtype=np.float32)))
        cached = ur._part_rows = (key, rows)
    qs = np.ascontiguousarray(q[:, index].T, dtype=np.float32)  # (samples, r)
    found = [ids[np.argmax(qs @ vpt, axis=1)] for ids, vpt in cached[1]]
    return np.unique(np.concatenate(found)) if found else np.zeros(0, dtype=np.int64)


def evaluate(problem, ur: UnitResponses, scales, ambient_offset: float = 0.0):
    """RunRecorder of the what-if case: peaks, first crossings and history at output times.

    Only candidate nodes are evaluated at every sample: each part's hottest node at every output
    time and at 60 spread samples (found over all nodes there, to float32 rounding), plus the
    probes' nodes.
    The part maxima at output times are therefore exact for the basis; between them they are the
    maxima over the candidates (as in a reduced run). Part means are not evaluated (NaN)."""
    from solver.results.recorder import RunRecorder

    q = ur.coordinates(scales, ambient_offset)
    v = ur.v
    n_s = len(ur.times)
    coarse = np.unique(np.concatenate([np.flatnonzero(ur.is_output),
                                       np.linspace(0, n_s - 1, min(n_s, 60)).round().astype(int)]))
    nodes = np.union1d(_hottest(problem, ur, q, coarse), np.unique(problem.probes.indices))
    vals = v[nodes] @ q  # (candidates, samples)
    cand = candidate_part_maxima(problem, vals, nodes)
    grid = type("Samples", (), {"is_output": ur.is_output})()
    chosen = event_indices(problem, grid, cand)
    rec = RunRecorder(problem, keep_fields=False)
    field = np.full(problem.n_nodes, -np.inf)
    no_mean = np.full(len(problem.model.parts), np.nan)
    prev_t = 0.0
    for k, i in enumerate(chosen):
        field[nodes] = vals[:, i]
        t = float(ur.times[i])
        rec.add(_Event(k, len(chosen) - 1, t, t - prev_t, field, cand[i].copy(), no_mean,
                       problem.probes @ field if problem.probes.shape[0] else np.zeros(0), bool(ur.is_output[i])))
        prev_t = t
    return rec


def parse_scales(model, specs) -> np.ndarray:
    """Factors per heat load from ``LOAD=FACTOR`` (LOAD: a heat load's part name, or heat_loads[i])."""
    scales = np.ones(len(model.heat_loads))
    issues = []
    for spec in specs:
        name, sep, val = spec.partition("=")
        name = name.strip()
        try:
            factor = float(val)
            ok = sep == "=" and math.isfinite(factor) and factor >= 0
        except ValueError:
            ok = False
        if not ok:
            issues.append(("--scale", f"{spec!r}: expected LOAD=FACTOR with a factor ≥ 0, e.g. \"radio module=1.2\""))
            continue
        hits = [i for i, hl in enumerate(model.heat_loads) if hl.part == name or name == f"heat_loads[{i}]"]
        if not hits:
            loads = ", ".join(sorted({hl.part for hl in model.heat_loads})) or "none"
            issues.append(("--scale", f"{name!r} names no heat load (heat loads are on: {loads})"))
        for i in hits:
            scales[i] = factor
    if issues:
        raise ModelError(issues)
    return scales
