"""Emulsion lots side by side: sets of replicate strips, their statistics and curves."""
