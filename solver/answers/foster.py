"""Foster RC ladders fitted to Zth(t) curves, and their Cauer equivalents.

Foster form (K/W, s)::

    Zth(t) = Σᵢ Rᵢ (1 − e^{−t/τᵢ}),  τᵢ = Rᵢ Cᵢ,   Z(s) = Σᵢ Rᵢ / (1 + s τᵢ)

Fit: for a fixed number of stages n, time constants are seeded log-spaced (and, second seed,
from a non-negative least-squares fit on a dense grid of time constants, merged down to n),
resistances follow by non-negative least squares (:func:`scipy.optimize.nnls`), then all 2n
parameters are refined together on a log scale (:func:`scipy.optimize.least_squares`), which
keeps every R and C positive. The error measure is
``max_k |fit(t_k) − Z(t_k)| / max(Z(t_k), 1 % of Z's final value)``: a relative error wherever
the curve has risen above 1 % of its final value (cross terms start flat).
With n automatic, the smallest n from 1 to :data:`MAX_STAGES` whose error is below
:data:`AUTO_TARGET` is taken.

Cauer form: capacitances C₁…Cₙ to ambient at the nodes of a chain of series resistances R₁…Rₙ
from the heat source (node 1) to ambient (Rₙ ends at ambient). The conversion uses the Lanczos
tridiagonalization of the Foster state matrix: Z(s) = b² e₁ᵀ(sI + J)⁻¹e₁ with J symmetric
tridiagonal is exactly a ladder's driving-point impedance, and J's entries give the C's and R's
one node at a time (equivalent to the continued-fraction expansion of Z(s), better conditioned;
see e.g. Golub & Van Loan, "Matrix Computations", 4th ed., §10.1 for Lanczos).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares, nnls

MAX_STAGES = 12
AUTO_TARGET = 0.004  # 0.4 %: margin under the 1 % promised
ACCEPT = 0.01  # the promise: 1 %
FLOOR = 0.01  # errors are relative to max(Z, FLOOR × final value)


@dataclass
class FosterFit:
    r: np.ndarray  # K/W, stages by increasing τ
    tau: np.ndarray  # s
    error: float  # max relative error as defined in the module doc
    signed: bool = False  # True: some stages have R < 0 (and C = τ/R < 0); no Cauer ladder exists

    @property
    def c(self) -> np.ndarray:
        """J/K."""
        return self.tau / self.r

    @property
    def stages(self) -> int:
        return len(self.r)

    def step(self, t) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        return (self.r[:, None] * -np.expm1(-t[None, :] / self.tau[:, None])).sum(axis=0)

    def impedance(self, s) -> np.ndarray:
        """Z(s) = Σ R/(1 + sτ), s complex or real (1/s)."""
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        return (self.r[:, None] / (1.0 + s[None, :] * self.tau[:, None])).sum(axis=0)


@dataclass
class CauerLadder:
    r: np.ndarray  # K/W, R₁ from the source node towards ambient … Rₙ ending at ambient
    c: np.ndarray  # J/K, C₁ at the source node … Cₙ

    def impedance(self, s) -> np.ndarray:
        """Driving-point Z(s) of the ladder by its continued fraction from the ambient end."""
        s = np.atleast_1d(np.asarray(s, dtype=complex))
        z = np.zeros_like(s)
        for k in range(len(self.r) - 1, -1, -1):
            z = 1.0 / (s * self.c[k] + 1.0 / (self.r[k] + z))
        return z


def fit_error(t, z, fit_values) -> float:
    den = np.maximum(z, FLOOR * z[-1])
    return float(np.max(np.abs(fit_values - z) / den))


def _basis(t, tau):
    return -np.expm1(-t[:, None] / tau[None, :])


def _nnls_r(t, z, w, tau):
    r, _ = nnls(_basis(t, tau) * w[:, None], z * w, maxiter=50 * len(tau))
    return r


def _merge(r, tau, n):
    """Merge adjacent (in τ) active terms until n remain: the smallest adjacent R sum first;
    τ of a merge is the R-weighted geometric mean."""
    keep = r > 0
    r, tau = list(r[keep]), list(tau[keep])
    while len(r) > n:
        k = int(np.argmin([r[i] + r[i + 1] for i in range(len(r) - 1)]))
        rs = r[k] + r[k + 1]
        ts = float(np.exp((r[k] * np.log(tau[k]) + r[k + 1] * np.log(tau[k + 1])) / rs))
        r[k:k + 2], tau[k:k + 2] = [rs], [ts]
    return np.array(r), np.array(tau)


def _refine(t, z, w, r, tau, signed: bool):
    """Least-squares refinement of all stages; τ on a log scale, R on a log scale (positive) or
    free (signed). Analytic Jacobian."""
    zf = float(z[-1])
    n = len(r)
    lo, hi = np.log(t[0]) - 3.0, np.log(t[-1]) + 3.0
    u0 = np.clip(np.log(tau), lo + 1e-6, hi - 1e-6)
    if signed:
        v0 = np.asarray(r, dtype=float)
        bounds = (np.concatenate([np.full(n, lo), np.full(n, -np.inf)]),
                  np.concatenate([np.full(n, hi), np.full(n, np.inf)]))
    else:
        rlo, rhi = np.log(1e-12 * zf), np.log(1e3 * zf)
        v0 = np.clip(np.log(np.maximum(r, 1e-9 * zf)), rlo + 1e-6, rhi - 1e-6)
        bounds = (np.concatenate([np.full(n, lo), np.full(n, rlo)]),
                  np.concatenate([np.full(n, hi), np.full(n, rhi)]))

    def parts(x):
        tau_, e = np.exp(x[:n]), None
        e = np.exp(-t[:, None] / tau_[None, :])
        rr = x[n:] if signed else np.exp(x[n:])
        return tau_, rr, e

    def res(x):
        _, rr, e = parts(x)
        return ((1.0 - e) @ rr - z) * w

    def jac(x):
        tau_, rr, e = parts(x)
        du = -(t[:, None] / tau_[None, :]) * e * rr[None, :]
        dv = (1.0 - e) * (1.0 if signed else rr[None, :])
        return np.hstack([du, dv]) * w[:, None]

    sol = least_squares(res, np.concatenate([u0, v0]), jac=jac, bounds=bounds, method="trf",
                        x_scale="jac", max_nfev=400 * (n + 1))
    tau, r = np.exp(sol.x[:n]), (sol.x[n:] if signed else np.exp(sol.x[n:]))
    order = np.argsort(tau)
    return r[order], tau[order]


def _fit_n(t, z, w, n, signed, r_dense, dense) -> FosterFit:
    tau0 = np.geomspace(t[0] * 3.0, t[-1] / 10.0, n) if n > 1 else np.array([np.sqrt(t[0] * t[-1])])
    if signed:
        # second seed: time constants spread over the rise itself (cross terms start late)
        t_rise = float(np.interp(FLOOR, z / z[-1], t)) if np.any(z >= FLOOR * z[-1]) else t[0]
        tau1 = np.geomspace(max(t_rise, t[0]), t[-1] / 5.0, n) if n > 1 else np.array([np.sqrt(t_rise * t[-1])])
        candidates = [(np.linalg.lstsq(_basis(t, ta) * w[:, None], z * w, rcond=None)[0], ta)
                      for ta in (tau0, tau1)]
    else:
        candidates = [(_nnls_r(t, z, w, tau0), tau0)]
    if np.count_nonzero(r_dense) >= n:
        candidates.append(_merge(r_dense, dense, n))
    best = None
    for r0, tau in candidates:
        r, tau = _refine(t, z, w, r0, tau, signed)
        fit = FosterFit(r, tau, fit_error(t, z, FosterFit(r, tau, 0.0).step(t)))
        if best is None or fit.error < best.error:
            best = fit
    return best


def fit_foster(t, z, stages: int | None = None, target: float = AUTO_TARGET, passive: bool = False) -> FosterFit:
    """Fit a Foster ladder to a step response z(t) (K/W) at times t (s, increasing, t > 0).
    ``stages`` None: automatic (see module doc). Non-negative stages are tried first; when they
    cannot meet ``target`` (``stages`` given: 1 %), signed stages are fitted (see module doc),
    unless ``passive``: then the best non-negative fit is returned whatever its error."""
    t = np.asarray(t, dtype=float)
    z = np.asarray(z, dtype=float)
    if z[-1] <= 0:
        raise ValueError("the response must end positive to fit a Foster ladder")
    w = 1.0 / np.maximum(np.abs(z), FLOOR * z[-1])
    dense = np.geomspace(t[0] / 3.0, t[-1], max(8, int(20 * np.log10(t[-1] / t[0] * 3.0))))
    r_dense = _nnls_r(t, z, w, dense)
    ns = [stages] if stages else list(range(1, MAX_STAGES + 1))
    goal = ACCEPT if stages else target
    # the dense non-negative fit is (nearly) the best any non-negative ladder can do: skip the
    # non-negative search when even it misses the promise
    best = {}
    if passive:
        kinds = (False,)
    else:
        kinds = (False, True) if _fit_error_nnls(t, z, w, r_dense, dense) <= ACCEPT else (True,)
    for signed in kinds:
        for n in ns:
            fit = _fit_n(t, z, w, n, signed, r_dense, dense)
            fit.signed = signed
            if fit.error <= goal:
                return fit
            if signed not in best or fit.error < best[signed].error:
                best[signed] = fit
        if not signed and (best[False].error <= ACCEPT or passive):
            return best[False]  # a passive ladder within the promise beats a closer signed one
    return min(best.values(), key=lambda f: f.error)


def _fit_error_nnls(t, z, w, r_dense, dense) -> float:
    return fit_error(t, z, _basis(t, dense) @ r_dense)


def foster_to_cauer(fit: FosterFit) -> CauerLadder:
    """The Cauer ladder with the same driving-point impedance Z(s) (see module doc)."""
    lam = 1.0 / fit.tau
    b = np.sqrt(fit.r / fit.tau)
    n = len(lam)
    nb2 = float(b @ b)
    q = np.zeros((n, n))
    alpha, beta = np.zeros(n), np.zeros(max(n - 1, 0))
    q[:, 0] = b / np.sqrt(nb2)
    for k in range(n):
        w = lam * q[:, k]
        alpha[k] = q[:, k] @ w
        w = w - q[:, :k + 1] @ (q[:, :k + 1].T @ w)  # full reorthogonalization, twice
        w = w - q[:, :k + 1] @ (q[:, :k + 1].T @ w)
        if k < n - 1:
            beta[k] = np.linalg.norm(w)
            if beta[k] <= 1e-14 * lam.max():
                raise ValueError("two Foster stages share a time constant; merge them before converting")
            q[:, k + 1] = w / beta[k]
    c = np.zeros(n)
    g = np.zeros(n)
    c[0] = 1.0 / nb2
    g_prev = 0.0
    for k in range(n):
        g[k] = alpha[k] * c[k] - g_prev
        if k < n - 1:
            c[k + 1] = g[k] ** 2 / (beta[k] ** 2 * c[k])
        g_prev = g[k]
    if np.any(g <= 0) or np.any(c <= 0):
        raise ValueError("the Cauer conversion lost positivity to round-off (time constants too close)")
    return CauerLadder(1.0 / g, c)
