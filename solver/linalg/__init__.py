"""Linear solvers for the symmetric positive definite systems of the stepper (direct and Krylov).

May import: solver.errors, solver.resources. Nothing here imports a later stage."""
