"""One run end to end: the accuracy ladder, the run session, the solve command line.

May import: every stage above except answers. Nothing here imports a later stage."""
