"""``run.method = "auto"``: step the full system, or run the reduced basis, by predicted cost.

Costs are counted in *solve-equivalents*: one solve with an already factored step matrix is 1.
The constants are calibrated from the measurements in benchmarks/README.md (sessions 2 and 3,
our own runs, not a published source):

- a factorization of the step matrix costs about ``FACTOR_SOLVES`` solves (1M nodes: 20.2 s
  set-up against 0.45 s per backward-Euler step; 200k nodes: 2.2 s against about 0.05 s);
- a reduced run costs one factorization plus about ``COLUMN_SOLVES`` solves per basis column
  (block solves, two Gram–Schmidt passes and the error checks: 200k nodes, 55 columns in
  about 5.6 s after the factorization), and the basis grows by one block (one column per
  distinct load shape) until its error estimate is met, typically ``EXPECTED_BLOCKS`` blocks;
- every field the reduced run hands out (outputs, peaks) is a product V·q, about
  r / ``RECONSTRUCT_PER_SOLVE`` solves;
- a forward-Euler step is a mat-vec and a diagonal scaling, about ``EXPLICIT_STEP`` of a solve;
- with radiation a full step takes about ``NONLINEAR_SOLVES_PER_STEP`` chord iterations (one solve
  each) and the slope is re-factored about ``NONLINEAR_REFACTORS`` times in a run (docs/physics.md);
  the reduced run's Newton iterations are on the small projected system, so its cost stays as above.

The reduced run is chosen only when its predicted cost is below ``MARGIN`` times the full
system's (it falls back to stepping the full system when its basis does not converge, and then
its own cost is lost), and when its expected basis fits the memory cap of :mod:`solver.transient.reduced`.
"""
from __future__ import annotations

from dataclasses import dataclass

METHODS = ("auto", "full", "reduced")
FACTOR_SOLVES = 45.0
COLUMN_SOLVES = 2.0
EXPECTED_BLOCKS = 9
RECONSTRUCT_PER_SOLVE = 600.0  # a solve is ~40 mat-vecs of ~15 N multiply-adds; V·q is r·N of them
EXPLICIT_STEP = 0.05
ADAPTIVE_SOLVES_PER_STEP = 2.0  # TR-BDF2: two stages
ADAPTIVE_MATRICES = 4  # ladder rungs typically factored in an adaptive run
MARGIN = 0.5
NONLINEAR_SOLVES_PER_STEP = 3.0
NONLINEAR_REFACTORS = 4


@dataclass(frozen=True)
class RunShape:
    """What the cost depends on. ``steps`` and ``step_matrices`` describe the full system's plan
    (fixed steps, or an adaptive run's estimate); ``load_shapes`` is the reduced basis' block
    width (distinct load patterns); ``events`` the fields the run hands out (outputs and peaks)."""

    nodes: int
    steps: int
    step_matrices: int
    load_shapes: int
    events: int
    explicit: bool = False
    adaptive: bool = False
    nonlinear: bool = False  # radiation: chord-Newton iterations in every full step
    max_columns: int = 256


@dataclass(frozen=True)
class MethodChoice:
    method: str  # "full" or "reduced"
    reason: str
    requested: str = "auto"
    full_cost: float | None = None  # predicted, in solve-equivalents
    reduced_cost: float | None = None


def predicted_costs(shape: RunShape) -> tuple[float, float, int]:
    """(full, reduced, expected basis columns), costs in solve-equivalents."""
    if shape.explicit:
        full = shape.steps * EXPLICIT_STEP
    elif shape.adaptive:
        full = ADAPTIVE_MATRICES * FACTOR_SOLVES + ADAPTIVE_SOLVES_PER_STEP * shape.steps
    elif shape.nonlinear:
        full = (shape.step_matrices + NONLINEAR_REFACTORS) * FACTOR_SOLVES + NONLINEAR_SOLVES_PER_STEP * shape.steps
    else:
        full = shape.step_matrices * FACTOR_SOLVES + shape.steps
    columns = 1 + max(1, shape.load_shapes) * EXPECTED_BLOCKS
    reduced = FACTOR_SOLVES + COLUMN_SOLVES * columns + shape.events * columns / RECONSTRUCT_PER_SOLVE
    return full, reduced, columns


def choose_run_method(shape: RunShape, requested: str | None = "auto") -> MethodChoice:
    """The method for a run of this shape; an explicit ``full``/``reduced`` is kept as asked."""
    requested = requested or "auto"
    if requested not in METHODS:
        raise ValueError(f"unknown method {requested!r} (expected one of {', '.join(METHODS)})")
    full, reduced, columns = predicted_costs(shape)
    if requested != "auto":
        return MethodChoice(requested, f"run.method = {requested!r} was asked for", requested, full, reduced)
    plan = (f"{shape.steps:,} {'estimated adaptive ' if shape.adaptive else ''}"
            f"{'forward-Euler ' if shape.explicit else ''}steps")
    if not shape.explicit and not shape.adaptive:
        plan += f" on {shape.step_matrices} step {'matrices' if shape.step_matrices != 1 else 'matrix'}"
    costs = f"predicted cost {full:,.0f} solves stepping vs {reduced:,.0f} for a basis of ~{columns} vectors"
    if columns > shape.max_columns:
        return MethodChoice("full", f"{shape.load_shapes} distinct load shapes need a basis of ~{columns} vectors, "
                                    f"more than fit in memory at {shape.nodes:,} nodes ({shape.max_columns}); "
                                    f"{plan}", requested, full, reduced)
    if reduced < MARGIN * full:
        return MethodChoice("reduced", f"reduced basis pays: {plan}, {shape.load_shapes} load shapes, "
                                       f"{shape.events:,} fields out; {costs}", requested, full, reduced)
    return MethodChoice("full", f"stepping is cheaper or close: {plan}; {costs}", requested, full, reduced)
