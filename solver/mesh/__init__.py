"""Grid planes, the structured tetrahedral mesher, mesh refinement and the mesh report.

May import: solver.errors, solver.resources, solver.model, solver.linalg. Nothing here imports a later stage."""
