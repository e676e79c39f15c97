"""Time profiles: heat loads in watts and ambient temperatures in °C.

Each profile is evaluated with one-sided limits so that a time step that ends exactly on a
jump uses the value from inside the step (``side="left"`` at the step end, ``side="right"``
at the step start).
"""
from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Breakpoint:
    """A time where a profile changes slope (``jump=False``) or value (``jump=True``)."""

    time_s: float
    jump: bool


class ProfileFunction(ABC):
    """Base class; subclasses implement :meth:`value` and :meth:`breakpoints`."""

    @abstractmethod
    def value(self, t: float, side: str = "right") -> float:
        """Value at ``t`` (s); ``side="left"`` gives the limit from before ``t`` at a jump."""

    @abstractmethod
    def breakpoints(self, t_end: float) -> list[Breakpoint]:
        """Times in (0, t_end) where the profile jumps or changes slope."""

    def sample(self, times) -> np.ndarray:
        """Values at an array of times (right-continuous), for plots and tables."""
        return np.array([self.value(float(t)) for t in np.asarray(times, dtype=float)])


@dataclass(frozen=True)
class Constant(ProfileFunction):
    value_: float

    def value(self, t, side="right"):
        return self.value_

    def breakpoints(self, t_end):
        return []


@dataclass(frozen=True)
class Step(ProfileFunction):
    """0 before ``start_s``, ``level`` from ``start_s`` on."""

    level: float
    start_s: float

    def value(self, t, side="right"):
        if side == "left":
            return self.level if t > self.start_s else 0.0
        return self.level if t >= self.start_s else 0.0

    def breakpoints(self, t_end):
        if 0.0 < self.start_s < t_end:
            return [Breakpoint(self.start_s, self.level != 0.0)]
        return []


@dataclass(frozen=True)
class Pulse(ProfileFunction):
    """``high`` on [start + k·period, start + k·period + duty·period), else ``low``; ``low`` before start."""

    high: float
    low: float
    period_s: float
    duty: float
    start_s: float

    _EPS = 1e-9  # relative tolerance (fraction of a period) for landing on an edge

    def value(self, t, side="right"):
        rel = (t - self.start_s) / self.period_s
        if side == "left":
            if rel <= self._EPS:
                return self.low
            k = math.ceil(rel - self._EPS) - 1
            frac = rel - k  # in (0, 1]
            return self.high if frac <= self.duty + self._EPS else self.low
        if rel < -self._EPS:
            return self.low
        k = math.floor(rel + self._EPS)
        frac = rel - k  # in [0, 1)
        return self.high if frac < self.duty - self._EPS else self.low

    def breakpoints(self, t_end):
        if self.high == self.low:
            return []
        out = []
        k = 0
        while True:
            t0 = self.start_s + k * self.period_s
            if t0 >= t_end:
                break
            if t0 > 0.0 and (k == 0 or self.duty < 1.0):
                out.append(Breakpoint(t0, True))
            t1 = t0 + self.duty * self.period_s
            if self.duty < 1.0 and 0.0 < t1 < t_end:
                out.append(Breakpoint(t1, True))
            k += 1
            if self.duty >= 1.0:
                break
        return out


@dataclass(frozen=True)
class Table(ProfileFunction):
    """Piecewise linear through ``points``; first value before, last value after."""

    times: tuple
    values: tuple

    def value(self, t, side="right"):
        return float(np.interp(t, self.times, self.values))

    def breakpoints(self, t_end):
        return [Breakpoint(float(t), False) for t in self.times if 0.0 < t < t_end]


def make_profile(spec) -> ProfileFunction:
    """Build an evaluator from a validated profile model (see :mod:`solver.model.modelfile`)."""
    kind = spec.type
    if kind == "constant":
        return Constant(float(spec.value))
    if kind == "step":
        return Step(float(spec.value), float(spec.start_s))
    if kind == "pulse":
        return Pulse(float(spec.high), float(spec.low), float(spec.period_s), float(spec.duty), float(spec.start_s))
    if kind == "table":
        ts = tuple(float(p[0]) for p in spec.points)
        vs = tuple(float(p[1]) for p in spec.points)
        return Table(ts, vs)
    raise ValueError(f"unknown profile type {kind!r}")


def scaled(prof: ProfileFunction, factor: float) -> ProfileFunction:
    """The same profile with every value multiplied by ``factor`` (same type and breakpoints)."""
    f = float(factor)
    if isinstance(prof, Constant):
        return Constant(prof.value_ * f)
    if isinstance(prof, Step):
        return Step(prof.level * f, prof.start_s)
    if isinstance(prof, Pulse):
        return Pulse(prof.high * f, prof.low * f, prof.period_s, prof.duty, prof.start_s)
    if isinstance(prof, Table):
        return Table(prof.times, tuple(v * f for v in prof.values))
    raise TypeError(f"cannot scale a {type(prof).__name__}")
