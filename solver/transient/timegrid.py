"""The sequence of time steps: fixed nominal step, landing exactly on every profile
breakpoint and every output time, with damped start-up after each jump (Crank–Nicolson).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

TIME_TOL = 1e-9  # seconds; breakpoints closer than this are merged
TIME_SAFETY = 1.25  # safety factor on a step-halving estimate


@dataclass(frozen=True)
class TimeStep:
    t0: float
    t1: float
    theta: float
    output: bool  # t1 is an output time

    @property
    def dt(self) -> float:
        return self.t1 - self.t0


def output_times(duration: float, every: float) -> np.ndarray:
    """0, every, 2·every, … and the duration (added if it is not a multiple)."""
    n = int(math.floor(duration / every + 1e-9))
    times = np.arange(n + 1, dtype=float) * every
    if duration - times[-1] > TIME_TOL:
        return np.append(times, duration)
    times[-1] = duration
    return times


def merge_times(times) -> np.ndarray:
    t = np.sort(np.asarray(list(times), dtype=float))
    if len(t) == 0:
        return t
    keep = np.concatenate([[True], np.diff(t) > TIME_TOL])
    return t[keep]


def plan_steps(duration: float, step: float, theta: float, breakpoints, outputs,
               damp_after_jumps: bool = True) -> list[TimeStep]:
    """Steps of at most ``step`` seconds landing on every breakpoint and output time.

    Each interval between landing times is divided into equal steps. With Crank–Nicolson
    (0 < θ < 1) and ``damp_after_jumps``, the first step after t = 0 and after each jump is
    replaced by two backward-Euler half steps (Rannacher start-up), which damps the stiff
    components that Crank–Nicolson would otherwise carry as oscillations.
    """
    jumps = {round(b.time_s, 9) for b in breakpoints if b.jump and 0.0 < b.time_s < duration}
    marks = merge_times([0.0, duration, *outputs, *(b.time_s for b in breakpoints if 0.0 < b.time_s < duration)])
    marks = marks[(marks >= 0.0) & (marks <= duration + TIME_TOL)]
    outs = merge_times(outputs)
    damp = damp_after_jumps and 0.0 < theta < 1.0
    steps: list[TimeStep] = []

    def lands_on_output(t: float) -> bool:  # binary search: planning stays linear in the outputs
        i = int(np.searchsorted(outs, t - TIME_TOL))
        return i < len(outs) and abs(outs[i] - t) <= TIME_TOL

    for a, b in zip(marks[:-1], marks[1:]):
        n = max(1, int(math.ceil((b - a) / step - 1e-9)))
        h = (b - a) / n
        starts_smoothly = not (a == 0.0 or round(a, 9) in jumps)
        for k in range(n):
            t0 = a + k * h
            t1 = b if k == n - 1 else a + (k + 1) * h
            is_out = lands_on_output(t1)
            if k == 0 and damp and not starts_smoothly:
                mid = t0 + 0.5 * (t1 - t0)
                steps.append(TimeStep(t0, mid, 1.0, False))
                steps.append(TimeStep(mid, t1, 1.0, is_out))
            else:
                steps.append(TimeStep(t0, t1, theta, is_out))
    return steps


def time_error_bound(phi_dt: np.ndarray, phi_half: np.ndarray, scheme: str) -> np.ndarray:
    """Error (K) of peaks at step Δt from a step-halving twin (Richardson in time): |φ(Δt) − φ(Δt/2)|
    · 2^q/(2^q − 1) · TIME_SAFETY, q = 2 for Crank–Nicolson, 1 otherwise."""
    q = 2.0 if scheme == "crank-nicolson" else 1.0
    return TIME_SAFETY * np.abs(np.asarray(phi_dt) - np.asarray(phi_half)) * 2**q / (2**q - 1.0)
