"""Calibrations: measured from a run (measure.py), kept as a file (file.py),
applied to decoded channels (apply.py)."""
