"""Combining the load basis into F(t), and the heat and convection totals (W)."""
from __future__ import annotations

import numpy as np


class LoadCombiner:
    """F(t) and the heat/convection totals from the problem's load basis, without per-step waste.

    Profile values are a short vector ``c(t)`` (W per heat load, °C per convection entry);
    F = basis @ c. A combination is only re-multiplied when its coefficients change.
    """

    def __init__(self, problem):
        self.p = problem
        self.basis = problem._load_basis()
        self.n_heat = problem.n_watt_loads  # watt columns (heat loads, surface loads) come first
        self.conv_sum = problem._conv_sum
        # Σ_c b_c is non-zero on convection faces only: keep those entries for a short dot product
        self.conv_idx = np.flatnonzero(problem._conv_b)
        self.conv_val = problem._conv_b[self.conv_idx]
        self._last_c = None
        self._last_f = None

    def coefficients(self, t: float, side: str) -> np.ndarray:
        return self.p.load_coefficients(t, side)

    def force(self, c: np.ndarray) -> np.ndarray:
        """basis @ c, reusing the last product when c is unchanged."""
        if self._last_c is None or not np.array_equal(c, self._last_c):
            self._last_c = c.copy()
            self._last_f = self.basis @ c
        return self._last_f

    def heat_in(self, c: np.ndarray) -> float:
        return float(c[:self.n_heat].sum())

    def convected_out(self, bd: float, c: np.ndarray) -> float:
        """Σ ∫ h (T − T_amb) dA from ``bd`` = (Σ b_c)·d, W."""
        return bd - float(c[self.n_heat:] @ self.conv_sum) if len(self.conv_sum) else 0.0

    def bd(self, d: np.ndarray) -> float:
        """(Σ_c b_c)·d in W (einsum: no BLAS thread start-up for a short product)."""
        return float(np.einsum("i,i->", self.conv_val, d[self.conv_idx])) if len(self.conv_sum) else 0.0
