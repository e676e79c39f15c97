"""Per-part records of a run: maxima, peaks, statuses (the peak table's rows).

May import: errors, model, mesh, fem, transient. Nothing here imports a later stage."""
