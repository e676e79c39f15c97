"""Finite-element matrices and the assembled problem (M, K, load basis), probes.

May import: the stages above: errors, model, linalg, mesh. Nothing here imports a later stage."""
