"""Diagnostics computed from a model (and later from snapshots): curves, tables, plots."""
