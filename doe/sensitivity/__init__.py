"""Sensitivity: input distributions, Sobol indices, Morris screening and their words."""
