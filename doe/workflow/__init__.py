"""Workflow: one function per step; the only layer that knows a study and its files."""
