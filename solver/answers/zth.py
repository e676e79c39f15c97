"""Thermal impedance Zth(t) of parts under unit power steps, from one reduced basis.

Definition used throughout (and in ``zth.csv``): ``Zth[A, j](t)`` in K/W is the maximum over the
nodes of part A's cells (the contract's part maximum) of the temperature rise above ambient at time
t, when 1 W steps on at t = 0 in part j (spread over the volume part j holds), the model starting
at ambient and every ambient held constant. ``A = j`` is a self term, ``A ≠ j`` a cross term.
Because the hottest node of A may move with time, Zth[A, j] is not exactly a sum of exponentials;
the Foster fit (:mod:`solver.answers.foster`) approximates it.

Times are log-spaced from a tenth of the fastest time constant that carries at least 1 % of any
pair's steady value to ten times the slowest (about 0.005 % of the step left), at least four
decades. The basis grows until two successive bases agree within ``tol`` (0.1 %) relative to
max(Zth(t), 1 % of its steady value) at every time: the same measure the Foster fit is judged by.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from solver.errors import ModelError, SolveError
from solver.answers.unitresponse import ModalBasis, MultiShiftBasis, diffusion_times, heat_patterns, require_linear, step_factor

DEFAULT_TOL = 1e-3  # relative to max(Zth(t), FLOOR × steady value)
FLOOR = 0.01
MAX_ROUNDS = 14
MIN_ROUNDS = 2
POINTS_PER_DECADE = 20
NODE_CHUNK = 20000
SIGNIFICANT = 1e-2  # share of a pair's steady value that makes a mode count for the time range


@dataclass
class ZthResult:
    parts: list  # names of the observed parts (rows A)
    heated: list  # names of the heated parts (columns j)
    times: np.ndarray  # (T,) s
    zth: np.ndarray  # (A, j, T) K/W
    rth: np.ndarray  # (A, j) steady value, K/W
    basis_size: int = 0
    rounds: int = 0
    error_estimate: float = float("nan")  # relative to the steady value
    shifts: list = field(default_factory=list)

    def pairs(self):
        """(a index, j index, part name, heated part name) for every pair."""
        for a, name in enumerate(self.parts):
            for j, h in enumerate(self.heated):
                yield a, j, name, h


def _observed(model, parts, heated_idx) -> list[int]:
    names = [p.name for p in model.parts]
    if parts:
        out, issues = [], []
        for p in parts:
            if p not in names:
                issues.append(("--part", f"no part named {p!r} (parts: {', '.join(names)})"))
            else:
                out.append(names.index(p))
        if issues:
            raise ModelError(issues)
        return list(dict.fromkeys(out))
    rated = [i for i, p in enumerate(model.parts) if p.rated_c is not None]
    return rated or list(heated_idx)


def _curves(problem, modal: ModalBasis, g: np.ndarray, observed, times) -> tuple[np.ndarray, np.ndarray]:
    """(Zth (A, j, T), Rth (A, j)) for the modal basis."""
    pn = problem.part_nodes
    s = step_factor(modal.lam, times)  # (r, T)
    with np.errstate(divide="ignore"):
        inv = np.where(modal.lam > 0, 1.0 / np.where(modal.lam > 0, modal.lam, 1.0), np.inf)
    m = g.shape[1]
    z = np.full((len(observed), m, len(times)), -np.inf)
    rth = np.full((len(observed), m), -np.inf)
    for a, part in enumerate(observed):
        ids = pn.index[pn.offsets[part]:pn.offsets[part] + pn.counts[part]]
        for c in range(0, len(ids), NODE_CHUNK):
            rows = modal.rows(ids[c:c + NODE_CHUNK])  # (n, r)
            for j in range(m):
                z[a, j] = np.maximum(z[a, j], (rows @ (g[:, j, None] * s)).max(axis=0))
                rth[a, j] = max(rth[a, j], float((rows @ (g[:, j] * inv)).max()))
    return z, rth


def _time_range(problem, modal: ModalBasis, g: np.ndarray, observed) -> tuple[float, float]:
    """(t_lo, t_hi) from the modes that matter for the steady values of the observed pairs."""
    pn = problem.part_nodes
    lam = modal.lam
    pos = lam > lam.max() * 1e-14
    sig = np.zeros(len(lam), dtype=bool)
    for part in observed:
        ids = pn.index[pn.offsets[part]:pn.offsets[part] + pn.counts[part]]
        rows = modal.rows(ids)
        for j in range(g.shape[1]):
            contrib = rows * (g[:, j] / np.where(pos, lam, 1.0))[None, :]
            contrib[:, ~pos] = 0.0
            hot = int(np.argmax(contrib.sum(axis=1)))
            c = np.abs(contrib[hot])
            sig |= c >= SIGNIFICANT * max(float(contrib[hot].sum()), 1e-300)
    sig &= pos
    if not sig.any():
        raise SolveError("no mode carries the heat to ambient; the unit responses have no steady state")
    t_lo = 0.1 / float(lam[sig].max())
    t_hi = 10.0 / float(lam[sig].min())
    return min(t_lo, t_hi * 1e-4), t_hi


def log_times(t_lo: float, t_hi: float, per_decade: int = POINTS_PER_DECADE) -> np.ndarray:
    n = int(np.ceil(np.log10(t_hi / t_lo) * per_decade)) + 1
    times = np.geomspace(t_lo, t_hi, n)
    times[0], times[-1] = t_lo, t_hi  # the ends exactly (geomspace may round them)
    return times


def check_zth_model(problem) -> list[int]:
    """Heated part indices, or a ModelError naming why Zth cannot be computed."""
    require_linear(problem.model)
    heated = list(dict.fromkeys(p for p, _ in problem.heat_profiles))
    issues = []
    if not heated:
        issues.append(("heat_loads", "no heat load: Zth is the response to a part's power, so at least one "
                                     "part must carry a heat load"))
    if not problem.conv_loads:
        issues.append(("convection", "no convection face: without a path to ambient there is no steady "
                                     "state and Zth grows without bound"))
    if issues:
        raise ModelError(issues)
    return heated


def compute_zth(problem, parts=None, linear_solver: str = "auto", tol: float = DEFAULT_TOL,
                per_decade: int = POINTS_PER_DECADE, progress=None) -> ZthResult:
    """Zth of the observed parts (``parts`` names, default the rated parts, else the heated
    parts) for a 1 W step in each heated part. ``progress(message)`` is called after each round."""
    heated = check_zth_model(problem)
    observed = _observed(problem.model, parts, heated)
    rhs = heat_patterns(problem, heated)
    fast, slow = diffusion_times(problem)
    n_shifts = 3 if slow / fast > 100 else 2
    shifts = list(np.geomspace(1.0 / slow, 1.0 / fast, n_shifts))
    basis = MultiShiftBasis(problem, rhs, shifts, linear_solver=linear_solver)
    prev = None
    result = None
    try:
        for rnd in range(1, MAX_ROUNDS + 1):
            added = basis.grow_round()
            modal = ModalBasis(problem, basis.V.copy())
            g = modal.modal_loads(rhs)
            t_lo, t_hi = _time_range(problem, modal, g, observed)
            times = log_times(t_lo, t_hi, per_decade)
            z, rth = _curves(problem, modal, g, observed, times)
            err = float("nan")
            if prev is not None:
                zp, _ = _curves(problem, prev, prev.modal_loads(rhs), observed, times)
                floor = np.maximum(z, FLOOR * rth[:, :, None])
                err = float(np.max(np.abs(z - zp) / floor))
            result = ZthResult([problem.model.parts[i].name for i in observed],
                               [problem.model.parts[i].name for i in heated], times, z, rth,
                               basis.size, rnd, err, shifts)
            if progress is not None:
                progress(f"round {rnd}: basis {basis.size} vectors, change {err:.2g} (relative)")
            if (rnd >= MIN_ROUNDS and err <= tol) or added == 0 or basis.full:
                break
            prev = modal
    finally:
        basis.close()
    if not np.isfinite(result.error_estimate) or result.error_estimate > 10 * tol:
        problem.warnings.append(f"the Zth basis changed by {result.error_estimate:.2g} (relative) in its "
                                f"last round (target {tol:g}); the curves may be inaccurate")
    return result
