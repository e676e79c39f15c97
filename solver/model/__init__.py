"""The model file: validated dataclasses, the material library and load/ambient profiles.

May import: solver.errors. Nothing here imports a later stage."""
