"""Exact time integration of a small projected system q' + Kᵣ q = Bᵣ c(t), Kᵣ symmetric.

With Kᵣ = Φ Λ Φᵀ (Φ orthonormal) each mode obeys z' = −λ z + g(t), g = Φᵀ Bᵣ c. Over an interval
of length h on which c is linear (the profiles are piecewise linear between breakpoints)::

    z(h)     = e^{−λh} z(0) + h φ₁(λh) g(0) + h φ₂(λh) (g(h) − g(0))
    ∫₀ʰ z dτ = h φ₁(λh) z(0) + h² φ₂(λh) g(0) + h² φ₃(λh) (g(h) − g(0))

with φ₁(x) = (1 − e^{−x})/x, φ₂(x) = (1 − φ₁(x))/x, φ₃(x) = (½ − φ₂(x))/x (the "phi functions"
of exponential integrators, here in decaying form; Hochbruck & Ostermann, "Exponential
integrators", Acta Numerica 19 (2010)). No step-size error is made: the only error of a reduced
run is the projection.
"""
from __future__ import annotations

import numpy as np

SERIES_BELOW = 1e-2  # |x| below which the phi functions use their Taylor series


def phi_functions(x: np.ndarray):
    """φ₁, φ₂, φ₃ of x ≥ 0 (arrays of the shape of x), accurate near 0."""
    x = np.asarray(x, dtype=float)
    small = x < SERIES_BELOW
    xs = np.where(small, 1.0, x)  # avoid dividing by ~0 in the closed forms
    p1 = -np.expm1(-xs) / xs
    p2 = (1.0 - p1) / xs
    p3 = (0.5 - p2) / xs
    x1 = np.where(small, x, 0.0)
    # series: φ_k(x) = Σ_j (−x)^j / (j + k)!
    s1 = 1 - x1 / 2 + x1 ** 2 / 6 - x1 ** 3 / 24 + x1 ** 4 / 120
    s2 = 0.5 - x1 / 6 + x1 ** 2 / 24 - x1 ** 3 / 120 + x1 ** 4 / 720
    s3 = 1 / 6 - x1 / 24 + x1 ** 2 / 120 - x1 ** 3 / 720 + x1 ** 4 / 5040
    return np.where(small, s1, p1), np.where(small, s2, p2), np.where(small, s3, p3)


class ModalSystem:
    """The projected system in modal form. ``k_r`` (r, r) symmetric positive semi-definite (1/s),
    ``b_r`` (r, m) load patterns (K/s per unit coefficient), ``q0`` (r,) initial coordinates."""

    def __init__(self, k_r: np.ndarray, b_r: np.ndarray, q0: np.ndarray):
        lam, phi = np.linalg.eigh(0.5 * (k_r + k_r.T))
        self.lam = np.maximum(lam, 0.0)  # round-off can leave the zero mode of an insulated model at −ε
        self.phi = phi
        self.g = phi.T @ b_r
        self.z0 = phi.T @ q0
        self._cache: dict = {}

    def _factors(self, h: float):
        key = float(h)
        f = self._cache.get(key)
        if f is None:
            p1, p2, p3 = phi_functions(self.lam * h)
            f = (np.exp(-self.lam * h), h * p1, h * p2, h * h * p2, h * h * p3)
            if len(self._cache) < 4096:
                self._cache[key] = f
        return f

    def propagate(self, t0: np.ndarray, t1: np.ndarray, c0: np.ndarray, c1: np.ndarray):
        """Modal coordinates over consecutive intervals [t0[k], t1[k]] with loads going linearly
        from ``c0[k]`` to ``c1[k]`` (coefficient rows). Returns (Z (r, n+1) at t0[0] and every t1,
        Zint (r, n) = ∫ z dt over each interval)."""
        n = len(t0)
        g0 = self.g @ np.asarray(c0, dtype=float).T  # (r, n)
        dg = self.g @ np.asarray(c1, dtype=float).T - g0
        r = len(self.lam)
        z = np.empty((r, n + 1))
        zint = np.empty((r, n))
        z[:, 0] = self.z0
        h = np.asarray(t1, dtype=float) - np.asarray(t0, dtype=float)
        for k in range(n):
            e, a1, a2, b2, b3 = self._factors(h[k])
            zk = z[:, k]
            z[:, k + 1] = e * zk + a1 * g0[:, k] + a2 * dg[:, k]
            zint[:, k] = a1 * zk + b2 * g0[:, k] + b3 * dg[:, k]
        return z, zint

    def coordinates(self, z: np.ndarray) -> np.ndarray:
        """Basis coordinates q = Φ z (r, ...)."""
        return self.phi @ z
