"""Calibration: the built-in model's empirical coefficients fitted to recorded results."""
