"""Accuracy control: a ladder of meshes, an error bound on every peak, refinement to a tolerance.

Each level is a full solve of the model on a finer grid (planes bisected where the flux-jump
indicator of :mod:`solver.mesh.refinement` is largest, at the peak time of each rated part). From
the peaks of the last three levels the error of the finest one is bounded by the grid
convergence index of Roache (1994), with the observed order and unequal refinement ratios as
in Celik et al. (2008), "Procedure for estimation and reporting of uncertainty due to
discretization in CFD applications", J. Fluids Eng. 130(7), 078001:

    h_i = N_i^(-1/3)               (representative cell size from the node count)
    r21 = h2/h1, r32 = h3/h2       (level 1 the finest)
    ε21 = φ1 − φ2, ε32 = φ2 − φ3
    p   = |ln|ε32/ε21| + ln((r21^p − s)/(r32^p − s))| / ln r21,  s = sign(ε32/ε21)
    E   = Fs · |ε21| / (r21^p − 1),  Fs = 1.25

p is clipped to [0.5, 2] (2 is the order of nodal values of linear elements on a smooth
solution; a lower observed order widens the band); when the last change is not smaller than
the one before (allowing for unequal ratios), the levels are not yet in the asymptotic range
and p = 0.5 is used, which keeps the band wide and the refinement going. With only two levels, p = 1 and Fs = 3
(Roache's recommendation for two-grid studies). When the changes alternate in sign the
bound is Fs · max(|ε21|, |ε32|). The time (or reduced-basis) error is added: the reduced
basis's own estimate, or for fixed steps a step-halving check on the first mesh
(E_t = |φ(Δt) − φ(Δt/2)| · 2^q/(2^q − 1), q = 2 for Crank–Nicolson, 1 otherwise, times 1.25).

Refinement stops when every goal part (rated parts; heated parts if none is rated) has an
estimated error below ``mesh.tolerance_k``, or a budget (``mesh.max_nodes``, ``max_levels``,
``time_limit_s``, or memory) is reached, which is then reported with the parts left above.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from solver.mesh.meshreport import part_resolution
from solver.transient.timegrid import TIME_SAFETY, time_error_bound  # noqa: F401  (re-exported)

FS_THREE = 1.25
FS_TWO = 3.0
P_MIN, P_MAX = 0.5, 2.0
P_TWO_GRIDS = 1.0
GROWTH_PER_LEVEL = 1.9  # planned node growth of a level (the indicator marking allows up to 2x cells)
MESH_SHARE_WHEN_TIME_DOMINATES = 0.3  # stop refining once the mesh's share is this small
MIN_LEVELS_TO_ACCEPT = 3  # a bound from fewer levels uses the two-grid factor and rarely passes


@dataclass
class AccuracySettings:
    tolerance_k: float | None  # None: keep the mesh as given, only estimate
    max_nodes: int
    max_levels: int
    time_limit_s: float | None

    @classmethod
    def from_model(cls, model, tolerance_k="model") -> "AccuracySettings":
        m = model.mesh
        tol = m.tolerance_k if tolerance_k == "model" else tolerance_k
        return cls(tol, int(m.max_nodes), int(m.max_levels), m.time_limit_s)

    @property
    def refine(self) -> bool:
        return self.tolerance_k is not None


def goal_parts(model) -> list[int]:
    """Parts whose peaks decide when the mesh is fine enough: rated, else heated, else all."""
    rated = [i for i, p in enumerate(model.parts) if p.rated_c is not None]
    if rated:
        return rated
    heated = sorted({model.part_index(h.part) for h in model.heat_loads})
    return heated or list(range(len(model.parts)))


@dataclass
class LevelRecord:
    """One solved mesh of the ladder (for run.json and the printed record)."""

    level: int
    nodes: int  # unknowns (free nodes; the hanging nodes of local planes take interpolated values)
    mesh_nodes: int  # nodes of the grid, hanging ones included
    planes: list
    cells_across_thinnest: int  # fewest cells across any goal part, in its thinnest direction
    peaks_c: dict  # part -> peak °C on this mesh
    error_k: dict  # part -> estimated bound on |peak - converged| for this level (None: not yet)
    wall_s: float
    method: str
    time_error_k: float = 0.0


def observed_order(e21: float, e32: float, r21: float, r32: float) -> float:
    """Observed order p from three solutions (Celik et al. 2008, eqs. 3–5), clipped to [P_MIN, P_MAX]."""
    if e21 == 0.0 or e32 == 0.0 or r21 <= 1.0 or r32 <= 1.0:
        return P_MAX if e21 == 0.0 else P_MIN
    s = math.copysign(1.0, e32 / e21)
    ratio = abs(e32 / e21)
    p = P_TWO_GRIDS
    for _ in range(50):
        q = math.log(max(1e-12, (r21**p - s) / (r32**p - s))) if (r32**p - s) != 0 else 0.0
        p_new = abs(math.log(ratio) + q) / math.log(r21)
        p_new = min(P_MAX, max(P_MIN, p_new))
        if abs(p_new - p) < 1e-6:
            break
        p = p_new
    return min(P_MAX, max(P_MIN, p))


def mesh_error_bound(peaks: list[np.ndarray], nodes: list[int]):
    """Error bound (K) and order used, per part, for the last of the given levels.

    ``peaks`` is a list over levels (coarse to fine) of per-part peak arrays (°C); ``nodes`` the
    node count of each level. NaN peaks (parts with no volume) give NaN bounds.
    """
    phi1 = np.asarray(peaks[-1], dtype=float)
    n = len(phi1)
    if len(peaks) < 2:
        return np.full(n, np.nan), np.full(n, np.nan)
    h = [float(x) ** (-1.0 / 3.0) for x in nodes]
    phi2 = np.asarray(peaks[-2], dtype=float)
    e21 = phi1 - phi2
    r21 = h[-2] / h[-1]
    if len(peaks) == 2 or r21 <= 1.0:
        p = np.full(n, P_TWO_GRIDS)
        bound = FS_TWO * np.abs(e21) / max(1e-12, r21**P_TWO_GRIDS - 1.0)
        return bound, p
    phi3 = np.asarray(peaks[-3], dtype=float)
    e32 = phi2 - phi3
    r32 = h[-3] / h[-2]
    bound = np.full(n, np.nan)
    orders = np.full(n, np.nan)
    for i in range(n):  # a handful of parts: scalar fixed-point iterations
        if not (np.isfinite(e21[i]) and np.isfinite(e32[i])):
            continue
        if e21[i] * e32[i] < 0:  # oscillating: the converged value lies within the swing
            bound[i] = FS_THREE * max(abs(e21[i]), abs(e32[i]))
            orders[i] = np.nan
            continue
        if abs(e21[i]) > abs(e32[i]) * (r21 / r32) ** P_MIN:
            p = P_MIN  # the changes are not shrinking yet: not in the asymptotic range
        else:
            p = observed_order(float(e21[i]), float(e32[i]), r21, r32)
        orders[i] = p
        fine = abs(e21[i]) / (r21**p - 1.0)
        # the same order applied one level down: the medium level's error, less the last change
        # (guards against a last change that is small by chance, before the asymptotic range)
        medium = abs(e32[i]) / (r32**p - 1.0) - abs(e21[i])
        bound[i] = FS_THREE * max(fine, medium)
    return bound, orders


def reported_bound(peaks: list[np.ndarray], nodes: list[int], reported: int, extra_k=0.0) -> np.ndarray:
    """Per-part bound (K) for the peaks of level ``reported`` from the peaks of every level (coarse
    to fine): the finest level's mesh bound plus ``extra_k`` (time or basis error); for a coarser
    reported level (``mesh.tolerance_k: null``) also its distance to the finest."""
    fine, _ = mesh_error_bound(peaks, nodes)
    bound = fine + extra_k
    if reported % len(peaks) != len(peaks) - 1:
        bound = np.abs(np.asarray(peaks[-1], dtype=float) - np.asarray(peaks[reported], dtype=float)) + bound
    return bound


@dataclass
class Ladder:
    """The levels solved so far and the decision to refine again."""

    model: object
    settings: AccuracySettings
    levels: list = field(default_factory=list)
    peaks: list = field(default_factory=list)  # per level: per-part peak arrays
    nodes: list = field(default_factory=list)  # grid nodes per level (h = N^(-1/3))
    unknowns: list = field(default_factory=list)  # free unknowns per level (the budget's count)
    time_error: np.ndarray | None = None  # per part, K (steps); reduced-basis estimates are per level
    stop_reason: str = ""
    converged: bool = False
    unconverged: list = field(default_factory=list)  # (part, bound K) above the tolerance at the end

    def __post_init__(self):
        self.goal = goal_parts(self.model)

    def add(self, problem, peaks: np.ndarray, wall_s: float, method: str, solver_error_k: float = 0.0) -> LevelRecord:
        """Record a solved level; returns its record with the error bounds known so far."""
        self.peaks.append(np.asarray(peaks, dtype=float))
        # h for the grid convergence index comes from the grid's nodes, hanging ones included: the
        # peaks' error is set by the cell size where the peaks are, which is the full grid's there
        # (local planes are active around them); the unknowns (what a level costs) are budgeted apart
        self.nodes.append(int(problem.n_nodes))
        self.unknowns.append(int(problem.n_free))
        mesh = problem.mesh
        thinnest = min((min(part_resolution(mesh, i).cells_across) for i in self.goal), default=0)
        rec = LevelRecord(level=len(self.levels), nodes=int(problem.n_free), mesh_nodes=int(problem.n_nodes),
                          planes=[len(l) for l in mesh.lines],
                          cells_across_thinnest=int(thinnest), peaks_c={}, error_k={}, wall_s=float(wall_s),
                          method=method, time_error_k=float(solver_error_k))
        bound = self.total_bound(solver_error_k)
        for i, p in enumerate(self.model.parts):
            rec.peaks_c[p.name] = _num(self.peaks[-1][i])
            rec.error_k[p.name] = _num(bound[i]) if len(self.peaks) > 1 else None
        self.levels.append(rec)
        return rec

    def total_bound(self, solver_error_k: float = 0.0) -> np.ndarray:
        """Mesh + time/basis error bound of the finest level, per part (K)."""
        mesh_b, _ = mesh_error_bound(self.peaks, self.nodes)
        t = self.time_error if self.time_error is not None else 0.0
        return mesh_b + t + float(solver_error_k)

    def goal_bounds(self, solver_error_k: float = 0.0) -> dict:
        b = self.total_bound(solver_error_k)
        return {self.model.parts[i].name: float(b[i]) for i in self.goal}

    def done(self, solver_error_k: float, wall_so_far_s: float, next_nodes: int | None,
             memory_ok: bool = True, next_grid_nodes: int | None = None) -> bool:
        """True when the finest level meets the tolerance or a budget forbids another level.
        ``next_nodes``: unknowns of the next level (planned or predicted); ``next_grid_nodes``: its
        grid nodes, hanging ones included (what the memory check counts), if known."""
        s = self.settings
        b = self.goal_bounds(solver_error_k)
        tol = s.tolerance_k
        if tol is not None and len(self.levels) >= MIN_LEVELS_TO_ACCEPT and all(
                np.isfinite(v) and v <= tol for v in b.values()):
            self.converged, self.stop_reason = True, f"every rated part within {tol:g} K"
            return True
        budget = None
        mesh_only, _ = mesh_error_bound(self.peaks, self.nodes)
        mesh_goal = np.array([mesh_only[i] for i in self.goal])
        if tol is not None and len(self.levels) >= MIN_LEVELS_TO_ACCEPT and np.all(
                np.isfinite(mesh_goal) & (mesh_goal <= MESH_SHARE_WHEN_TIME_DOMINATES * tol)):
            budget = ("the mesh is fine enough, but the time step's (or reduced basis's) error keeps the "
                      "bound above the tolerance: use a smaller run.step_s")
        elif len(self.levels) >= s.max_levels:
            budget = f"mesh.max_levels ({s.max_levels}) reached"
        elif next_nodes is not None and next_nodes > s.max_nodes:
            budget = (f"the next mesh would need about {next_nodes:,} unknowns (nodes solved for), more than "
                      f"mesh.max_nodes ({s.max_nodes:,})")
        elif not memory_ok:
            size = (f"about {next_grid_nodes:,} grid nodes" if next_grid_nodes is not None
                    else f"about {next_nodes:,} unknowns, more grid nodes")
            budget = f"the next mesh ({size}) would not fit in the memory available"
        elif s.time_limit_s is not None and self.levels and wall_so_far_s + GROWTH_PER_LEVEL * 1.2 * \
                self.levels[-1].wall_s > s.time_limit_s:
            budget = (f"the next mesh would likely end after mesh.time_limit_s ({s.time_limit_s:g} s; "
                      f"{wall_so_far_s:.0f} s used)")
        if budget is None:
            return False
        self.stop(solver_error_k, budget)
        return True

    def stop(self, solver_error_k: float, reason: str) -> None:
        """Stop refining for ``reason`` (a budget): the parts still above the tolerance are noted."""
        self.stop_reason = reason
        tol = self.settings.tolerance_k
        if tol is not None:
            b = self.goal_bounds(solver_error_k)
            self.unconverged = [(k, v) for k, v in b.items() if not (np.isfinite(v) and v <= tol)]

    def record(self) -> dict:
        """The mesh-independence record for run.json."""
        return {"tolerance_k": self.settings.tolerance_k, "converged": self.converged,
                "stop_reason": self.stop_reason,
                "unconverged": [{"part": k, "error_k": _num(v)} for k, v in self.unconverged],
                "goal_parts": [self.model.parts[i].name for i in self.goal],
                "time_error_k": (None if self.time_error is None else
                                 {p.name: _num(self.time_error[i]) for i, p in enumerate(self.model.parts)}),
                "method": ("Roache's grid convergence index with the observed order (Celik et al. 2008) "
                           "over a ladder of meshes refined by a directional flux-jump indicator"),
                "levels": [asdict(r) for r in self.levels]}


def _num(v):
    v = float(v)
    return v if math.isfinite(v) else None


def format_record(record: dict, parts: list[str] | None = None) -> str:
    """The mesh-independence record as a plain-text table (printed at the end of a solve)."""
    levels = record.get("levels", [])
    if not levels:
        return ""
    names = parts or record.get("goal_parts") or list(levels[0]["peaks_c"])
    head = (f"{'mesh':>4} {'unknowns':>10} {'grid nodes':>10} {'cells':>6} {'s':>7}  "
            + "  ".join(f"{n[:16]:>16}" for n in names))
    out = ["mesh-independence record (peak °C ± estimated error K; cells = fewest across a rated part; "
           "unknowns = grid nodes less those on local planes, which are interpolated):", head]
    for lv in levels:
        cells = []
        for n in names:
            pk, er = lv["peaks_c"].get(n), lv["error_k"].get(n)
            txt = "" if pk is None else (f"{pk:.2f}" + ("" if er is None else f" ± {er:.2f}"))
            cells.append(f"{txt:>16}")
        out.append(f"{lv['level']:>4} {lv['nodes']:>10,} {lv.get('mesh_nodes', lv['nodes']):>10,} "
                   f"{lv['cells_across_thinnest']:>6} {lv['wall_s']:>7.1f}  "
                   + "  ".join(cells))
    tol = record.get("tolerance_k")
    if tol is None:
        out.append("mesh kept as given (mesh.tolerance_k = null): the finer meshes only estimate its error")
    elif record.get("converged"):
        out.append(f"converged: {record.get('stop_reason')}")
    else:
        left = ", ".join(f"{u['part']} ({'?' if u['error_k'] is None else format(u['error_k'], '.2f')} K)"
                         for u in record.get("unconverged", []))
        out.append(f"NOT converged to {tol:g} K: {record.get('stop_reason')}" + (f"; still above: {left}" if left else ""))
    return "\n".join(out)
