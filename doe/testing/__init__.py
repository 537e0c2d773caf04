"""Test functions with published answers, synthetic data and benchmark loops (for tests and benchmarks)."""
