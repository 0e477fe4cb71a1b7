"""Matplotlib figures (the Agg backend: no screen needed)."""
