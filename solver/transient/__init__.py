"""Time stepping: the theta family, adaptive steps, the reduced basis, the step plan, load combination, periodic cycles.

May import: errors, model, linalg, mesh, fem. Nothing here imports a later stage."""
