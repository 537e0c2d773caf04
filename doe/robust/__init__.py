"""Robust settings: setup-scatter propagation, the robust search and the trade-off set."""
