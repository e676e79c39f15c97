"""The caution shown with every result (command line, app, report)."""

CAUTION = ("Results are engineering estimates from a conduction model with assumed convection coefficients. "
           "Confirm them by measurement on real hardware and defer to the applicable safety standards, "
           "codes and licensed practice before relying on them.")
