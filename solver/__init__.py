"""Transient heat conduction in box-built enclosures: a plain numerical library (no Qt).

Typical use::

    from solver import load_model, build_problem, Stepper, RunRecorder
    model = load_model("samples/outdoor_radio_box.json")
    problem = build_problem(model)
    rec = RunRecorder(problem)
    for event in Stepper(problem):
        rec.add(event)
    rows = rec.peak_rows()
"""
from solver.errors import Cancelled, ModelError, SolveError
from solver.model.modelfile import Model, load_model, parse_model, save_model
from solver.fem.problem import Problem, build_problem
from solver.results.recorder import PeakRow, RunRecorder
from solver.transient.stepping import StepEvent, Stepper, critical_step
from solver.run.session import RunSession

__version__ = "0.1.0"

__all__ = ["Cancelled", "ModelError", "SolveError", "Model", "load_model", "parse_model", "save_model",
           "Problem", "build_problem", "PeakRow", "RunRecorder", "StepEvent", "Stepper", "critical_step", "RunSession",
           "__version__"]
