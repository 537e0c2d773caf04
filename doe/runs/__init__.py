"""Runs: outcomes, the results store, execution, executors (local, Dask) and the evaluators."""
