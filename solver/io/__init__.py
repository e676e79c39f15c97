"""Files: the field series (VTKHDF, legacy VTK XML), CSV and run.json writers, results folders.

May import: errors, model, mesh, fem, transient, results. Nothing here imports a later stage."""
