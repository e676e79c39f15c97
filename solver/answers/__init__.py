"""Answers from one solve: unit responses, Zth and RC networks, what-if, sweeps on Dask.

May import: every stage above. Nothing here imports a later stage."""
